//! The review charts of a `pick` or `sweep` run, drawn from the real
//! results with the crate's plotting layer ([`crate::output::plot`]).
//!
//! Each chart is first described as plain [`Figure`] data ([`describe`]:
//! title, panels, series with their points, limits, marks, labels) from
//! the sweep, the pick report and, where a chart needs more than the sweep
//! holds (traces, the loop gain, hold approximations), fresh evaluations
//! of the same [`PreparedLoop`]; tests read those descriptions. Then each
//! is drawn ([`write_charts`]). The charts are independent, so they are
//! built and drawn in parallel. A chart that needs a recommendation is
//! skipped when there is none; a chart that needs a budget is skipped
//! without one.

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, PoisonError};

use rayon::prelude::*;

use crate::case::Case;
use crate::engineering::{hz, periods, seconds, sig4};
use crate::error::Error;
use crate::explore::budget;
use crate::explore::pick::{PickReport, Recommended, case_methods};
use crate::explore::search::method_label;
use crate::model::discretize::Method;
use crate::model::poly::C64;
use crate::model::transfer::Controller;
use crate::model::transfer::DiscreteTransfer;
use crate::output::chart_rows::{ChartSeries, Points, RATE_PANELS, RateSeries, figure_of};
use crate::output::plot::{
    Annotation, Axis, Band, Draw, Figure, Limit, MarkStyle, PALETTE_LEN, Panel, Series, Side,
    VMark, render_png_bytes,
};
use crate::sampled::continuous::HoldApprox;
use crate::sampled::evaluate::{Evaluation, Figures, Given, Point, PointError, PreparedLoop};
use crate::sampled::feasibility::assess;
use crate::sampled::figure::{Figure as LoopFigure, Limiting, Unit, Worse};
use crate::sampled::frequency::{loop_grid, unwrapped_phase};
use crate::sampled::time_response::TracePoint;
use crate::spec::Format;
use crate::spec::HoldKind;
use crate::spec::Spec;

/// File names of the charts, in the order [`write_charts`] returns them.
pub const FIGURES_VS_RATE: &str = "figures-vs-rate.png";
pub const STEP_RESPONSE: &str = "step-response.png";
pub const LOOP_RESPONSE: &str = "loop-response.png";
pub const CPU_BUDGET: &str = "cpu-budget.png";
pub const HOLD_APPROXIMATION: &str = "hold-approximation.png";
pub const DISTURBANCE: &str = "disturbance.png";
pub const PRECISION: &str = "precision.png";
pub const HOLD_KINDS: &str = "hold-kinds.png";

/// Rates of the hold-approximation chart (log-spaced over the case's range).
const HOLD_CHART_RATES: usize = 40;
/// At most this many sample markers per trace; beyond it every n-th sample
/// is marked (and the legend says so), so the markers stay readable.
const MAX_SAMPLE_MARKERS: usize = 60;
/// Points of a continuous-design trace.
const CONTINUOUS_TRACE_STEPS: usize = 2000;
/// An upper-limited figure is shown up to this many times its limit; the
/// points above are marked at the top edge (near the stability edge such
/// a figure runs to hundreds and would flatten the rest).
const CLIP_TIMES_LIMIT: f64 = 3.0;
/// f* values closer than this ratio share one label (one per cluster),
/// so labels never pile up on a log rate axis.
const STAR_CLUSTER_RATIO: f64 = 1.25;

// Palette entries, fixed per role so a reader can follow a role from
// chart to chart.
const STYLE_RECOMMENDED: usize = 0;
const STYLE_STAR: usize = 1;
const STYLE_FAILING: usize = 3;
const STYLE_CONTINUOUS: usize = 4;
const STYLE_REFERENCE: usize = 6;

/// The side of a limit on `fig` that fails.
pub fn bad_side(fig: LoopFigure) -> Side {
    match fig.worse() {
        Worse::Lower => Side::Below,
        _ => Side::Above,
    }
}

/// The spec limit on `fig` as drawn: `max 25.00 %`, `min 45.00 deg`.
pub fn limit_of(fig: LoopFigure, spec: &Spec) -> Option<Limit> {
    let v = fig.limit(spec)?;
    Some(Limit::new(v, bad_side(fig), fig.limit_text(v)))
}

/// The unit written after a number on `fig`'s axis (none for a ratio or
/// output units).
fn unit_of(fig: LoopFigure) -> &'static str {
    match fig.unit() {
        Unit::Ratio | Unit::Output | Unit::Actuator => "",
        u => u.symbol(),
    }
}

/// `overshoot 25.31 %`: the figure's value in words, the number kept
/// with its unit by a no-break space.
fn value_text(fig: LoopFigure, f: &Figures) -> Option<String> {
    let v = fig.limited_value(f)?;
    Some(format!(
        "{} {}",
        fig.short_label(),
        fig.quantity(v).replace(' ', "\u{a0}")
    ))
}

/// What the charts are drawn from: the case, its prepared loop, what the
/// sweep gathered for them, and the pick's answer when a search was made
/// (`pick`; `sweep` has none, and draws only the charts that need none).
pub struct ChartInput<'a> {
    pub case: &'a Case,
    pub lp: &'a PreparedLoop,
    pub rows: &'a ChartSeries,
    pub pick: Option<&'a PickReport>,
}

/// Everything a chart builder reads.
struct Inputs<'a> {
    case: &'a Case,
    lp: &'a PreparedLoop,
    /// The series the charts show, finished.
    series: &'a [RateSeries],
    /// Formats evaluated by the sweep (f64 left out).
    formats: &'a [Format],
    /// The largest computation delay listed: the one the charts show.
    design_delay: f64,
    pick: Option<&'a PickReport>,
    /// The recommendation and its method, when there is one.
    rec: Option<(&'a Recommended, Option<Method>)>,
    /// The controllers the charts run, shared between them.
    controllers: Controllers,
}

/// A controller discretized once per (method, rate) and shared by every
/// chart that shows that point (its evaluation, its traces, its loop
/// gain). Charts are drawn in parallel, hence the lock.
#[derive(Default)]
struct Controllers(Mutex<Vec<(ControllerKey, Arc<ControllerAt>)>>);

/// A chart point's method and rate (the bits of the rate in Hz).
type ControllerKey = (Option<Method>, u64);
type ControllerAt = Result<DiscreteTransfer, PointError>;

impl Controllers {
    /// The controller at `p`'s method and rate, built on first use.
    fn at(&self, lp: &PreparedLoop, p: &Point) -> Arc<ControllerAt> {
        let key = (p.method, p.rate_hz.to_bits());
        let mut memo = self.0.lock().unwrap_or_else(PoisonError::into_inner);
        if let Some((_, c)) = memo.iter().find(|(k, _)| *k == key) {
            return Arc::clone(c);
        }
        let c = Arc::new(lp.controller_at(p.rate_hz, p.method));
        memo.push((key, Arc::clone(&c)));
        c
    }
}

impl Inputs<'_> {
    /// The nominal loop's figures at `p` around the shared controller.
    fn evaluation(&self, p: &Point) -> Evaluation {
        let c = self.controllers.at(self.lp, p);
        let given = Given {
            controller: Some(c.as_ref().as_ref()),
            ..Given::default()
        };
        self.lp.evaluate(p, given)
    }
}

