//! The answer a user comes for: per method the slowest rate that meets the
//! spec, the recommended method and rate with headroom, its CPU load, and
//! the rate window between the spec and the CPU budget.

use crate::model::rounding;
use crate::model::rounding::StructuralFailure;
use crate::sampled::figure::Limiting;
use rayon::prelude::*;
use serde::Serialize;

use std::cell::RefCell;

use crate::case::Case;
use crate::engineering::{at_least, hz, hz_at_least, hz_at_most, periods, sig4};
use crate::error::Error;
use crate::explore::budget::{self, RateWindow, WindowBound};
use crate::explore::precision;
use crate::explore::search::{
    Ceiling, CoarseSeries, FailingRuns, SearchObserver, SlowestRate, Verdict, fastest_rate_by,
    slowest_rate, slowest_rate_by,
};
use crate::explore::sweep::{self, Grid, Plan, SweepRow};
use crate::explore::variants::{Judging, NamedValue, VariantSet};
use crate::model::discretize::{Method, MethodChoice};
use crate::model::rounding::Damage;
use crate::model::transfer::Controller;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::evaluate::{
    Evaluation, Figures, Given, Point, PointError, PreparedLoop, Transport,
};
use crate::sampled::feasibility::{Assessment, LimitCheck, assess, check_figures};
use crate::sampled::time_response::TimeOptions;
use crate::spec::HoldKind;
use crate::spec::UncertaintyMode;
use crate::spec::{Format, Structure};

/// Build the rate-independent part of the loop from a case (nominal
/// parameter values).
pub fn prepare(case: &Case) -> Result<PreparedLoop, Error> {
    let m = case.nominal()?;
    let time = TimeOptions {
        band: case.spec.settling_band_pct / 100.0,
        ..TimeOptions::default()
    };
    PreparedLoop::with_transport(
        &m.plant,
        &m.sensor,
        &m.controller,
        case.prewarp_hz,
        time,
        Transport {
            plant_s: case.plant_delay_s,
            sensor_s: case.sensor_delay_s,
        },
    )
    .map_err(|e| Error::Model {
        context: format!("{}: preparing the loop", case.source.display()),
        reason: e,
    })
}

/// A finished job: the sweep's rows, the plant variants they were
/// evaluated on (with `[uncertainty]`) and the answer.
pub struct Picked {
    pub rows: Vec<SweepRow>,
    pub variants: Option<VariantSet>,
    pub report: PickReport,
}

/// The plant variants of a case with `[uncertainty]` (None without).
pub fn case_variants(case: &Case, lp: &PreparedLoop) -> Result<Option<VariantSet>, Error> {
    case.uncertainty
        .as_ref()
        .map(|_| VariantSet::new(case, lp))
        .transpose()
}

/// The whole job on a case, keeping every row: its variants, the sweep of
/// its grid (with everything the case asks for) and the pick. `on_done`
/// is called once per swept point. For tests and small grids: the rows
/// are held in memory (the command line streams them instead, see
/// [`sweep_and_pick_streaming`]).
pub fn sweep_and_pick(
    case: &Case,
    lp: &PreparedLoop,
    on_done: &(dyn Fn() + Sync),
    observer: &dyn SearchObserver,
) -> Result<Picked, Error> {
    let mut rows: Vec<(usize, SweepRow)> = Vec::new();
    let Streamed { variants, report } =
        sweep_and_pick_streaming(case, lp, on_done, observer, &mut |i, row, _| {
            rows.push((i, row.clone()))
        })?;
    rows.sort_by_key(|r| r.0);
    Ok(Picked {
        rows: rows.into_iter().map(|r| r.1).collect(),
        variants,
        report,
    })
}

/// Takes each finished row: its grid index, the row, the plant variants.
pub type RowSink<'a> = dyn FnMut(usize, &SweepRow, Option<&VariantSet>) + 'a;

/// A finished streamed job: the plant variants (with `[uncertainty]`) and
/// the answer; the rows went to the sink.
pub struct Streamed {
    pub variants: Option<VariantSet>,
    pub report: PickReport,
}

/// The whole job on a case, handing each row to `on_row(grid_index, row,
/// variants)` as the sweep finishes it (to stream `sweep.csv` and gather
/// what the charts draw; rows of one (method, hold, delay) series come in
/// ascending rate) and keeping only what the search needs
/// ([`SweepSummary`]): memory does not grow with the grid.
///
/// When the continuous design already fails the spec, nothing is swept:
/// every grid point is handed on as a row that says so
/// ([`not_evaluated_rows`]) and the report carries the design's failures.
pub fn sweep_and_pick_streaming(
    case: &Case,
    lp: &PreparedLoop,
    on_done: &(dyn Fn() + Sync),
    observer: &dyn SearchObserver,
    on_row: &mut RowSink<'_>,
) -> Result<Streamed, Error> {
    Ok(sweep_streaming(case, lp, on_done, on_row)?.pick(case, lp, observer))
}

/// The sweep of a case done, with what its pick needs: the first half of
/// [`sweep_and_pick_streaming`], so that a caller can run other work
/// beside the pick (a cascade's search reads the same rows).
pub struct Swept {
    variants: Option<VariantSet>,
    done: SweptAs,
}

/// How the sweep ended: a summary for the search, or the answer already
/// (the continuous design fails the spec, nothing was swept).
enum SweptAs {
    Summary(Box<SweepSummary>),
    DesignFails(Box<PickReport>),
}

impl Swept {
    /// The pick on this sweep (`pick_from`).
    pub fn pick(self, case: &Case, lp: &PreparedLoop, observer: &dyn SearchObserver) -> Streamed {
        let report = match self.done {
            SweptAs::DesignFails(report) => *report,
            SweptAs::Summary(summary) => {
                pick_from(case, lp, self.variants.as_ref(), &summary, observer)
            }
        };
        Streamed {
            variants: self.variants,
            report,
        }
    }
}

/// The sweep of [`sweep_and_pick_streaming`], each row handed to `on_row`
/// as it is finished; the pick is [`Swept::pick`].
pub fn sweep_streaming(
    case: &Case,
    lp: &PreparedLoop,
    on_done: &(dyn Fn() + Sync),
    on_row: &mut RowSink<'_>,
) -> Result<Swept, Error> {
    let variants = case_variants(case, lp)?;
    let grid = case_sweep_grid(case, lp);
    if let Some(report) = failed_design(case, lp) {
        not_evaluated_rows(case, lp, &grid, &mut |i, row| {
            on_done();
            on_row(i, row, variants.as_ref())
        });
        let done = SweptAs::DesignFails(Box::new(report));
        return Ok(Swept { variants, done });
    }
    let plan = Plan::for_case(case, lp, variants.as_ref());
    let mut summary = SweepSummary::new(&grid);
    sweep::run_streaming(&plan, &grid, on_done, &mut |i, row| {
        on_row(i, &row, variants.as_ref());
        summary.push(i, &row);
    });
    let done = SweptAs::Summary(Box::new(summary));
    Ok(Swept { variants, done })
}

