//! The cascade's search: for each inner rate the largest ratio whose outer
//! loop meets the outer spec (the slowest outer rate), and among the pairs
//! that meet both specs the one with the least CPU load (`docs/figures.md`,
//! "Cascaded loops").
//!
//! CPU load of a pair = (inner cycles x f + outer cycles x f/N) / cpu_hz,
//! each update's cycles measured (`cycles_per_update`) or estimated from
//! its controller (MACs x `cycles_per_mac` + `overhead_cycles`). Without a
//! `[budget]` the cost is the number of updates a second, f + f/N.
//!
//! The load falls as the ratio grows, so at one inner rate the cheapest
//! passing pair is the largest passing ratio: the ratios are tried from the
//! largest down, each first screened by the lifted loop's poles alone, then
//! by its loop figures (a failing phase margin, gain margin or sensitivity
//! limit ends it before the time responses), and the first that passes
//! ends the inner rate (the smaller ratios are reported as not evaluated,
//! with that reason). `full` evaluates every pair (the `sweep` command).

use crate::engineering::{at_least, hz, hz_at_least, sig4};
use rayon::prelude::*;
use serde::Serialize;

use crate::case::{Case, OuterLoop};
use crate::error::Error;
use std::collections::HashMap;
use std::sync::Arc;

use crate::explore::budget;
use crate::explore::pick::{case_methods, prepare};
use crate::explore::sweep::SweepRow;
use crate::model::discretize::{Method, MethodChoice};
use crate::model::rounding;
use crate::model::transfer::{Controller, DiscreteTransfer};
use crate::sampled::cascade::evaluate::{
    CascadeError, CascadePoint, OuterOutcome, PreparedCascade,
};
use crate::sampled::evaluate::{Evaluation, Given, Point, Status};
use crate::sampled::feasibility::{Assessment, assess};
use crate::spec::HoldKind;
use crate::spec::Structure;

/// A cascade's search done: a row per pair of the grid and the pick
/// (`search_cascade`).
pub struct CascadeSearch {
    pub rows: Vec<CascadeRow>,
    pub pick: CascadePick,
}

/// The cascade's search and pick, reading the inner loop's figures from
/// its single-loop sweep (`inner_known`; the inner pick does not enter, so
/// the two can run side by side).
pub fn search_cascade(
    case: &Case,
    pc: &PreparedCascade,
    inner_known: &InnerEvaluations,
) -> CascadeSearch {
    let rows = cascade_rows_with(case, pc, false, inner_known);
    let pick = cascade_pick(case, pc, &rows);
    CascadeSearch { rows, pick }
}

/// Build the cascade of a case (nominal parameters); None without `[outer]`.
pub fn prepare_cascade(case: &Case) -> Result<Option<PreparedCascade>, Error> {
    let Some(outer) = &case.outer else {
        return Ok(None);
    };
    let inner = prepare(case)?;
    let models = case.outer_nominal()?.ok_or_else(|| {
        Error::Input("the case has [outer] but its models could not be built".into())
    })?;
    PreparedCascade::new(
        inner,
        models,
        outer.prewarp_hz,
        outer.spec.settling_band_pct / 100.0,
    )
    .map(Some)
    .map_err(|e| Error::Input(format!("{}: [outer]: {e}", case.source.display())))
}

/// One series of the cascade grid: everything but the inner rate and the
/// ratio.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Series {
    pub inner_method: Option<Method>,
    pub inner_hold: HoldKind,
    pub inner_delay: f64,
    pub outer_method: Option<Method>,
    pub outer_hold: HoldKind,
    pub outer_delay: f64,
}

/// Every series of a case: inner methods x holds x delays x outer methods
/// x outer holds x outer delays, in file order.
pub fn case_series(case: &Case, outer: &OuterLoop) -> Vec<Series> {
    let outer_methods: Vec<Option<Method>> = if outer.methods.is_empty() {
        vec![None]
    } else {
        outer.methods.iter().copied().map(Some).collect()
    };
    let mut out = Vec::new();
    for &inner_method in &case_methods(case) {
        for &inner_hold in &case.holds {
            for &inner_delay in &case.compute_delays {
                for &outer_method in &outer_methods {
                    for &outer_hold in &outer.holds {
                        for &outer_delay in &outer.compute_delays {
                            out.push(Series {
                                inner_method,
                                inner_hold,
                                inner_delay,
                                outer_method,
                                outer_hold,
                                outer_delay,
                            });
                        }
                    }
                }
            }
        }
    }
    out
}

