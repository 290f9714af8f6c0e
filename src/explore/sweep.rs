//! The rate sweep: every (rate, method, computation delay) point of the
//! case's grid evaluated in parallel, each with its verdict and CPU load.
//!
//! Results come back in grid order whatever the thread count (rayon's
//! indexed `collect` keeps order, and each point is computed alone), so
//! the CSV is identical byte for byte for 1 thread or many.

use crate::model::rounding;
use std::collections::HashMap;

use rayon::prelude::*;

use crate::case::Case;
use crate::explore::budget;
use crate::explore::precision::{self, PrecisionPoint};
use crate::explore::variants::{Judging, LazyPlants, RobustPoint, VariantSet};
use crate::model::discretize::Method;
use crate::sampled::evaluate::{Evaluation, Given, Point, PreparedLoop};
use crate::sampled::feasibility::{Assessment, assess};
use crate::spec::HoldKind;
use crate::spec::{Arithmetic, Budget, Spec};
use crate::spec::{Format, Structure};

/// One evaluated grid point.
#[derive(Debug, Clone)]
pub struct SweepRow {
    pub point: Point,
    /// The nominal loop's evaluation and verdict.
    pub eval: Evaluation,
    pub assessment: Assessment,
    /// CPU load at this rate, percent (None without a budget, or when the
    /// cycles are estimated and the controller could not be built).
    pub cpu_load_pct: Option<f64>,
    /// The verdict over every plant variant, when the case has
    /// `[uncertainty]`.
    pub robust: Option<RobustPoint>,
    /// One verdict per number format of `[arithmetic]` other than f64 (the
    /// reference, whose loop is the nominal one), in case order.
    pub precision: Vec<PrecisionPoint>,
}

impl SweepRow {
    /// The row of a point that was not evaluated: its status gives the
    /// reason (`not evaluated: ...`), `assessment` the verdict that
    /// reason carries (infeasible, with the figure that decides it).
    /// Every grid point still has its row, at the cost of none of its work.
    pub fn not_evaluated(point: Point, reason: &str, assessment: Assessment) -> SweepRow {
        SweepRow {
            point,
            eval: Evaluation {
                status: crate::sampled::evaluate::Status::NotEvaluated(reason.to_string()),
                ..Evaluation::error("")
            },
            assessment,
            cpu_load_pct: None,
            robust: None,
            precision: Vec::new(),
        }
    }
}

/// What a sweep evaluates at each point: the nominal loop, and optionally
/// every plant variant and every coefficient format.
#[derive(Debug, Clone, Copy)]
pub struct Plan<'a> {
    pub lp: &'a PreparedLoop,
    pub spec: &'a Spec,
    pub budget: Option<&'a Budget>,
    pub variants: Option<&'a VariantSet>,
    pub arithmetic: Option<&'a Arithmetic>,
    /// Keep every variant's evaluation (for `--variants`); such a sweep
    /// judges every variant at every point (no verdict-only rows).
    pub keep_variants: bool,
    /// With variants: a row stops at the first variant that fails
    /// (`VariantSet::judge_verdict`, a verdict-only row) instead of
    /// judging them all (`VariantSet::judge`). What a case's sweep does;
    /// `keep_variants` overrides it.
    pub verdict_only: bool,
}

impl<'a> Plan<'a> {
    /// The nominal loop only.
    pub fn nominal(lp: &'a PreparedLoop, spec: &'a Spec, budget: Option<&'a Budget>) -> Self {
        Plan {
            lp,
            spec,
            budget,
            variants: None,
            arithmetic: None,
            keep_variants: false,
            verdict_only: false,
        }
    }

    /// Everything the case asks for: its variants (when `variants` is
    /// given) and its `[arithmetic]` formats.
    pub fn for_case(
        case: &'a Case,
        lp: &'a PreparedLoop,
        variants: Option<&'a VariantSet>,
    ) -> Self {
        Plan {
            lp,
            spec: &case.spec,
            budget: case.budget.as_ref(),
            variants,
            arithmetic: case.arithmetic.as_ref(),
            keep_variants: false,
            verdict_only: true,
        }
    }

    /// The formats actually evaluated (f64 is the reference and skipped).
    pub fn formats(&self) -> Vec<Format> {
        self.arithmetic
            .map(|a| {
                a.formats
                    .iter()
                    .copied()
                    .filter(|f| *f != Format::F64)
                    .collect()
            })
            .unwrap_or_default()
    }

    /// Where the rounded controller's gain error is measured: the
    /// continuous design's crossover, else the nominal loop's at the point.
    pub fn check_hz(&self, nominal: &Evaluation) -> Option<f64> {
        self.lp
            .design
            .as_ref()
            .and_then(|d| d.figures.as_ref())
            .and_then(|f| f.crossover_hz)
            .or_else(|| nominal.figures.as_ref().and_then(|f| f.crossover_hz))
    }
}