/// Why no grid point needs evaluating, when the continuous design already
/// fails the spec (no sampling rate can fix that: loop model): the
/// reason a row gives and the verdict it carries (the design's own, with
/// its limiting figure). None when the design passes or there is none (a
/// controller given in z).
pub fn design_failure(case: &Case, lp: &PreparedLoop) -> Option<(String, Assessment)> {
    let design = lp.design.as_ref()?;
    failed_design(case, lp)?;
    let a = assess(design, &case.spec);
    let what = match (&design.figures, a.limiting) {
        (Some(_), Some(l)) => format!("{} fails", l.label()),
        (Some(_), None) => "a limit fails".to_string(),
        (None, _) => format!("it is {}", design.status.label()),
    };
    Some((
        format!("the continuous design already fails the spec ({what})"),
        Assessment {
            feasible: false,
            checks: Vec::new(),
            ..a
        },
    ))
}

/// Every grid point as a row that was not evaluated because the
/// continuous design already fails the spec, handed to `sink` in grid
/// order (nothing when the design passes).
pub fn not_evaluated_rows(
    case: &Case,
    lp: &PreparedLoop,
    grid: &Grid,
    sink: &mut dyn FnMut(usize, &SweepRow),
) {
    let Some((reason, a)) = design_failure(case, lp) else {
        return;
    };
    for i in 0..grid.len() {
        sink(
            i,
            &SweepRow::not_evaluated(grid.point(i), &reason, a.clone()),
        );
    }
}

/// What the pick reads from a sweep, gathered row by row while the sweep
/// streams, so it does not grow with the grid: per (method, hold, delay)
/// series the coarse verdicts the `f_star` search needs (nominal and over
/// the plant variants, [`CoarseSeries`]) and per number format the runs of
/// failing rates ([`FailingRuns`]); the grid's rates once.
#[derive(Debug, Clone)]
pub struct SweepSummary {
    grid: Grid,
    nominal: Vec<CoarseSeries>,
    robust: Vec<CoarseSeries>,
    precision: Vec<Vec<(Format, FailingRuns)>>,
}

impl SweepSummary {
    /// An empty summary of a sweep of `grid`.
    pub fn new(grid: &Grid) -> SweepSummary {
        let n = grid.series_count();
        SweepSummary {
            grid: grid.clone(),
            nominal: vec![CoarseSeries::default(); n],
            robust: vec![CoarseSeries::default(); n],
            precision: vec![Vec::new(); n],
        }
    }

    /// Add the row of grid point `i`; the rows of one series must come in
    /// ascending rate (as the sweep delivers them).
    pub fn push(&mut self, i: usize, row: &SweepRow) {
        let n = self.grid.rates.len().max(1);
        let (s, k) = (i / n, i % n);
        let Some(nominal) = self.nominal.get_mut(s) else {
            return;
        };
        let rate = row.point.rate_hz;
        nominal.push(rate, &row.assessment, 0);
        if let Some(rb) = &row.robust {
            self.robust[s].push_verdict(rate, &rb.assessment, rb.worst, !rb.verdict_only);
        }
        let formats = &mut self.precision[s];
        for p in &row.precision {
            match formats.iter_mut().find(|f| f.0 == p.format) {
                Some(f) => f.1.push(k, &p.assessment),
                None => {
                    let mut runs = FailingRuns::default();
                    runs.push(k, &p.assessment);
                    formats.push((p.format, runs));
                }
            }
        }
    }

    /// The series index of (method, hold, delay), if the grid has it.
    fn series_of(&self, method: Option<Method>, hold: HoldKind, delay: f64) -> Option<usize> {
        let n = self.grid.rates.len();
        (0..self.grid.series_count()).find(|&s| {
            let p = self.grid.point(s * n);
            p.method == method && p.hold == hold && p.delay == delay
        })
    }
}

/// The methods of the sweep: the case's list, or "given in z".
pub fn case_methods(case: &Case) -> Vec<Option<Method>> {
    if case.methods.is_empty() {
        vec![None]
    } else {
        case.methods.iter().copied().map(Some).collect()
    }
}

/// The grid the case asks for: the case's rates, or only the
/// controller's own rate when it is given in z; every method, hold kind
/// and computation delay.
pub fn case_sweep_grid(case: &Case, lp: &PreparedLoop) -> Grid {
    let rates = match &lp.controller {
        Controller::Discrete(d) => vec![1.0 / d.period_s],
        Controller::Continuous(_) => case.rates.grid(),
    };
    Grid {
        rates,
        methods: case_methods(case),
        holds: case.holds.clone(),
        delays: case.compute_delays.clone(),
    }
}

/// Every point of [`case_sweep_grid`], in grid order (for tests and
/// short lists; a case's sweep computes each point from its index).
pub fn case_grid(case: &Case, lp: &PreparedLoop) -> Vec<Point> {
    case_sweep_grid(case, lp).points()
}

/// The recommended design.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recommended {
    pub method: MethodChoice,
    /// The actuator's hold kind.
    pub hold: HoldKind,
    /// Why this hold, in words (the cheapest passing one, against the
    /// other kinds the case lists).
    pub hold_basis: String,
    pub compute_delay: f64,
    /// `f_star` of this method, Hz.
    pub slowest_rate_hz: f64,
    /// `f_star * headroom`, rounded up to a timer rate when a timer is given.
    pub rate_hz: f64,
    /// How `rate_hz` was reached, in words: the headroom and what it
    /// covers (model error), or why none applies (controller given in z).
    pub basis: String,
    pub period_s: f64,
    /// Timer divider that makes `rate_hz`, when `[budget] timer_hz` is given.
    pub timer_divider: Option<u64>,
    pub cpu_load_pct: Option<f64>,
    pub cycles_per_update: Option<f64>,
    pub figures: Option<Figures>,
    pub checks: Vec<LimitCheck>,
    pub feasible: bool,
    /// With plant variants: each figure at its worst over them at this
    /// rate, checked against the spec (None when a variant is unstable).
    pub worst_figures: Option<Figures>,
    pub worst_checks: Vec<LimitCheck>,
    /// With plant variants: every variant feasible at this rate.
    pub robust_feasible: Option<bool>,
}

/// The whole answer (`pick.json`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PickReport {
    pub title: String,
    /// The continuous design's figures, and the limits it already fails.
    pub design: Option<Figures>,
    pub design_failures: Vec<LimitCheck>,
    pub methods: Vec<SlowestRate>,
    pub recommended: Option<Recommended>,
    /// `[low, high]` when a budget is given and the window is not empty.
    pub window_hz: Option<[f64; 2]>,
    /// The window with both ends even when empty.
    pub window: Option<RateWindow>,
    /// The budget's ceiling rate for the recommended method, Hz.
    pub cpu_ceiling_hz: Option<f64>,
    /// What would open an empty window.
    pub advice: Vec<String>,
    pub headroom: f64,
    /// The computation delay the recommendation is made at (the largest
    /// the case lists: the conservative choice).
    pub design_delay: f64,
    /// The search over plant variants, when the case has `[uncertainty]`.
    pub robust: Option<RobustReport>,
    /// Precision ceilings, when the case has `[arithmetic]`.
    pub precision: Option<PrecisionReport>,
    pub notes: Vec<String>,
}

