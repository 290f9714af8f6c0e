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

use crate::model::discretize::{Method, MethodChoice};
use crate::model::scalar_solve;
use crate::sampled::evaluate::{Point, PreparedLoop};
use crate::sampled::feasibility::{Assessment, assess};
use crate::sampled::figure::Limiting;
use crate::spec::HoldKind;
use crate::spec::Spec;

/// Relative tolerance on `f_star` (loop model: 1e-4 or tighter).
pub const RATE_TOLERANCE: f64 = 1e-4;

/// The answer for one method and delay.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SlowestRate {
    /// Method name (`given-in-z` for a controller given in z).
    pub method: MethodChoice,
    /// The actuator's hold kind.
    pub hold: HoldKind,
    pub compute_delay: f64,
    /// `f_star`, Hz; None when `max_hz` itself fails.
    pub slowest_rate_hz: Option<f64>,
    /// The figure that fails just below `f_star` (or at `max_hz` when
    /// there is no answer); `stability` for an unstable loop.
    pub limiting: Option<Limiting>,
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

/// The method as results carry it (`None`: the controller given in z).
pub fn method_label(m: Option<Method>) -> MethodChoice {
    MethodChoice(m)
}

/// One verdict of the coarse sweep as the search keeps it: the rate, the
/// verdict (its per-limit checks dropped: the search reads the verdict,
/// the limiting figure and the slack) and, over plant variants, the
/// worst variant's index (0 on the nominal loop).
#[derive(Debug, Clone)]
pub struct Verdict {
    pub rate_hz: f64,
    pub assessment: Assessment,
    pub worst: usize,
    /// False for a verdict-only row over plant variants: the verdict is
    /// exact, but the limiting figure, the slack and `worst` are those of
    /// the first variant found failing, not the worst over all of them
    /// (see [`CoarseSeries::complete`]).
    pub complete: bool,
}

/// What the search needs from one series' coarse sweep, gathered while
/// its verdicts arrive in ascending rate, so a sweep keeps a few verdicts
/// per series whatever its length: the lowest and highest rates' verdicts,
/// the fastest infeasible rate's and the next one up (the bracket of
/// `f_star`), and the feasible runs below the fastest infeasible rate
/// (the islands). Nothing else of the series is read by the search.
#[derive(Debug, Clone, Default)]
pub struct CoarseSeries {
    first: Option<Verdict>,
    last: Option<Verdict>,
    /// The fastest infeasible rate so far, and the rate after it.
    last_bad: Option<Verdict>,
    after_bad: Option<Verdict>,
    /// Feasible runs each ended by an infeasible rate, `[first, last]`.
    closed_runs: Vec<[f64; 2]>,
    /// The feasible run still open at the top.
    open_run: Option<[f64; 2]>,
}

impl CoarseSeries {
    /// Add the verdict at `rate_hz`, above every rate added before.
    pub fn push(&mut self, rate_hz: f64, assessment: &Assessment, worst: usize) {
        self.push_verdict(rate_hz, assessment, worst, true);
    }

    /// [`CoarseSeries::push`] for a verdict that may be verdict-only
    /// (`complete` false: see [`Verdict::complete`]).
    pub fn push_verdict(
        &mut self,
        rate_hz: f64,
        assessment: &Assessment,
        worst: usize,
        complete: bool,
    ) {
        let v = Verdict {
            rate_hz,
            assessment: Assessment {
                checks: Vec::new(),
                ..assessment.clone()
            },
            worst,
            complete,
        };
        if self.first.is_none() {
            self.first = Some(v.clone());
        }
        if v.assessment.feasible {
            let start = self.open_run.map_or(rate_hz, |r| r[0]);
            self.open_run = Some([start, rate_hz]);
            if self.last_bad.is_some() && self.after_bad.is_none() {
                self.after_bad = Some(v.clone());
            }
        } else {
            if let Some(run) = self.open_run.take() {
                self.closed_runs.push(run);
            }
            self.last_bad = Some(v.clone());
            self.after_bad = None;
        }
        self.last = Some(v);
    }