type Builder = fn(&Inputs) -> Option<Figure>;

/// A chart as drawn: where it was written and its PNG bytes (which the
/// HTML report embeds, so it never reads a file back that another run
/// could have replaced).
#[derive(Debug, Clone)]
pub struct Chart {
    pub path: PathBuf,
    pub png: Vec<u8>,
}

/// Describe every chart that applies to this run, in a fixed order: file
/// name and figure (without the footer note). Charts that need a
/// recommendation (step, loop, hold approximation, disturbance) are
/// skipped when there is none (always in a `sweep`); `cpu-budget.png`
/// without a budget.
pub fn describe(input: &ChartInput) -> Vec<(&'static str, Figure)> {
    let ChartInput {
        case,
        lp,
        rows,
        pick,
    } = *input;
    let rec = pick.and_then(|p| p.recommended.as_ref()).and_then(|r| {
        case_methods(case)
            .into_iter()
            .find(|m| method_label(*m) == r.method)
            .map(|m| (r, m))
    });
    let inputs = Inputs {
        case,
        lp,
        series: &rows.series,
        formats: &rows.formats,
        design_delay: rows.design_delay,
        pick,
        rec,
        controllers: Controllers::default(),
    };
    let jobs: [(&str, Builder); 8] = [
        (FIGURES_VS_RATE, figures_vs_rate),
        (STEP_RESPONSE, step_response),
        (LOOP_RESPONSE, loop_response),
        (CPU_BUDGET, cpu_budget),
        (HOLD_APPROXIMATION, hold_approximation),
        (DISTURBANCE, disturbance),
        (PRECISION, precision_chart),
        (HOLD_KINDS, hold_kinds),
    ];
    jobs.par_iter()
        .filter_map(|(name, build)| build(&inputs).map(|f| (*name, f)))
        .collect()
}

/// Draw every chart that applies to this run into `out_dir` (created if
/// missing) and return the charts written, in [`describe`]'s order.
pub fn write_charts(out_dir: &Path, input: &ChartInput) -> Result<Vec<Chart>, Error> {
    std::fs::create_dir_all(out_dir).map_err(|e| Error::Output {
        path: out_dir.display().to_string(),
        message: e.to_string(),
    })?;
    write_figures(out_dir, input.case, describe(input))
}

/// Draw `figures` (file name, figure) with the case's footer note and
/// write each into `out_dir`, in order.
pub(crate) fn write_figures(
    out_dir: &Path,
    case: &Case,
    figures: Vec<(&str, Figure)>,
) -> Result<Vec<Chart>, Error> {
    let version = env!("CARGO_PKG_VERSION");
    let note = format!(
        "{} | looprate {version} | model-based: confirm on the hardware",
        case.title
    );
    (figures.into_par_iter())
        .map(|(name, fig)| {
            let path = out_dir.join(name);
            let png = render_png_bytes(&fig.with_note(note.clone()), &path)?;
            crate::output::writer::write_atomic(&path, &png)?;
            Ok(Chart { path, png })
        })
        .collect()
}

// ------------------------------------------------------------- helpers

/// The time axis of a response over `[0, t_end]` s: labelled in ms or µs
/// when the whole span is below 0.1 s or 0.1 ms (the data stay in s).
fn time_axis(t_end: f64) -> Axis {
    let (label, scale) = match t_end {
        t if t < 1e-4 => ("time (µs)", 1e6),
        t if t < 0.1 => ("time (ms)", 1e3),
        _ => ("time (s)", 1.0),
    };
    Axis::linear(label)
        .with_range(0.0, t_end)
        .with_label_scale(scale)
}

fn rate_axis() -> Axis {
    Axis::log("loop rate (Hz)")
}

/// The series of one (method, hold) at the design delay.
fn rows_of<'a>(inp: &'a Inputs, m: Option<Method>, h: HoldKind) -> Option<&'a RateSeries> {
    (inp.series.iter()).find(|s| s.method == m && s.hold == h && s.delay == inp.design_delay)
}

/// The methods of the sweep at the design delay, in case order.
fn design_series<'a>(inp: &'a Inputs) -> Vec<(String, &'a RateSeries)> {
    let hold = design_hold(inp);
    (case_methods(inp.case).into_iter())
        .filter_map(|m| Some((method_label(m).to_string(), rows_of(inp, m, hold)?)))
        .collect()
}

/// The rows of a controller given in z, one series per computation delay
/// (each a single rate), labelled by the delay.
fn delay_series<'a>(inp: &'a Inputs) -> Vec<(String, &'a RateSeries)> {
    (inp.case.compute_delays.iter())
        .filter_map(|&d| {
            let s = inp.series.iter().find(|s| s.delay == d)?;
            Some((format!("computation delay {}", periods(d)), s))
        })
        .collect()
}

/// The nominal `f_star` of a method at the design delay.
fn f_star(report: &PickReport, method: &str) -> Option<f64> {
    let hold = report.recommended.as_ref().map(|r| r.hold);
    (report.methods.iter())
        .find(|m| {
            m.method.name() == method
                && Some(m.hold) == hold
                && m.compute_delay == report.design_delay
        })
        .and_then(|m| m.slowest_rate_hz)
}

/// The robust `f_star` of a method at the design delay (plant variants).
fn robust_f_star(report: &PickReport, method: &str) -> Option<f64> {
    let rb = report.robust.as_ref()?;
    (rb.methods.iter())
        .find(|m| m.rate.method.name() == method && m.rate.compute_delay == report.design_delay)
        .and_then(|m| m.rate.slowest_rate_hz)
}

/// ` with a first-order hold` when the case lists more than one hold
/// kind (the chart must say which it shows), else nothing.
fn hold_words(inp: &Inputs) -> String {
    match inp.case.holds.len() > 1 {
        true => format!(" with a {} hold", design_hold(inp).name()),
        false => String::new(),
    }
}

/// The hold kind the charts of methods show: the recommended one, else
/// the first the case lists.
fn design_hold(inp: &Inputs) -> HoldKind {
    inp.rec
        .map(|(r, _)| r.hold)
        .unwrap_or_else(|| inp.case.holds.first().copied().unwrap_or_default())
}

/// Vertical marks of one kind of `f_star` (one per method). Values closer
/// than [`STAR_CLUSTER_RATIO`] to their neighbour form a cluster with one
/// label naming its span and count (the report's tables give each value);
/// a lone value names its method.
fn star_marks(
    series: &[(String, &RateSeries)],
    kind: &str,
    style: MarkStyle,
    get: impl Fn(&str) -> Option<f64>,
) -> Vec<VMark> {
    let mut found: Vec<(&str, f64)> = (series.iter())
        .filter_map(|(m, _)| get(m).map(|f| (m.as_str(), f)))
        .collect();
    found.sort_by(|a, b| a.1.total_cmp(&b.1));
    let mut out = Vec::new();
    for (i, &(m, f)) in found.iter().enumerate() {
        let starts = i == 0 || f > STAR_CLUSTER_RATIO * found[i - 1].1;
        let end = (i + 1..found.len())
            .find(|&j| found[j].1 > STAR_CLUSTER_RATIO * found[j - 1].1)
            .unwrap_or(found.len());
        let text = match (starts, end - i) {
            (false, _) => String::new(),
            (true, 1) => format!("{kind} {m} {}", hz(f)),
            (true, n) => format!("{kind} {} to {} ({n} methods)", hz(f), hz(found[end - 1].1)),
        };
        out.push(VMark::new(f, text, style));
    }
    out
}