impl PickReport {
    /// The answers the recommendation rests on: the robust ones when there
    /// are plant variants, else the nominal ones.
    pub fn answers(&self) -> Vec<&SlowestRate> {
        match &self.robust {
            Some(rb) => rb.methods.iter().map(|m| &m.rate).collect(),
            None => self.methods.iter().collect(),
        }
    }
}

/// A parameter and its range.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ParamRange {
    pub name: String,
    pub nominal: f64,
    pub min: f64,
    pub max: f64,
}

/// `f_star` over every plant variant for one method and delay.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RobustRate {
    /// The robust answer: every variant feasible at every rate from
    /// `slowest_rate_hz` up to `max_hz`.
    #[serde(flatten)]
    pub rate: SlowestRate,
    /// The nominal answer for the same method and delay, Hz.
    pub nominal_slowest_rate_hz: Option<f64>,
    /// The variant that fails just below the robust `f_star` (or at
    /// `max_hz` when there is none; the one with the least slack at the
    /// lowest rate when every swept rate passes), and its limiting figure.
    pub worst_variant: Option<Vec<NamedValue>>,
    pub worst_limiting: Option<Limiting>,
}

/// How the plant variants were drawn (`pick.json` `robust.mode`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum VariantDraw {
    /// Every corner of the box of parameter ranges.
    Corners,
    /// Points of a Latin hypercube (with `seed`).
    Samples,
}

/// The robust search (`pick.json` key `robust`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RobustReport {
    pub mode: VariantDraw,
    pub seed: Option<u64>,
    /// Variants evaluated, the nominal one included.
    pub variants: usize,
    pub params: Vec<ParamRange>,
    pub methods: Vec<RobustRate>,
}

/// One number format's ceiling for one method.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FormatCeiling {
    pub method: MethodChoice,
    pub format: Format,
    /// The search started here: the method's `f_star` times the headroom, Hz.
    pub from_hz: f64,
    #[serde(flatten)]
    pub ceiling: Ceiling,
}

/// What rounding does at the recommended rate, per format.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FormatAtRate {
    pub format: Format,
    pub damage: Option<Damage>,
    /// Why there is no damage figure, when there is none.
    pub reason: Option<String>,
    /// Whether the design's integrators survive (None without any).
    pub integral_kept: Option<bool>,
    pub feasible: bool,
    pub limiting: Option<Limiting>,
}

/// The precision ceilings (`pick.json` key `precision`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrecisionReport {
    /// The case's structure (`transposed-direct` or `sos` in the file).
    pub structure: Structure,
    /// The format that bounds the rate window (the first listed).
    pub window_format: Format,
    /// Per method (at the design delay) and format.
    pub ceilings: Vec<FormatCeiling>,
    /// At the recommended method and rate, per format.
    pub at_recommended: Vec<FormatAtRate>,
    /// When the case's structure loses the design's integral action in
    /// the window's format (at the recommended rate or just above the
    /// ceiling): whether the other structure keeps it over the same rates.
    pub other_structure: Option<OtherStructure>,
}

/// The integral action in the other structure, checked at the same rates
/// (the recommended rate and every swept rate above it, recommended
/// method, window format): what the advice rests on when one structure
/// loses the integrator and the other keeps it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OtherStructure {
    /// The other structure (`sos` or `transposed-direct` in the file).
    pub structure: Structure,
    pub format: Format,
    /// Where the case's structure loses the integral action, Hz.
    pub lost_at_hz: f64,
    /// Rates checked, from the recommended rate up.
    pub rates_checked: usize,
    /// The highest rate up to which the other structure keeps the integral
    /// action at every rate checked, Hz; None when it loses it at the
    /// recommended rate too.
    pub kept_up_to_hz: Option<f64>,
    /// True when it keeps it at every rate checked (up to the top of the
    /// swept range).
    pub kept_at_every_rate: bool,
}

impl OtherStructure {
    /// The advice in words.
    pub fn advice(&self, structure: Structure) -> String {
        match self.kept_up_to_hz {
            Some(h) if self.kept_at_every_rate => format!(
                "another structure: {} keeps the integral action in {} at every rate checked up to {} ({} rates), which {structure} loses at {}",
                self.structure,
                self.format,
                hz(h),
                self.rates_checked,
                hz(self.lost_at_hz)
            ),
            Some(h) => format!(
                "another structure: {} keeps the integral action in {} up to {} Hz (every rate checked), {structure} loses it at {} Hz",
                self.structure,
                self.format,
                sig4(h),
                sig4(self.lost_at_hz)
            ),
            None => format!(
                "{} loses the integral action in {} as well: a wider format is needed",
                self.structure, self.format
            ),
        }
    }
}

impl PickReport {
    /// True when there is a usable answer: a recommendation inside a
    /// non-empty window (or no budget to bound it).
    pub fn has_answer(&self) -> bool {
        self.recommended.is_some() && !self.window.as_ref().is_some_and(|w| w.empty)
    }
}

/// The report before any search: the case's title and notes, the
/// headroom and the design delay.
fn base_report(case: &Case) -> PickReport {
    PickReport {
        title: case.title.clone(),
        design: None,
        design_failures: Vec::new(),
        methods: Vec::new(),
        recommended: None,
        window_hz: None,
        window: None,
        cpu_ceiling_hz: None,
        advice: Vec::new(),
        headroom: case.spec.headroom,
        design_delay: design_delay(case),
        robust: None,
        precision: None,
        notes: case.notes.clone(),
    }
}

/// What the design check gives: the report's start, to be continued when
/// the continuous design passes, or the finished report when it already
/// fails the spec (then no rate can pass and nothing is searched).
enum DesignCheck {
    Passes(PickReport),
    Fails(PickReport),
}

/// Step 1, the design check: the report's start (the design's figures and
/// the limits it fails, and the notes on the case's ranges).
fn design_check(case: &Case, lp: &PreparedLoop) -> DesignCheck {
    let spec = &case.spec;
    let mut report = base_report(case);
    if case.uncertainty.is_none() && case.params.iter().any(|p| p.min < p.max) {
        report.notes.push(
            "parameter ranges are given but no [uncertainty] mode: every figure is for the nominal parameters".into(),
        );
    }
    let mut failed = false;
    if let Some(design) = &lp.design {
        match &design.figures {
            Some(f) => {
                report.design = Some(f.clone());
                report.design_failures = check_figures(f, spec)
                    .into_iter()
                    .filter(|c| !c.pass)
                    .collect();
            }
            None => report.notes.push(format!(
                "the continuous design is {}",
                design.status.label()
            )),
        }
        if !report.design_failures.is_empty() || design.figures.is_none() {
            report.notes.push(
                "the continuous design already fails the spec: no sampling rate can fix that; revise the controller or the spec first".into(),
            );
            failed = true;
        }
    }
    if failed {
        DesignCheck::Fails(report)
    } else {
        DesignCheck::Passes(report)
    }
}

/// The report of a case whose continuous design already fails the spec
/// (what `pick` answers without sweeping); None when the design passes.
pub fn failed_design(case: &Case, lp: &PreparedLoop) -> Option<PickReport> {
    match design_check(case, lp) {
        DesignCheck::Fails(report) => Some(report),
        DesignCheck::Passes(_) => None,
    }
}

