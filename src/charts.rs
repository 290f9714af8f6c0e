//! The review charts of a `pick` run, drawn from the real results with the
//! crate's own renderer ([`crate::plot`]).
//!
//! Each chart is built as plain [`Figure`] data from the sweep, the pick
//! report and, where a chart needs more than the sweep holds (traces, the
//! loop gain, hold approximations), fresh evaluations of the same
//! [`PreparedLoop`]. The charts are independent, so they are built and
//! drawn in parallel. A chart that needs a recommendation is skipped when
//! there is none; a chart that needs a budget is skipped without one.

use std::path::{Path, PathBuf};

use rayon::prelude::*;

use crate::budget;
use crate::case::Case;
use crate::continuous::HoldApprox;
use crate::discretize::Method;
use crate::error::Error;
use crate::evaluate::{Evaluation, Figures, Point, PreparedLoop};
use crate::feasibility::assess;
use crate::frequency::{loop_grid, unwrapped_phase};
use crate::hold::HoldKind;
use crate::pick::{PickReport, Recommended, case_methods};
use crate::plot::{
    Annotation, Axis, Draw, Figure, Limit, MarkStyle, Panel, Series, Side, VMark, XBand, YBand,
    render_png_bytes,
};
use crate::poly::C64;
use crate::search::method_label;
use crate::summary::fmt_num;
use crate::sweep::SweepRow;
use crate::time_response::TracePoint;
use crate::transfer::Controller;

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

// Palette entries, fixed per role so a reader can follow a role from
// chart to chart.
const STYLE_RECOMMENDED: usize = 0;
const STYLE_STAR: usize = 1;
const STYLE_FAILING: usize = 3;
const STYLE_CONTINUOUS: usize = 4;
const STYLE_REFERENCE: usize = 4;

/// Everything a chart builder reads.
struct Inputs<'a> {
    case: &'a Case,
    lp: &'a PreparedLoop,
    rows: &'a [SweepRow],
    report: &'a PickReport,
    /// The recommendation and its method, when there is one.
    rec: Option<(&'a Recommended, Option<Method>)>,
}

type Builder = fn(&Inputs) -> Option<Figure>;
/// Reads one figure (None where it does not exist).
type Get = fn(&Figures) -> Option<f64>;
/// A limit: value, infeasible side, label.
type LimitSpec = Option<(f64, Side, String)>;
/// A panel of a figures-against-rate chart: y label, figure, limit.
type PanelSpec = (&'static str, Get, LimitSpec);
type Points = Vec<(f64, f64)>;

/// A chart as drawn: where it was written and its PNG bytes (which the
/// HTML report embeds, so it never reads a file back that another run
/// could have replaced).
#[derive(Debug, Clone)]
pub struct Chart {
    pub path: PathBuf,
    pub png: Vec<u8>,
}

/// Draw every chart that applies to this run into `out_dir` (created if
/// missing) and return the charts written, in a fixed order.
///
/// Charts that need a recommendation (step, loop, hold approximation,
/// disturbance) are skipped when the report has none; `cpu-budget.png`
/// is skipped when the case has no budget.
pub fn write_charts(
    out_dir: &Path,
    case: &Case,
    lp: &PreparedLoop,
    rows: &[SweepRow],
    report: &PickReport,
) -> Result<Vec<Chart>, Error> {
    std::fs::create_dir_all(out_dir).map_err(|e| Error::Output {
        path: out_dir.display().to_string(),
        message: e.to_string(),
    })?;
    let rec = report.recommended.as_ref().and_then(|r| {
        case_methods(case)
            .into_iter()
            .find(|m| method_label(*m) == r.method)
            .map(|m| (r, m))
    });
    let inputs = Inputs {
        case,
        lp,
        rows,
        report,
        rec,
    };
    let note = format!(
        "{} | looprate {} | model-based: confirm on the hardware",
        case.title,
        env!("CARGO_PKG_VERSION")
    );
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
    let written: Vec<Result<Option<Chart>, Error>> = jobs
        .par_iter()
        .map(|(name, build)| {
            let Some(fig) = build(&inputs) else {
                return Ok(None);
            };
            let path = out_dir.join(name);
            let png = render_png_bytes(&fig.with_note(note.clone()), &path)?;
            crate::outputs::write_atomic(&path, &png)?;
            Ok(Some(Chart { path, png }))
        })
        .collect();
    written.into_iter().filter_map(Result::transpose).collect()
}

// ------------------------------------------------------------- helpers

fn rate_axis() -> Axis {
    Axis::log("loop rate (Hz)")
}

fn hz(v: f64) -> String {
    crate::engineering::hz(v)
}

/// The methods of the sweep at the design delay, in case order.
fn design_series<'a>(inp: &Inputs<'a>) -> Vec<(String, Vec<&'a SweepRow>)> {
    let mut out: Vec<(String, Vec<&SweepRow>)> = Vec::new();
    for m in case_methods(inp.case) {
        let mut rows: Vec<&SweepRow> = inp
            .rows
            .iter()
            .filter(|r| {
                r.point.method == m
                    && r.point.hold == design_hold(inp)
                    && r.point.delay == inp.report.design_delay
            })
            .collect();
        if rows.is_empty() {
            continue;
        }
        rows.sort_by(|a, b| a.point.rate_hz.total_cmp(&b.point.rate_hz));
        out.push((method_label(m), rows));
    }
    out
}

/// The rows of a controller given in z, one series per computation delay
/// (each a single rate), labelled by the delay.
fn delay_series<'a>(inp: &Inputs<'a>) -> Vec<(String, Vec<&'a SweepRow>)> {
    let mut out: Vec<(String, Vec<&SweepRow>)> = Vec::new();
    for &d in &inp.case.compute_delays {
        let rows: Vec<&SweepRow> = inp.rows.iter().filter(|r| r.point.delay == d).collect();
        if !rows.is_empty() {
            out.push((format!("computation delay {} T", fmt_num(d)), rows));
        }
    }
    out
}