/// What the charts call the rate they show the loop at: the recommended
/// rate, or, when the rate window is empty, only the rate the spec alone
/// needs (it is no recommendation then).
fn rate_word(report: &PickReport) -> &'static str {
    if report.window.as_ref().is_some_and(|w| w.empty) {
        "spec alone"
    } else {
        "recommended"
    }
}

/// The name of the `f_star` the answer rests on: with plant variants it
/// is the robust one, and every chart says so (one meaning of "f*").
fn star_word(report: &PickReport) -> &'static str {
    if report.robust.is_some() {
        "robust f*"
    } else {
        "f*"
    }
}

/// A point of the recommended method at the design delay.
fn point_at(inp: &Inputs, method: Option<Method>, rate_hz: f64) -> Point {
    Point {
        rate_hz,
        method,
        delay: inp.design_delay,
        hold: design_hold(inp),
    }
}

/// The failing rate shown beside f_star: the fastest infeasible grid rate
/// below it, or f_star / 1.5 when the grid has none.
fn failing_rate(inp: &Inputs, rec: &Recommended, method: Option<Method>) -> f64 {
    rows_of(inp, method, rec.hold)
        .and_then(|s| s.last_infeasible_hz)
        .filter(|&f| f < rec.slowest_rate_hz)
        .unwrap_or(rec.slowest_rate_hz / 1.5)
}

/// A sampled trace as a line through every point up to `t_end`, plus its
/// sampling instants as markers (thinned to [`MAX_SAMPLE_MARKERS`]). The
/// trace is run `slot.0` of `slot.1` on the panel: with several runs every
/// run marks at most every other sample, each starting at its own offset,
/// so the markers of two runs whose rates are 1 % apart alternate instead
/// of hiding each other.
fn trace_series(
    trace: &[TracePoint],
    t_end: f64,
    label: &str,
    style: usize,
    slot: (usize, usize),
) -> [Series; 2] {
    let shown = || trace.iter().filter(|p| p.t <= t_end * (1.0 + 1e-12));
    let samples: Points = shown().filter(|p| p.sample).map(|p| (p.t, p.y)).collect();
    let (run, runs) = (slot.0, slot.1.max(1));
    let stride = (samples.len().div_ceil(MAX_SAMPLE_MARKERS)).max(1 + usize::from(runs > 1));
    let marks: Points = samples
        .into_iter()
        .skip(run * stride / runs)
        .step_by(stride)
        .collect();
    let mark_label = match stride {
        1 => "samples".to_string(),
        n => format!("samples (1 in {n} shown)"),
    };
    [
        Series::line(label, shown().map(|p| (p.t, p.y)).collect(), style),
        Series::line(mark_label, marks, style).drawn(Draw::Markers),
    ]
}

/// Visible y range of a set of series, padded; non-finite points ignored.
fn padded_range<'a>(series: impl Iterator<Item = &'a Series>, pad: f64) -> Option<(f64, f64)> {
    let (lo, hi) = (series.flat_map(|s| s.points.iter().map(|p| p.1)))
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    let span = (hi - lo).max(1e-9 * hi.abs().max(1.0));
    (lo.is_finite() && hi.is_finite()).then_some((lo - pad * span, hi + pad * span))
}

/// A horizontal line across `[x0, x1]`.
fn hline(label: &str, y: f64, x0: f64, x1: f64, style: usize) -> Series {
    Series::line(label, vec![(x0, y), (x1, y)], style)
}

/// A panel of one figure against the rate: one series per entry of
/// `series` (legend on the top panel `named`), its spec limit, the gaps
/// explained in its caption.
fn rate_panel(
    def: LoopFigure,
    spec: &Spec,
    series: &[(String, &RateSeries)],
    named: bool,
    worst: bool,
) -> Panel {
    let mut panel = Panel::new(Axis::linear(def.axis_title()));
    let label = |text: String| if named { text } else { String::new() };
    for (k, (name, rows)) in series.iter().enumerate() {
        let text = match rows.unstable == rows.rows {
            false => name.clone(),
            true => format!("{name} (unstable at every rate)"),
        };
        let s = Series::line(label(text), rows.nominal(def).clone(), k);
        panel.series.push(s.drawn(Draw::LineAndMarkers));
    }
    // With plant variants, each method's figure at its worst over them, in
    // the styles after the nominal curves'.
    for (k, (name, rows)) in series.iter().enumerate().filter(|_| worst) {
        let style = (series.len() + k) % PALETTE_LEN;
        let text = label(format!("{name}, worst variant"));
        panel
            .series
            .push(Series::line(text, rows.worst(def).clone(), style));
    }
    let sum = |n: fn(&RateSeries) -> usize| series.iter().map(|(_, rows)| n(rows)).sum::<usize>();
    let (unstable, total) = (sum(|r| r.unstable), sum(|r| r.rows));
    let missing: usize = series.iter().map(|(_, rows)| rows.missing_of(def)).sum();
    let variant_gaps = if worst { sum(|r| r.variant_gaps) } else { 0 };
    let why: Vec<String> = [
        (unstable, format!("loop unstable ({unstable}/{total})")),
        (
            missing,
            format!("{} ({missing}/{total})", def.absence_reason()),
        ),
        (
            variant_gaps,
            format!("no worst case, a variant fails ({variant_gaps} more)"),
        ),
    ]
    .into_iter()
    .filter_map(|(n, text)| (n > 0).then_some(text))
    .collect();
    if !why.is_empty() {
        panel.caption = format!("gaps: {}", why.join("; "));
    }
    match limit_of(def, spec) {
        // The view clipped above an upper limit (see [`clip_above`]).
        Some(l) => {
            if l.bad_side == Side::Above && l.value > 0.0 {
                clip_above(&mut panel, CLIP_TIMES_LIMIT * l.value, unit_of(def));
            }
            panel.limits.push(l);
        }
        // Without a limit, Ms is still shown up to a few times the usual
        // bound of 2 (common practice, no source).
        None if def == LoopFigure::SensitivityPeak => {
            clip_above(&mut panel, CLIP_TIMES_LIMIT * 2.0, "")
        }
        None => {}
    }
    // A time that stays under 0.1 s reads in ms (the data stay in s).
    let values = (panel.series.iter()).flat_map(|s| s.points.iter().map(|p| p.1));
    let top = (panel.y.range).map_or_else(
        || values.filter(|v| v.is_finite()).fold(0.0, f64::max),
        |r| r.1,
    );
    if def.unit() == Unit::Seconds && top > 0.0 && top < 0.1 {
        let label = format!("{} (ms)", def.short_label());
        panel.y = Axis {
            label,
            label_scale: 1e3,
            ..panel.y
        };
    }
    panel
}

