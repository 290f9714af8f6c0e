//! looprate: choose the slowest loop rate for a digital controller that
//! still meets the spec, from an exact model of the sampled-data loop.
//!
//! The data's path: case file -> models -> discretization -> loop ->
//! evaluation (time, frequency) -> sweep -> search -> outputs. See
//! `DEVELOPERS.md` for the map.

pub mod budget;
pub mod cascade;
pub mod case;
pub mod certificate;
pub mod charts;
pub mod closed_loop;
pub mod continuous;
pub mod delay_margin;
pub mod discretize;
pub mod engineering;
pub mod error;
pub mod evaluate;
pub mod expr;
pub mod feasibility;
pub mod frequency;
pub mod hold;
pub mod outputs;
pub mod pick;
pub mod plot;
pub mod poly;
pub mod precision;
pub mod report;
pub mod scalar_solve;
pub mod search;
pub mod state_space;
pub mod summary;
pub mod sweep;
pub mod time_response;
pub mod transfer;
pub mod variants;
