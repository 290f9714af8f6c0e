//! Rendering tests for `looprate::output::plot`: real figures go to PNG files,
//! are decoded again and checked for size and content.

use std::path::PathBuf;

use looprate::error::PlotError;
use looprate::output::plot::{
    Annotation, Axis, Band, Draw, Figure, Limit, MarkStyle, Panel, Series, Side, VMark,
    render_png_bytes, render_rgb,
};

/// Draw `fig` and write its PNG to `path`.
fn render_png(fig: &Figure, path: &std::path::Path) -> Result<(), PlotError> {
    let png = render_png_bytes(fig, path)?;
    std::fs::write(path, png).expect("writable test directory");
    Ok(())
}

/// A fresh directory under the system temp dir, unique to this test.
fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("looprate-plot-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Where test images go: `LOOPRATE_PLOT_OUT` (to keep them for a look)
/// or a scratch directory.
fn out_dir(name: &str) -> PathBuf {
    match std::env::var_os("LOOPRATE_PLOT_OUT") {
        Some(d) => {
            let d = PathBuf::from(d);
            std::fs::create_dir_all(&d).unwrap();
            d
        }
        None => scratch(name),
    }
}

/// A review-style figure: log rate axis, three panels, every element.
fn review_figure() -> Figure {
    let rates: Vec<f64> = (0..=120)
        .map(|i| 10f64.powf(1.0 + 3.0 * f64::from(i) / 120.0))
        .collect();
    // Made-up but plausible curves: margins grow with the rate, the
    // conservative model lags; overshoot falls; settling time falls.
    let margin: Vec<(f64, f64)> = rates
        .iter()
        .map(|&f| (f, 62.0 * (1.0 - (-f / 300.0).exp())))
        .collect();
    let margin_fast: Vec<(f64, f64)> = rates
        .iter()
        .enumerate()
        .map(|(i, &f)| {
            let y = 62.0 * (1.0 - (-f / 520.0).exp()) - 3.0;
            // A gap in the data: NaNs must break the line.
            if (40..46).contains(&i) {
                (f, f64::NAN)
            } else {
                (f, y)
            }
        })
        .collect();
    let overshoot: Vec<(f64, f64)> = rates
        .iter()
        .map(|&f| (f, 4.0 + 60.0 * (-f / 250.0).exp()))
        .collect();
    let settle: Vec<(f64, f64)> = rates
        .iter()
        .step_by(10)
        .map(|&f| (f, 0.02 + 2.0 / f.sqrt()))
        .collect();
    let cost: Vec<(f64, f64)> = rates
        .iter()
        .step_by(12)
        .map(|&f| (f, (f / 100.0).min(100.0)))
        .collect();

    let mut top = Panel::new(Axis::linear("phase margin (°)"));
    top.series
        .push(Series::line("continuous controller, Tustin", margin, 0));
    top.series.push(Series::line(
        "continuous controller, ZOH + delay",
        margin_fast,
        1,
    ));
    top.limits
        .push(Limit::new(45.0, Side::Below, "minimum phase margin 45°"));
    top.vmarks
        .push(VMark::new(850.0, "chosen rate 850 Hz", MarkStyle::Solid));
    top.vmarks.push(VMark::new(
        700.0,
        "slowest feasible 700 Hz",
        MarkStyle::Dashed,
    ));
    top.bands
        .push(Band::new(700.0, f64::INFINITY, "feasible rates"));
    top.notes
        .push(Annotation::new(420.0, 45.0, "Tustin meets 45° at 420 Hz"));

    let mut mid = Panel::new(Axis::linear("overshoot (%)"));
    mid.series
        .push(Series::line("step overshoot", overshoot, 2).drawn(Draw::LineAndMarkers));
    mid.limits.push(Limit::new(10.0, Side::Above, "max 10 %"));
    mid.hbands.push(Band::new(0.0, 5.0, "target band ±5 %"));
    mid.vmarks.push(VMark::new(850.0, "", MarkStyle::Solid));

    let mut bottom = Panel::new(Axis::log("settling time (s)"));
    bottom
        .series
        .push(Series::line("2 % settling", settle, 3).drawn(Draw::Markers));
    bottom
        .series
        .push(Series::line("CPU load (%)", cost, 4).drawn(Draw::LineAndMarkers));
    bottom
        .series
        .push(Series::line("", vec![(20.0, 0.5), (9000.0, 0.5)], 5));
    bottom.vmarks.push(VMark::new(850.0, "", MarkStyle::Dotted));
    bottom
        .notes
        .push(Annotation::new(850.0, 0.0886, "t₂% ≈ 89 ms at 850 Hz"));

    Figure::new(
        "Loop-rate sweep: plant A, PI controller",
        Axis::log("loop rate (Hz)"),
    )
    .with_panel(top)
    .with_panel(mid)
    .with_panel(bottom)
    .with_note("case: plant-a.toml · 121 rates · looprate 0.1.0")
}

fn decode(path: &std::path::Path) -> image::RgbImage {
    image::open(path).expect("PNG decodes").to_rgb8()
}

fn variance(img: &image::RgbImage) -> f64 {
    let n = f64::from(img.width() * img.height());
    let luma: Vec<f64> = img
        .pixels()
        .map(|p| 0.3 * f64::from(p[0]) + 0.6 * f64::from(p[1]) + 0.1 * f64::from(p[2]))
        .collect();
    let mean = luma.iter().sum::<f64>() / n;
    luma.iter().map(|l| (l - mean).powi(2)).sum::<f64>() / n
}

#[test]
fn three_panel_figure_renders_to_png() {
    let dir = out_dir("three");
    let path = dir.join("review.png");
    render_png(&review_figure(), &path).expect("renders");
    let img = decode(&path);
    assert_eq!((img.width(), img.height()), (1600, 1000));
    let var = variance(&img);
    assert!(var > 300.0, "image looks blank: luma variance {var}");
    // Several distinct colours from the palette are present.
    let has = |r: u8, g: u8, b: u8| {
        img.pixels().any(|p| {
            (i32::from(p[0]) - i32::from(r)).abs() < 12
                && (i32::from(p[1]) - i32::from(g)).abs() < 12
                && (i32::from(p[2]) - i32::from(b)).abs() < 12
        })
    };
    assert!(has(0x1d, 0x4f, 0x91), "blue series missing");
    assert!(has(0xd4, 0x6f, 0x12), "orange series missing");
    // No temporary files are left next to the output.
    let leftovers: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains(".tmp"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

#[test]
fn small_and_wide_sizes_render() {
    let dir = out_dir("sizes");
    for (w, h) in [(800, 500), (2400, 900)] {
        let path = dir.join(format!("review-{w}x{h}.png"));
        render_png(&review_figure().with_size(w, h), &path).expect("renders");
        let img = decode(&path);
        assert_eq!((img.width(), img.height()), (w, h));
        assert!(variance(&img) > 200.0);
    }
}

#[test]
fn degenerate_figures_do_not_panic() {
    let dir = out_dir("degenerate");
    let nan = vec![(f64::NAN, f64::NAN); 5];
    let inf = vec![(f64::INFINITY, 1.0), (1.0, f64::NEG_INFINITY)];
    let mut p1 = Panel::new(Axis::linear("nothing"));
    p1.series.push(Series::line("empty", vec![], 0));
    p1.series.push(Series::line("all NaN", nan.clone(), 1));
    p1.series
        .push(Series::line("infinite", inf, 2).drawn(Draw::LineAndMarkers));
    let mut p2 = Panel::new(Axis::log("log of nothing"));
    p2.series.push(Series::line(
        "non-positive",
        vec![(-1.0, 0.0), (0.0, -5.0)],
        3,
    ));
    p2.limits
        .push(Limit::new(f64::NAN, Side::Above, "nan limit"));
    p2.vmarks
        .push(VMark::new(f64::NAN, "nan mark", MarkStyle::Dashed));
    p2.notes.push(Annotation::new(f64::NAN, 1.0, "nowhere"));
    p2.bands
        .push(Band::new(f64::NEG_INFINITY, f64::NAN, "odd band"));
    p2.hbands.push(Band::new(f64::NAN, f64::INFINITY, ""));
    let mut p3 = Panel::new(Axis::linear("constant").with_range(3.0, 3.0));
    p3.series
        .push(Series::line("flat", vec![(5.0, 3.0), (5.0, 3.0)], 4));
    let fig = Figure::new("", Axis::log("x").with_range(5.0, 5.0))
        .with_panel(p1)
        .with_panel(p2)
        .with_panel(p3);
    render_png(&fig, &dir.join("degenerate.png")).expect("degenerate data still draws");
    let img = decode(&dir.join("degenerate.png"));
    assert_eq!(img.width(), 1600);

    // Single points, a single panel, no labels at all.
    let mut p = Panel::default();
    p.series
        .push(Series::line("", vec![(2.0, 2.0)], 0).drawn(Draw::LineAndMarkers));
    let fig = Figure::new("", Axis::default()).with_panel(p);
    render_png(&fig, &dir.join("single.png")).expect("one point draws");

    // Clean errors.
    let empty = Figure::new("no panels", Axis::default());
    assert!(matches!(render_rgb(&empty), Err(PlotError::NoPanels)));
    let tiny = review_figure().with_size(10, 10);
    assert!(matches!(
        render_rgb(&tiny),
        Err(PlotError::InvalidSize { .. })
    ));
    let cramped = review_figure().with_size(200, 90);
    assert!(matches!(
        render_rgb(&cramped),
        Err(PlotError::TooSmall { .. })
    ));
    let mut bad = review_figure();
    bad.x = Axis::log("x").with_range(-1.0, 10.0);
    assert!(matches!(
        render_rgb(&bad),
        Err(PlotError::InvalidRange { .. })
    ));
    let mut bad = review_figure();
    bad.panels[1].y.range = Some((0.0, f64::NAN));
    assert!(matches!(
        render_rgb(&bad),
        Err(PlotError::InvalidRange { .. })
    ));
}

/// A time-domain figure on linear axes: a step response with a settling
/// band, sampled outputs with markers, and more series than the
/// palette has entries (the legend must cope: long labels wrap, never cut).
#[test]
fn step_response_figure_renders() {
    let dir = out_dir("step");
    let t: Vec<f64> = (0..=400).map(|i| f64::from(i) * 0.0002).collect();
    let resp = |wn: f64, z: f64| -> Vec<(f64, f64)> {
        let wd = wn * (1.0 - z * z).sqrt();
        t.iter()
            .map(|&t| {
                let e = (-z * wn * t).exp();
                (t, 1.0 - e * ((wd * t).cos() + z * wn / wd * (wd * t).sin()))
            })
            .collect()
    };
    let mut p = Panel::new(Axis::linear("output (normalized)"));
    p.series
        .push(Series::line("continuous loop", resp(900.0, 0.45), 0));
    for (k, rate) in [2000.0, 4000.0, 8000.0].iter().enumerate() {
        let step = 1.0 / rate;
        let pts: Vec<(f64, f64)> = resp(900.0 * (1.0 - 300.0 / rate), 0.45 - 600.0 / rate)
            .into_iter()
            .filter(|(t, _)| ((t / step).round() * step - t).abs() < 1e-9)
            .collect();
        p.series.push(
            Series::line(
                format!("sampled at {rate} Hz (zero-order hold)"),
                pts,
                k + 1,
            )
            .drawn(Draw::LineAndMarkers),
        );
    }
    for k in 4..10 {
        let pts = resp(700.0 + 60.0 * k as f64, 0.3 + 0.04 * k as f64);
        p.series.push(Series::line(
            format!("variant {k} with a rather long legend label that wraps onto more lines"),
            pts,
            k,
        ));
    }
    p.hbands.push(Band::new(0.98, 1.02, "±2 % settling band"));
    p.limits
        .push(Limit::new(1.25, Side::Above, "overshoot limit 25 %"));
    p.vmarks
        .push(VMark::new(0.0051, "settled at 5.1 ms", MarkStyle::Dotted));
    let mut u = Panel::new(Axis::linear("control effort (V)"));
    u.series.push(
        Series::line(
            "u[k]",
            (0..160)
                .map(|i| {
                    let t = f64::from(i) * 0.0005;
                    (t, -3.0 + 9.0 * (-t * 900.0).exp())
                })
                .collect(),
            0,
        )
        .drawn(Draw::LineAndMarkers),
    );
    u.limits.push(Limit::new(5.0, Side::Above, "actuator +5 V"));
    u.limits
        .push(Limit::new(-5.0, Side::Below, "actuator −5 V"));
    let fig = Figure::new("Step response at candidate rates", Axis::linear("time (s)"))
        .with_panel(p)
        .with_panel(u);
    let path = dir.join("step.png");
    render_png(&fig, &path).expect("renders");
    let img = decode(&path);
    assert_eq!((img.width(), img.height()), (1600, 1000));
    assert!(variance(&img) > 200.0);
}
