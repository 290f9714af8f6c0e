//! The search for `f_star`: the lowest rate such that every rate from it
//! up to `max_hz` is feasible (loop model), for one method and delay.
//!
//! The coarse sweep brackets it (the fastest infeasible grid rate and the
//! grid rate above it); Brent root finding (argmin) on the limiting slack
//! in ln f then narrows it, and a bisection guard certifies the final
//! bracket `[lo, hi]` with `lo` infeasible, `hi` feasible and
//! `hi / lo - 1 <= tol`. Where the slack jumps (settling time moving by a
//! whole oscillation, a crossing appearing) Brent's bracket still holds,
//! and the guard falls back to plain bisection.

use std::cell::Cell;

use serde::Serialize;

use crate::case::Spec;
use crate::discretize::Method;
use crate::evaluate::{Point, PreparedLoop};
use crate::feasibility::{Assessment, assess};
use crate::hold::HoldKind;
use crate::scalar_solve;
use crate::sweep::SweepRow;

/// Relative tolerance on `f_star` (loop model: 1e-4 or tighter).
pub const RATE_TOLERANCE: f64 = 1e-4;

/// The answer for one method and delay.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SlowestRate {
    /// Method name (`given-in-z` for a controller given in z).
    pub method: String,
    /// The actuator's hold kind.
    pub hold: HoldKind,
    pub compute_delay: f64,
    /// `f_star`, Hz; None when `max_hz` itself fails.
    pub slowest_rate_hz: Option<f64>,
    /// The figure that fails just below `f_star` (or at `max_hz` when
    /// there is no answer); `stability` for an unstable loop.
    pub limiting: Option<String>,
    /// Feasible rate ranges below `f_star` (never recommended), Hz.
    pub islands: Vec<[f64; 2]>,
    /// Loop evaluations the refinement used beyond the coarse sweep.
    pub evaluations: usize,
    /// True when every swept rate is feasible: `f_star` is at or below the
    /// sweep's lowest rate, which is what is reported.
    pub at_range_floor: bool,
}

/// An observer of the refinement: called after each loop evaluation with
/// the rate and its verdict. The numerical core never prints; a log or a
/// progress display attaches here.
pub trait SearchObserver: Sync {
    fn evaluated(&self, _rate_hz: f64, _assessment: &Assessment) {}
}

/// The observer that does nothing.
pub struct Silent;
impl SearchObserver for Silent {}

/// Name for a method in outputs.
pub fn method_label(m: Option<Method>) -> String {
    m.map_or_else(|| "given-in-z".to_string(), |m| m.name().to_string())
}

/// `f_star` for the rows of one (method, delay) series, sorted by rate,
/// judged on the nominal loop.
pub fn slowest_rate(
    lp: &PreparedLoop,
    spec: &Spec,
    rows: &[&SweepRow],
    observer: &dyn SearchObserver,
) -> SlowestRate {
    let (method, delay, hold) = rows.first().map_or((None, 0.0, HoldKind::ZeroOrder), |r| {
        (r.point.method, r.point.delay, r.point.hold)
    });
    let series: Vec<(f64, &Assessment)> = rows
        .iter()
        .map(|r| (r.point.rate_hz, &r.assessment))
        .collect();
    let judge = |rate: f64| -> Assessment {
        let p = Point {
            rate_hz: rate,
            method,
            delay,
            hold,
        };
        let a = assess(&lp.sampled(&p), spec);
        observer.evaluated(rate, &a);
        a
    };
    slowest_rate_by(method, hold, delay, &series, &judge)
}

/// `f_star` for one (method, delay) series: `series` holds the coarse
/// sweep's verdicts `(rate_hz, assessment)` sorted by rate, and `judge`
/// gives the verdict at any other rate (the nominal loop, or the worst of
/// several plant variants).
pub fn slowest_rate_by(
    method: Option<Method>,
    hold: HoldKind,
    delay: f64,
    series: &[(f64, &Assessment)],
    judge: &dyn Fn(f64) -> Assessment,
) -> SlowestRate {
    let mut answer = SlowestRate {
        method: method_label(method),
        hold,
        compute_delay: delay,
        slowest_rate_hz: None,
        limiting: None,
        islands: Vec::new(),
        evaluations: 0,
        at_range_floor: false,
    };
    let Some(last) = series.last() else {
        return answer;
    };
    if !last.1.feasible {
        answer.limiting = last.1.limiting.map(str::to_string);
        answer.islands = islands(series, series.len() - 1);
        return answer;
    }
    let Some(i_bad) = series.iter().rposition(|r| !r.1.feasible) else {
        answer.slowest_rate_hz = Some(series[0].0);
        answer.limiting = series[0].1.limiting.map(str::to_string);
        answer.at_range_floor = true;
        return answer;
    };
    answer.islands = islands(series, i_bad);

    let count = Cell::new(0usize);
    let judge = |rate: f64| -> Assessment {
        count.set(count.get() + 1);
        judge(rate)
    };
    let mut lo = series[i_bad].0;
    let mut hi = series[i_bad + 1].0;
    let mut lo_assessment = series[i_bad].1.clone();
    let ln_tol = (1.0 + RATE_TOLERANCE).ln() / 4.0;

    // Brent on the limiting slack; its answer x sits next to the sign
    // change, so probing x and x - tol usually closes the bracket at once.
    // The bracket's ends were judged by the sweep: their slack is reused,
    // not recomputed (the solver asks for both ends before it starts).
    let ends = [
        (lo.ln(), series[i_bad].1.slack),
        (hi.ln(), series[i_bad + 1].1.slack),
    ];
    let slack = |x: f64| match ends.iter().find(|e| e.0 == x) {
        Some(e) => e.1,
        None => judge(x.exp()).slack,
    };
    if let Some(x) = scalar_solve::root(&slack, lo.ln(), hi.ln(), ln_tol) {
        let r = x.exp();
        if r > lo && r < hi {
            let a = judge(r);
            if a.feasible {
                hi = r;
                let below = (x - ln_tol).exp();
                if below > lo {
                    let b = judge(below);
                    if b.feasible {
                        hi = below;
                    } else {
                        lo = below;
                        lo_assessment = b;
                    }
                }
            } else {
                lo = r;
                lo_assessment = a;
            }
        }
    }
    // Bisection guard: certify the bracket to the tolerance.
    while hi / lo - 1.0 > RATE_TOLERANCE {
        let mid = (lo * hi).sqrt();
        let a = judge(mid);
        if a.feasible {
            hi = mid;
        } else {
            lo = mid;
            lo_assessment = a;
        }
    }
    answer.slowest_rate_hz = Some(hi);
    answer.limiting = lo_assessment.limiting.map(str::to_string);
    answer.evaluations = count.get();
    answer
}

