//! Whether an evaluated loop meets the case's limits, and which figure
//! has the least slack.
//!
//! Slack is measured as a fraction of the limit: `(limit - value) / |limit|`
//! for an upper limit, `(value - limit) / |limit|` for a lower one, so
//! limits of different units compare. Negative slack fails.

use serde::Serialize;

use crate::sampled::evaluate::{Evaluation, Figures, Status};
use crate::sampled::figure::{Figure, Limiting};
use crate::spec::Spec;

/// Slack given to a loop that is not stable, or could not be evaluated:
/// finite (the search's root finder needs finite values) and below any
/// slack a stable loop can have on a reachable limit.
pub const UNSTABLE_SLACK: f64 = -1.0;

/// One limit's verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitCheck {
    /// The figure the limit bounds (serialized as its key).
    pub figure: Figure,
    pub limit: f64,
    /// The figure's value as the limit reads it (the gain margin's size);
    /// None when it does not exist (not settled, no crossing).
    pub value: Option<f64>,
    /// Fraction of the limit; +inf for an infinite margin, -inf for a
    /// figure that does not exist but must (e.g. never settled).
    pub slack: f64,
    pub pass: bool,
}

/// The verdict on one evaluation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Assessment {
    pub feasible: bool,
    /// The figure with the least slack (or `stability`).
    pub limiting: Option<Limiting>,
    /// Its slack, finite (clamped to [-1, 1e6]) for search and CSV.
    pub slack: f64,
    pub checks: Vec<LimitCheck>,
}

/// Every limit of `spec` checked against `f`, in the catalogue's order
/// ([`Figure::LIMITED`]).
pub fn check_figures(f: &Figures, spec: &Spec) -> Vec<LimitCheck> {
    Figure::LIMITED
        .into_iter()
        .filter_map(|figure| {
            let limit = figure.limit(spec)?;
            let value = figure.limited_value(f);
            let slack = figure.slack(limit, value, figure.missing(f));
            Some(LimitCheck {
                figure,
                limit,
                value,
                slack,
                pass: slack >= 0.0,
            })
        })
        .collect()
}

/// The verdict on an evaluation.
pub fn assess(e: &Evaluation, spec: &Spec) -> Assessment {
    let Some(f) = (e.status == Status::Ok)
        .then_some(e.figures.as_ref())
        .flatten()
    else {
        return Assessment {
            feasible: false,
            limiting: Some(Limiting::Stability),
            slack: UNSTABLE_SLACK,
            checks: Vec::new(),
        };
    };
    let checks = check_figures(f, spec);
    let worst = checks.iter().min_by(|a, b| a.slack.total_cmp(&b.slack));
    Assessment {
        feasible: checks.iter().all(|c| c.pass),
        limiting: worst.map(|c| Limiting::Figure(c.figure)),
        slack: worst.map_or(1e6, |c| c.slack.clamp(UNSTABLE_SLACK, 1e6)),
        checks,
    }
}
