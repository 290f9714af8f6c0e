//! The rate sweep: every (rate, method, computation delay) point of the
//! case's grid evaluated in parallel, each with its verdict and CPU load.
//!
//! Results come back in grid order whatever the thread count (rayon's
//! indexed `collect` keeps order, and each point is computed alone), so
//! the CSV is identical byte for byte for 1 thread or many.

use rayon::prelude::*;

use crate::budget;
use crate::case::{Budget, Spec};
use crate::discretize::Method;
use crate::evaluate::{Evaluation, Point, PreparedLoop};
use crate::feasibility::{Assessment, assess};

/// One evaluated grid point.
#[derive(Debug, Clone)]
pub struct SweepRow {
    pub point: Point,
    pub eval: Evaluation,
    pub assessment: Assessment,
    /// CPU load at this rate, percent (None without a budget, or when the
    /// cycles are estimated and the controller could not be built).
    pub cpu_load_pct: Option<f64>,
}

/// The grid, ordered by method, then delay, then ascending rate.
pub fn grid(rates: &[f64], methods: &[Option<Method>], delays: &[f64]) -> Vec<Point> {
    let mut out = Vec::with_capacity(rates.len() * methods.len() * delays.len());
    for &method in methods {
        for &delay in delays {
            for &rate_hz in rates {
                out.push(Point {
                    rate_hz,
                    method,
                    delay,
                });
            }
        }
    }
    out
}

/// Evaluate and judge one point.
pub fn evaluate_row(
    lp: &PreparedLoop,
    spec: &Spec,
    budget: Option<&Budget>,
    p: &Point,
) -> SweepRow {
    let eval = lp.sampled(p);
    let assessment = assess(&eval, spec);
    let cpu_load_pct = budget.and_then(|b| {
        let c = lp.controller_at(p.rate_hz, p.method).ok();
        budget::cycles_per_update(b, c.as_ref()).map(|cy| budget::load_pct(b, cy, p.rate_hz))
    });
    SweepRow {
        point: *p,
        eval,
        assessment,
        cpu_load_pct,
    }
}

/// Evaluate every point in parallel on the current rayon pool; `on_done`
/// is called once per finished point (progress display).
pub fn run(
    lp: &PreparedLoop,
    spec: &Spec,
    budget: Option<&Budget>,
    points: &[Point],
    on_done: &(dyn Fn() + Sync),
) -> Vec<SweepRow> {
    points
        .par_iter()
        .map(|p| {
            let row = evaluate_row(lp, spec, budget, p);
            on_done();
            row
        })
        .collect()
}
