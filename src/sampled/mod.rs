//! The sampled-data loop at one rate and its figures: the hold and
//! actuation path, the closed loop, time figures (with the stop
//! certificate), frequency figures, the exact delay margin, the
//! continuous design as reference, one evaluation per grid point, and the
//! verdict against the spec. Meanings: `docs/figures.md`.

pub mod cascade;
pub mod certificate;
pub mod closed_loop;
pub mod continuous;
pub mod delay_margin;
pub mod evaluate;
pub mod feasibility;
pub mod figure;
pub mod frequency;
pub mod hold;
pub mod output_map;
pub mod stretch;
pub mod time_response;
