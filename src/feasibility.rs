//! Whether an evaluated loop meets the case's limits, and which figure
//! has the least slack.
//!
//! Slack is measured as a fraction of the limit: `(limit - value) / |limit|`
//! for an upper limit, `(value - limit) / |limit|` for a lower one, so
//! limits of different units compare. Negative slack fails.

use serde::Serialize;

use crate::case::Spec;
use crate::evaluate::{Evaluation, Figures, Status};

/// Slack given to a loop that is not stable, or could not be evaluated:
/// finite (the search's root finder needs finite values) and below any
/// slack a stable loop can have on a reachable limit.
pub const UNSTABLE_SLACK: f64 = -1.0;

/// One limit's verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitCheck {
    /// Figure name as in `loop-model.md` (e.g. `overshoot_pct`).
    pub figure: &'static str,
    pub limit: f64,
    /// The figure's value; None when it does not exist (not settled, no
    /// crossing) or could not be decided (`Figures::undecided`), which
    /// fails an upper limit.
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
    pub limiting: Option<&'static str>,
    /// Its slack, finite (clamped to [-1, 1e6]) for search and CSV.
    pub slack: f64,
    pub checks: Vec<LimitCheck>,
}

fn upper(figure: &'static str, limit: f64, value: Option<f64>, missing: f64) -> LimitCheck {
    let slack = match value {
        Some(v) => (limit - v) / limit.abs().max(1e-300),
        None => missing,
    };
    LimitCheck {
        figure,
        limit,
        value,
        slack,
        pass: slack >= 0.0,
    }
}

fn lower(figure: &'static str, limit: f64, value: Option<f64>, missing: f64) -> LimitCheck {
    let slack = match value {
        Some(v) => (v - limit) / limit.abs().max(1e-300),
        None => missing,
    };
    LimitCheck {
        figure,
        limit,
        value,
        slack,
        pass: slack >= 0.0,
    }
}

/// Every limit of `spec` checked against `f`.
pub fn check_figures(f: &Figures, spec: &Spec) -> Vec<LimitCheck> {
    let inf = f64::INFINITY;
    let mut out = Vec::new();
    if let Some(l) = spec.max_overshoot_pct {
        // No y_final means no tracking: fails.
        out.push(upper(
            "overshoot_pct",
            l,
            f.decided("overshoot_pct", f.overshoot_pct),
            -inf,
        ));
    }
    if let Some(l) = spec.max_settling_s {
        out.push(upper(
            "settling_time_s",
            l,
            f.decided("settling_time_s", f.settling_time_s),
            -inf,
        ));
    }
    if let Some(l) = spec.max_rise_s {
        out.push(upper(
            "rise_time_s",
            l,
            f.decided("rise_time_s", f.rise_time_s),
            -inf,
        ));
    }
    if let Some(l) = spec.min_phase_margin_deg {
        // No gain crossing: |L| < 1 everywhere, the phase margin is infinite.
        out.push(lower("phase_margin_deg", l, f.phase_margin_deg, inf));
    }
    if let Some(l) = spec.min_gain_margin_db {
        // The gain margin keeps its sign; its size is what the limit bounds
        // (a negative value is a gain-reduction margin). None: infinite.
        out.push(lower(
            "gain_margin_db",
            l,
            f.gain_margin_db.map(f64::abs),
            inf,
        ));
    }
    if let Some(l) = spec.max_sensitivity_peak {
        out.push(upper("sensitivity_peak", l, Some(f.sensitivity_peak), -inf));
    }
    if let Some(l) = spec.max_recovery_s {
        out.push(upper(
            "recovery_time_s",
            l,
            f.decided("recovery_time_s", f.recovery_time_s),
            -inf,
        ));
    }
    if let Some(l) = spec.max_disturbance_peak {
        out.push(upper(
            "disturbance_peak",
            l,
            f.decided("disturbance_peak", Some(f.disturbance_peak)),
            -inf,
        ));
    }
    if let Some(l) = spec.max_u_peak {
        out.push(upper(
            "u_peak",
            l,
            f.decided("u_peak", Some(f.u_peak)),
            -inf,
        ));
    }
    out
}

/// The verdict on an evaluation.
pub fn assess(e: &Evaluation, spec: &Spec) -> Assessment {
    let Some(f) = (e.status == Status::Ok)
        .then_some(e.figures.as_ref())
        .flatten()
    else {
        return Assessment {
            feasible: false,
            limiting: Some("stability"),
            slack: UNSTABLE_SLACK,
            checks: Vec::new(),
        };
    };
    let checks = check_figures(f, spec);
    let worst = checks.iter().min_by(|a, b| a.slack.total_cmp(&b.slack));
    Assessment {
        feasible: checks.iter().all(|c| c.pass),
        limiting: worst.map(|c| c.figure),
        slack: worst.map_or(1e6, |c| c.slack.clamp(UNSTABLE_SLACK, 1e6)),
        checks,
    }
}