/// The grid with a zero-order hold, ordered by method, then delay, then
/// ascending rate.
pub fn grid(rates: &[f64], methods: &[Option<Method>], delays: &[f64]) -> Vec<Point> {
    grid_holds(rates, methods, &[HoldKind::ZeroOrder], delays)
}

/// The grid, ordered by method, then hold kind, then delay, then
/// ascending rate.
pub fn grid_holds(
    rates: &[f64],
    methods: &[Option<Method>],
    holds: &[HoldKind],
    delays: &[f64],
) -> Vec<Point> {
    let mut out = Vec::with_capacity(rates.len() * methods.len() * holds.len() * delays.len());
    for &method in methods {
        for &hold in holds {
            for &delay in delays {
                for &rate_hz in rates {
                    out.push(Point {
                        rate_hz,
                        method,
                        delay,
                        hold,
                    });
                }
            }
        }
    }
    out
}

/// Evaluate and judge one point.
pub fn evaluate_row(plan: &Plan, p: &Point) -> SweepRow {
    let plants = plants_at(plan, p);
    evaluate_row_on(plan, p, &plants, None)
}

/// The plant side at one (rate, delay, hold), built once for the methods
/// of a sweep group, each when first used: one per plant variant, or only
/// the nominal loop's (index 0 is always the nominal one).
fn plants_at<'a>(plan: &Plan<'a>, p: &Point) -> LazyPlants<'a> {
    match plan.variants {
        None => LazyPlants::new(std::slice::from_ref(plan.lp), p),
        Some(v) => v.plants_at(p),
    }
}

/// `evaluate_row` with the point's plant side `plants` (shared by a
/// group). `hint`: the variant that failed at the group's previous point,
/// tried first by a verdict-only row.
fn evaluate_row_on(plan: &Plan, p: &Point, plants: &LazyPlants, hint: Option<usize>) -> SweepRow {
    let lp = plan.lp;
    // The controller at this (method, rate), discretized once: the
    // nominal loop, every plant variant, the CPU cost and every number
    // format's rounding start from it.
    let controller = lp.controller_at(p.rate_hz, p.method);
    let (eval, robust) = match plan.variants {
        Some(v) if plan.verdict_only && !plan.keep_variants => {
            let (e, r) = v.judge_verdict(plan.spec, p, controller.as_ref(), plants, hint);
            (e, Some(r))
        }
        Some(v) => {
            let how = Judging {
                keep: plan.keep_variants,
                plants: Some(plants),
                exact_delay_margin: false,
            };
            let (e, r) = v.judge(plan.spec, p, controller.as_ref(), how);
            (e, Some(r))
        }
        None => {
            let given = Given {
                controller: Some(controller.as_ref()),
                plant: Some(plants.get(0)),
                exact_delay_margin: false,
            };
            (lp.evaluate(p, given), None)
        }
    };
    let assessment = assess(&eval, plan.spec);
    let structure = plan
        .arithmetic
        .map_or(Structure::TransposedDirect, |a| a.structure);
    let cpu_load_pct = plan.budget.and_then(|b| {
        let integrators = rounding::design_integrators(&lp.controller);
        budget::cost_at(
            b,
            controller.as_ref().ok(),
            structure,
            integrators,
            p.rate_hz,
        )
        .map(|c| c.load_pct)
    });
    let check_hz = plan.check_hz(&eval);
    let nominal_plant = Some(plants.get(0));
    let precision = plan
        .formats()
        .into_par_iter()
        .map(|f| {
            let given = Given {
                controller: Some(controller.as_ref()),
                plant: nominal_plant,
                exact_delay_margin: false,
            };
            precision::judge_point(lp, plan.spec, p, given, structure, f, check_hz)
        })
        .collect();
    SweepRow {
        point: *p,
        eval,
        assessment,
        cpu_load_pct,
        robust,
        precision,
    }
}

/// The grid of a sweep as the product it is: every method, then hold
/// kind, then delay, then ascending rate (the order of `sweep.csv`). A
/// point is computed from its index, so a sweep of any size holds the
/// rates and nothing per point.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    pub rates: Vec<f64>,
    pub methods: Vec<Option<Method>>,
    pub holds: Vec<HoldKind>,
    pub delays: Vec<f64>,
}

impl Grid {
    /// Points in the grid.
    pub fn len(&self) -> usize {
        self.series_count() * self.rates.len()
    }

    /// True when the grid has no point.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Series of the grid: one per (method, hold, delay), each of
    /// `rates.len()` points in ascending rate.
    pub fn series_count(&self) -> usize {
        self.methods.len() * self.holds.len() * self.delays.len()
    }