/// The inner rates of a case with the ratios to try at each, ascending
/// (for an outer controller in z only the pairs on its rate).
pub fn case_pairs(case: &Case, pc: &PreparedCascade, outer: &OuterLoop) -> Vec<(f64, Vec<usize>)> {
    let (rates, range) = match &pc.inner.controller {
        Controller::Discrete(d) => (vec![1.0 / d.period_s], (1.0 / d.period_s, 1.0 / d.period_s)),
        Controller::Continuous(_) => (case.rates.grid(), (case.rates.min_hz, case.rates.max_hz)),
    };
    let mut out: Vec<(f64, Vec<usize>)> = Vec::new();
    for (f, n) in outer.pairs(&rates, range) {
        match out.iter_mut().find(|(g, _)| *g == f) {
            Some((_, ns)) => ns.push(n),
            None => out.push((f, vec![n])),
        }
    }
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    for (_, ns) in &mut out {
        ns.sort_unstable();
    }
    out
}

/// One row of the cascade grid.
#[derive(Debug, Clone)]
pub struct CascadeRow {
    pub point: CascadePoint,
    /// The inner loop (outer loop open); shared by every ratio at its rate
    /// (one allocation for all of them).
    pub inner: Arc<Evaluation>,
    pub inner_verdict: Assessment,
    /// The outer loop; None when not evaluated (`skipped` says why). Boxed:
    /// most rows of a search are not evaluated, and a pick holds every row.
    pub outer: Option<Box<Evaluation>>,
    pub outer_verdict: Option<Assessment>,
    pub skipped: Option<String>,
    /// The outer loop was judged before its time responses: by its poles
    /// (not stable) or by a failing limit on a loop figure.
    pub screened: bool,
    /// CPU cost of the pair.
    pub cost: Cost,
}

impl CascadeRow {
    /// Both loops meet their specs.
    pub fn passes(&self) -> bool {
        self.inner_verdict.feasible && self.outer_verdict.as_ref().is_some_and(|a| a.feasible)
    }
}

/// The processor cost of a pair.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Cost {
    /// Cycles of one inner and one outer update (None without a budget or
    /// when a controller could not be built).
    pub inner_cycles: Option<f64>,
    pub outer_cycles: Option<f64>,
    /// Load of each loop and their sum, percent of the CPU.
    pub inner_load_pct: Option<f64>,
    pub outer_load_pct: Option<f64>,
    pub total_load_pct: Option<f64>,
    /// Updates a second, f + f/N (the cost without a budget).
    pub updates_per_s: f64,
}

impl Cost {
    /// What the search minimises: the total load, or updates a second.
    pub fn key(&self) -> f64 {
        self.total_load_pct.unwrap_or(self.updates_per_s)
    }
}

/// The cost of a pair at `p` with the two controllers.
pub fn pair_cost(
    case: &Case,
    p: &CascadePoint,
    inner_c: Option<&DiscreteTransfer>,
    outer_c: Option<&DiscreteTransfer>,
    inner_design: &Controller,
    outer_design: &Controller,
) -> Cost {
    let f = p.inner.rate_hz;
    let fo = p.outer_rate_hz();
    let mut cost = Cost {
        inner_cycles: None,
        outer_cycles: None,
        inner_load_pct: None,
        outer_load_pct: None,
        total_load_pct: None,
        updates_per_s: f + fo,
    };
    let (Some(b), Some(outer)) = (case.budget.as_ref(), case.outer.as_ref()) else {
        return cost;
    };
    let structure = case
        .arithmetic
        .as_ref()
        .map_or(Structure::TransposedDirect, |a| a.structure);
    let ci = budget::cycles_per_update(
        b,
        inner_c,
        structure,
        rounding::design_integrators(inner_design),
    );
    let co = match outer.cycles_per_update {
        Some(c) => Some(c),
        None => budget::cycles_per_update(
            b,
            outer_c,
            structure,
            rounding::design_integrators(outer_design),
        ),
    };
    cost.inner_cycles = ci;
    cost.outer_cycles = co;
    cost.inner_load_pct = ci.map(|c| budget::load_pct(b, c, f));
    cost.outer_load_pct = co.map(|c| budget::load_pct(b, c, fo));
    if let (Some(a), Some(o)) = (cost.inner_load_pct, cost.outer_load_pct) {
        cost.total_load_pct = Some(a + o);
    }
    cost
}