/// [`pick_from`] on the rows of a finished sweep of the case's grid
/// (`rows` in grid order, as `sweep::run` over [`case_grid`] returns them).
pub fn pick(
    case: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    rows: &[SweepRow],
    observer: &dyn SearchObserver,
) -> PickReport {
    let mut summary = SweepSummary::new(&case_sweep_grid(case, lp));
    for (i, r) in rows.iter().enumerate() {
        summary.push(i, r);
    }
    pick_from(case, lp, variants, &summary, observer)
}

/// Search every (method, hold, delay) series of a finished sweep and make
/// the recommendation: on the robust answer when `variants` is given (the
/// sweep must have been run with the same variants), and with the
/// precision ceilings when the case has `[arithmetic]`. The steps, in
/// order: the design check, the search, the recommendation, the precision
/// ceilings, the window, the advice.
pub fn pick_from(
    case: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    summary: &SweepSummary,
    observer: &dyn SearchObserver,
) -> PickReport {
    let mut report = match design_check(case, lp) {
        DesignCheck::Passes(r) => r,
        DesignCheck::Fails(done) => return done,
    };
    let searched = search(case, lp, variants, summary, observer);
    report.methods = searched.methods;
    report.robust = searched.robust;
    report.notes.extend(searched.notes);
    // The answers the recommendation rests on: robust when there are variants.
    let answers: Vec<SlowestRate> = report.answers().into_iter().cloned().collect();
    let Some(rec) = recommend(case, lp, variants, &answers) else {
        let robust = report.robust.is_some();
        report
            .notes
            .push(no_answer(lp, &answers, report.design_delay, robust));
        return report;
    };
    report.notes.extend(rec.notes);
    report.recommended = Some(rec.recommended);
    report.cpu_ceiling_hz = match (case.budget.as_ref(), rec.cycles) {
        (Some(b), Some(c)) => Some(budget::ceiling_hz(b, c)),
        _ => None,
    };
    if case.arithmetic.is_some() {
        report.precision = Some(precision_report(
            case,
            lp,
            summary,
            &answers,
            &rec.chosen,
            observer,
        ));
    }
    let Some(window) = window(case, lp, &rec.chosen, &report) else {
        return report;
    };
    if window.empty {
        report.advice = empty_window_advice(case, lp, &report, &window, rec.cycles);
    } else {
        report.window_hz = Some([window.low_hz, window.high_hz]);
        if let Some(pr) = &report.precision
            && window.high_bound.is_coefficients()
            && let Some(o) = &pr.other_structure
        {
            report.notes.push(o.advice(pr.structure));
        }
    }
    report.window = Some(window);
    report
}

/// What the search found: `f_star` per series on the nominal loop, the
/// robust search over plant variants, and the notes they call for.
struct Searched {
    methods: Vec<SlowestRate>,
    robust: Option<RobustReport>,
    notes: Vec<String>,
}

/// Step 2, the search: `f_star` for every (method, hold, delay) series on
/// the nominal loop, then over the plant variants when there are any. A
/// controller given in z has one rate: each delay gets its own verdict
/// there.
fn search(
    case: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    summary: &SweepSummary,
    observer: &dyn SearchObserver,
) -> Searched {
    let spec = &case.spec;
    let n = summary.grid.rates.len();
    let mut methods: Vec<SlowestRate> = (0..summary.grid.series_count())
        .into_par_iter()
        .map(|s| {
            let p = summary.grid.point(s * n);
            slowest_rate(
                lp,
                spec,
                p.method,
                p.hold,
                p.delay,
                &summary.nominal[s],
                observer,
            )
        })
        .collect();
    let mut notes = Vec::new();
    if let Controller::Discrete(d) = &lp.controller {
        // One rate only: "at or below" the range floor does not apply.
        for m in methods.iter_mut() {
            m.at_range_floor = false;
        }
        // Each listed delay gets its own verdict at that rate.
        let own = 1.0 / d.period_s;
        for m in &methods {
            notes.push(match (m.slowest_rate_hz, &m.limiting) {
                (Some(_), _) => format!(
                    "computation delay {}: the controller given in z meets the spec at its rate {own} Hz",
                    m.compute_delay
                ),
                (None, lim) => format!(
                    "computation delay {}: the controller given in z fails the spec at its rate {own} Hz ({})",
                    m.compute_delay,
                    lim.map_or("?".into(), |l| l.label())
                ),
            });
        }
    }
    let robust = variants.map(|v| robust_report(case, lp, v, summary, &methods, observer));
    Searched {
        methods,
        robust,
        notes,
    }
}

/// The recommended method, hold and rate, with the controller discretized
/// there once: the recommendation's own evaluation, its CPU cost, its
/// plant variants, its rounding in every format and the precision
/// ceiling's search from it all use this one.
struct Chosen {
    method: Option<Method>,
    hold: HoldKind,
    delay: f64,
    rate_hz: f64,
    /// The nominal loop's crossover at the recommended rate, Hz.
    crossover_hz: Option<f64>,
    controller: Result<DiscreteTransfer, PointError>,
}

impl Chosen {
    /// The recommended point.
    fn point(&self) -> Point {
        Point {
            rate_hz: self.rate_hz,
            method: self.method,
            delay: self.delay,
            hold: self.hold,
        }
    }

    /// What is already built at `p`: the recommended controller when `p`
    /// is the recommended point, else nothing.
    fn given_at(&self, p: &Point) -> Given<'_> {
        Given {
            controller: (*p == self.point()).then_some(self.controller.as_ref()),
            ..Given::default()
        }
    }
}

/// What the recommendation step gives: the recommendation, the point it
/// was made at, the update's cost there and the notes on the way.
struct Recommendation {
    recommended: Recommended,
    chosen: Chosen,
    cycles: Option<f64>,
    notes: Vec<String>,
}

