//! Cascaded loops sharing one processor: a fast inner loop and an outer
//! loop updated every N-th inner tick (`[outer]` in a case file;
//! `docs/figures.md`, "Cascaded loops").
//!
//! - `lift`: the whole continuous plant, the inner loop closed on it, and
//!   the two-rate loop as one system at the outer rate.
//! - `evaluate`: both loops' figures at a (inner rate, ratio, methods,
//!   delays) point.
//!
//! The search over pairs of rates is `explore::cascade`; the outputs are
//! `output::cascade` and `output::cascade_charts`.

pub mod evaluate;
pub mod lift;