/// The inner loop's evaluations already made by the single-loop sweep of
/// the same inner grid (what `pick` runs first on a cascade case), keyed
/// by point: the cascade's search reads them instead of evaluating the
/// inner loop again. Only evaluated points are kept (a row not evaluated on
/// purpose is evaluated by the cascade itself).
#[derive(Debug, Default)]
pub struct InnerEvaluations {
    map: HashMap<PointKey, Evaluation>,
}

type PointKey = (u64, Option<Method>, u64, HoldKind);

fn point_key(p: &Point) -> PointKey {
    (p.rate_hz.to_bits(), p.method, p.delay.to_bits(), p.hold)
}

impl InnerEvaluations {
    /// Keep a finished sweep row's nominal evaluation.
    pub fn push(&mut self, row: &SweepRow) {
        if !matches!(row.eval.status, Status::NotEvaluated(_)) {
            self.map.insert(point_key(&row.point), row.eval.clone());
        }
    }

    fn get(&self, p: &Point) -> Option<&Evaluation> {
        self.map.get(&point_key(p))
    }

    /// Number of evaluations held.
    pub fn len(&self) -> usize {
        self.map.len()
    }

    pub fn is_empty(&self) -> bool {
        self.map.is_empty()
    }
}

/// `pair_cost` of the cascade's own controllers at `p` (the inner one
/// already discretized at its rate, shared by the ratios there).
fn pair_cost_at(
    case: &Case,
    pc: &PreparedCascade,
    p: &CascadePoint,
    (inner_c, outer_c): (Option<&DiscreteTransfer>, Option<&DiscreteTransfer>),
) -> Cost {
    pair_cost(
        case,
        p,
        inner_c,
        outer_c,
        &pc.inner.controller,
        &pc.outer_models.controller,
    )
}

/// The rows of one (series, inner rate): the inner loop once, then the
/// ratios (all of them with `full`, else from the largest down to the first
/// that passes).
fn rows_at(
    case: &Case,
    pc: &PreparedCascade,
    series: &Series,
    rate_hz: f64,
    ratios: &[usize],
    full: bool,
    known: &InnerEvaluations,
) -> Vec<CascadeRow> {
    let outer = case.outer.as_ref().expect("rows_at runs on a cascade case");
    let inner_point = Point {
        rate_hz,
        method: series.inner_method,
        delay: series.inner_delay,
        hold: series.inner_hold,
    };
    // The inner controller at this rate, discretized once: the inner
    // evaluation (when the sweep did not hand it over) and the CPU cost.
    let inner_c = pc.inner.controller_at(rate_hz, series.inner_method);
    let inner = Arc::new(match known.get(&inner_point) {
        Some(e) => e.clone(),
        None => pc.inner.evaluate(
            &inner_point,
            Given {
                controller: Some(inner_c.as_ref()),
                ..Given::default()
            },
        ),
    });
    let inner_verdict = assess(&inner, &case.spec);
    // The inner loop on the whole plant, shared by every ratio here; not
    // built when no ratio needs it (the search skips every pair at an inner
    // rate that fails the inner spec).
    let needed = full || inner_verdict.feasible;
    let closed = ratios.first().filter(|_| needed).map(|&n| {
        let c = (inner_c.as_ref()).map_err(|e| CascadeError::InnerController(e.clone()))?;
        pc.inner_closed_around(
            &CascadePoint {
                inner: inner_point,
                ratio: n,
                outer_method: series.outer_method,
                outer_delay: series.outer_delay,
                outer_hold: series.outer_hold,
            },
            c,
            pc.outer_time.points_per_period,
        )
    });
    let mut rows: Vec<CascadeRow> = Vec::with_capacity(ratios.len());
    let mut found = false;
    for &n in ratios.iter().rev() {
        let point = CascadePoint {
            inner: inner_point,
            ratio: n,
            outer_method: series.outer_method,
            outer_delay: series.outer_delay,
            outer_hold: series.outer_hold,
        };
        // The outer controller at this ratio, discretized once: the CPU
        // cost and the outer loop.
        let outer_c = pc.outer_controller(&point);
        let cost = pair_cost_at(
            case,
            pc,
            &point,
            (inner_c.as_ref().ok(), outer_c.as_ref().ok()),
        );
        let skip = |why: String| CascadeRow {
            point,
            inner: inner.clone(),
            inner_verdict: inner_verdict.clone(),
            outer: None,
            outer_verdict: None,
            skipped: Some(why),
            screened: false,
            cost,
        };
        // A pair the search's screens proved failing: its verdict and why.
        let screened_out = |verdict, why| CascadeRow {
            outer_verdict: Some(verdict),
            screened: true,
            ..skip(why)
        };
        if !full {
            if found {
                rows.push(skip(
                    "not evaluated: a larger ratio passes at this inner rate".into(),
                ));
                continue;
            }
            if !inner_verdict.feasible {
                rows.push(skip("not evaluated: the inner loop fails its spec".into()));
                continue;
            }
        }
        let outcome = match &closed {
            Some(Ok(inner)) => {
                let spec = (!full).then_some(&outer.spec);
                pc.evaluate_outer_on(inner, &point, outer_c.as_ref(), false, spec)
            }
            Some(Err(e)) => OuterOutcome::Figures(Box::new(Evaluation::error(e.clone()))),
            None => OuterOutcome::Figures(Box::new(pc.evaluate_outer(&point, false))),
        };
        let e = match outcome {
            // Unstable, marginal or not built: judged on the lifted loop's
            // poles (or its error) alone.
            OuterOutcome::Figures(e) if !full && e.figures.is_none() => {
                rows.push(CascadeRow {
                    outer_verdict: Some(assess(&e, &outer.spec)),
                    outer: Some(e),
                    skipped: None,
                    screened: true,
                    ..skip(String::new())
                });
                continue;
            }
            OuterOutcome::Figures(e) => *e,
            OuterOutcome::FailsLoopFigures(verdict) => {
                let checks = failing_checks(&verdict, "=");
                rows.push(screened_out(verdict, format!(
                    "fails the outer spec on its loop figures ({checks}); time figures not computed"
                )));
                continue;
            }
            OuterOutcome::FailsSimulation(verdict) => {
                let checks = failing_checks(&verdict, ">=");
                rows.push(screened_out(verdict, format!(
                    "fails the outer spec on a short exact simulation of its step response ({checks}); loop and time figures not computed"
                )));
                continue;
            }
        };
        let verdict = assess(&e, &outer.spec);
        found |= verdict.feasible && inner_verdict.feasible;
        rows.push(CascadeRow {
            point,
            inner: inner.clone(),
            inner_verdict: inner_verdict.clone(),
            outer: Some(Box::new(e)),
            outer_verdict: Some(verdict),
            skipped: None,
            screened: false,
            cost,
        });
    }
    rows.reverse();
    rows
}