    /// The series from `(rate_hz, assessment)` pairs sorted by rate.
    pub fn from_verdicts<'a>(verdicts: impl IntoIterator<Item = (f64, &'a Assessment)>) -> Self {
        let mut s = CoarseSeries::default();
        for (f, a) in verdicts {
            s.push(f, a, 0);
        }
        s
    }

    /// The verdict at the lowest rate.
    pub fn first(&self) -> Option<&Verdict> {
        self.first.as_ref()
    }

    /// The verdict at the highest rate.
    pub fn last(&self) -> Option<&Verdict> {
        self.last.as_ref()
    }

    /// The fastest infeasible rate's verdict.
    pub fn last_infeasible(&self) -> Option<&Verdict> {
        self.last_bad.as_ref()
    }

    /// Replace every verdict-only verdict the search reads (the lowest,
    /// the highest, the fastest infeasible rate and the next one up) by a
    /// complete one: `judge` gives the verdict over every variant at a
    /// rate (its assessment and worst variant), called once per rate. The
    /// search then reads the very slack, limiting figure and worst variant
    /// a sweep judging every variant at every row would have given, so its
    /// answer is the same. Returns the judgements made.
    pub fn complete(&mut self, judge: &dyn Fn(f64) -> (Assessment, usize)) -> usize {
        let mut done: Vec<Verdict> = Vec::new();
        for slot in [
            &mut self.first,
            &mut self.last,
            &mut self.last_bad,
            &mut self.after_bad,
        ]
        .into_iter()
        .flatten()
        {
            if slot.complete {
                continue;
            }
            let rate_hz = slot.rate_hz;
            let v = match done.iter().find(|v| v.rate_hz == rate_hz) {
                Some(v) => v.clone(),
                None => {
                    let (a, worst) = judge(rate_hz);
                    let v = Verdict {
                        rate_hz,
                        assessment: Assessment {
                            checks: Vec::new(),
                            ..a
                        },
                        worst,
                        complete: true,
                    };
                    done.push(v.clone());
                    v
                }
            };
            *slot = v;
        }
        done.len()
    }
}

/// `f_star` for one (method, hold, delay) series of the coarse sweep,
/// judged on the nominal loop.
pub fn slowest_rate(
    lp: &PreparedLoop,
    spec: &Spec,
    method: Option<Method>,
    hold: HoldKind,
    delay: f64,
    series: &CoarseSeries,
    observer: &dyn SearchObserver,
) -> SlowestRate {
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
    slowest_rate_by(method, hold, delay, series, &judge)
}

