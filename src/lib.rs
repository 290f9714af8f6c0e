//! looprate: choose the slowest loop rate for a digital controller that
//! still meets the spec, from an exact model of the sampled-data loop.
//!
//! The data's path: case file -> models -> discretization -> loop ->
//! evaluation (time, frequency) -> sweep -> search -> outputs. See
//! `DEVELOPERS.md` for the map.

pub mod discretize;
pub mod plot;
pub mod poly;
pub mod tf;