/// The failing checks of a verdict in words, `figure REL value against
/// limit` (`REL` is `>=` for a bound from a short simulation).
fn failing_checks(verdict: &Assessment, rel: &str) -> String {
    verdict
        .checks
        .iter()
        .filter(|c| !c.pass)
        .map(|c| {
            format!(
                "{} {rel} {} against {}",
                c.figure,
                c.value.map_or_else(|| "none".into(), sig4),
                sig4(c.limit)
            )
        })
        .collect::<Vec<_>>()
        .join("; ")
}

/// Every row of the cascade grid in grid order (series, inner rate,
/// ratio), evaluated in parallel; `full` evaluates every pair.
pub fn cascade_rows(case: &Case, pc: &PreparedCascade, full: bool) -> Vec<CascadeRow> {
    cascade_rows_with(case, pc, full, &InnerEvaluations::default())
}

/// `cascade_rows` reading the inner loop's evaluations from `known` where
/// it has them (the single-loop sweep's; the same figures).
pub fn cascade_rows_with(
    case: &Case,
    pc: &PreparedCascade,
    full: bool,
    known: &InnerEvaluations,
) -> Vec<CascadeRow> {
    let jobs = jobs(case, pc);
    jobs.par_iter()
        .flat_map_iter(|(s, (f, ns))| rows_at(case, pc, s, *f, ns, full, known))
        .collect()
}

/// The grid's jobs in grid order: one per (series, inner rate), with the
/// ratios there. None without `[outer]`.
fn jobs(case: &Case, pc: &PreparedCascade) -> Vec<(Series, (f64, Vec<usize>))> {
    let Some(outer) = &case.outer else {
        return Vec::new();
    };
    let pairs = case_pairs(case, pc, outer);
    case_series(case, outer)
        .into_iter()
        .flat_map(|s| pairs.iter().map(move |p| (s, p.clone())))
        .collect()
}

