//! The physics: plain functions on grids and arrays, with no knowledge of
//! the language. Each module cites its formulas (field guide and textbooks).
//!
//! Horizontal operators take [slice, latitude, longitude] arrays (slices are
//! time x level flattened, see `Field::horizontal_slices`); vertical ones
//! take [time, level, latitude, longitude]. NaN is missing data throughout.

pub mod advection;
pub mod allocation;
pub mod differences;
pub mod geostrophic;
pub mod layers;
pub mod model_levels;
pub mod projected;
pub mod sampling;
pub mod smoothing;
pub mod stability;
pub mod standard_atmosphere;
pub mod thermal_wind;
pub mod vertical;
pub mod wind;