/// Step 3, the recommendation: the cheapest passing (method, hold) at the
/// design delay (the lowest `f_star`, ties to the first in case order),
/// its rate with headroom (and the timer), evaluated there with the exact
/// delay margin, its CPU cost and its plant variants. None when no method
/// passes at the design delay (`no_answer` says why).
fn recommend(
    case: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    answers: &[SlowestRate],
) -> Option<Recommendation> {
    let spec = &case.spec;
    let design_delay = design_delay(case);
    // min_by keeps the first of equals.
    let best = answers
        .iter()
        .filter(|m| m.compute_delay == design_delay)
        .filter_map(|m| m.slowest_rate_hz.map(|f| (m, f)))
        .min_by(|a, b| a.1.total_cmp(&b.1));
    let (best, f_star) = best?;
    let (rate, divider, mut notes) = recommended_rate(case, lp, f_star);
    let chosen = Chosen {
        method: best.method.0,
        hold: best.hold,
        delay: design_delay,
        rate_hz: rate,
        crossover_hz: None,
        controller: lp.controller_at(rate, best.method.0),
    };
    let p = chosen.point();
    let given = Given {
        controller: Some(chosen.controller.as_ref()),
        plant: None,
        exact_delay_margin: true,
    };
    let eval: Evaluation = lp.evaluate(&p, given);
    let a = assess(&eval, spec);
    let cost = case.budget.as_ref().and_then(|b| {
        budget::cost_at(
            b,
            chosen.controller.as_ref().ok(),
            case_structure(case),
            rounding::design_integrators(&lp.controller),
            rate,
        )
    });
    let margins = Judging {
        exact_delay_margin: true,
        ..Judging::default()
    };
    let robust_here = variants.map(|v| v.judge(spec, &p, chosen.controller.as_ref(), margins).1);
    let worst_figures = robust_here.as_ref().and_then(|r| r.worst_figures.clone());
    if rate > case.rates.max_hz {
        notes.push(format!(
            "the rate f* times the headroom, {}, is above the swept range (max_hz = {})",
            hz(rate),
            hz(case.rates.max_hz)
        ));
    }
    let recommended = Recommended {
        worst_checks: worst_figures
            .as_ref()
            .map(|f| check_figures(f, spec))
            .unwrap_or_default(),
        worst_figures,
        robust_feasible: robust_here.as_ref().map(|r| r.assessment.feasible),
        basis: match &lp.controller {
            Controller::Discrete(_) => {
                "the controller given in z runs only at its own rate: no headroom applied".into()
            }
            Controller::Continuous(_) => format!(
                "f_star {f_star} Hz times headroom {}{}; the headroom covers model error (parameter drift, unmodelled dynamics), it is not a guarantee",
                spec.headroom,
                match divider {
                    Some(n) => format!(", rounded up to the timer rate timer_hz / {n}"),
                    None => String::new(),
                }
            ),
        },
        method: best.method,
        hold: best.hold,
        hold_basis: hold_basis(
            case,
            answers,
            best.method.name(),
            best.hold,
            f_star,
            design_delay,
        ),
        compute_delay: design_delay,
        slowest_rate_hz: f_star,
        rate_hz: rate,
        period_s: 1.0 / rate,
        timer_divider: divider,
        cpu_load_pct: cost.map(|c| c.load_pct),
        cycles_per_update: cost.map(|c| c.cycles),
        figures: eval.figures.clone(),
        checks: a.checks,
        feasible: a.feasible,
    };
    let crossover_hz = eval.figures.as_ref().and_then(|f| f.crossover_hz);
    Some(Recommendation {
        recommended,
        chosen: Chosen {
            crossover_hz,
            ..chosen
        },
        cycles: cost.map(|c| c.cycles),
        notes,
    })
}

/// The computation delay the recommendation is made at: the largest the
/// case lists (the conservative choice).
fn design_delay(case: &Case) -> f64 {
    case.compute_delays.iter().copied().fold(0.0, f64::max)
}

/// The structure the controller is arranged in on the target (the CPU
/// cost counts its multiply-accumulates).
fn case_structure(case: &Case) -> Structure {
    case.arithmetic
        .as_ref()
        .map_or(Structure::TransposedDirect, |a| a.structure)
}

/// Why there is no recommendation: no method passes at the design delay.
fn no_answer(
    lp: &PreparedLoop,
    answers: &[SlowestRate],
    design_delay: f64,
    robust: bool,
) -> String {
    if let Controller::Discrete(d) = &lp.controller {
        let passing: Vec<String> = answers
            .iter()
            .filter(|m| m.slowest_rate_hz.is_some())
            .map(|m| sig4(m.compute_delay))
            .collect();
        let variants = if robust {
            " on every plant variant"
        } else {
            ""
        };
        return format!(
            "the controller given in z at {} fails the spec{variants} at computation delay {} (the largest listed, which the recommendation is made at){}",
            hz(1.0 / d.period_s),
            periods(design_delay),
            if passing.is_empty() {
                " and at every other delay listed".to_string()
            } else {
                format!("; it meets it at computation delay {}", passing.join(", "))
            }
        );
    }
    if robust {
        "no method meets the spec on every plant variant at the fastest swept rate".into()
    } else {
        "no method meets the spec at the fastest swept rate".into()
    }
}

/// The recommended rate from `f_star`: times the headroom and rounded up
/// to a rate the timer makes (a controller given in z: its own rate, no
/// headroom, no rounding); with the timer's divider and the notes.
fn recommended_rate(
    case: &Case,
    lp: &PreparedLoop,
    f_star: f64,
) -> (f64, Option<u64>, Vec<String>) {
    let mut notes = Vec::new();
    let mut rate = f_star * case.spec.headroom;
    let mut divider = None;
    let timer = case.budget.as_ref().and_then(|b| b.timer_hz);
    if let Controller::Discrete(d) = &lp.controller {
        rate = 1.0 / d.period_s;
        notes.push(format!(
            "the controller is given in z at {rate} Hz: it can run only at that rate, so no headroom is applied"
        ));
        if let Some(timer) = timer {
            let n = (timer / rate).round();
            if n < 1.0 || ((timer / n) - rate).abs() > 1e-9 * rate {
                notes.push(format!(
                    "the timer ({}) cannot make exactly {rate} Hz",
                    hz(timer)
                ));
            } else {
                divider = Some(n as u64);
            }
        }
    } else if let Some(timer) = timer {
        match budget::timer_rate_at_least(timer, rate) {
            Some((r, n)) => {
                rate = r;
                divider = Some(n);
            }
            None => notes.push(format!(
                "the timer ({}) cannot make {rate:.6} Hz: the rate is shown unrounded",
                hz(timer)
            )),
        }
    }
    (rate, divider, notes)
}

/// Step 5, the window: from the recommended rate up to the lower of the
/// CPU ceiling and the first format's precision ceiling (one above the
/// swept range bounds nothing), never above the last rate checked. None
/// without a budget or a format that bounds it.
fn window(
    case: &Case,
    lp: &PreparedLoop,
    chosen: &Chosen,
    report: &PickReport,
) -> Option<RateWindow> {
    let rate = chosen.rate_hz;
    let method = MethodChoice(chosen.method);
    let prec = report.precision.as_ref().and_then(|pr| {
        pr.ceilings
            .iter()
            .find(|c| c.method == method && c.format == pr.window_format)
            .filter(|c| !c.ceiling.above_range)
            .map(|c| {
                let bound = |fails_at_start: Option<Limiting>| WindowBound::Coefficients {
                    format: c.format,
                    structure: pr.structure,
                    fails_at_start,
                };
                match c.ceiling.rate_hz {
                    Some(h) => (h, bound(None)),
                    // Failing already where the search starts: no rate above
                    // the low end is usable, so the window is empty. (An
                    // infeasible verdict always names what fails.)
                    None => (f64::NEG_INFINITY, bound(c.ceiling.limiting)),
                }
            })
    });
    let top = match (report.cpu_ceiling_hz, prec) {
        (Some(cc), Some((pc, bound))) if pc < cc => Some((pc, bound)),
        (Some(cc), _) => Some((cc, WindowBound::CpuBudget)),
        (None, Some(p)) => Some(p),
        (None, None) => None,
    };
    // A window claims only rates that were checked: the spec (and the
    // coefficients) are known to hold up to the top of the swept range
    // (a controller given in z: its own rate only), so a ceiling above it
    // is cut there and the bound says so.
    let checked_top = match &lp.controller {
        Controller::Discrete(d) => 1.0 / d.period_s,
        Controller::Continuous(_) => case.rates.max_hz,
    };
    let (high, bound) = top?;
    let (high, bound) = if high > checked_top {
        (
            checked_top,
            WindowBound::LastRateChecked {
                checked_hz: checked_top,
                beyond: Box::new(bound),
                beyond_hz: high,
            },
        )
    } else {
        (high, bound)
    };
    Some(if high.is_finite() {
        RateWindow::new(rate, high, bound, report.cpu_ceiling_hz)
    } else {
        RateWindow {
            high_hz: rate,
            empty: true,
            ..RateWindow::new(rate, rate, bound, report.cpu_ceiling_hz)
        }
    })
}