/// Near the stability edge an upper-limited figure runs off to huge
/// values and would flatten the rest: the view stops at `top`, each curve
/// gets a marker (its own) where it leaves the top edge, and the caption
/// says so.
fn clip_above(panel: &mut Panel, top: f64, unit: &str) {
    let leaving: Vec<Series> = (panel.series.iter())
        .map(|s| {
            let pts = (s.points.windows(2))
                .filter(|w| w[0].1 <= top || w[0].1.is_nan())
                .filter(|w| w[1].1.is_finite() && w[1].1 > top)
                .map(|w| (w[1].0, top))
                .collect();
            Series::line("", pts, s.style).drawn(Draw::Markers)
        })
        .filter(|s| !s.points.is_empty())
        .collect();
    if leaving.is_empty() {
        return;
    }
    panel.y = panel.y.clone().with_range(0.0, top);
    panel.series.extend(leaving);
    let text = match unit {
        "s" => format!("off scale above {}", seconds(top)),
        _ => format!("off scale above {} {unit}", sig4(top)),
    };
    let text = text.trim_end();
    panel.caption = match panel.caption.is_empty() {
        true => text.to_string(),
        false => format!("{}; {text}", panel.caption),
    };
}

// --------------------------------------------------------------- charts

/// Overshoot, settling time, phase margin, gain margin and sensitivity
/// peak against the rate, one series per method at the design delay
/// (with plant variants also each method's worst-variant curve).
fn figures_vs_rate(inp: &Inputs) -> Option<Figure> {
    // A controller given in z runs at one rate: one point per computation
    // delay, on an axis around that rate (not the range of a sweep).
    let single = match &inp.lp.controller {
        Controller::Discrete(d) => Some(1.0 / d.period_s),
        Controller::Continuous(_) => None,
    };
    let series = match single {
        Some(_) => delay_series(inp),
        None => design_series(inp),
    };
    if series.is_empty() {
        return None;
    }
    // With plant variants both answers are marked, each by its name: the
    // nominal f* (dotted, where the nominal curves cross the limits) and
    // the robust f* (dashed, where the worst-variant curves do: what the
    // answer rests on).
    let robust = inp.pick.is_some_and(|p| p.robust.is_some());
    let mut marks: Vec<VMark> = Vec::new();
    if let Some(pick) = inp.pick {
        marks.extend((pick.recommended.as_ref()).map(|r| recommended_mark(pick, r.rate_hz)));
        if robust {
            let get = |m: &str| robust_f_star(pick, m);
            marks.extend(star_marks(&series, "robust f*", MarkStyle::Dashed, get));
        }
        let (kind, style) = match robust {
            true => ("nominal f*", MarkStyle::Dotted),
            false => ("f*", MarkStyle::Dashed),
        };
        marks.extend(star_marks(&series, kind, style, |m| f_star(pick, m)));
    }
    let (lo, hi) = match single {
        Some(f) => (f / 1.5, f * 1.5),
        None => (inp.case.rates.min_hz, inp.case.rates.max_hz),
    };
    let never_stable = (series.iter()).all(|(_, rows)| rows.unstable == rows.rows);
    let delay = periods(inp.design_delay);
    let title = match single {
        Some(f) => format!(
            "Loop figures of the controller given in z at its one rate {} (one point per computation delay; PM phase margin, GM gain margin, Ms sensitivity peak; hatched side of a limit fails)",
            hz(f)
        ),
        None if never_stable => format!(
            "No swept rate gives a stable loop ({} to {}, computation delay {delay})",
            hz(lo),
            hz(hi),
        ),
        None => format!(
            "Loop figures vs rate, computation delay {delay}{} (PM phase margin, GM gain margin, Ms sensitivity peak; hatched side of a limit fails)",
            if robust {
                ", nominal plant and worst variant"
            } else {
                ""
            }
        ),
    };
    let mut fig = Figure::new(title, rate_axis().with_range(lo, hi));
    // Lines through every panel, each label on one panel only (spread
    // over the panels so the labels do not collide).
    let labelled = |k: usize| marks[..k].iter().filter(|m| !m.label.is_empty()).count();
    for (i, def) in RATE_PANELS.iter().enumerate() {
        let mut panel = rate_panel(*def, &inp.case.spec, &series, i == 0, robust);
        for (k, mk) in marks.iter().enumerate() {
            let mut mk = mk.clone();
            if labelled(k) % RATE_PANELS.len() != i {
                mk.label.clear();
            }
            panel.vmarks.push(mk);
        }
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

/// Phase margin and overshoot against the rate, one series per hold kind
/// the case lists, at the recommended method and the design delay (drawn
/// when the case compares two or more hold kinds and has a
/// recommendation).
fn hold_kinds(inp: &Inputs) -> Option<Figure> {
    if inp.case.holds.len() < 2 {
        return None;
    }
    let (rec, method) = inp.rec?;
    let pick = inp.pick?;
    let f_star_of = |h: HoldKind| {
        (pick.answers().into_iter())
            .find(|a| a.method == rec.method && a.hold == h && a.compute_delay == inp.design_delay)
            .and_then(|a| a.slowest_rate_hz)
    };
    let series: Vec<(String, &RateSeries)> = (inp.case.holds.iter())
        .filter_map(|&h| {
            let name = match f_star_of(h) {
                Some(f) => format!("{h} (f* {})", hz(f)),
                None => format!("{h} (no f*)"),
            };
            Some((name, rows_of(inp, method, h)?))
        })
        .collect();
    if series.is_empty() {
        return None;
    }
    let title = format!(
        "Hold kinds: {} at computation delay {} (hatched side of a limit fails)",
        rec.method,
        periods(inp.design_delay)
    );
    let x = rate_axis().with_range(inp.case.rates.min_hz, inp.case.rates.max_hz);
    let mut fig = Figure::new(title, x);
    for (i, def) in [LoopFigure::PhaseMargin, LoopFigure::Overshoot]
        .into_iter()
        .enumerate()
    {
        let mut panel = rate_panel(def, &inp.case.spec, &series, i == 0, false);
        for &h in &inp.case.holds {
            if let Some(f) = f_star_of(h) {
                let text = if i == 0 {
                    format!("f* {h}")
                } else {
                    String::new()
                };
                panel.vmarks.push(VMark::new(f, text, MarkStyle::Dashed));
            }
        }
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

/// One run of a time-response chart: its rate, legend label and style.
struct Run {
    rate: f64,
    label: String,
    style: usize,
}

/// A time-response figure over `[0, t_end]` (1.4 times the longest of
/// `times`, else `fallback`): the continuous design and each run's trace
/// (a line through the output between samples, markers at the samples);
/// `step` picks the step trace, else the load-disturbance one. Runs that
/// cannot be simulated are named after the title; `finish` adds what
/// the chart marks.
#[allow(clippy::too_many_arguments)]
fn time_figure(
    inp: &Inputs,
    method: Option<Method>,
    runs: &[Run],
    (times, fallback): (&[Option<f64>], f64),
    step: bool,
    y_label: &str,
    mut title: String,
    finish: impl FnOnce(&mut Panel),
) -> Figure {
    let longest = times.iter().flatten().copied().fold(0.0, f64::max);
    let t_end = if longest > 0.0 {
        1.4 * longest
    } else {
        fallback
    };
    let mut panel = Panel::new(Axis::linear(y_label));
    let mut notes = Vec::new();
    if inp.lp.design.is_some() {
        match inp.lp.continuous_traces(t_end, CONTINUOUS_TRACE_STEPS) {
            Ok((s, d)) => {
                let pts = (if step { s } else { d })
                    .iter()
                    .map(|p| (p.t, p.y))
                    .collect();
                (panel.series).push(Series::line("continuous design", pts, STYLE_CONTINUOUS));
            }
            Err(e) => notes.push(format!("continuous design not simulated: {e}")),
        }
    }
    for (i, run) in runs.iter().enumerate() {
        let p = point_at(inp, method, run.rate);
        let periods = (t_end * run.rate).ceil() as usize + 1;
        let c = inp.controllers.at(inp.lp, &p);
        let traces = (c.as_ref().as_ref().map_err(PointError::clone))
            .and_then(|c| inp.lp.traces_around(&p, c, Some(periods)));
        match traces {
            Ok((s, d)) => {
                let t = if step { s } else { d };
                let slot = (i, runs.len());
                (panel.series).extend(trace_series(&t, t_end, &run.label, run.style, slot));
            }
            Err(e) => notes.push(format!("{}: not simulated: {e}", run.label)),
        }
    }
    finish(&mut panel);
    for n in notes {
        title = format!("{title}; {n}");
    }
    Figure::new(title, time_axis(t_end)).with_panel(panel)
}

/// Step response: the continuous design, the sampled loop (nominal
/// plant) at the recommended rate, at f_star and at a failing slower
/// rate, with the overshoot limit and the settling band and limit.
fn step_response(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let report = inp.pick?;
    let figs = rec.figures.as_ref()?;
    let spec = &inp.case.spec;
    let fail_rate = failing_rate(inp, rec, method);
    let star_eval = inp.evaluation(&point_at(inp, method, rec.slowest_rate_hz));
    let fail_eval = inp.evaluation(&point_at(inp, method, fail_rate));
    // The f* and failing runs can lie 1 % apart and draw almost the same
    // curve: their labels give the figure that decides between them.
    let limiting = assess(&fail_eval, spec).limiting;
    let def = match limiting {
        Some(Limiting::Figure(f) | Limiting::Undecided(f)) => Some(f),
        _ => None,
    };
    let value = |e: &Evaluation| {
        def.zip(e.figures.as_ref())
            .and_then(|(d, f)| value_text(d, f))
    };
    let fail_text = match (value(&fail_eval), limiting) {
        (Some(v), _) => format!("{} fails: {v}", hz(fail_rate)),
        (None, Some(k)) => format!("{} fails: {k}", hz(fail_rate)),
        (None, None) => format!("{} fails", hz(fail_rate)),
    };
    let star_text = format!("{} {}", hz(rec.slowest_rate_hz), star_word(report));
    let runs = [
        (
            rec.rate_hz,
            format!("{} {}", hz(rec.rate_hz), rate_word(report)),
            STYLE_RECOMMENDED,
        ),
        (
            rec.slowest_rate_hz,
            match value(&star_eval) {
                Some(v) => format!("{star_text}: {v}"),
                None => star_text,
            },
            STYLE_STAR,
        ),
        (fail_rate, fail_text, STYLE_FAILING),
    ]
    .map(|(rate, label, style)| Run { rate, label, style });
    let settle = [
        report.design.as_ref().and_then(|f| f.settling_time_s),
        figs.settling_time_s,
        star_eval.figures.as_ref().and_then(|f| f.settling_time_s),
        spec.max_settling_s,
    ];
    let plant = match &report.robust {
        Some(rb) => format!(
            "nominal plant (f* and the recommendation hold for all {} variants)",
            rb.variants
        ),
        None => "nominal plant".to_string(),
    };
    let title = format!(
        "Step response, {}{} at computation delay {}, {plant} (line: output between samples)",
        rec.method,
        hold_words(inp),
        periods(inp.design_delay)
    );
    let y_label = "plant output y (output units, unit step)";
    let spans = (&settle[..], figs.horizon_s);
    let fig = time_figure(inp, method, &runs, spans, true, y_label, title, |panel| {
        // A failing run may diverge: fit the view to the design, the
        // passing runs and the overshoot limit so they stay readable.
        let os_limit = (spec.max_overshoot_pct).map(|l| figs.y_final * (1.0 + l / 100.0));
        let fitted =
            (panel.series.iter()).filter(|s| s.style != STYLE_FAILING && s.draw == Draw::Line);
        let limit_line = os_limit.map(|v| hline("", v, 0.0, 0.0, 0));
        if let Some((lo, hi)) = padded_range(fitted.chain(limit_line.iter()), 0.12) {
            panel.y = panel.y.clone().with_range(lo.min(0.0), hi);
        }
        if let (Some(v), Some(l)) = (os_limit, spec.max_overshoot_pct) {
            let side = if figs.y_final >= 0.0 {
                Side::Above
            } else {
                Side::Below
            };
            (panel.limits).push(Limit::new(v, side, format!("max overshoot {} %", sig4(l))));
        }
        let band = spec.settling_band_pct / 100.0 * figs.y_final.abs();
        let text = format!("settling band ±{} %", sig4(spec.settling_band_pct));
        (panel.hbands).push(Band::new(figs.y_final - band, figs.y_final + band, text));
        if let Some(l) = spec.max_settling_s {
            let text = format!("settling limit {}", seconds(l));
            panel.vmarks.push(VMark::new(l, text, MarkStyle::Dotted));
        }
    });
    Some(fig)
}

/// Load-disturbance response at the recommended rate and at f_star, with
/// the recovery band of the recommended run and each run's computation
/// delay.
fn disturbance(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let report = inp.pick?;
    let figs = rec.figures.as_ref()?;
    let spec = &inp.case.spec;
    let star_eval = inp.evaluation(&point_at(inp, method, rec.slowest_rate_hz));
    let recovery = [
        report.design.as_ref().and_then(|f| f.recovery_time_s),
        figs.recovery_time_s,
        star_eval.figures.as_ref().and_then(|f| f.recovery_time_s),
        spec.max_recovery_s,
    ];
    let d = inp.design_delay;
    let run = |rate: f64, word: &str, style: usize| Run {
        rate,
        label: format!(
            "{} {word} (delay {} = {})",
            hz(rate),
            periods(d),
            seconds(d / rate)
        ),
        style,
    };
    let runs = [
        run(rec.rate_hz, rate_word(report), STYLE_RECOMMENDED),
        run(rec.slowest_rate_hz, star_word(report), STYLE_STAR),
    ];
    let title = format!(
        "Response to a unit load step at the plant input, {}{}, nominal plant (r = 0)",
        rec.method,
        hold_words(inp)
    );
    let y_label = "plant output y (output units, unit load step)";
    let spans = (&recovery[..], figs.horizon_s);
    let fig = time_figure(inp, method, &runs, spans, false, y_label, title, |panel| {
        // Recovery: |y - y_end| within the band times the peak
        // (docs/figures.md); the recommended run's own final value is its
        // last point.
        let end = (panel.series.iter())
            .find(|s| s.style == STYLE_RECOMMENDED && s.draw == Draw::Line)
            .and_then(|s| s.points.last().map(|p| p.1));
        if let Some(y_end) = end.filter(|v| v.is_finite()) {
            let band = spec.settling_band_pct / 100.0 * figs.disturbance_peak;
            let text = format!(
                "recovery band ±{} % of the peak ({} {})",
                sig4(spec.settling_band_pct),
                hz(rec.rate_hz),
                rate_word(report)
            );
            (panel.hbands).push(Band::new(y_end - band, y_end + band, text));
        }
        if let Some(t) = figs.recovery_time_s {
            let text = format!("recovered {}", seconds(t));
            panel.vmarks.push(VMark::new(t, text, MarkStyle::Dashed));
        }
        if let Some(l) = spec.max_recovery_s {
            let text = format!("recovery limit {}", seconds(l));
            panel.vmarks.push(VMark::new(l, text, MarkStyle::Dotted));
        }
        if let Some(l) = limit_of(LoopFigure::DisturbancePeak, spec) {
            let label = format!("{} peak", l.label);
            panel.limits.push(Limit { label, ..l });
        }
    });
    Some(fig)
}

/// Magnitude and phase of the loop gain at the recommended rate.
fn loop_response(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let report = inp.pick?;
    let p = point_at(inp, method, rec.rate_hz);
    // One controller and one plant side for the figures and the curves.
    let c = inp.controllers.at(inp.lp, &p);
    let c = c.as_ref().as_ref().ok()?;
    let plant = inp.lp.hold_at(&p).ok()?;
    let given = Given {
        controller: Some(Ok(c)),
        plant: Some(Ok(&plant)),
        ..Given::default()
    };
    let detail = inp.lp.evaluate(&p, given).loop_detail?;
    let l = plant.loop_gain(c.clone());
    let range = inp.lp.sampled_range(rec.rate_hz);
    let grid = loop_grid(&l, &range);
    let phase = unwrapped_phase(&grid);
    let two_pi = 2.0 * std::f64::consts::PI;
    let (nyquist_hz, hz_of) = (rec.rate_hz / 2.0, |w: f64| w / two_pi);
    // Three decades below Nyquist, or lower when a crossing sits there.
    let lowest_mark = [detail.crossover_hz, detail.gain_margin_hz]
        .into_iter()
        .flatten()
        .fold(nyquist_hz, f64::min);
    let f_lo = hz_of(range.w_lo).max((nyquist_hz * 1e-3).min(lowest_mark / 10.0));
    let mut mag = Panel::new(Axis::linear("magnitude |L| (dB)"));
    let mut ph = Panel::new(Axis::linear("phase of L (deg)"));
    // One curve on both panels: |L| in dB and its unwrapped phase.
    let mut bode = |label: &str, l: &[(f64, C64)], phase: &[f64], style: usize| {
        let kept = || (l.iter().zip(phase)).filter(|(g, _)| hz_of(g.0) >= f_lo);
        let db = kept().map(|(&(w, v), _)| (hz_of(w), 20.0 * v.norm().log10()));
        mag.series.push(Series::line(label, db.collect(), style));
        let deg = kept().map(|(&(w, _), &phi)| (hz_of(w), phi));
        ph.series.push(Series::line(label, deg.collect(), style));
    };
    let label = format!(
        "sampled loop, {}{} {}",
        rec.method,
        hold_words(inp),
        hz(rec.rate_hz)
    );
    bode(&label, &grid, &phase, STYLE_RECOMMENDED);
    // The continuous design on the same grid, for comparison.
    if let Controller::Continuous(c) = &inp.lp.controller {
        let lp = inp.lp;
        let cont: Vec<(f64, C64)> = (grid.iter())
            .map(|&(w, _)| (w, C64::new(0.0, w)))
            .map(|(w, s)| (w, lp.plant.eval(s) * lp.sensor.eval(s) * c.eval(s)))
            .collect();
        // The transport delays' e^{-jwL} turns the phase only: exactly
        // -w L, added after unwrapping the rational part.
        let delay_s = lp.transport.plant_s + lp.transport.sensor_s;
        let cph: Vec<f64> = (unwrapped_phase(&cont).into_iter().zip(&cont))
            .map(|(phi, &(w, _))| phi - (w * delay_s).to_degrees())
            .collect();
        bode("continuous design", &cont, &cph, STYLE_CONTINUOUS);
    }
    let f_hi = nyquist_hz;
    clip_magnitude(&mut mag, detail.gain_margin_db);
    (mag.series).push(hline("0 dB", 0.0, f_lo, f_hi, STYLE_REFERENCE));
    // Unwrapped phase at a frequency, exactly: the nearest grid point's
    // unwrapped value plus the angle from it.
    let phase_at = |f: f64| -> f64 {
        let w = f * two_pi;
        let i = (0..grid.len())
            .min_by(|&a, &b| {
                let d = |i: usize| (grid[i].0.ln() - w.ln()).abs();
                d(a).total_cmp(&d(b))
            })
            .unwrap_or(0);
        phase[i] + (l(w) / grid[i].1).arg().to_degrees()
    };
    // The -180 deg lines (mod 360) inside the phase panel's span.
    let (plo, phi) = (phase.iter().zip(&grid))
        .filter(|(_, g)| hz_of(g.0) >= f_lo)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), (v, _)| {
            (a.min(*v), b.max(*v))
        });
    if plo.is_finite() {
        let k0 = ((plo + 180.0) / 360.0).floor() as i64;
        let levels = (k0..).map(|k| -180.0 + 360.0 * k as f64);
        let levels = levels
            .take_while(|v| *v <= phi + 20.0)
            .filter(|v| *v >= plo - 20.0);
        for (i, level) in levels.enumerate() {
            let text = if i == 0 { "-180 deg (mod 360)" } else { "" };
            (ph.series).push(hline(text, level, f_lo, f_hi, STYLE_REFERENCE));
        }
    }
    for panel in [&mut mag, &mut ph] {
        let text = format!("Nyquist {}", hz(nyquist_hz));
        panel
            .vmarks
            .push(VMark::new(nyquist_hz, text, MarkStyle::Dotted));
    }
    if let (Some(fc), Some(pm)) = (detail.crossover_hz, detail.phase_margin_deg) {
        let text = format!("crossover {}", hz(fc));
        mag.vmarks.push(VMark::new(fc, text, MarkStyle::Dashed));
        ph.vmarks.push(VMark::new(fc, "", MarkStyle::Dashed));
        let text = format!("phase margin {} deg", sig4(pm));
        ph.notes.push(Annotation::new(fc, phase_at(fc), text));
    }
    if let (Some(fg), Some(gm)) = (detail.gain_margin_hz, detail.gain_margin_db) {
        let text = format!("gain margin {} dB at {}", sig4(gm), hz(fg));
        let db = 20.0 * l(fg * two_pi).norm().log10();
        mag.notes.push(Annotation::new(fg, db, text));
        ph.notes.push(Annotation::new(fg, phase_at(fg), ""));
    }
    // The title names what is drawn; the marks carry the margins' values.
    let missing: Vec<&str> = [
        (
            detail.gain_margin_db,
            "no -180 deg crossing, so no gain margin mark",
        ),
        (
            detail.phase_margin_deg,
            "no gain crossover, so no phase margin mark",
        ),
    ]
    .into_iter()
    .filter_map(|(v, text)| v.is_none().then_some(text))
    .collect();
    let at = match rate_word(report) {
        "recommended" => "the recommended rate",
        _ => "the rate the spec alone needs",
    };
    let title = match missing.is_empty() {
        true => format!("Loop gain L(e^jwT) at {at}"),
        false => format!("Loop gain L(e^jwT) at {at} ({})", missing.join("; ")),
    };
    let x = Axis::log("frequency (Hz)").with_range(f_lo, f_hi);
    Some(Figure::new(title, x).with_panel(mag).with_panel(ph))
}

/// Deepest magnitude the loop-gain chart shows below its top, dB: 80 dB
/// holds the crossover region, the gain-margin crossing and the roll-off
/// toward Nyquist of any loop looprate is meant for.
const MAGNITUDE_SPAN_DB: f64 = 80.0;

/// Clip the magnitude axis of the loop-gain chart to its useful range.
///
/// A zero near Nyquist (a notch) sends |L| to -300 dB and more, which
/// would squeeze the crossover region into a sliver of the plot. The axis
/// keeps [`MAGNITUDE_SPAN_DB`] below the top, never less than down to
/// -40 dB and 20 dB below the gain-margin crossing; what lies deeper is
/// clipped at the bottom edge and shaded, with its depth in the label.
fn clip_magnitude(mag: &mut Panel, gain_margin_db: Option<f64>) {
    let values = || {
        mag.series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| p.1))
            .filter(|v| v.is_finite())
    };
    let top = values().fold(f64::NEG_INFINITY, f64::max);
    let deepest = values().fold(f64::INFINITY, f64::min);
    if !top.is_finite() {
        return;
    }
    let floor = [
        top - MAGNITUDE_SPAN_DB,
        -40.0,
        gain_margin_db.map_or(f64::INFINITY, |g| -g.abs() - 20.0),
    ]
    .into_iter()
    .fold(f64::INFINITY, f64::min);
    // On a whole 10 dB line, so the bottom tick reads as a round number.
    let floor = (floor / 10.0).floor() * 10.0;
    if deepest >= floor {
        return;
    }
    // Frequency intervals where any series lies below the floor.
    let mut below: Vec<(f64, f64)> = Vec::new();
    for s in &mag.series {
        let mut start: Option<f64> = None;
        let mut last = f64::NAN;
        for &(x, y) in &s.points {
            match (y < floor, start) {
                (true, None) => start = Some(x),
                (false, Some(a)) => {
                    below.push((a, last));
                    start = None;
                }
                _ => {}
            }
            last = x;
        }
        if let Some(a) = start {
            below.push((a, last));
        }
    }
    let pad = 5.0;
    mag.y = mag.y.clone().with_range(floor, top + pad);
    // A dot where each clipped stretch leaves the bottom edge; the first
    // says how deep the curve goes.
    for (i, (a, _)) in below.into_iter().enumerate() {
        let label = if i == 0 {
            format!("clipped below {floor} dB (down to {} dB)", sig4(deepest))
        } else {
            String::new()
        };
        mag.notes.push(Annotation::new(a, floor, label));
    }
}