/// Jobs (series, inner rate) evaluated side by side before their rows are
/// handed on, per worker thread: enough to keep the threads busy, few
/// enough that memory does not grow with the grid.
const STREAM_JOBS_PER_THREAD: usize = 8;

/// Every row of the cascade grid with every pair evaluated (`sweep`),
/// handed to `each` in grid order as the evaluations finish: the jobs run
/// in parallel a batch at a time, so only one batch of rows is held
/// (memory flat in the grid size), and the rows are those of
/// `cascade_rows(case, pc, true)`, in its order.
pub fn each_cascade_row(case: &Case, pc: &PreparedCascade, each: &mut dyn FnMut(CascadeRow)) {
    let known = InnerEvaluations::default();
    let batch = STREAM_JOBS_PER_THREAD * rayon::current_num_threads().max(1);
    for chunk in jobs(case, pc).chunks(batch) {
        let rows: Vec<Vec<CascadeRow>> = chunk
            .par_iter()
            .map(|(s, (f, ns))| rows_at(case, pc, s, *f, ns, true, &known))
            .collect();
        rows.into_iter().flatten().for_each(&mut *each);
    }
}

/// Per inner rate of a series, the largest ratio that meets both specs.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SeriesAnswer {
    #[serde(flatten)]
    pub series: SeriesNames,
    /// `(inner rate, largest passing ratio or None)`, ascending in rate.
    pub largest_ratio: Vec<(f64, Option<usize>)>,
}

/// A series' identities (written as their names).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SeriesNames {
    pub inner_method: MethodChoice,
    pub inner_hold: HoldKind,
    pub inner_compute_delay: f64,
    pub outer_method: MethodChoice,
    /// The outer hold, named only when the case lists anything but
    /// `zero-order` alone (`OuterLoop::hold_named`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub outer_hold: Option<HoldKind>,
    pub outer_compute_delay: f64,
}

impl SeriesNames {
    /// The names of `p`'s series in a case whose outer loop is `outer`.
    pub fn of(p: &CascadePoint, outer: &OuterLoop) -> SeriesNames {
        SeriesNames {
            inner_method: MethodChoice(p.inner.method),
            inner_hold: p.inner.hold,
            inner_compute_delay: p.inner.delay,
            outer_method: MethodChoice(p.outer_method),
            outer_hold: outer.hold_named().then_some(p.outer_hold),
            outer_compute_delay: p.outer_delay,
        }
    }
}

/// The chosen pair.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChosenPair {
    #[serde(flatten)]
    pub series: SeriesNames,
    pub inner_rate_hz: f64,
    pub ratio: usize,
    pub outer_rate_hz: f64,
    pub cost: Cost,
    /// Both loops' figures at the pair, exact delay margins searched.
    pub inner: Evaluation,
    pub outer: Evaluation,
    pub inner_verdict: Assessment,
    pub outer_verdict: Assessment,
}

/// The chosen pair moved up by the headroom, as the single loop's pick
/// recommends `f_star x headroom`: the inner rate times the inner spec's
/// headroom (rounded up to a timer division with `timer_hz`), the ratio
/// kept (so the outer rate moves with it), both loops evaluated there
/// exactly and judged again. Not a grid pair: a pair can fail above a
/// passing one, so its verdicts are reported, not assumed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RecommendedPair {
    pub inner_rate_hz: f64,
    pub ratio: usize,
    pub outer_rate_hz: f64,
    /// The factor applied to the chosen pair's inner rate (1 when none can
    /// be: a controller given in z runs at its own rate only).
    pub headroom: f64,
    /// How the pair was reached, in words.
    pub basis: String,
    pub cost: Cost,
    /// The total load is within `max_load_pct` (true without a budget).
    pub fits_budget: bool,
    pub inner_verdict: Assessment,
    pub outer_verdict: Assessment,
    /// Both loops' figures there, exact delay margins searched.
    pub inner: Evaluation,
    pub outer: Evaluation,
    pub notes: Vec<String>,
}

