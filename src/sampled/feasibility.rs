//! Whether an evaluated loop meets the case's limits, and which figure
//! has the least slack.
//!
//! Slack is measured as a fraction of the limit: `(limit - value) / |limit|`
//! for an upper limit, `(value - limit) / |limit|` for a lower one, so
//! limits of different units compare. Negative slack fails.

use serde::Serialize;

use crate::sampled::evaluate::{Evaluation, Figures, Status};
use crate::sampled::figure::{Figure, Limiting, Missing};
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

impl LimitCheck {
    /// What this check, taken as the least slack, says limits the loop:
    /// its figure, or the figure left undecided (no value because the
    /// bounded time search could not decide it).
    pub fn limiting(&self, f: &Figures) -> Limiting {
        if self.value.is_none() && self.figure.missing(f) == Missing::Undecided {
            Limiting::Undecided(self.figure)
        } else {
            Limiting::Figure(self.figure)
        }
    }
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
        limiting: worst.map(|c| c.limiting(f)),
        slack: worst.map_or(1e6, |c| c.slack.clamp(UNSTABLE_SLACK, 1e6)),
        checks,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sampled::evaluate::Evaluation;
    use crate::sampled::time_response::TimeFigure;

    fn spec() -> Spec {
        Spec {
            max_overshoot_pct: Some(20.0),
            min_phase_margin_deg: Some(45.0),
            ..Spec::unlimited()
        }
    }

    fn figures(overshoot_pct: Option<f64>, undecided: Vec<TimeFigure>) -> Figures {
        Figures {
            y_final: 1.0,
            overshoot_pct,
            settling_time_s: Some(0.1),
            rise_time_s: Some(0.01),
            disturbance_peak: 0.5,
            recovery_time_s: Some(0.2),
            u_peak: 1.0,
            gain_margin_db: Some(12.0),
            phase_margin_deg: Some(60.0),
            crossover_hz: Some(10.0),
            delay_margin_s: None,
            delay_margin_estimate_s: Some(0.01),
            sensitivity_peak: 1.3,
            horizon_s: 1.0,
            undecided,
            delay_margin_searched: false,
            not_computed: Vec::new(),
            loop_notes: Vec::new(),
        }
    }

    fn evaluation(f: Figures) -> Evaluation {
        Evaluation {
            status: Status::Ok,
            stable: true,
            figures: Some(f),
            closed_loop_poles: vec![[0.5, 0.0]],
            loop_detail: None,
        }
    }

    #[test]
    fn an_undecided_figure_limits_as_undecided_not_as_over_its_limit() {
        // Overshoot 30 % against max 20 %: the figure limits.
        let over = assess(&evaluation(figures(Some(30.0), Vec::new())), &spec());
        assert!(!over.feasible);
        assert_eq!(over.limiting, Some(Limiting::Figure(Figure::Overshoot)));
        // No value because the search could not decide it: the verdict
        // still fails (nothing proves the limit met), and says why.
        let open = assess(
            &evaluation(figures(None, vec![TimeFigure::Overshoot])),
            &spec(),
        );
        assert!(!open.feasible);
        let l = open.limiting.unwrap();
        assert_eq!(l, Limiting::Undecided(Figure::Overshoot));
        assert_eq!(l.label(), "overshoot undecided");
        // Files keep the figure's key.
        assert_eq!(l.key(), Figure::Overshoot.key());
    }
}