/// CPU load against the rate with the budget line and the rate window.
fn cpu_budget(inp: &Inputs) -> Option<Figure> {
    let b = inp.case.budget.as_ref()?;
    let mut panel = Panel::new(Axis::linear("CPU load (%)"));
    // The load is drawn on its own dense grid, from the slowest swept rate
    // to past both the swept range and the budget's ceiling, so the whole
    // window is covered.
    let lo = inp.case.rates.min_hz;
    let ceiling = inp.pick.and_then(|p| p.cpu_ceiling_hz).unwrap_or(0.0);
    let hi = [ceiling * 1.3, inp.rec.map_or(0.0, |(r, _)| r.rate_hz * 1.3)]
        .into_iter()
        .filter(|v| v.is_finite())
        .fold(inp.case.rates.max_hz, f64::max);
    // A single rate (a controller given in z) with nothing above it.
    let hi = if hi > lo * 1.01 { hi } else { lo * 1.5 };
    let rates = log_spaced(lo, hi, 120);
    let structure = (inp.case.arithmetic.as_ref())
        .map_or(crate::spec::Structure::TransposedDirect, |a| a.structure);
    let integrators = crate::model::rounding::design_integrators(&inp.lp.controller);
    // Methods with the same load share one line and one legend entry.
    let mut loads: Vec<(Vec<String>, Points)> = Vec::new();
    for m in case_methods(inp.case) {
        let method = method_label(m).to_string();
        let pts: Points = (rates.iter())
            .map(|&f| {
                let c = inp.lp.controller_at(f, m).ok();
                let load = budget::cost_at(b, c.as_ref(), structure, integrators, f)
                    .map_or(f64::NAN, |c| c.load_pct);
                (f, load)
            })
            .collect();
        if !pts.iter().any(|p| p.1.is_finite()) {
            continue;
        }
        match loads.iter_mut().find(|(_, q)| *q == pts) {
            Some((names, _)) => names.push(method),
            None => loads.push((vec![method], pts)),
        }
    }
    for (k, (names, pts)) in loads.into_iter().enumerate() {
        let label = match names.len() {
            1 => names.join(""),
            _ => format!("{} (same load)", names.join(", ")),
        };
        panel.series.push(Series::line(label, pts, k));
    }
    let text = format!("max load {} %", sig4(b.max_load_pct));
    (panel.limits).push(Limit::new(b.max_load_pct, Side::Above, text));
    let window = inp.pick.and_then(|p| p.window.as_ref());
    let title = match (inp.pick, window) {
        (None, _) => "CPU load vs rate (sweep only: run pick for the rate window)".into(),
        (Some(_), Some(w)) if w.empty => format!(
            "CPU load vs rate: NO rate window - the spec needs at least {} but the budget allows at most {}",
            hz(w.low_hz),
            hz(w.high_hz)
        ),
        (Some(_), Some(w)) => format!(
            "CPU load vs rate: rate window {} to {} (shaded){}",
            hz(w.low_hz),
            hz(w.high_hz),
            match &w.high_bound {
                budget::WindowBound::LastRateChecked { .. } =>
                    ", cut at the last rate checked".to_string(),
                b => format!(", top set by the {b}"),
            }
        ),
        (Some(p), None) if p.recommended.is_some() => {
            "CPU load vs rate (the load of the chosen controller is unknown)".into()
        }
        (Some(p), None) if !p.design_failures.is_empty() || p.methods.is_empty() => {
            "CPU load vs rate: the continuous design already fails the spec, so there is no window"
                .into()
        }
        (Some(_), None) => {
            "CPU load vs rate: no method meets the spec, so there is no window".into()
        }
    };
    if let Some(w) = window.filter(|w| !w.empty) {
        (panel.bands).push(Band::new(w.low_hz, w.high_hz, "rate window"));
    }
    if let Some(p) = inp.pick {
        if let Some(r) = &p.recommended {
            panel.vmarks.push(recommended_mark(p, r.rate_hz));
        }
        if let Some(c) = p.cpu_ceiling_hz {
            let text = format!("budget ceiling {}", hz(c));
            panel.vmarks.push(VMark::new(c, text, MarkStyle::Dashed));
        }
    }
    if panel.series.is_empty() {
        let text = "no load known (cycles estimated from a controller that could not be built)";
        (panel.notes).push(Annotation::new(lo, b.max_load_pct, text));
    }
    Some(Figure::new(title, rate_axis()).with_panel(panel))
}