/// The nominal `f_star` of a method at the design delay.
fn f_star(report: &PickReport, method: &str) -> Option<f64> {
    report
        .methods
        .iter()
        .find(|m| {
            m.method == method
                && Some(m.hold) == report.recommended.as_ref().map(|r| r.hold)
                && m.compute_delay == report.design_delay
        })
        .and_then(|m| m.slowest_rate_hz)
}

/// The hold kind the charts of methods show: the recommended one, else
/// the first the case lists.
fn design_hold(inp: &Inputs) -> HoldKind {
    inp.rec
        .map(|(r, _)| r.hold)
        .unwrap_or_else(|| inp.case.holds.first().copied().unwrap_or_default())
}

/// The robust `f_star` of a method at the design delay (plant variants).
fn robust_f_star(report: &PickReport, method: &str) -> Option<f64> {
    report.robust.as_ref().and_then(|rb| {
        rb.methods
            .iter()
            .find(|m| m.rate.method == method && m.rate.compute_delay == report.design_delay)
            .and_then(|m| m.rate.slowest_rate_hz)
    })
}

/// Vertical marks of one kind of `f_star` (one per method). When the
/// methods' values lie within 10 % of each other their labels would
/// collide: one label then names the span and the count, and the other
/// lines go unlabelled (the report's tables give each value).
fn star_marks(
    series: &[(String, Vec<&SweepRow>)],
    kind: &str,
    style: MarkStyle,
    get: impl Fn(&str) -> Option<f64>,
) -> Vec<(f64, String, MarkStyle)> {
    let found: Vec<(&str, f64)> = series
        .iter()
        .filter_map(|(m, _)| get(m).map(|f| (m.as_str(), f)))
        .collect();
    let lo = found.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
    let hi = found.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
    if found.len() > 1 && hi <= 1.1 * lo {
        return found
            .iter()
            .enumerate()
            .map(|(i, &(_, f))| {
                let text = if i == 0 {
                    format!("{kind} {} to {} ({} methods)", hz(lo), hz(hi), found.len())
                } else {
                    String::new()
                };
                (f, text, style)
            })
            .collect();
    }
    found
        .into_iter()
        .map(|(m, f)| (f, format!("{kind} {m} {}", hz(f)), style))
        .collect()
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

/// The figures of a chart row; NaN (a break in the line) where the loop
/// is unstable or the figure does not exist.
fn figure_of(e: &Evaluation, get: fn(&Figures) -> Option<f64>) -> f64 {
    e.figures.as_ref().and_then(get).unwrap_or(f64::NAN)
}

fn overshoot(f: &Figures) -> Option<f64> {
    f.overshoot_pct
}
fn settling(f: &Figures) -> Option<f64> {
    f.settling_time_s
}
fn phase_margin(f: &Figures) -> Option<f64> {
    f.phase_margin_deg
}
/// The size of the gain margin: what `min_gain_margin_db` bounds.
fn gain_margin(f: &Figures) -> Option<f64> {
    f.gain_margin_db.map(f64::abs)
}
fn sensitivity(f: &Figures) -> Option<f64> {
    Some(f.sensitivity_peak)
}

/// A point of the recommended method at the design delay.
fn point_at(inp: &Inputs, method: Option<Method>, rate_hz: f64) -> Point {
    Point {
        rate_hz,
        method,
        delay: inp.report.design_delay,
        hold: design_hold(inp),
    }
}

/// The failing rate shown beside f_star: the fastest infeasible grid rate
/// below it, or f_star / 1.5 when the grid has none.
fn failing_rate(inp: &Inputs, rec: &Recommended, method: Option<Method>) -> f64 {
    inp.rows
        .iter()
        .filter(|r| {
            r.point.method == method
                && r.point.hold == rec.hold
                && r.point.delay == inp.report.design_delay
        })
        .filter(|r| r.point.rate_hz < rec.slowest_rate_hz && !r.assessment.feasible)
        .map(|r| r.point.rate_hz)
        .fold(None, |a: Option<f64>, f| Some(a.map_or(f, |a| a.max(f))))
        .unwrap_or(rec.slowest_rate_hz / 1.5)
}

/// A sampled trace as a line through every point up to `t_end`, plus its
/// sampling instants as markers (thinned to [`MAX_SAMPLE_MARKERS`]).
fn trace_series(trace: &[TracePoint], t_end: f64, label: &str, style: usize) -> [Series; 2] {
    let line: Vec<(f64, f64)> = trace
        .iter()
        .filter(|p| p.t <= t_end * (1.0 + 1e-12))
        .map(|p| (p.t, p.y))
        .collect();
    let samples: Vec<(f64, f64)> = trace
        .iter()
        .filter(|p| p.sample && p.t <= t_end * (1.0 + 1e-12))
        .map(|p| (p.t, p.y))
        .collect();
    let stride = samples.len().div_ceil(MAX_SAMPLE_MARKERS).max(1);
    let marks: Vec<(f64, f64)> = samples.iter().copied().step_by(stride).collect();
    let mark_label = if stride > 1 {
        format!("samples (1 in {stride} shown)")
    } else {
        "samples".to_string()
    };
    [
        Series::line(label, line, style),
        Series::line(mark_label, marks, style).drawn(Draw::Markers),
    ]
}

/// Visible y range of a set of series, padded; non-finite points ignored.
fn padded_range(series: &[&Series], pad: f64) -> Option<(f64, f64)> {
    let (lo, hi) = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    if !(lo.is_finite() && hi.is_finite()) {
        return None;
    }
    let span = (hi - lo).max(1e-9 * hi.abs().max(1.0));
    Some((lo - pad * span, hi + pad * span))
}

/// A horizontal line across `[x0, x1]`.
fn hline(label: &str, y: f64, x0: f64, x1: f64, style: usize) -> Series {
    Series::line(label, vec![(x0, y), (x1, y)], style)
}

// --------------------------------------------------------------- charts

/// Overshoot, settling time, phase margin, gain margin and sensitivity
/// peak against the rate, one series per method at the design delay.
fn figures_vs_rate(inp: &Inputs) -> Option<Figure> {
    let spec = &inp.case.spec;
    // A controller given in z runs at one rate: one point per computation
    // delay, on an axis around that rate (not the range of a sweep).
    let single = match &inp.lp.controller {
        crate::transfer::Controller::Discrete(d) => Some(1.0 / d.period_s),
        crate::transfer::Controller::Continuous(_) => None,
    };
    let series = match single {
        Some(_) => delay_series(inp),
        None => design_series(inp),
    };
    if series.is_empty() {
        return None;
    }
    // Short axis labels keep the text full size on five stacked panels;
    // the title spells the abbreviations out.
    let panels: [PanelSpec; 5] = [
        (
            "overshoot (%)",
            overshoot,
            spec.max_overshoot_pct
                .map(|l| (l, Side::Above, format!("max {} %", fmt_num(l)))),
        ),
        (
            "settling time (s)",
            settling,
            spec.max_settling_s
                .map(|l| (l, Side::Above, format!("max {} s", fmt_num(l)))),
        ),
        (
            "PM (deg)",
            phase_margin,
            spec.min_phase_margin_deg
                .map(|l| (l, Side::Below, format!("min {} deg", fmt_num(l)))),
        ),
        (
            "|GM| (dB)",
            gain_margin,
            spec.min_gain_margin_db
                .map(|l| (l, Side::Below, format!("min {} dB", fmt_num(l)))),
        ),
        (
            "Ms (ratio)",
            sensitivity,
            spec.max_sensitivity_peak
                .map(|l| (l, Side::Above, format!("max {}", fmt_num(l)))),
        ),
    ];
    // Vertical marks, each labelled on one panel only (spread over the
    // panels so the labels do not collide); the lines run through all.
    // With plant variants both answers are marked, each by its name: the
    // nominal f* (dotted, where these nominal curves cross the limits) and
    // the robust f* (dashed, what the answer rests on).
    let robust = inp.report.robust.is_some();
    let mut marks: Vec<(f64, String, MarkStyle)> = Vec::new();
    if robust {
        marks.extend(star_marks(&series, "robust f*", MarkStyle::Dashed, |m| {
            robust_f_star(inp.report, m)
        }));
        marks.extend(star_marks(&series, "nominal f*", MarkStyle::Dotted, |m| {
            f_star(inp.report, m)
        }));
    } else {
        marks.extend(star_marks(&series, "f*", MarkStyle::Dashed, |m| {
            f_star(inp.report, m)
        }));
    }
    // Only labelled marks take a panel for their label.
    let mut labelled = 0;
    let marks: Vec<(f64, String, MarkStyle, usize)> = marks
        .into_iter()
        .map(|(x, t, st)| {
            let slot = labelled;
            if !t.is_empty() {
                labelled += 1;
            }
            (x, t, st, slot + 1)
        })
        .collect();
    let mut marks = marks;
    if let Some(r) = &inp.report.recommended {
        marks.insert(
            0,
            (
                r.rate_hz,
                format!("{} {}", rate_word(inp.report), hz(r.rate_hz)),
                MarkStyle::Solid,
                0,
            ),
        );
    }
    let (lo, hi) = match single {
        Some(f) => (f / 1.5, f * 1.5),
        None => (inp.case.rates.min_hz, inp.case.rates.max_hz),
    };
    // A method with no stable point draws nothing: its legend says why.
    let never_stable: Vec<bool> = series
        .iter()
        .map(|(_, rows)| rows.iter().all(|r| r.eval.figures.is_none()))
        .collect();
    let mut title = format!(
        "Loop figures vs rate, computation delay {} T (PM phase margin, GM gain margin, Ms sensitivity peak; hatched side of a limit fails; gaps: unstable)",
        fmt_num(inp.report.design_delay)
    );
    if let Some(f) = single {
        title = format!(
            "Loop figures of the controller given in z at its one rate {} (one point per computation delay; PM phase margin, GM gain margin, Ms sensitivity peak; hatched side of a limit fails)",
            hz(f)
        );
    } else if never_stable.iter().all(|&b| b) {
        title = format!(
            "No swept rate gives a stable loop ({} to {}, computation delay {} T)",
            hz(lo),
            hz(hi),
            fmt_num(inp.report.design_delay)
        );
    }
    let mut fig = Figure::new(title, rate_axis().with_range(lo, hi));
    for (i, (label, get, limit)) in panels.into_iter().enumerate() {
        let mut panel = Panel::new(Axis::linear(label));
        for (k, (method, rows)) in series.iter().enumerate() {
            let pts = rows
                .iter()
                .map(|r| (r.point.rate_hz, figure_of(&r.eval, get)))
                .collect();
            // The legend is given once, on the top panel; styles repeat
            // below, so every panel reads the same way.
            let name = match (i, never_stable[k]) {
                (0, false) => method.clone(),
                (0, true) => format!("{method} (unstable at every rate)"),
                _ => String::new(),
            };
            panel
                .series
                .push(Series::line(name, pts, k).drawn(Draw::LineAndMarkers));
        }
        for (x, text, style, slot) in &marks {
            let text = if slot % 5 == i {
                text.clone()
            } else {
                String::new()
            };
            panel.vmarks.push(VMark::new(*x, text, *style));
        }
        if let Some((v, side, text)) = limit {
            // Near the stability edge an upper-limited figure runs off to
            // huge values; keep the view on the region around the limit
            // (the line leaves the top edge where it goes beyond).
            if side == Side::Above {
                let top = panel
                    .series
                    .iter()
                    .flat_map(|s| s.points.iter().map(|p| p.1))
                    .filter(|v| v.is_finite())
                    .fold(f64::NEG_INFINITY, f64::max);
                if top > 3.0 * v {
                    panel.y = panel.y.clone().with_range(0.0, 3.0 * v);
                }
            }
            panel.limits.push(Limit::new(v, side, text));
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
    let mut series: Vec<(HoldKind, Vec<&SweepRow>)> = Vec::new();
    for &h in &inp.case.holds {
        let mut rows: Vec<&SweepRow> = inp
            .rows
            .iter()
            .filter(|r| {
                r.point.method == method
                    && r.point.hold == h
                    && r.point.delay == inp.report.design_delay
            })
            .collect();
        if rows.is_empty() {
            continue;
        }
        rows.sort_by(|a, b| a.point.rate_hz.total_cmp(&b.point.rate_hz));
        series.push((h, rows));
    }
    if series.is_empty() {
        return None;
    }
    let spec = &inp.case.spec;
    let (lo, hi) = (inp.case.rates.min_hz, inp.case.rates.max_hz);
    let mut fig = Figure::new(
        format!(
            "Hold kinds: {} at computation delay {} T (hatched side of a limit fails; gaps: unstable)",
            rec.method,
            fmt_num(inp.report.design_delay)
        ),
        rate_axis().with_range(lo, hi),
    );
    let f_star_of = |h: HoldKind| {
        inp.report
            .answers()
            .into_iter()
            .find(|a| {
                a.method == rec.method && a.hold == h && a.compute_delay == inp.report.design_delay
            })
            .and_then(|a| a.slowest_rate_hz)
    };
    let panels: [PanelSpec; 2] = [
        (
            "PM (deg)",
            phase_margin,
            spec.min_phase_margin_deg
                .map(|l| (l, Side::Below, format!("min {} deg", fmt_num(l)))),
        ),
        (
            "overshoot (%)",
            overshoot,
            spec.max_overshoot_pct
                .map(|l| (l, Side::Above, format!("max {} %", fmt_num(l)))),
        ),
    ];
    for (i, (label, get, limit)) in panels.into_iter().enumerate() {
        let mut panel = Panel::new(Axis::linear(label));
        for (k, (h, rows)) in series.iter().enumerate() {
            let pts = rows
                .iter()
                .map(|r| (r.point.rate_hz, figure_of(&r.eval, get)))
                .collect();
            let name = if i == 0 {
                match f_star_of(*h) {
                    Some(f) => format!("{h} (f* {})", hz(f)),
                    None => format!("{h} (no f*)"),
                }
            } else {
                String::new()
            };
            panel
                .series
                .push(Series::line(name, pts, k).drawn(Draw::LineAndMarkers));
            if let Some(f) = f_star_of(*h) {
                let text = if i == 0 {
                    format!("f* {h}")
                } else {
                    String::new()
                };
                panel.vmarks.push(VMark::new(f, text, MarkStyle::Dashed));
            }
        }
        if let Some((v, side, text)) = limit {
            if side == Side::Above {
                let top = panel
                    .series
                    .iter()
                    .flat_map(|s| s.points.iter().map(|p| p.1))
                    .filter(|v| v.is_finite())
                    .fold(f64::NEG_INFINITY, f64::max);
                if top > 3.0 * v {
                    panel.y = panel.y.clone().with_range(0.0, 3.0 * v);
                }
            }
            panel.limits.push(Limit::new(v, side, text));
        }
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

/// Step response: the continuous design, the sampled loop at the
/// recommended rate, at f_star and at a failing slower rate.
fn step_response(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let figs = rec.figures.as_ref()?;
    let spec = &inp.case.spec;
    let star = point_at(inp, method, rec.slowest_rate_hz);
    let fail_rate = failing_rate(inp, rec, method);
    let fail = point_at(inp, method, fail_rate);
    let star_eval = inp.lp.sampled(&star);
    let fail_assessment = assess(&inp.lp.sampled(&fail), spec);

    // Long enough to show settling of every passing response and the
    // settling-time limit.
    let settle = [
        inp.report.design.as_ref().and_then(|f| f.settling_time_s),
        figs.settling_time_s,
        star_eval.figures.as_ref().and_then(|f| f.settling_time_s),
        spec.max_settling_s,
    ];
    let longest = settle.iter().flatten().copied().fold(0.0, f64::max);
    let t_end = if longest > 0.0 {
        1.4 * longest
    } else {
        figs.horizon_s
    };

    let mut panel = Panel::new(Axis::linear("plant output y (output units, unit step)"));
    let mut notes = Vec::new();
    if inp.lp.design.is_some() {
        match inp.lp.continuous_traces(t_end, CONTINUOUS_TRACE_STEPS) {
            Ok((step, _)) => panel.series.push(
                Series::line(
                    "continuous design",
                    step.iter().map(|p| (p.t, p.y)).collect(),
                    STYLE_CONTINUOUS,
                )
                .drawn(Draw::Line),
            ),
            Err(e) => notes.push(format!("continuous design not simulated: {e}")),
        }
    }
    let runs = [
        (
            rec.rate_hz,
            format!("{} {}", hz(rec.rate_hz), rate_word(inp.report)),
            STYLE_RECOMMENDED,
        ),
        (
            rec.slowest_rate_hz,
            format!("{} {}", hz(rec.slowest_rate_hz), star_word(inp.report)),
            STYLE_STAR,
        ),
        (
            fail_rate,
            format!(
                "{} fails ({})",
                hz(fail_rate),
                fail_assessment.limiting.unwrap_or("-")
            ),
            STYLE_FAILING,
        ),
    ];
    let mut good: Vec<Series> = Vec::new();
    for (k, (rate, label, style)) in runs.iter().enumerate() {
        let p = point_at(inp, method, *rate);
        let periods = (t_end * rate).ceil() as usize + 1;
        match inp.lp.sampled_traces(&p, Some(periods)) {
            Ok((step, _)) => {
                let [line, marks] = trace_series(&step, t_end, label, *style);
                if k < 2 {
                    good.push(line.clone());
                }
                panel.series.push(line);
                panel.series.push(marks);
            }
            Err(e) => notes.push(format!("{label}: not simulated: {e}")),
        }
    }
    // A failing run may diverge: fit the view to the design and the
    // passing runs so they stay readable; the failing one is clipped.
    let mut fitted: Vec<&Series> = good.iter().collect();
    fitted.extend(
        panel
            .series
            .iter()
            .filter(|s| s.label == "continuous design"),
    );
    if let Some((lo, hi)) = padded_range(&fitted, 0.12) {
        panel.y = panel.y.clone().with_range(lo.min(0.0), hi);
    }
    let band = spec.settling_band_pct / 100.0 * figs.y_final.abs();
    panel.hbands.push(YBand::new(
        figs.y_final - band,
        figs.y_final + band,
        format!("settling band +/-{} %", fmt_num(spec.settling_band_pct)),
    ));
    if let Some(l) = spec.max_settling_s {
        panel.vmarks.push(VMark::new(
            l,
            format!("settling limit {} s", fmt_num(l)),
            MarkStyle::Dotted,
        ));
    }
    let mut title = format!(
        "Step response, {} at computation delay {} T (line: output between samples)",
        rec.method,
        fmt_num(inp.report.design_delay)
    );
    if !notes.is_empty() {
        title = format!("{title}; {}", notes.join("; "));
    }
    Some(Figure::new(title, Axis::linear("time (s)").with_range(0.0, t_end)).with_panel(panel))
}

/// Magnitude and phase of the loop gain at the recommended rate.
fn loop_response(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let p = point_at(inp, method, rec.rate_hz);
    let l = inp.lp.sampled_loop_gain(&p).ok()?;
    let detail = inp.lp.sampled(&p).loop_detail?;
    let range = inp.lp.sampled_range(rec.rate_hz);
    let grid = loop_grid(&l, &range);
    let phase = unwrapped_phase(&grid);
    let two_pi = 2.0 * std::f64::consts::PI;
    let nyquist_hz = rec.rate_hz / 2.0;
    // Three decades below Nyquist, or lower when a crossing sits there.
    let lowest_mark = [detail.crossover_hz, detail.gain_margin_hz]
        .into_iter()
        .flatten()
        .fold(nyquist_hz, f64::min);
    let f_lo = (range.w_lo / two_pi).max((nyquist_hz * 1e-3).min(lowest_mark / 10.0));
    let keep = |w: f64| w / two_pi >= f_lo;

    let mut mag = Panel::new(Axis::linear("magnitude |L| (dB)"));
    let mut ph = Panel::new(Axis::linear("phase of L (deg)"));
    let label = format!("sampled loop, {} {}", rec.method, hz(rec.rate_hz));
    mag.series.push(Series::line(
        label.clone(),
        grid.iter()
            .filter(|g| keep(g.0))
            .map(|&(w, v)| (w / two_pi, 20.0 * v.norm().log10()))
            .collect(),
        STYLE_RECOMMENDED,
    ));
    ph.series.push(Series::line(
        label,
        grid.iter()
            .zip(&phase)
            .filter(|(g, _)| keep(g.0))
            .map(|(&(w, _), &phi)| (w / two_pi, phi))
            .collect(),
        STYLE_RECOMMENDED,
    ));
    // The continuous design on the same grid, for comparison.
    if let Controller::Continuous(c) = &inp.lp.controller {
        let cont: Vec<(f64, C64)> = grid
            .iter()
            .map(|&(w, _)| {
                let s = C64::new(0.0, w);
                (w, inp.lp.plant.eval(s) * inp.lp.sensor.eval(s) * c.eval(s))
            })
            .collect();
        let cph = unwrapped_phase(&cont);
        mag.series.push(Series::line(
            "continuous design",
            cont.iter()
                .filter(|g| keep(g.0))
                .map(|&(w, v)| (w / two_pi, 20.0 * v.norm().log10()))
                .collect(),
            STYLE_CONTINUOUS,
        ));
        ph.series.push(Series::line(
            "continuous design",
            cont.iter()
                .zip(&cph)
                .filter(|(g, _)| keep(g.0))
                .map(|(&(w, _), &phi)| (w / two_pi, phi))
                .collect(),
            STYLE_CONTINUOUS,
        ));
    }
    let f_hi = nyquist_hz;
    clip_magnitude(&mut mag, detail.gain_margin_db);
    mag.series
        .push(hline("0 dB", 0.0, f_lo, f_hi, STYLE_REFERENCE + 2));
    // Unwrapped phase at a frequency, exactly: the nearest grid point's
    // unwrapped value plus the angle from it.
    let phase_at = |f: f64| -> f64 {
        let w = f * two_pi;
        let i = grid
            .iter()
            .enumerate()
            .min_by(|a, b| {
                (a.1.0.ln() - w.ln())
                    .abs()
                    .total_cmp(&(b.1.0.ln() - w.ln()).abs())
            })
            .map_or(0, |(i, _)| i);
        phase[i] + (l(w) / grid[i].1).arg().to_degrees()
    };
    // The -180 deg lines (mod 360) inside the phase panel's span.
    let (plo, phi) = phase
        .iter()
        .zip(&grid)
        .filter(|(_, g)| keep(g.0))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), (v, _)| {
            (a.min(*v), b.max(*v))
        });
    if plo.is_finite() {
        let mut k = ((plo + 180.0) / 360.0).floor();
        let mut first = true;
        while -180.0 + 360.0 * k <= phi + 20.0 {
            let level = -180.0 + 360.0 * k;
            if level >= plo - 20.0 {
                let text = if first { "-180 deg (mod 360)" } else { "" };
                ph.series
                    .push(hline(text, level, f_lo, f_hi, STYLE_REFERENCE + 2));
                first = false;
            }
            k += 1.0;
        }
    }
    for panel in [&mut mag, &mut ph] {
        panel.vmarks.push(VMark::new(
            nyquist_hz,
            format!("Nyquist {}", hz(nyquist_hz)),
            MarkStyle::Dotted,
        ));
    }
    if let (Some(fc), Some(pm)) = (detail.crossover_hz, detail.phase_margin_deg) {
        mag.vmarks.push(VMark::new(
            fc,
            format!("crossover {}", hz(fc)),
            MarkStyle::Dashed,
        ));
        ph.vmarks.push(VMark::new(fc, "", MarkStyle::Dashed));
        ph.notes.push(Annotation::new(
            fc,
            phase_at(fc),
            format!("phase margin {} deg", fmt_num(pm)),
        ));
    }
    if let (Some(fg), Some(gm)) = (detail.gain_margin_hz, detail.gain_margin_db) {
        let w = fg * two_pi;
        mag.notes.push(Annotation::new(
            fg,
            20.0 * l(w).norm().log10(),
            format!("gain margin {} dB at {}", fmt_num(gm), hz(fg)),
        ));
        ph.notes.push(Annotation::new(fg, phase_at(fg), ""));
    }
    // The title names what is drawn; the marks carry the margins' values.
    let mut missing = Vec::new();
    if detail.gain_margin_db.is_none() {
        missing.push("no -180 deg crossing, so no gain margin mark");
    }
    if detail.phase_margin_deg.is_none() {
        missing.push("no gain crossover, so no phase margin mark");
    }
    let at = if rate_word(inp.report) == "recommended" {
        "the recommended rate"
    } else {
        "the rate the spec alone needs"
    };
    let title = if missing.is_empty() {
        format!("Loop gain L(e^jwT) at {at}")
    } else {
        format!("Loop gain L(e^jwT) at {at} ({})", missing.join("; "))
    };
    Some(
        Figure::new(title, Axis::log("frequency (Hz)").with_range(f_lo, f_hi))
            .with_panel(mag)
            .with_panel(ph),
    )
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
            format!("clipped below {floor} dB (down to {} dB)", fmt_num(deepest))
        } else {
            String::new()
        };
        mag.notes.push(Annotation::new(a, floor, label));
    }
}

/// CPU load against the rate with the budget line and the rate window.
fn cpu_budget(inp: &Inputs) -> Option<Figure> {
    let b = inp.case.budget.as_ref()?;
    let report = inp.report;
    let mut panel = Panel::new(Axis::linear("CPU load (%)"));
    // The load is drawn on its own dense grid, from the slowest swept rate
    // to past both the swept range and the budget's ceiling, so the whole
    // window is covered.
    let lo = inp.case.rates.min_hz;
    let hi = [
        inp.case.rates.max_hz,
        report.cpu_ceiling_hz.unwrap_or(0.0) * 1.3,
        report.recommended.as_ref().map_or(0.0, |r| r.rate_hz * 1.3),
    ]
    .into_iter()
    .filter(|v| v.is_finite())
    .fold(inp.case.rates.max_hz, f64::max);
    // A single rate (a controller given in z) with nothing above it.
    let hi = if hi > lo * 1.01 { hi } else { lo * 1.5 };
    let n = 120;
    let rates: Vec<f64> = (0..n)
        .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
        .collect();
    let structure = inp
        .case
        .arithmetic
        .as_ref()
        .map_or(crate::precision::Structure::TransposedDirect, |a| {
            a.structure
        });
    let integrators = crate::precision::design_integrators(&inp.lp.controller);
    // Methods with the same load share one line and one legend entry.
    let mut loads: Vec<(Vec<String>, Points)> = Vec::new();
    for (method, rows) in design_series(inp) {
        let m = rows[0].point.method;
        let pts: Vec<(f64, f64)> = rates
            .iter()
            .map(|&f| {
                let c = inp.lp.controller_at(f, m).ok();
                let load = budget::cycles_per_update(b, c.as_ref(), structure, integrators)
                    .map_or(f64::NAN, |cy| budget::load_pct(b, cy, f));
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
        panel.series.push(Series::line(names.join(" = "), pts, k));
    }
    panel.limits.push(Limit::new(
        b.max_load_pct,
        Side::Above,
        format!("max load {} %", fmt_num(b.max_load_pct)),
    ));
    let title = match (&report.window, &report.recommended) {
        (Some(w), _) if w.empty => format!(
            "CPU load vs rate: NO rate window - the spec needs at least {} but the budget allows at most {}",
            hz(w.low_hz),
            hz(w.high_hz)
        ),
        (Some(w), _) => format!(
            "CPU load vs rate: rate window {} to {} (shaded){}",
            hz(w.low_hz),
            hz(w.high_hz),
            match &w.high_bound {
                crate::budget::WindowBound::LastRateChecked { .. } =>
                    ", cut at the last rate checked".to_string(),
                b => format!(", top set by the {b}"),
            }
        ),
        (None, Some(_)) => {
            "CPU load vs rate (the load of the chosen controller is unknown)".to_string()
        }
        (None, None) if report.methods.is_empty() => {
            "CPU load vs rate (sweep only: run pick for the rate window)".into()
        }
        (None, None) => "CPU load vs rate: no method meets the spec, so there is no window".into(),
    };
    if let Some(w) = &report.window
        && !w.empty
    {
        panel
            .bands
            .push(XBand::new(w.low_hz, w.high_hz, "rate window"));
    }
    if let Some(r) = &report.recommended {
        panel.vmarks.push(VMark::new(
            r.rate_hz,
            format!("{} {}", rate_word(report), hz(r.rate_hz)),
            MarkStyle::Solid,
        ));
    }
    if let Some(c) = report.cpu_ceiling_hz {
        panel.vmarks.push(VMark::new(
            c,
            format!("budget ceiling {}", hz(c)),
            MarkStyle::Dashed,
        ));
    }
    if panel.series.is_empty() {
        panel.notes.push(Annotation::new(
            inp.case.rates.min_hz,
            b.max_load_pct,
            "no load known (cycles estimated from a controller that could not be built)",
        ));
    }
    Some(Figure::new(title, rate_axis()).with_panel(panel))
}

/// What rounding the coefficients does against rate, per number format,
/// for the recommended method (the first with an answer otherwise) at the
/// design delay: the controller's pole error and DC gain error, with each
/// format's precision ceiling marked. Only with `[arithmetic]`.
fn precision_chart(inp: &Inputs) -> Option<Figure> {
    let pr = inp.report.precision.as_ref();
    let first = inp.rows.first()?;
    if first.precision.is_empty() {
        return None;
    }
    let series = design_series(inp);
    let (method, rows) = match inp.rec {
        Some((r, _)) => series.into_iter().find(|(m, _)| *m == r.method)?,
        None => series.into_iter().next()?,
    };
    let formats: Vec<String> = first.precision.iter().map(|p| p.format.name()).collect();
    type Pick = fn(&crate::precision::Damage) -> Option<f64>;
    let panels: [(&str, Pick); 2] = [
        ("controller pole error (%)", |d| Some(d.pole_error_pct)),
        ("DC gain error (%)", |d| d.dc_gain_error_pct),
    ];
    let structure = inp
        .case
        .arithmetic
        .as_ref()
        .map_or("transposed-direct", |a| a.structure.name());
    let mut fig = Figure::new(
        format!(
            "Coefficient rounding ({structure}) vs rate, {method}: errors and precision ceilings"
        ),
        rate_axis(),
    );
    let mut empty = Vec::new();
    for (label, get) in panels {
        let mut panel = Panel::new(Axis::log(label));
        for (k, f) in formats.iter().enumerate() {
            let pts: Points = rows
                .iter()
                .map(|r| {
                    let v = r.precision[k]
                        .damage
                        .as_ref()
                        .and_then(get)
                        .filter(|v| *v > 0.0)
                        .unwrap_or(f64::NAN);
                    (r.point.rate_hz, v)
                })
                .collect();
            if pts.iter().any(|p| p.1.is_finite()) {
                panel.series.push(Series::line(f.clone(), pts, k));
            }
        }
        if let Some(pr) = pr {
            for c in pr.ceilings.iter().filter(|c| c.method == method) {
                if let (Some(h), false) = (c.ceiling.rate_hz, c.ceiling.above_range) {
                    panel.vmarks.push(VMark::new(
                        h,
                        format!("{} ceiling {}", c.format, hz(h)),
                        MarkStyle::Dashed,
                    ));
                }
            }
        }
        if let Some((r, _)) = inp.rec {
            panel.vmarks.push(VMark::new(
                r.rate_hz,
                format!("{} {}", rate_word(inp.report), hz(r.rate_hz)),
                MarkStyle::Solid,
            ));
        }
        if panel.series.is_empty() {
            // Nothing to draw on a log axis: the figure is exact.
            empty.push(label);
            continue;
        }
        fig = fig.with_panel(panel);
    }
    if empty.len() == 2 {
        return None;
    }
    if let Some(label) = empty.first() {
        fig.title = format!("{}; {label}: zero at every rate", fig.title);
    }
    Some(fig)
}

/// Phase margin and overshoot of the exact sampled loop beside each hold
/// approximation and the continuous design, over the case's rates.
fn hold_approximation(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let design = inp.report.design.as_ref()?;
    let (lo, hi) = (inp.case.rates.min_hz, inp.case.rates.max_hz);
    let n = HOLD_CHART_RATES;
    let rates: Vec<f64> = (0..n)
        .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
        .collect();
    let evals: Vec<(Evaluation, Vec<Evaluation>)> = rates
        .par_iter()
        .map(|&f| {
            let p = point_at(inp, method, f);
            let approx = HoldApprox::ALL
                .iter()
                .map(|&k| inp.lp.hold_approx(&p, k))
                .collect();
            (inp.lp.sampled(&p), approx)
        })
        .collect();
    let spec = &inp.case.spec;
    let panels: [PanelSpec; 2] = [
        (
            "phase margin (deg)",
            phase_margin,
            spec.min_phase_margin_deg
                .map(|l| (l, Side::Below, format!("min {} deg", fmt_num(l)))),
        ),
        (
            "overshoot (%)",
            overshoot,
            spec.max_overshoot_pct
                .map(|l| (l, Side::Above, format!("max {} %", fmt_num(l)))),
        ),
    ];
    let mut fig = Figure::new(
        format!(
            "Hold approximations vs the exact sampled loop ({}, {} hold, computation delay {} T)",
            rec.method,
            rec.hold,
            fmt_num(inp.report.design_delay)
        ),
        rate_axis().with_range(lo, hi),
    );
    for (i, (label, get, limit)) in panels.into_iter().enumerate() {
        let named = |s: &str| if i == 0 { s.to_string() } else { String::new() };
        let mut panel = Panel::new(Axis::linear(label));
        panel.series.push(
            Series::line(
                named("exact sampled loop"),
                rates
                    .iter()
                    .zip(&evals)
                    .map(|(&f, (e, _))| (f, figure_of(e, get)))
                    .collect(),
                STYLE_RECOMMENDED,
            )
            .drawn(Draw::LineAndMarkers),
        );
        for (k, kind) in HoldApprox::ALL.iter().enumerate() {
            panel.series.push(Series::line(
                named(&format!("{} approximation", kind.name())),
                rates
                    .iter()
                    .zip(&evals)
                    .map(|(&f, (_, a))| (f, figure_of(&a[k], get)))
                    .collect(),
                // Styles 1, 2, 3, then 5: 4 is the continuous design's.
                if k + 1 >= STYLE_CONTINUOUS {
                    k + 2
                } else {
                    k + 1
                },
            ));
        }
        if let Some(v) = get(design) {
            panel.series.push(hline(
                &named("continuous design"),
                v,
                lo,
                hi,
                STYLE_CONTINUOUS,
            ));
        }
        if let Some((v, side, text)) = limit {
            panel.limits.push(Limit::new(v, side, text));
        }
        panel.vmarks.push(VMark::new(
            rec.rate_hz,
            if i == 0 {
                format!("{} {}", rate_word(inp.report), hz(rec.rate_hz))
            } else {
                String::new()
            },
            MarkStyle::Solid,
        ));
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

/// Load-disturbance response at the recommended rate and at f_star.
fn disturbance(inp: &Inputs) -> Option<Figure> {
    let (rec, method) = inp.rec?;
    let figs = rec.figures.as_ref()?;
    let star = point_at(inp, method, rec.slowest_rate_hz);
    let star_eval = inp.lp.sampled(&star);
    let recovery = [
        inp.report.design.as_ref().and_then(|f| f.recovery_time_s),
        figs.recovery_time_s,
        star_eval.figures.as_ref().and_then(|f| f.recovery_time_s),
        inp.case.spec.max_recovery_s,
    ];
    let longest = recovery.iter().flatten().copied().fold(0.0, f64::max);
    let t_end = if longest > 0.0 {
        1.4 * longest
    } else {
        figs.horizon_s
    };
    let mut panel = Panel::new(Axis::linear(
        "plant output y (output units, unit load step)",
    ));
    let mut notes = Vec::new();
    if inp.lp.design.is_some() {
        match inp.lp.continuous_traces(t_end, CONTINUOUS_TRACE_STEPS) {
            Ok((_, dist)) => panel.series.push(Series::line(
                "continuous design",
                dist.iter().map(|p| (p.t, p.y)).collect(),
                STYLE_CONTINUOUS,
            )),
            Err(e) => notes.push(format!("continuous design not simulated: {e}")),
        }
    }
    for (rate, label, style) in [
        (
            rec.rate_hz,
            format!("{} {}", hz(rec.rate_hz), rate_word(inp.report)),
            STYLE_RECOMMENDED,
        ),
        (
            rec.slowest_rate_hz,
            format!("{} {}", hz(rec.slowest_rate_hz), star_word(inp.report)),
            STYLE_STAR,
        ),
    ] {
        let p = point_at(inp, method, rate);
        let periods = (t_end * rate).ceil() as usize + 1;
        match inp.lp.sampled_traces(&p, Some(periods)) {
            Ok((_, dist)) => panel
                .series
                .extend(trace_series(&dist, t_end, &label, style)),
            Err(e) => notes.push(format!("{label}: not simulated: {e}")),
        }
    }
    if let Some(l) = inp.case.spec.max_recovery_s {
        panel.vmarks.push(VMark::new(
            l,
            format!("recovery limit {} s", fmt_num(l)),
            MarkStyle::Dotted,
        ));
    }
    if let Some(l) = inp.case.spec.max_disturbance_peak {
        panel.limits.push(Limit::new(
            l,
            Side::Above,
            format!("max peak {}", fmt_num(l)),
        ));
    }
    let mut title = format!(
        "Response to a unit load step at the plant input, {} (r = 0)",
        rec.method
    );
    if !notes.is_empty() {
        title = format!("{title}; {}", notes.join("; "));
    }
    Some(Figure::new(title, Axis::linear("time (s)").with_range(0.0, t_end)).with_panel(panel))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_controller_given_in_z_is_drawn_at_its_one_rate() {
        // A gain in z at 5 Hz with two computation delays: the
        // figures-vs-rate chart shows one point per delay on an axis
        // around 5 Hz, not the range of a sweep.
        let text = "[plant]\ntransfer = \"1 / (s * (s + 1))\"\n[controller]\nnumerator_z = [2.0]\ndenominator_z = [1.0]\nrate_hz = 5\n[timing]\ncompute_delay = [0.5, 1]\n[spec]\nmin_phase_margin_deg = 20\n";
        let case = Case::parse(text, Path::new("z.toml")).unwrap();
        let lp = crate::pick::prepare(&case).unwrap();
        let picked =
            crate::pick::sweep_and_pick(&case, &lp, &|| {}, &crate::search::Silent).unwrap();
        let inputs = Inputs {
            case: &case,
            lp: &lp,
            rows: &picked.rows,
            report: &picked.report,
            rec: None,
        };
        let fig = figures_vs_rate(&inputs).unwrap();
        let (lo, hi) = fig.x.range.unwrap();
        assert!(lo < 5.0 && hi > 5.0 && hi / lo < 3.0, "{lo} .. {hi}");
        assert!(fig.title.contains("given in z"), "{}", fig.title);
        let series = &fig.panels[0].series;
        assert_eq!(series.len(), 2, "one series per delay");
        for s in series {
            assert_eq!(s.points.len(), 1);
            assert_eq!(s.points[0].0, 5.0);
        }
    }
}