/// The robust search for every series: the judge evaluates every variant
/// with the shared controller and keeps the worst.
fn robust_report(
    case: &Case,
    lp: &PreparedLoop,
    variants: &VariantSet,
    summary: &SweepSummary,
    nominal: &[SlowestRate],
    observer: &dyn SearchObserver,
) -> RobustReport {
    let spec = &case.spec;
    let n = summary.grid.rates.len();
    let methods = summary
        .robust
        .par_iter()
        .enumerate()
        .zip(nominal.par_iter())
        .map(|((s, coarse), nominal)| {
            let p0 = summary.grid.point(s * n);
            let (method, delay, hold) = (p0.method, p0.delay, p0.hold);
            // The sweep's verdict-only rows the search reads, judged over
            // every variant: the same slack, limiting figure and worst
            // variant as a sweep that judged every variant everywhere.
            // The robust verdict at a rate, over every variant.
            let judged = |rate: f64| {
                let p = Point {
                    rate_hz: rate,
                    method,
                    delay,
                    hold,
                };
                let c = lp.controller_at(rate, method);
                variants.judge(spec, &p, c.as_ref(), Judging::default()).1
            };
            let mut coarse = coarse.clone();
            coarse.complete(&|rate: f64| {
                let v = judged(rate);
                (v.assessment, v.worst)
            });
            let coarse = &coarse;
            // Every judged rate with its verdict and worst variant.
            let seen: RefCell<Vec<(f64, Assessment, usize)>> = RefCell::new(Vec::new());
            let judge = |rate: f64| -> Assessment {
                let v = judged(rate);
                observer.evaluated(rate, &v.assessment);
                seen.borrow_mut()
                    .push((rate, v.assessment.clone(), v.worst));
                v.assessment
            };
            let mut rate = slowest_rate_by(method, hold, delay, coarse, &judge);
            // Both answers are brackets of width 1e-4; where the nominal
            // bracket ends above the robust one, its passing end also passes
            // every variant (it lies above the robust answer), so report it:
            // the robust answer is never below the nominal one.
            if let (Some(r), Some(n)) = (rate.slowest_rate_hz, nominal.slowest_rate_hz)
                && r < n
                && !rate.at_range_floor
            {
                rate.slowest_rate_hz = Some(n);
            }
            // The worst variant: where the answer is decided. Of the swept
            // rates only three can be: the lowest (every rate passes), the
            // fastest failing one (below f_star, every swept rate above it
            // passes) and the highest (no answer); the judged rates follow.
            let verdict = |v: &Verdict| (v.rate_hz, v.assessment.clone(), v.worst);
            let swept = match rate.slowest_rate_hz {
                _ if rate.at_range_floor => coarse.first(),
                Some(_) => coarse.last_infeasible(),
                None => coarse.last(),
            };
            let mut all: Vec<(f64, Assessment, usize)> = swept.map(verdict).into_iter().collect();
            all.extend(seen.into_inner());
            let decisive = match rate.slowest_rate_hz {
                _ if rate.at_range_floor => all
                    .iter()
                    .filter(|a| a.0 == rate.slowest_rate_hz.unwrap_or(f64::NAN))
                    .min_by(|a, b| a.1.slack.total_cmp(&b.1.slack)),
                Some(f) => all
                    .iter()
                    .filter(|a| a.0 < f && !a.1.feasible)
                    .max_by(|a, b| a.0.total_cmp(&b.0)),
                None => all.iter().max_by(|a, b| a.0.total_cmp(&b.0)),
            };
            let worst_variant = decisive.map(|d| {
                variants
                    .named(d.2)
                    .into_iter()
                    .map(|(name, value)| NamedValue { name, value })
                    .collect()
            });
            let worst_limiting = decisive.and_then(|d| d.1.limiting);
            if let Controller::Discrete(_) = &lp.controller {
                // One rate only: "at or below" the range floor does not apply.
                rate.at_range_floor = false;
            }
            RobustRate {
                worst_limiting,
                worst_variant,
                nominal_slowest_rate_hz: nominal.slowest_rate_hz,
                rate,
            }
        })
        .collect();
    let (mode, seed) = match case.uncertainty {
        Some(UncertaintyMode::Samples { seed, .. }) => (VariantDraw::Samples, Some(seed)),
        _ => (VariantDraw::Corners, None),
    };
    RobustReport {
        mode,
        seed,
        variants: variants.len(),
        params: case
            .params
            .iter()
            .filter(|p| p.min < p.max)
            .map(|p| ParamRange {
                name: p.name.clone(),
                nominal: p.nominal,
                min: p.min,
                max: p.max,
            })
            .collect(),
        methods,
    }
}

/// Step 4, the precision ceilings: for every method with an answer at the
/// design delay with the recommended hold (searched upward from its
/// `f_star` times the headroom, on the nominal plant), the damage at the
/// recommended rate, and the other structure when the case's loses the
/// integral action.
fn precision_report(
    case: &Case,
    lp: &PreparedLoop,
    summary: &SweepSummary,
    answers: &[SlowestRate],
    chosen: &Chosen,
    observer: &dyn SearchObserver,
) -> PrecisionReport {
    let Some(arith) = case.arithmetic.as_ref() else {
        unreachable!("precision_report is called only with [arithmetic]")
    };
    // As in the sweep: the design's crossover, else (a controller given
    // in z, which runs at one rate) the loop's own at that rate.
    let check_hz = lp
        .design
        .as_ref()
        .and_then(|d| d.figures.as_ref())
        .and_then(|f| f.crossover_hz)
        .or(chosen.crossover_hz);
    let ceilings = format_ceilings(case, lp, summary, answers, chosen, check_hz, observer);
    let p = chosen.point();
    let at_recommended = arith
        .formats
        .par_iter()
        .map(|&format| {
            let given = chosen.given_at(&p);
            let v = precision::judge_point(
                lp,
                &case.spec,
                &p,
                given,
                arith.structure,
                format,
                check_hz,
            );
            FormatAtRate {
                format,
                reason: v.reason,
                integral_kept: v
                    .damage
                    .as_ref()
                    .filter(|d| d.integrators > 0)
                    .map(Damage::integral_kept),
                damage: v.damage,
                feasible: v.assessment.feasible,
                limiting: v.assessment.limiting,
            }
        })
        .collect();
    let window_format = arith.formats[0];
    let lost_at = ceilings
        .iter()
        .find(|c| c.method == MethodChoice(chosen.method) && c.format == window_format)
        .filter(|c| {
            c.ceiling.limiting == Some(Limiting::Rounding(StructuralFailure::IntegralActionLost))
        })
        .and_then(|c| c.ceiling.first_failure_hz);
    let other_structure = lost_at.map(|lost_at_hz| {
        let mut rates: Vec<f64> = (summary.grid.rates.iter())
            .copied()
            .filter(|&f| f > chosen.rate_hz)
            .collect();
        rates.insert(0, chosen.rate_hz);
        other_structure_integral(
            lp,
            chosen,
            arith.structure,
            window_format,
            &rates,
            lost_at_hz,
        )
    });
    PrecisionReport {
        structure: arith.structure,
        window_format,
        ceilings,
        at_recommended,
        other_structure,
    }
}