/// The solid mark at the recommended rate (or the rate the spec alone
/// needs), labelled.
fn recommended_mark(report: &PickReport, rate_hz: f64) -> VMark {
    let text = format!("{} {}", rate_word(report), hz(rate_hz));
    VMark::new(rate_hz, text, MarkStyle::Solid)
}

/// `n` rates from `lo` to `hi`, evenly spaced on a log axis.
pub(crate) fn log_spaced(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
        .collect()
}

/// What rounding the coefficients does against rate, per number format,
/// for the recommended method (the first with an answer otherwise) at the
/// design delay: the controller's pole error and DC gain error, with each
/// format's precision ceiling marked. Only with `[arithmetic]`.
fn precision_chart(inp: &Inputs) -> Option<Figure> {
    let pr = inp.pick.and_then(|p| p.precision.as_ref());
    if inp.formats.is_empty() {
        return None;
    }
    let series = design_series(inp);
    let (method, rows) = match inp.rec {
        Some((r, _)) => series.into_iter().find(|(m, _)| m == r.method.name())?,
        None => series.into_iter().next()?,
    };
    let structure =
        (inp.case.arithmetic.as_ref()).map_or("transposed-direct", |a| a.structure.name());
    let title = format!(
        "Coefficient rounding ({structure}) vs rate, {method}: errors and precision ceilings"
    );
    let mut fig = Figure::new(title, rate_axis());
    let mut empty = Vec::new();
    for (j, label) in ["controller pole error (%)", "DC gain error (%)"]
        .into_iter()
        .enumerate()
    {
        let mut panel = Panel::new(Axis::log(label));
        for (k, f) in inp.formats.iter().enumerate() {
            let Some(pts) = rows.precision.get(k).map(|p| p[j].clone()) else {
                continue;
            };
            if pts.iter().any(|p| p.1.is_finite()) {
                panel.series.push(Series::line(f.name(), pts, k));
            }
        }
        let ceilings = pr.iter().flat_map(|pr| &pr.ceilings);
        for c in ceilings.filter(|c| c.method.name() == method) {
            if let (Some(h), false) = (c.ceiling.rate_hz, c.ceiling.above_range) {
                let text = format!("{} ceiling {}", c.format, hz(h));
                panel.vmarks.push(VMark::new(h, text, MarkStyle::Dashed));
            }
        }
        if let (Some((r, _)), Some(p)) = (inp.rec, inp.pick) {
            panel.vmarks.push(recommended_mark(p, r.rate_hz));
        }
        if panel.series.is_empty() {
            // Nothing to draw on a log axis: the figure is exact.
            empty.push(label);
            continue;
        }
        fig = fig.with_panel(panel);
    }
    match empty[..] {
        [_, _] => return None,
        [label] => fig.title = format!("{}; {label}: zero at every rate", fig.title),
        _ => {}
    }
    Some(fig)
}