/// The headroom pair of a chosen pair (`RecommendedPair`).
fn recommend(case: &Case, pc: &PreparedCascade, chosen: &CascadeRow) -> RecommendedPair {
    let outer = case
        .outer
        .as_ref()
        .expect("recommend runs on a cascade case");
    let h = case.spec.headroom;
    let f0 = chosen.point.inner.rate_hz;
    let n = chosen.point.ratio;
    let mut notes = Vec::new();
    let fixed =
        matches!(pc.inner.controller, Controller::Discrete(_)) || outer.rate_in_z_hz().is_some();
    let (mut rate, mut basis) = if fixed {
        (
            f0,
            "a controller given in z runs only at its own rate: no headroom applied".to_string(),
        )
    } else {
        (
            f0 * h,
            format!(
                "the chosen pair's inner rate {} times the headroom {h}, ratio {n} kept; the headroom covers model error (parameter drift, unmodelled dynamics), it is not a guarantee",
                hz(f0)
            ),
        )
    };
    if !fixed && let Some(timer) = case.budget.as_ref().and_then(|b| b.timer_hz) {
        match budget::timer_rate_at_least(timer, rate) {
            Some((r, d)) => {
                rate = r;
                basis.push_str(&format!(", rounded up to the timer rate timer_hz / {d}"));
            }
            None => notes.push(format!(
                "the timer ({}) cannot make {} Hz: the rate is shown unrounded",
                hz(timer),
                sig4(rate)
            )),
        }
    }
    if rate > case.rates.max_hz * (1.0 + 1e-12) {
        notes.push(format!(
            "the inner rate with headroom, {}, is above the swept range (max_hz = {})",
            hz(rate),
            hz(case.rates.max_hz)
        ));
    }
    let point = CascadePoint {
        inner: Point {
            rate_hz: rate,
            ..chosen.point.inner
        },
        ..chosen.point
    };
    // Both controllers discretized once: both loops' figures and the cost.
    let c = pc.controllers(&point);
    let e = pc.evaluate_with(&point, &c, true);
    let cost = pair_cost_at(
        case,
        pc,
        &point,
        (c.inner.as_ref().ok(), c.outer.as_ref().ok()),
    );
    let fits_budget = match (case.budget.as_ref(), cost.total_load_pct) {
        (Some(b), Some(l)) => l <= b.max_load_pct,
        (Some(_), None) => false,
        (None, _) => true,
    };
    if !fits_budget {
        notes.push(format!(
            "the pair with headroom needs {} % of the CPU, above max_load_pct: the chosen pair is the one within the budget",
            cost.total_load_pct.map_or_else(|| "an unknown share".into(), sig4)
        ));
    }
    let inner_verdict = assess(&e.inner, &case.spec);
    let outer_verdict = assess(&e.outer, &outer.spec);
    if !(inner_verdict.feasible && outer_verdict.feasible) {
        notes.push(
            "the pair with headroom fails a spec (a pair can fail above a passing one): the chosen pair is the checked answer".into(),
        );
    }
    RecommendedPair {
        inner_rate_hz: rate,
        ratio: n,
        outer_rate_hz: point.outer_rate_hz(),
        headroom: if fixed { 1.0 } else { h },
        basis,
        cost,
        fits_budget,
        inner_verdict,
        outer_verdict,
        inner: e.inner,
        outer: e.outer,
        notes,
    }
}

/// The window of inner rates for the chosen series: from the lowest inner
/// rate above which every checked rate has a passing pair, to the highest
/// whose cheapest passing pair fits the CPU budget.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CascadeWindow {
    pub low_hz: Option<f64>,
    pub high_hz: Option<f64>,
    /// What sets `high_hz`.
    pub high_bound: CascadeTop,
}

/// What sets the top of a cascade's inner-rate window (`pick.json`
/// `cascade.window.high_bound`: `cpu-budget` or `last-rate-checked`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum CascadeTop {
    /// The fastest inner rate whose cheapest passing pair fits the budget.
    CpuBudget,
    /// No budget given: the fastest inner rate checked.
    LastRateChecked,
}

impl std::fmt::Display for CascadeTop {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            CascadeTop::CpuBudget => "the CPU budget",
            CascadeTop::LastRateChecked => "the fastest inner rate checked",
        })
    }
}

/// The cascade's answer (`pick.json` `cascade`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CascadePick {
    pub ratios: Vec<usize>,
    pub series: Vec<SeriesAnswer>,
    pub chosen: Option<ChosenPair>,
    /// The chosen pair with headroom (`RecommendedPair`).
    pub recommended: Option<RecommendedPair>,
    pub window_hz: Option<[f64; 2]>,
    pub window: Option<CascadeWindow>,
    /// Rows evaluated past the screens (every loop figure, the time
    /// figures the outer spec limits), judged before their time responses
    /// (poles, the short simulation or a failing loop figure), not
    /// evaluated.
    pub evaluated: usize,
    pub screened: usize,
    pub not_evaluated: usize,
    pub advice: Vec<String>,
    pub notes: Vec<String>,
}