/// The top of a run of passing rates: the highest rate `f` such that every
/// rate in `[from_hz, f]` passes.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Ceiling {
    /// The ceiling, Hz; None when `from_hz` itself fails.
    pub rate_hz: Option<f64>,
    /// True when every swept rate from `from_hz` up passes: the ceiling is
    /// at or above the sweep's top rate, which is what `rate_hz` holds.
    pub above_range: bool,
    /// What fails just above the ceiling (or at `from_hz`).
    pub limiting: Option<String>,
    /// The lowest failing rate found, Hz: `from_hz` when it fails, else
    /// just above the ceiling (None when every rate checked passes). Where
    /// the verdict is not monotone in the rate (rounding), every rate
    /// checked below it passed, the sweep's grid rates included.
    pub first_failure_hz: Option<f64>,
    /// Evaluations the refinement used beyond the coarse sweep.
    pub evaluations: usize,
}

/// The ceiling above `from_hz` from the coarse sweep's verdicts `series`
/// (sorted by rate) refined by bisection in ln f to [`RATE_TOLERANCE`]:
/// the passing side of the final bracket is reported. The bracket is the
/// *first* failing grid rate above `from_hz` and the passing one below it,
/// so where rounding makes the verdict non-monotone in the rate (a pole
/// landing on either side of z = 1 from one rate to the next) the ceiling
/// is never above a failing rate that was checked: every grid rate and
/// every bisection point from `from_hz` to the ceiling passed. Bisection, not
/// Brent: what ends a run of passing rates (a coefficient rounding onto
/// z = 1) is a step, not a smooth slack.
pub fn fastest_rate_by(
    from_hz: f64,
    series: &[(f64, &Assessment)],
    judge: &dyn Fn(f64) -> Assessment,
) -> Ceiling {
    let mut evaluations = 1usize;
    let start = judge(from_hz);
    if !start.feasible {
        return Ceiling {
            rate_hz: None,
            above_range: false,
            limiting: start.limiting.map(str::to_string),
            first_failure_hz: Some(from_hz),
            evaluations,
        };
    }
    let above: Vec<&(f64, &Assessment)> = series.iter().filter(|r| r.0 > from_hz).collect();
    let Some(i) = above.iter().position(|r| !r.1.feasible) else {
        return Ceiling {
            rate_hz: Some(above.last().map_or(from_hz, |r| r.0)),
            above_range: true,
            limiting: None,
            first_failure_hz: None,
            evaluations,
        };
    };
    let mut hi = above[i].0;
    let mut hi_assessment = above[i].1.clone();
    let mut lo = if i > 0 { above[i - 1].0 } else { from_hz };
    while hi / lo - 1.0 > RATE_TOLERANCE {
        let mid = (lo * hi).sqrt();
        evaluations += 1;
        let a = judge(mid);
        if a.feasible {
            lo = mid;
        } else {
            hi = mid;
            hi_assessment = a;
        }
    }
    Ceiling {
        rate_hz: Some(lo),
        above_range: false,
        limiting: hi_assessment.limiting.map(str::to_string),
        first_failure_hz: Some(hi),
        evaluations,
    }
}

/// Feasible runs of grid rates strictly below index `below`.
fn islands(series: &[(f64, &Assessment)], below: usize) -> Vec<[f64; 2]> {
    let mut out = Vec::new();
    let mut start: Option<f64> = None;
    let mut prev = 0.0;
    for r in &series[..below] {
        let f = r.0;
        if r.1.feasible {
            if start.is_none() {
                start = Some(f);
            }
            prev = f;
        } else if let Some(s) = start.take() {
            out.push([s, prev]);
        }
    }
    if let Some(s) = start {
        out.push([s, prev]);
    }
    out
}