/// Phase margin and overshoot of the exact sampled loop beside each hold
/// approximation and the continuous design, over the case's rates.
fn hold_approximation(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let report = inp.pick?;
    let design = report.design.as_ref()?;
    let (lo, hi) = (inp.case.rates.min_hz, inp.case.rates.max_hz);
    let rates = log_spaced(lo, hi, HOLD_CHART_RATES);
    // Per rate: the exact loop, then each approximation.
    let evals: Vec<Vec<Evaluation>> = rates
        .par_iter()
        .map(|&f| {
            let p = point_at(inp, method, f);
            let approx = HoldApprox::ALL.iter().map(|&k| inp.lp.hold_approx(&p, k));
            std::iter::once(inp.lp.sampled(&p)).chain(approx).collect()
        })
        .collect();
    let title = format!(
        "Hold approximations vs the exact sampled loop ({}, {} hold, computation delay {})",
        rec.method,
        rec.hold,
        periods(inp.design_delay)
    );
    let mut fig = Figure::new(title, rate_axis().with_range(lo, hi));
    let names = std::iter::once("exact sampled loop".to_string()).chain(
        HoldApprox::ALL
            .iter()
            .map(|k| format!("{} approximation", k.name())),
    );
    let names: Vec<String> = names.collect();
    for (i, def) in [LoopFigure::PhaseMargin, LoopFigure::Overshoot]
        .into_iter()
        .enumerate()
    {
        let named = |s: &str| if i == 0 { s.to_string() } else { String::new() };
        let mut panel = Panel::new(Axis::linear(def.axis_title()));
        for (k, name) in names.iter().enumerate() {
            let pts = (rates.iter().zip(&evals)).map(|(&f, e)| (f, figure_of(&e[k], def)));
            // Markers as well as dashes: the approximations lie close
            // together and must stay apart in greyscale. Styles 0 (the
            // exact loop), 1, 2, 3, then 5: 4 is the continuous design's.
            let style = if k >= STYLE_CONTINUOUS { k + 1 } else { k };
            let series = Series::line(named(name), pts.collect(), style);
            panel.series.push(series.drawn(Draw::LineAndMarkers));
        }
        // A curve stops where its loop has no such figure (unstable, or
        // no crossing): say so, as the rate chart does.
        let gaps = (evals.iter())
            .filter(|e| e.iter().any(|x| figure_of(x, def).is_nan()))
            .count();
        if gaps > 0 {
            let (short, n) = (def.short_label(), evals.len());
            panel.caption = format!(
                "gaps: no {short} at {gaps} of {n} rates (loop unstable or no such figure)"
            );
        }
        if let Some(v) = def.limited_value(design) {
            let line = hline(&named("continuous design"), v, lo, hi, STYLE_CONTINUOUS);
            panel.series.push(line);
        }
        panel.limits.extend(limit_of(def, &inp.case.spec));
        let mut mark = recommended_mark(report, rec.rate_hz);
        if i > 0 {
            mark.label.clear();
        }
        panel.vmarks.push(mark);
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_short_response_is_labelled_in_milliseconds_or_microseconds() {
        // The data stay in seconds; only the labels change unit.
        let ms = time_axis(0.012);
        assert_eq!((ms.label.as_str(), ms.label_scale), ("time (ms)", 1e3));
        assert_eq!(ms.range, Some((0.0, 0.012)));
        let us = time_axis(5e-5);
        assert_eq!((us.label.as_str(), us.label_scale), ("time (µs)", 1e6));
        let s = time_axis(0.35);
        assert_eq!((s.label.as_str(), s.label_scale), ("time (s)", 1.0));
    }
}