/// `f_star` for one (method, delay) series: `series` holds what the
/// coarse sweep's verdicts tell, and `judge` gives the verdict at any
/// other rate (the nominal loop, or the worst of several plant variants).
pub fn slowest_rate_by(
    method: Option<Method>,
    hold: HoldKind,
    delay: f64,
    series: &CoarseSeries,
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
    // The islands: feasible runs below the fastest infeasible rate.
    answer.islands = series.closed_runs.clone();
    if !last.assessment.feasible {
        answer.limiting = last.assessment.limiting;
        return answer;
    }
    let (Some(bad), Some(next)) = (series.last_bad.as_ref(), series.after_bad.as_ref()) else {
        let first = series.first().unwrap_or(last);
        answer.slowest_rate_hz = Some(first.rate_hz);
        answer.limiting = first.assessment.limiting;
        answer.at_range_floor = true;
        return answer;
    };

    let count = Cell::new(0usize);
    let judge = |rate: f64| -> Assessment {
        count.set(count.get() + 1);
        judge(rate)
    };
    let mut lo = bad.rate_hz;
    let mut hi = next.rate_hz;
    let mut lo_assessment = bad.assessment.clone();
    let ln_tol = (1.0 + RATE_TOLERANCE).ln() / 4.0;

    // Brent on the limiting slack; its answer x sits next to the sign
    // change, so probing x and x - tol usually closes the bracket at once.
    // The bracket's ends were judged by the sweep: their slack is reused,
    // not recomputed (the solver asks for both ends before it starts).
    let ends = [
        (lo.ln(), bad.assessment.slack),
        (hi.ln(), next.assessment.slack),
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
    answer.limiting = lo_assessment.limiting;
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
    pub limiting: Option<Limiting>,
    /// The lowest failing rate found, Hz: `from_hz` when it fails, else
    /// just above the ceiling (None when every rate checked passes). Where
    /// the verdict is not monotone in the rate (rounding), every rate
    /// checked below it passed, the sweep's grid rates included.
    pub first_failure_hz: Option<f64>,
    /// Evaluations the refinement used beyond the coarse sweep.
    pub evaluations: usize,
}

/// The coarse sweep's verdicts of one series for a precision ceiling,
/// kept as runs: the grid's rates are shared by every series, so only
/// each run of failing rates is kept (first and last index in the
/// series, and what fails), a few entries where the verdict changes and
/// none where it holds.
#[derive(Debug, Clone, Default)]
pub struct FailingRuns {
    /// `(first index, last index, limiting)` of each run of failing rates
    /// with one limiting figure, ascending.
    runs: Vec<(usize, usize, Option<Limiting>)>,
}

impl FailingRuns {
    /// Add the verdict of the series' rate number `index` (ascending).
    pub fn push(&mut self, index: usize, assessment: &Assessment) {
        if assessment.feasible {
            return;
        }
        match self.runs.last_mut() {
            Some(r) if r.1 + 1 == index && r.2 == assessment.limiting => r.1 = index,
            _ => self.runs.push((index, index, assessment.limiting)),
        }
    }

    /// The first failing index at or after `from`, with what fails there.
    fn first_from(&self, from: usize) -> Option<(usize, Option<Limiting>)> {
        self.runs
            .iter()
            .find(|r| r.1 >= from)
            .map(|r| (r.0.max(from), r.2))
    }
}

/// The ceiling above `from_hz` from the coarse sweep's verdicts (`rates`
/// ascending, `failing` the runs of failing ones) refined by bisection in
/// ln f to [`RATE_TOLERANCE`]:
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
    rates: &[f64],
    failing: &FailingRuns,
    judge: &dyn Fn(f64) -> Assessment,
) -> Ceiling {
    let mut evaluations = 1usize;
    let start = judge(from_hz);
    if !start.feasible {
        return Ceiling {
            rate_hz: None,
            above_range: false,
            limiting: start.limiting,
            first_failure_hz: Some(from_hz),
            evaluations,
        };
    }
    // The grid rates above from_hz start here.
    let first_above = rates.partition_point(|&f| f <= from_hz);
    let Some((i, limiting)) = failing.first_from(first_above) else {
        return Ceiling {
            rate_hz: Some(
                rates
                    .last()
                    .copied()
                    .filter(|&f| f > from_hz)
                    .unwrap_or(from_hz),
            ),
            above_range: true,
            limiting: None,
            first_failure_hz: None,
            evaluations,
        };
    };
    let mut hi = rates[i];
    let mut hi_limiting = limiting;
    let mut lo = if i > first_above {
        rates[i - 1]
    } else {
        from_hz
    };
    while hi / lo - 1.0 > RATE_TOLERANCE {
        let mid = (lo * hi).sqrt();
        evaluations += 1;
        let a = judge(mid);
        if a.feasible {
            lo = mid;
        } else {
            hi = mid;
            hi_limiting = a.limiting;
        }
    }
    Ceiling {
        rate_hz: Some(lo),
        above_range: false,
        limiting: hi_limiting,
        first_failure_hz: Some(hi),
        evaluations,
    }
}