/// The cascade's pick from its rows (`cascade_rows`).
pub fn cascade_pick(case: &Case, pc: &PreparedCascade, rows: &[CascadeRow]) -> CascadePick {
    let outer = case
        .outer
        .as_ref()
        .expect("cascade_pick runs on a cascade case");
    let mut series: Vec<SeriesAnswer> = Vec::new();
    for r in rows {
        let names = SeriesNames::of(&r.point, outer);
        let idx = match series.iter().position(|s| s.series == names) {
            Some(i) => i,
            None => {
                series.push(SeriesAnswer {
                    series: names,
                    largest_ratio: Vec::new(),
                });
                series.len() - 1
            }
        };
        let list = &mut series[idx].largest_ratio;
        let f = r.point.inner.rate_hz;
        let entry = match list.iter_mut().find(|(g, _)| *g == f) {
            Some(e) => e,
            None => {
                list.push((f, None));
                list.last_mut().expect("just pushed")
            }
        };
        if r.passes() {
            entry.1 = Some(entry.1.map_or(r.point.ratio, |n| n.max(r.point.ratio)));
        }
    }
    // The recommendation is made at the largest delays listed (the
    // conservative choice, as for a single loop).
    let inner_delay = case.compute_delays.iter().copied().fold(0.0, f64::max);
    let outer_delay = outer.compute_delays.iter().copied().fold(0.0, f64::max);
    let max_load = case.budget.as_ref().map(|b| b.max_load_pct);
    let fits = |r: &CascadeRow| match (max_load, r.cost.total_load_pct) {
        (Some(m), Some(l)) => l <= m,
        (Some(_), None) => false,
        (None, _) => true,
    };
    let at_design =
        |r: &&CascadeRow| r.point.inner.delay == inner_delay && r.point.outer_delay == outer_delay;
    let best = rows
        .iter()
        .filter(at_design)
        .filter(|r| r.passes() && fits(r))
        .min_by(|a, b| a.cost.key().total_cmp(&b.cost.key()));
    let cheapest_passing = rows
        .iter()
        .filter(at_design)
        .filter(|r| r.passes())
        .min_by(|a, b| a.cost.key().total_cmp(&b.cost.key()));
    // The chosen pair and its headroom pair, each evaluated with its exact
    // delay margins, side by side (the rest of the pick is parallel).
    let (chosen, recommended) = match best {
        Some(r) => {
            let (c, h) = rayon::join(|| pc.evaluate(&r.point, true), || recommend(case, pc, r));
            (Some((r, c)), Some(h))
        }
        None => (None, None),
    };
    let chosen = chosen.map(|(r, e)| ChosenPair {
        series: SeriesNames::of(&r.point, outer),
        inner_rate_hz: r.point.inner.rate_hz,
        ratio: r.point.ratio,
        outer_rate_hz: r.point.outer_rate_hz(),
        cost: r.cost,
        inner_verdict: assess(&e.inner, &case.spec),
        outer_verdict: assess(&e.outer, &outer.spec),
        inner: e.inner,
        outer: e.outer,
    });
    // The window, on the chosen series (or the cheapest passing one).
    let window = cheapest_passing.map(|c| {
        let names = SeriesNames::of(&c.point, outer);
        let mut by_rate: Vec<(f64, Option<&CascadeRow>)> = Vec::new();
        for r in rows
            .iter()
            .filter(|r| SeriesNames::of(&r.point, outer) == names)
        {
            let f = r.point.inner.rate_hz;
            if !by_rate.iter().any(|(g, _)| *g == f) {
                by_rate.push((f, None));
            }
            if r.passes() {
                let slot = by_rate
                    .iter_mut()
                    .find(|(g, _)| *g == f)
                    .expect("pushed above");
                if slot.1.is_none_or(|b| r.cost.key() < b.cost.key()) {
                    slot.1 = Some(r);
                }
            }
        }
        by_rate.sort_by(|a, b| a.0.total_cmp(&b.0));
        let low = by_rate
            .iter()
            .rposition(|(_, r)| r.is_none())
            .map_or(Some(0), |i| (i + 1 < by_rate.len()).then_some(i + 1))
            .map(|i| by_rate[i].0);
        let (high, bound) = match max_load {
            Some(_) => (
                by_rate
                    .iter()
                    .filter(|(_, r)| r.is_some_and(fits))
                    .map(|(f, _)| *f)
                    .fold(None, |m: Option<f64>, f| Some(m.map_or(f, |m| m.max(f)))),
                CascadeTop::CpuBudget,
            ),
            None => (by_rate.last().map(|(f, _)| *f), CascadeTop::LastRateChecked),
        };
        CascadeWindow {
            low_hz: low,
            high_hz: high,
            high_bound: bound,
        }
    });
    let window_hz = window.as_ref().and_then(|w| match (w.low_hz, w.high_hz) {
        (Some(l), Some(h)) if l <= h => Some([l, h]),
        _ => None,
    });
    let mut advice = Vec::new();
    if chosen.is_none() {
        advice = cascade_advice(case, rows, cheapest_passing, max_load);
    }
    let mut notes = Vec::new();
    if let Some(c) = &chosen
        && !(c.inner_verdict.feasible && c.outer_verdict.feasible)
    {
        // The search judged the pair on the figures its spec limits; the
        // full evaluation can differ where a search it alone runs falls
        // back to the walk (`docs/figures.md`, "Cascaded loops").
        notes.push("the chosen pair passed the search but its full evaluation fails a spec (see its verdicts): check the pairs around it".into());
    }
    if !outer.inner_spec_given {
        notes.push(
            "the case has no [spec] for the inner loop: it is checked for stability only".into(),
        );
    }
    if case.uncertainty.is_some() || case.arithmetic.is_some() {
        notes.push("the cascade is evaluated on the nominal plant with exact coefficients ([uncertainty] and [arithmetic] apply to the inner loop's own pick)".into());
    }
    CascadePick {
        ratios: outer.ratios.clone(),
        series,
        chosen,
        recommended,
        window_hz,
        window,
        evaluated: rows
            .iter()
            .filter(|r| r.outer.is_some() && !r.screened)
            .count(),
        screened: rows.iter().filter(|r| r.screened).count(),
        not_evaluated: rows.iter().filter(|r| r.outer_verdict.is_none()).count(),
        advice,
        notes,
    }
}

