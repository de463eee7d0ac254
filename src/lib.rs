//! Baroc: thermal-wind and balance diagnostics on pressure-level grids.
//!
//! The data flow one way (see DEVELOPERS.md for the code map):
//! text -> `lang` (grammar, syntax tree, check, evaluate) -> values ->
//! `render` (MIME bundles) -> front ends (`kernel`, `evcxr`, CLI).
//! The physics (`physics`) works on plain arrays and grids and knows nothing
//! of the language; `diagnostics` applies it to fields read through `io`.

pub mod atomic;
pub mod audit;
pub mod calendar;
pub mod constants;
pub mod demo;
pub mod diagnostics;
pub mod display;
pub mod figures;
pub mod grid;
pub mod io;
pub mod lang;
pub mod memory;
pub mod kernel;
pub mod mime;
pub mod physics;
pub mod projection;
pub mod session;
pub mod units;
pub mod render;
pub mod report;
pub mod runner;
pub mod text;
pub mod shard;
pub mod sharing;
pub mod merge;
pub mod bounded;