/// Each number format's ceiling for every method with an answer at the
/// design delay with the recommended hold: the fastest rate up to which
/// the rounded controller passes, searched upward from the method's
/// `f_star` times the headroom (the recommended method: from the
/// recommended rate) on the sweep's verdicts. The formats of one method
/// share its controller at the start.
fn format_ceilings(
    case: &Case,
    lp: &PreparedLoop,
    summary: &SweepSummary,
    answers: &[SlowestRate],
    chosen: &Chosen,
    check_hz: Option<f64>,
    observer: &dyn SearchObserver,
) -> Vec<FormatCeiling> {
    let Some(arith) = case.arithmetic.as_ref() else {
        return Vec::new();
    };
    let spec = &case.spec;
    let (hold, design_delay) = (chosen.hold, chosen.delay);
    let evaluated = Plan::for_case(case, lp, None).formats();
    let searched = arith.formats.iter().any(|f| evaluated.contains(f));
    // Each method's start with its controller there, discretized once and
    // shared by every format's search (None for the recommended method,
    // which starts at the recommended rate: `chosen` holds its controller).
    let mut starts: Vec<(f64, Option<Result<DiscreteTransfer, PointError>>)> = Vec::new();
    let mut jobs: Vec<(Option<Method>, usize, Format)> = Vec::new();
    for m in case_methods(case) {
        let Some(f_star) = answers
            .iter()
            .find(|a| {
                a.method == MethodChoice(m) && a.hold == hold && a.compute_delay == design_delay
            })
            .and_then(|a| a.slowest_rate_hz)
        else {
            continue;
        };
        starts.push(if m == chosen.method {
            (chosen.rate_hz, None)
        } else {
            let from = f_star * spec.headroom;
            (from, searched.then(|| lp.controller_at(from, m)))
        });
        for &f in &arith.formats {
            jobs.push((m, starts.len() - 1, f));
        }
    }
    jobs.par_iter()
        .map(|&(m, start, format)| {
            let (from, start_controller) = &starts[start];
            let from = *from;
            let rates = &summary.grid.rates;
            let swept = summary
                .series_of(m, hold, design_delay)
                .and_then(|s| summary.precision[s].iter().find(|f| f.0 == format))
                .map(|f| &f.1);
            let ceiling = match evaluated.iter().position(|f| *f == format) {
                None => {
                    // f64 is the reference: its loop is the nominal loop,
                    // feasible from f_star up to max_hz by definition.
                    Ceiling {
                        rate_hz: Some(case.rates.max_hz.max(from)),
                        above_range: true,
                        limiting: None,
                        first_failure_hz: None,
                        evaluations: 0,
                    }
                }
                Some(_) => {
                    let judge = |rate: f64| -> Assessment {
                        let p = Point {
                            rate_hz: rate,
                            method: m,
                            delay: design_delay,
                            hold,
                        };
                        let given = match start_controller {
                            Some(c) if rate == from => Given {
                                controller: Some(c.as_ref()),
                                ..Given::default()
                            },
                            _ => chosen.given_at(&p),
                        };
                        let a = precision::judge_point(
                            lp,
                            spec,
                            &p,
                            given,
                            arith.structure,
                            format,
                            check_hz,
                        )
                        .assessment;
                        observer.evaluated(rate, &a);
                        a
                    };
                    // The sweep's verdicts; a sweep made without this
                    // format is judged here instead.
                    let judged;
                    let failing = match swept {
                        Some(runs) => runs,
                        None => {
                            let mut runs = FailingRuns::default();
                            for (k, &f) in rates.iter().enumerate() {
                                runs.push(k, &judge(f));
                            }
                            judged = runs;
                            &judged
                        }
                    };
                    fastest_rate_by(from, rates, failing, &judge)
                }
            };
            FormatCeiling {
                method: MethodChoice(m),
                format,
                from_hz: from,
                ceiling,
            }
        })
        .collect()
}

/// Whether the structure other than `structure` keeps the design's
/// integral action in `format` at each of `rates` (ascending, the first
/// the recommended rate, where `chosen`'s controller is used): the
/// rounding alone decides it, so only the quantized controller is built
/// (no loop evaluation).
fn other_structure_integral(
    lp: &PreparedLoop,
    chosen: &Chosen,
    structure: Structure,
    format: Format,
    rates: &[f64],
    lost_at_hz: f64,
) -> OtherStructure {
    let other = structure.other();
    let integrators = rounding::design_integrators(&lp.controller);
    let kept = |rate: f64| {
        let own;
        let c = if rate == chosen.rate_hz {
            chosen.controller.as_ref().ok()
        } else {
            own = lp.controller_at(rate, chosen.method).ok();
            own.as_ref()
        };
        c.and_then(|c| rounding::quantize(c, integrators, other, format, None).ok())
            .is_some_and(|q| q.damage.integral_kept())
    };
    let mut kept_up_to_hz = None;
    let mut checked = 0;
    let mut every = true;
    for &f in rates {
        checked += 1;
        if kept(f) {
            kept_up_to_hz = Some(f);
        } else {
            every = false;
            break;
        }
    }
    OtherStructure {
        structure: other,
        format,
        lost_at_hz,
        rates_checked: checked,
        kept_up_to_hz,
        kept_at_every_rate: every,
    }
}

