//! Exploring rates: the sweep over the grid, plant variants, the search
//! for the slowest passing rate, the CPU budget, precision ceilings, and
//! the pick that puts them together.

pub mod budget;
pub mod cascade;
pub mod pick;
pub mod precision;
pub mod search;
pub mod sweep;
pub mod variants;
