//! Cascaded loops sharing one processor: a fast inner loop and an outer
//! loop updated every N-th inner tick (`[outer]` in a case file;
//! `docs/figures.md`, "Cascaded loops").
//!
//! - `lift`: the whole continuous plant, the inner loop closed on it, and
//!   the two-rate loop as one system at the outer rate.
//! - `evaluate`: both loops' figures at a (inner rate, ratio, methods,
//!   delays) point.
//! - `search`: per inner rate the largest passing ratio, the cheapest
//!   passing pair by CPU load, the window and the advice.
//! - `output`: the `outer` JSON object, the cascade's `sweep.csv` rows,
//!   `pick.json`'s `cascade` object, its charts and report section.

pub mod charts;
pub mod evaluate;
pub mod lift;
pub mod output;
pub mod search;

pub use evaluate::{CascadeEvaluation, CascadePoint, PreparedCascade};
pub use search::{CascadePick, CascadeRow, cascade_pick, prepare_cascade};