/// Step 6, the advice: what would open an empty rate window, each item with the number it
/// would take: a faster CPU, a cheaper update, a higher load limit, a
/// wider number format, a looser spec, another method, a shorter delay.
fn empty_window_advice(
    case: &Case,
    lp: &PreparedLoop,
    report: &PickReport,
    window: &RateWindow,
    cycles: Option<f64>,
) -> Vec<String> {
    let mut out = Vec::new();
    let (rate, ceiling) = (window.low_hz, window.high_hz);
    if let (Some(b), Some(cycles), Some(cpu)) =
        (case.budget.as_ref(), cycles, report.cpu_ceiling_hz)
        && cpu < rate
    {
        // Each threshold is rounded toward the side that works (up for a
        // minimum, down for a maximum), so applied alone it opens the window.
        out.push(format!(
            "a faster CPU: at least {} MHz at {} % load",
            at_least(rate * cycles / (b.max_load_pct / 100.0) / 1e6),
            b.max_load_pct
        ));
        out.push(format!(
            "a cheaper update: at most {:.0} cycles per update (now {:.0})",
            ((b.max_load_pct / 100.0) * b.cpu_hz / rate).floor(),
            cycles
        ));
        out.push(format!(
            "a higher load limit: at least {} % would be needed",
            at_least(rate * cycles / b.cpu_hz * 100.0)
        ));
    }
    if let Some(pr) = &report.precision
        && window.high_bound.is_coefficients()
    {
        let wider: Vec<String> = pr
            .ceilings
            .iter()
            .filter(|c| {
                report
                    .recommended
                    .as_ref()
                    .is_some_and(|r| r.method == c.method)
                    && c.format != pr.window_format
                    && c.ceiling.rate_hz.is_some_and(|h| h >= rate)
            })
            .map(|c| c.format.name())
            .collect();
        if let Some(o) = &pr.other_structure {
            out.push(o.advice(pr.structure));
        }
        out.push(if wider.is_empty() {
            format!(
                "wider coefficients or another structure than {} {}: the rounded controller fails at the rate the spec alone needs",
                pr.window_format, pr.structure
            )
        } else {
            format!(
                "a wider number format: {} holds the rate the spec alone needs",
                wider.join(", ")
            )
        });
    }
    if let Some(r) = &report.recommended {
        let answers = report.answers();
        let lim = answers
            .iter()
            .find(|m| {
                m.method == r.method && m.hold == r.hold && m.compute_delay == r.compute_delay
            })
            .and_then(|m| m.limiting)
            .map_or("".into(), |l| l.label());
        out.push(format!(
            "a looser spec: the {lim} is what sets the slowest rate"
        ));
    }
    // Only the CPU ceiling is known at every rate; a format's ceiling was
    // searched for the design delay alone.
    let cpu_bound = report.cpu_ceiling_hz == Some(ceiling) && !window.high_bound.is_coefficients();
    if cpu_bound && let Some(b) = case.budget.as_ref() {
        out.extend(other_method_advice(case, lp, report, b, ceiling));
    }
    let answers = report.answers();
    let rec_hold = report.recommended.as_ref().map(|r| r.hold);
    let shorter: Vec<String> = answers
        .into_iter()
        .filter(|_| cpu_bound)
        .filter(|m| Some(m.hold) == rec_hold)
        .filter(|m| m.compute_delay < report.design_delay)
        .filter_map(|m| m.slowest_rate_hz.map(|f| (m, f)))
        .filter(|(_, f)| f * case.spec.headroom <= ceiling)
        .map(|(m, f)| {
            format!(
                "{} at delay {} (f_star {})",
                m.method,
                periods(m.compute_delay),
                hz(f)
            )
        })
        .collect();
    if !shorter.is_empty() {
        out.push(format!(
            "a shorter computation delay fits the CPU budget: {}",
            shorter.join(", ")
        ));
    }
    out
}

/// The "another method" item of the empty-window advice (CPU-bound window,
/// continuous controller): a method whose own `f_star` times the headroom
/// fits under its own CPU ceiling (the update's cost can differ between
/// methods when cycles are estimated from multiply-accumulates) opens the
/// window; otherwise, the `f_star` a method would need, the lowest found,
/// and the methods the case did not try.
fn other_method_advice(
    case: &Case,
    lp: &PreparedLoop,
    report: &PickReport,
    b: &crate::spec::Budget,
    ceiling: f64,
) -> Option<String> {
    if case.methods.is_empty() {
        return None;
    }
    let structure = case
        .arithmetic
        .as_ref()
        .map_or(Structure::TransposedDirect, |a| a.structure);
    let integrators = rounding::design_integrators(&lp.controller);
    let answers = report.answers();
    let rec_hold = report.recommended.as_ref().map(|r| r.hold);
    let at_design: Vec<(Method, f64)> = answers
        .iter()
        .filter(|a| a.compute_delay == report.design_delay)
        .filter(|a| rec_hold.is_none_or(|h| a.hold == h))
        .filter_map(|a| {
            let m = a.method.0.filter(|m| case.methods.contains(m))?;
            Some((m, a.slowest_rate_hz?))
        })
        .collect();
    let opens: Vec<String> = at_design
        .iter()
        .filter(|(m, _)| {
            report
                .recommended
                .as_ref()
                .is_none_or(|r| r.method != MethodChoice(Some(*m)))
        })
        .filter_map(|&(m, f)| {
            let low = f * case.spec.headroom;
            let c = lp.controller_at(low, Some(m)).ok();
            let cycles = budget::cycles_per_update(b, c.as_ref(), structure, integrators)?;
            let high = budget::ceiling_hz(b, cycles);
            (low <= high).then(|| {
                format!(
                    "{} ({:.0} cycles per update): window {} to {}",
                    m.name(),
                    cycles,
                    hz_at_least(low),
                    hz_at_most(high)
                )
            })
        })
        .collect();
    if !opens.is_empty() {
        return Some(format!(
            "another method fits the CPU budget with its own update cost: {}",
            opens.join("; ")
        ));
    }
    // With a timer the rate is rounded up to one the timer makes, so the
    // top that counts is the fastest timer rate under the ceiling.
    let top = match b.timer_hz {
        Some(t) if t >= ceiling => {
            let n = (t / ceiling).ceil().max(1.0);
            // Guard against rounding in the division (as in the budget).
            if t / n > ceiling {
                t / (n + 1.0)
            } else {
                t / n
            }
        }
        _ => ceiling,
    };
    let need = top / case.spec.headroom;
    let lowest = at_design
        .iter()
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(m, f)| format!("the lowest here is {} at {}", m.name(), hz(*f)))
        .unwrap_or_else(|| "no method here has one".into());
    let untried: Vec<&str> = Method::ALL
        .iter()
        .filter(|m| !case.methods.contains(m))
        .map(|m| m.name())
        .collect();
    let untried = if untried.is_empty() {
        String::new()
    } else {
        format!("; not tried: {}", untried.join(", "))
    };
    Some(format!(
        "a method with a lower f_star: at most {} would fit the CPU ceiling with the headroom ({lowest}{untried})",
        hz_at_most(need)
    ))
}

/// Why the recommended hold: the cheapest passing one at the design delay
/// (lowest `f_star`, ties to the first listed), set against the best
/// `f_star` of every other hold kind the case lists.
fn hold_basis(
    case: &Case,
    answers: &[SlowestRate],
    method: &str,
    hold: HoldKind,
    f_star: f64,
    design_delay: f64,
) -> String {
    if case.holds.len() < 2 {
        return format!("{hold}: the only hold kind the case lists");
    }
    let others: Vec<String> = case
        .holds
        .iter()
        .filter(|&&h| h != hold)
        .map(|&h| {
            let best = answers
                .iter()
                .filter(|a| a.hold == h && a.compute_delay == design_delay)
                .filter_map(|a| a.slowest_rate_hz.map(|f| (a, f)))
                .min_by(|a, b| a.1.total_cmp(&b.1));
            match best {
                Some((a, f)) if f == f_star => {
                    format!("{h} ties at {} ({}) but is listed later", hz(f), a.method)
                }
                Some((a, f)) => format!("{h} needs {} ({})", hz(f), a.method),
                None => format!("{h} meets the spec with no method up to max_hz"),
            }
        })
        .collect();
    format!(
        "{hold}: the lowest slowest rate at delay {}, {} with {method}; {}",
        periods(design_delay),
        hz(f_star),
        others.join("; ")
    )
}
