//! What each chart shows, read from its description (`charts::describe`:
//! title, panels, series with their points, limits, marks, labels) and
//! checked against the pick's own figures: the series are the sweep's
//! rows, the marks the report's rates, the limits the spec's. Invented
//! demo loops (no outside reference: the charts must show the results
//! the pick computed).

use std::path::Path;

use looprate::case::Case;
use looprate::engineering::hz;
use looprate::explore::pick::{Picked, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::output::chart_rows::{self, ChartSeries, RATE_PANELS};
use looprate::output::charts::{self, ChartInput, describe};
use looprate::output::plot::{Draw, Figure, MarkStyle, Side};
use looprate::sampled::figure::Figure as LoopFigure;

const CASE: &str = r#"
title = "Invented positioning loop"
[plant]
transfer = "20 / (s * (0.05*s + 1))"
[sensor]
transfer = "1 / (0.001*s + 1)"
[controller]
transfer = "2 * (0.1*s + 1) / (0.02*s + 1)"
[timing]
compute_delay = [0.5]
[rates]
min_hz = 20
max_hz = 2000
points = 30
[methods]
use = ["tustin", "step-invariant"]
[spec]
max_overshoot_pct = 35
max_settling_s = 0.25
min_phase_margin_deg = 30
min_gain_margin_db = 6
max_sensitivity_peak = 2.2
max_recovery_s = 0.6
[budget]
cpu_hz = 16e6
cycles_per_update = 900
max_load_pct = 25
"#;

/// The same loop with its gain uncertain (three corners).
fn robust_case() -> String {
    CASE.replace(
        "transfer = \"20 / (s * (0.05*s + 1))\"",
        "transfer = \"k / (s * (0.05*s + 1))\"",
    )
    .replace(
        "[plant]",
        "[params]\nk = { nominal = 20, min = 16, max = 24 }\n[uncertainty]\nmode = \"corners\"\n[plant]",
    )
}

struct Described {
    case: Case,
    picked: Picked,
    charts: Vec<(&'static str, Figure)>,
}

fn described(text: &str) -> Described {
    let case = Case::parse(text, Path::new("invented.toml")).unwrap();
    let lp = prepare(&case).unwrap();
    let picked = sweep_and_pick(&case, &lp, &|| {}, &Silent).unwrap();
    let rows = ChartSeries::from_rows(&case, &lp, &picked.rows);
    let charts = describe(&ChartInput {
        case: &case,
        lp: &lp,
        rows: &rows,
        pick: Some(&picked.report),
    });
    Described {
        case,
        picked,
        charts,
    }
}

impl Described {
    fn chart(&self, name: &str) -> &Figure {
        &(self.charts.iter().find(|c| c.0 == name))
            .unwrap_or_else(|| panic!("no {name}"))
            .1
    }
}

/// Equal as drawn: both NaN (a gap) or the same number.
fn same(a: f64, b: f64) -> bool {
    (a.is_nan() && b.is_nan()) || a == b
}

#[test]
fn figures_vs_rate_shows_the_sweep_the_limits_and_the_answers() {
    let d = described(CASE);
    let report = &d.picked.report;
    let rec = report.recommended.as_ref().expect("an answer");
    let fig = d.chart(charts::FIGURES_VS_RATE);
    assert_eq!(fig.panels.len(), RATE_PANELS.len());
    let spec = &d.case.spec;
    for (panel, def) in fig.panels.iter().zip(RATE_PANELS) {
        assert_eq!(panel.y.label, def.axis_title());
        // One series per method, its points the sweep's rows at the
        // design delay (NaN where the loop is unstable or the figure is
        // missing).
        for method in ["tustin", "step-invariant"] {
            let k = ["tustin", "step-invariant"]
                .iter()
                .position(|m| *m == method)
                .unwrap();
            let s = &panel.series[k];
            let rows: Vec<_> = (d.picked.rows.iter())
                .filter(|r| r.point.method.map(|m| m.name()) == Some(method))
                .collect();
            assert_eq!(s.points.len(), rows.len(), "{method} {}", def.axis_title());
            for (p, r) in s.points.iter().zip(&rows) {
                let want = r
                    .eval
                    .figures
                    .as_ref()
                    .and_then(|f| def.limited_value(f))
                    .unwrap_or(f64::NAN);
                assert!(
                    p.0 == r.point.rate_hz && same(p.1, want),
                    "{method} {} {p:?}",
                    def.axis_title()
                );
            }
        }
        // The spec's limit, on the failing side.
        let limit = def.limit(spec).unwrap();
        assert_eq!(panel.limits.len(), 1);
        assert_eq!(
            (panel.limits[0].value, panel.limits[0].bad_side),
            (limit, charts::bad_side(def))
        );
        // A gap is explained where there is one.
        let gaps = panel
            .series
            .iter()
            .any(|s| s.points.iter().any(|p| p.1.is_nan()));
        assert_eq!(
            gaps,
            panel.caption.starts_with("gaps:"),
            "{}",
            panel.caption
        );
        // The recommended rate and each method's f* cross every panel.
        assert!(
            panel
                .vmarks
                .iter()
                .any(|v| v.x == rec.rate_hz && v.style == MarkStyle::Solid)
        );
        for m in &report.methods {
            let f = m.slowest_rate_hz.unwrap();
            assert!(
                panel
                    .vmarks
                    .iter()
                    .any(|v| v.x == f && v.style == MarkStyle::Dashed)
            );
        }
    }
    // The legend is given once, on the top panel.
    assert_eq!(fig.panels[0].series[0].label, "tustin");
    assert!(
        fig.panels[1..]
            .iter()
            .all(|p| p.series.iter().all(|s| s.label.is_empty()))
    );
    // Every labelled mark is labelled once, and each f* label names its
    // rate (one label per cluster of close values).
    let labels: Vec<&str> = (fig.panels.iter().flat_map(|p| &p.vmarks))
        .map(|v| v.label.as_str())
        .filter(|l| !l.is_empty())
        .collect();
    let mut unique = labels.clone();
    unique.dedup();
    assert_eq!(labels.len(), unique.len(), "{labels:?}");
    assert!(
        labels.contains(&format!("recommended {}", hz(rec.rate_hz)).as_str()),
        "{labels:?}"
    );
    let first = report
        .methods
        .iter()
        .filter_map(|m| m.slowest_rate_hz)
        .fold(f64::MAX, f64::min);
    assert!(
        labels
            .iter()
            .any(|l| l.starts_with("f*") && l.contains(&hz(first))),
        "{labels:?}"
    );
}

#[test]
fn with_plant_variants_the_worst_curves_and_the_robust_f_star_are_drawn() {
    let d = described(&robust_case());
    let report = &d.picked.report;
    let robust = report.robust.as_ref().unwrap();
    let fig = d.chart(charts::FIGURES_VS_RATE);
    let top = &fig.panels[0];
    for (k, method) in ["tustin", "step-invariant"].iter().enumerate() {
        let s = (top.series.iter())
            .find(|s| s.label == format!("{method}, worst variant"))
            .unwrap_or_else(|| panic!("no worst-variant curve for {method}"));
        // Its own style, after the nominal curves'.
        assert_eq!(s.style, 2 + k);
        let rows: Vec<_> = (d.picked.rows.iter())
            .filter(|r| r.point.method.map(|m| m.name()) == Some(*method))
            .collect();
        for (p, r) in s.points.iter().zip(&rows) {
            let w = r.robust.as_ref().unwrap().worst_figures.as_ref();
            assert!(same(
                p.1,
                w.and_then(|f| LoopFigure::Overshoot.limited_value(f))
                    .unwrap_or(f64::NAN)
            ));
        }
        // The robust f* dashed, the nominal one dotted.
        let rf = (robust.methods.iter())
            .find(|m| m.rate.method.name() == *method)
            .unwrap();
        let rf = rf.rate.slowest_rate_hz.unwrap();
        assert!(
            top.vmarks
                .iter()
                .any(|v| v.x == rf && v.style == MarkStyle::Dashed)
        );
        let nf = (report.methods.iter())
            .find(|m| m.method.name() == *method)
            .unwrap();
        let nf = nf.slowest_rate_hz.unwrap();
        assert!(
            top.vmarks
                .iter()
                .any(|v| v.x == nf && v.style == MarkStyle::Dotted)
        );
    }
    assert!(fig.title.contains("worst variant"), "{}", fig.title);
    // The step chart says which plant it shows.
    let step = d.chart(charts::STEP_RESPONSE);
    assert!(step.title.contains("nominal plant"), "{}", step.title);
    assert!(step.title.contains("3 variants"), "{}", step.title);
    let f_star = report.recommended.as_ref().unwrap().slowest_rate_hz;
    let labels: Vec<&str> = step.panels[0]
        .series
        .iter()
        .map(|s| s.label.as_str())
        .collect();
    let star = format!("{} robust f*", hz(f_star));
    assert!(labels.iter().any(|l| l.starts_with(&star)), "{labels:?}");
}

#[test]
fn step_chart_shows_the_limits_and_tells_f_star_from_the_failing_run() {
    let d = described(CASE);
    let rec = d.picked.report.recommended.as_ref().unwrap();
    let figs = rec.figures.as_ref().unwrap();
    let spec = &d.case.spec;
    let fig = d.chart(charts::STEP_RESPONSE);
    let p = &fig.panels[0];
    // The overshoot limit, as an output level above the final value.
    let os = figs.y_final * (1.0 + spec.max_overshoot_pct.unwrap() / 100.0);
    assert_eq!(p.limits.len(), 1);
    assert_eq!((p.limits[0].value, p.limits[0].bad_side), (os, Side::Above));
    let (lo, hi) = p.y.range.unwrap();
    assert!(lo <= 0.0 && hi > os, "{lo} .. {hi} hides the limit {os}");
    // The settling band and the settling limit.
    let band = spec.settling_band_pct / 100.0 * figs.y_final.abs();
    assert_eq!(
        (p.hbands[0].from, p.hbands[0].to),
        (figs.y_final - band, figs.y_final + band)
    );
    assert!(p.vmarks.iter().any(|v| v.x == spec.max_settling_s.unwrap()));
    // Three runs (line + sample markers each) beside the continuous design;
    // the failing run's label gives the figure that fails it, and the f*
    // run's label the same figure, so the two read apart however close.
    let lines: Vec<&str> = (p.series.iter())
        .filter(|s| s.draw == Draw::Line && s.label != "continuous design")
        .map(|s| s.label.as_str())
        .collect();
    assert_eq!(lines.len(), 3, "{lines:?}");
    assert!(lines[0].starts_with(&format!("{} recommended", hz(rec.rate_hz))));
    let fail = lines[2];
    assert!(fail.contains(" fails: "), "{fail}");
    let figure = fail
        .split(" fails: ")
        .nth(1)
        .unwrap()
        .split(' ')
        .next()
        .unwrap();
    assert!(lines[1].contains(&format!(": {figure} ")), "{lines:?}");
    assert!(p.series.iter().filter(|s| s.draw == Draw::Markers).count() == 3);
}

#[test]
fn disturbance_chart_shows_the_recovery_band_and_the_delay() {
    let d = described(CASE);
    let rec = d.picked.report.recommended.as_ref().unwrap();
    let figs = rec.figures.as_ref().unwrap();
    let p = &d.chart(charts::DISTURBANCE).panels[0];
    let run = (p.series.iter())
        .find(|s| {
            s.label
                .starts_with(&format!("{} recommended", hz(rec.rate_hz)))
        })
        .unwrap();
    // Recovery (docs/figures.md): within the band times the peak of the
    // run's own final value.
    let y_end = run.points.last().unwrap().1;
    let band = d.case.spec.settling_band_pct / 100.0 * figs.disturbance_peak;
    assert_eq!(p.hbands.len(), 1);
    assert!((p.hbands[0].from - (y_end - band)).abs() < 1e-12);
    assert!((p.hbands[0].to - (y_end + band)).abs() < 1e-12);
    // Each run names its computation delay in time.
    let delay = looprate::engineering::seconds(0.5 / rec.rate_hz);
    assert!(run.label.contains(&format!("= {delay}")), "{}", run.label);
    // The recovery time and its limit are marked.
    let t = figs.recovery_time_s.unwrap();
    assert!(p.vmarks.iter().any(|v| v.x == t));
    assert!(
        p.vmarks
            .iter()
            .any(|v| v.x == 0.6 && v.style == MarkStyle::Dotted)
    );
}

#[test]
fn cpu_and_loop_charts_carry_the_budget_and_the_margins() {
    let d = described(CASE);
    let report = &d.picked.report;
    let rec = report.recommended.as_ref().unwrap();
    let cpu = &d.chart(charts::CPU_BUDGET).panels[0];
    assert_eq!(
        (cpu.limits[0].value, cpu.limits[0].bad_side),
        (25.0, Side::Above)
    );
    // Both methods cost the same (a measured cycle count): one curve.
    assert_eq!(cpu.series.len(), 1);
    assert_eq!(cpu.series[0].label, "tustin, step-invariant (same load)");
    // The load at each rate: cycles * rate / cpu_hz.
    for &(f, load) in &cpu.series[0].points {
        assert!((load - 100.0 * 900.0 * f / 16e6).abs() < 1e-9 * load.max(1.0));
    }
    let w = report.window.as_ref().unwrap();
    assert_eq!((cpu.bands[0].from, cpu.bands[0].to), (w.low_hz, w.high_hz));

    let lr = d.chart(charts::LOOP_RESPONSE);
    // The title names what is drawn, without values: the marks carry them.
    assert!(
        !lr.title.chars().any(|c| c.is_ascii_digit()),
        "{}",
        lr.title
    );
    let fig = rec.figures.as_ref().unwrap();
    let pm = fig.phase_margin_deg.unwrap();
    let notes: Vec<&str> = lr.panels[1].notes.iter().map(|n| n.text.as_str()).collect();
    assert!(
        notes.contains(&format!("phase margin {} deg", looprate::engineering::sig4(pm)).as_str())
    );
    let nyquist = rec.rate_hz / 2.0;
    assert_eq!(lr.x.range.unwrap().1, nyquist);
}

#[test]
fn an_upper_limited_figure_is_clipped_and_its_clipped_points_marked() {
    // A tight Ms limit and a wide rate range: near the slow end Ms runs
    // far above three times its limit. The continuous design fails that
    // limit too, so `pick` sweeps nothing: the chart is the sweep's (no
    // search, no pick), drawn from every evaluated row.
    let text = CASE.replace("max_sensitivity_peak = 2.2", "max_sensitivity_peak = 1.3");
    let (_, fig) = sweep_figures_vs_rate(&text);
    let fig = &fig;
    let ms = &fig.panels[4];
    let top = 3.0 * 1.3;
    let highest = (ms.series.iter().flat_map(|s| &s.points))
        .map(|p| p.1)
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    assert!(
        highest > top,
        "the case no longer reaches off scale: {highest}"
    );
    assert_eq!(ms.y.range, Some((0.0, top)));
    let marks: Vec<_> = ms
        .series
        .iter()
        .filter(|s| s.draw == Draw::Markers)
        .collect();
    assert!(!marks.is_empty());
    for m in &marks {
        assert!(m.points.iter().all(|p| p.1 == top));
        // Each mark is where a curve of the same style leaves the view.
        let curve = ms
            .series
            .iter()
            .find(|s| s.style == m.style && s.draw != Draw::Markers)
            .unwrap();
        for p in &m.points {
            let i = curve.points.iter().position(|q| q.0 == p.0).unwrap();
            let before = curve.points[i - 1].1;
            assert!(curve.points[i].1 > top && (before <= top || before.is_nan()));
        }
    }
    assert!(
        ms.caption.contains("off scale above 3.900"),
        "{}",
        ms.caption
    );
}

#[test]
fn a_controller_given_in_z_is_drawn_at_its_one_rate() {
    // A gain in z at 5 Hz with two computation delays: the
    // figures-vs-rate chart shows one point per delay on an axis around
    // 5 Hz, not the range of a sweep.
    let text = "[plant]\ntransfer = \"1 / (s * (s + 1))\"\n[controller]\nnumerator_z = [2.0]\ndenominator_z = [1.0]\nrate_hz = 5\n[timing]\ncompute_delay = [0.5, 1]\n[spec]\nmin_phase_margin_deg = 20\n";
    let d = described(text);
    let fig = d.chart(charts::FIGURES_VS_RATE);
    let (lo, hi) = fig.x.range.unwrap();
    assert!(lo < 5.0 && hi > 5.0 && hi / lo < 3.0, "{lo} .. {hi}");
    assert!(fig.title.contains("given in z"), "{}", fig.title);
    let series = &fig.panels[0].series;
    assert_eq!(series.len(), 2, "one series per delay");
    for s in series {
        assert_eq!(s.points, [(5.0, s.points[0].1)]);
    }
}

/// A long series is thinned to the chart's width: at most three points
/// (lowest, highest, one gap) per column of the rate axis, each curve's
/// lowest and highest value kept, the captions' counts over every row.
/// A sweep's chart, drawn without a pick.
#[test]
fn a_long_series_is_thinned_to_the_chart_width() {
    let points = 2 * chart_rows::CHART_COLUMNS + 500;
    let text = CASE
        .replace("points = 30", &format!("points = {points}"))
        .replace(
            "use = [\"tustin\", \"step-invariant\"]",
            "use = [\"tustin\"]",
        );
    let (rows, fig) = sweep_figures_vs_rate(&text);
    let fig = &fig;
    // No pick: no recommended rate and no f* marks.
    assert!(fig.panels.iter().all(|p| p.vmarks.is_empty()));
    for (panel, def) in fig.panels.iter().zip(RATE_PANELS) {
        let curve = &panel.series[0];
        assert!(curve.points.len() <= 3 * chart_rows::CHART_COLUMNS);
        assert!(curve.points.len() < rows.len());
        let values: Vec<f64> = (rows.iter())
            .map(|r| {
                (r.eval.figures.as_ref())
                    .and_then(|f| def.limited_value(f))
                    .unwrap_or(f64::NAN)
            })
            .filter(|v| v.is_finite())
            .collect();
        let drawn: Vec<f64> = curve.points.iter().map(|p| p.1).collect();
        for want in [
            values.iter().copied().fold(f64::INFINITY, f64::min),
            values.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        ] {
            assert!(
                drawn.contains(&want),
                "{}: {want} not drawn",
                def.axis_title()
            );
        }
        // The points stay in rate order.
        assert!(curve.points.windows(2).all(|w| w[0].0 < w[1].0));
        let unstable = rows.iter().filter(|r| r.eval.figures.is_none()).count();
        if unstable > 0 {
            let total = rows.len();
            assert!(
                panel.caption.contains(&format!("({unstable}/{total})")),
                "{}",
                panel.caption
            );
        }
    }
}

#[test]
fn the_continuous_loop_gain_carries_the_transport_delay() {
    // Closed form: a pure delay L multiplies the loop gain by e^{-jwL},
    // which leaves |L| alone and turns the phase by exactly -w L. The loop
    // of CASE, L(s) = 20/(s(0.05 s + 1)) * 1/(0.001 s + 1) * 2(0.1 s + 1)
    // /(0.02 s + 1), has the phase -90 - atan(0.05 w) - atan(0.001 w) +
    // atan(0.1 w) - atan(0.02 w) degrees (no wrap: it starts at -90 deg at
    // low frequency); with 2 ms at the plant and 1 ms on the measurement
    // the chart's continuous phase must be that minus 360 f (3 ms).
    let d = described(
        &CASE
            .replace("[sensor]", "delay_s = 0.002\n[sensor]")
            .replace("[controller]", "delay_s = 0.001\n[controller]"),
    );
    let lr = d.chart(charts::LOOP_RESPONSE);
    let curve = |panel: usize| {
        lr.panels[panel]
            .series
            .iter()
            .find(|s| s.label == "continuous design")
            .expect("a continuous design curve")
            .points
            .clone()
    };
    let phase = curve(1);
    assert!(phase.len() > 20);
    for &(f, deg) in &phase {
        let w = 2.0 * std::f64::consts::PI * f;
        let rational = -90.0 - (0.05 * w).atan().to_degrees() - (0.001 * w).atan().to_degrees()
            + (0.1 * w).atan().to_degrees()
            - (0.02 * w).atan().to_degrees();
        let expected = rational - 360.0 * f * 0.003;
        assert!(
            (deg - expected).abs() < 1e-6 * expected.abs().max(1.0),
            "at {f} Hz: {deg} deg, expected {expected}"
        );
    }
    // The magnitude is the rational part's: |L(jw)| in dB.
    for &(f, db) in &curve(0) {
        let w = 2.0 * std::f64::consts::PI * f;
        let mag =
            20.0 / (w * (1.0 + (0.05 * w).powi(2)).sqrt()) / (1.0 + (0.001 * w).powi(2)).sqrt()
                * 2.0
                * (1.0 + (0.1 * w).powi(2)).sqrt()
                / (1.0 + (0.02 * w).powi(2)).sqrt();
        let expected = 20.0 * mag.log10();
        assert!(
            (db - expected).abs() < 1e-9 * expected.abs().max(1.0),
            "at {f} Hz: {db} dB, expected {expected}"
        );
    }
}

/// The figures-vs-rate chart a `sweep` of the case `text` draws (no
/// search, no pick), from every evaluated row.
fn sweep_figures_vs_rate(text: &str) -> (Vec<looprate::explore::sweep::SweepRow>, Figure) {
    let case = Case::parse(text, Path::new("invented.toml")).unwrap();
    let lp = prepare(&case).unwrap();
    let grid = looprate::explore::pick::case_grid(&case, &lp);
    let plan = looprate::explore::sweep::Plan::for_case(&case, &lp, None);
    let rows = looprate::explore::sweep::run(&plan, &grid, &|| {});
    let series = ChartSeries::from_rows(&case, &lp, &rows);
    let fig = describe(&ChartInput {
        case: &case,
        lp: &lp,
        rows: &series,
        pick: None,
    })
    .into_iter()
    .find(|c| c.0 == charts::FIGURES_VS_RATE)
    .expect("a sweep draws figures-vs-rate")
    .1;
    (rows, fig)
}