    /// The point at grid index `i` (`i < len()`).
    pub fn point(&self, i: usize) -> Point {
        let n = self.rates.len();
        let (series, r) = (i / n, i % n);
        let d = series % self.delays.len();
        let h = (series / self.delays.len()) % self.holds.len();
        let m = series / (self.delays.len() * self.holds.len());
        Point {
            rate_hz: self.rates[r],
            method: self.methods[m],
            delay: self.delays[d],
            hold: self.holds[h],
        }
    }

    /// Every point, in grid order (for small grids and tests; a sweep
    /// never builds this list).
    pub fn points(&self) -> Vec<Point> {
        (0..self.len()).map(|i| self.point(i)).collect()
    }

    /// The groups of points sharing (rate, delay, hold), one per method
    /// each, in order of their first point (that of the first method).
    fn groups(&self) -> impl Iterator<Item = Vec<usize>> + '_ {
        let n = self.rates.len();
        let per_method = self.holds.len() * self.delays.len() * n;
        (0..per_method).map(move |first| {
            (0..self.methods.len())
                .map(|m| m * per_method + first)
                .collect()
        })
    }
}

/// Evaluate every point in parallel on the current rayon pool; `on_done`
/// is called once per finished point (progress display). Every row is
/// kept: for short lists of points (tests, a dense check around a rate);
/// a case's sweep streams its rows instead ([`run_streaming`]).
///
/// The hold + delay + plant equivalent depends on the rate, the delay and
/// the hold kind but not on the method, so the points are taken in groups
/// that share (rate, delay, hold), each group building it once (about 5 % of a point's
/// work, saved for all methods but one). Each point is still computed
/// alone from the same inputs, and the rows come back in grid order, so
/// the results do not depend on the grouping or the thread count.
pub fn run(plan: &Plan, points: &[Point], on_done: &(dyn Fn() + Sync)) -> Vec<SweepRow> {
    let mut groups: Vec<Vec<usize>> = Vec::new();
    let mut index: HashMap<(u64, u64, HoldKind), usize> = HashMap::new();
    for (i, p) in points.iter().enumerate() {
        let key = (p.rate_hz.to_bits(), p.delay.to_bits(), p.hold);
        let g = *index.entry(key).or_insert_with(|| {
            groups.push(Vec::new());
            groups.len() - 1
        });
        groups[g].push(i);
    }
    let mut rows: Vec<Option<SweepRow>> = vec![None; points.len()];
    run_groups(
        plan,
        &|i| points[i],
        groups.into_iter(),
        on_done,
        &mut |i, row| rows[i] = Some(row),
    );
    rows.into_iter().flatten().collect()
}

/// Groups (of points sharing rate and delay) evaluated in parallel before
/// their rows are handed on: enough to keep every worker busy, few enough
/// that the rows in flight stay a small, fixed amount of memory.
const GROUPS_IN_FLIGHT: usize = 256;

/// A case's sweep without keeping the rows: `sink(grid_index, row)` takes
/// each row on the calling thread as its batch of groups finishes. Groups
/// come in order of their first point in the grid, so the rows of each
/// (method, hold, delay) series arrive in ascending rate, whatever the
/// thread count (each point is computed alone, from the same inputs).
/// Memory: the rows of [`GROUPS_IN_FLIGHT`] groups, whatever the grid's size.
pub fn run_streaming(
    plan: &Plan,
    grid: &Grid,
    on_done: &(dyn Fn() + Sync),
    sink: &mut dyn FnMut(usize, SweepRow),
) {
    run_groups(plan, &|i| grid.point(i), grid.groups(), on_done, sink);
}

/// Evaluate `groups` (grid indices sharing one plant side; `point` gives
/// each index's point) in batches, handing every row to `sink` in group
/// order.
fn run_groups(
    plan: &Plan,
    point: &(dyn Fn(usize) -> Point + Sync),
    mut groups: impl Iterator<Item = Vec<usize>>,
    on_done: &(dyn Fn() + Sync),
    sink: &mut dyn FnMut(usize, SweepRow),
) {
    loop {
        let batch: Vec<Vec<usize>> = groups.by_ref().take(GROUPS_IN_FLIGHT).collect();
        if batch.is_empty() {
            break;
        }
        let done: Vec<Vec<(usize, SweepRow)>> = batch
            .par_iter()
            .map(|group| {
                let plants = plants_at(plan, &point(group[0]));
                // The methods of a group share the rate: where one fails on
                // a variant, the next tries that variant first.
                let mut hint = None;
                group
                    .iter()
                    .map(|&i| {
                        let row = evaluate_row_on(plan, &point(i), &plants, hint);
                        if let Some(rb) = row.robust.as_ref().filter(|rb| !rb.assessment.feasible) {
                            hint = Some(rb.worst);
                        }
                        on_done();
                        (i, row)
                    })
                    .collect()
            })
            .collect();
        for (i, row) in done.into_iter().flatten() {
            sink(i, row);
        }
    }
}