/// What would open an empty cascade answer.
fn cascade_advice(
    case: &Case,
    rows: &[CascadeRow],
    cheapest_passing: Option<&CascadeRow>,
    max_load: Option<f64>,
) -> Vec<String> {
    let mut out = Vec::new();
    if let (Some(r), Some(limit), Some(b)) = (cheapest_passing, max_load, case.budget.as_ref()) {
        if let Some(load) = r.cost.total_load_pct {
            out.push(format!(
                "the cheapest pair meeting both specs (inner {}, ratio {}, outer {}) needs {} % of the CPU, above max_load_pct = {limit}: raise max_load_pct to {} or more, or a CPU clock of {} or more, or cheaper updates",
                hz(r.point.inner.rate_hz),
                r.point.ratio,
                hz(r.point.outer_rate_hz()),
                sig4(load),
                at_least(load.max(limit)),
                hz_at_least(b.cpu_hz * load / limit),
            ));
        }
        return out;
    }
    if rows.iter().all(|r| !r.inner_verdict.feasible) {
        let limiting = rows
            .iter()
            .filter_map(|r| r.inner_verdict.limiting)
            .next()
            .map_or("stability".into(), |l| l.label());
        out.push(format!(
            "the inner loop meets its spec at no inner rate checked (limiting: {limiting}): run the single-loop pick on the inner loop, loosen [spec] or raise [rates] max_hz"
        ));
        return out;
    }
    let smallest = rows
        .iter()
        .filter(|r| r.inner_verdict.feasible)
        .filter_map(|r| r.outer_verdict.as_ref().map(|v| (r, v)))
        .max_by(|a, b| a.1.slack.total_cmp(&b.1.slack));
    match smallest {
        Some((r, v)) => out.push(format!(
            "the outer loop meets its spec at no pair where the inner loop passes; the closest is inner {}, ratio {} (limiting: {}, slack {} %): a smaller ratio (add one to [outer.rates] ratios), a looser [outer.spec], another outer method or a shorter outer delay",
            hz(r.point.inner.rate_hz),
            r.point.ratio,
            v.limiting.map_or("stability".into(), |l| l.label()),
            sig4(v.slack * 100.0)
        )),
        None => out.push(
            "no outer loop was evaluated (every inner rate fails the inner spec)".to_string(),
        ),
    }
    out
}
