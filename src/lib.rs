//! Baroc: thermal-wind and balance diagnostics on pressure-level grids.
//!
//! The data flow one way (see DEVELOPERS.md for the code map):
//! text -> `lang` (grammar, syntax tree, check, evaluate) -> values ->
//! `render` (MIME bundles) -> front ends (`kernel`, `evcxr`, CLI).
//! The physics (`physics`) works on plain arrays and grids and knows nothing
//! of the language.

pub mod constants;
pub mod kernel;
pub mod mime;
