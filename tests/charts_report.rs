//! Charts and the report from a real pick run on a small invented case
//! (invented data: a demo loop, not a reference).

use std::path::{Path, PathBuf};

use looprate::case::Case;
use looprate::charts::write_charts;
use looprate::evaluate::PreparedLoop;
use looprate::pick::{PickReport, case_grid, pick, prepare};
use looprate::search::Silent;
use looprate::sweep::{self, SweepRow};

const CASE: &str = r#"
title = "Invented positioning loop"

[plant]
tf = "20 / (s * (0.05*s + 1))"

[sensor]
tf = "1 / (0.001*s + 1)"

[controller]
tf = "2 * (0.1*s + 1) / (0.02*s + 1)"

[timing]
compute_delay = [0.5]

[rates]
min_hz = 20
max_hz = 2000
points = 30

[methods]
use = ["tustin", "zoh"]

[spec]
max_overshoot_pct = 35
max_settling_s = 0.25
min_phase_margin_deg = 30
min_gain_margin_db = 6
max_sensitivity_peak = 2.2

[budget]
cpu_hz = 16e6
cycles_per_update = 900
max_load_pct = 25
"#;

/// A fresh directory for this test's files: `LOOPRATE_CHART_OUT` to keep
/// them for a look, or a scratch directory under the system temp dir.
fn out_dir(name: &str) -> PathBuf {
    let dir = match std::env::var_os("LOOPRATE_CHART_OUT") {
        Some(d) => PathBuf::from(d).join(name),
        None => std::env::temp_dir().join(format!("looprate-charts-{}-{name}", std::process::id())),
    };
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

struct Run {
    case: Case,
    lp: PreparedLoop,
    rows: Vec<SweepRow>,
    report: PickReport,
}

fn run(text: &str, dir: &Path) -> Run {
    let path = dir.join("case.toml");
    std::fs::write(&path, text).unwrap();
    let case = Case::load(&path).unwrap();
    let lp = prepare(&case).unwrap();
    let grid = case_grid(&case, &lp);
    let rows = sweep::run(&lp, &case.spec, case.budget.as_ref(), &grid, &|| {});
    let report = pick(&case, &lp, &rows, &Silent);
    Run {
        case,
        lp,
        rows,
        report,
    }
}

/// Decode a PNG and check its size and that it is not blank.
fn check_png(path: &Path) {
    let img = image::open(path)
        .unwrap_or_else(|e| panic!("{} does not decode: {e}", path.display()))
        .to_rgb8();
    assert_eq!(img.dimensions(), (1600, 1000), "{}", path.display());
    let n = f64::from(img.width() * img.height());
    let lum: Vec<f64> = img
        .pixels()
        .map(|p| (f64::from(p[0]) + f64::from(p[1]) + f64::from(p[2])) / 3.0)
        .collect();
    let mean = lum.iter().sum::<f64>() / n;
    let var = lum.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    assert!(
        var > 50.0,
        "{} looks blank (variance {var})",
        path.display()
    );
}

#[test]
fn charts_of_a_case_with_an_answer() {
    let dir = out_dir("answer");
    let r = run(CASE, &dir);
    assert!(r.report.recommended.is_some(), "{:#?}", r.report);
    let charts = write_charts(&dir, &r.case, &r.lp, &r.rows, &r.report).unwrap();
    let names: Vec<String> = charts
        .iter()
        .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names,
        [
            "figures-vs-rate.png",
            "step-response.png",
            "loop-response.png",
            "cpu-budget.png",
            "hold-approximation.png",
            "disturbance.png"
        ]
    );
    for c in &charts {
        check_png(c);
    }
}
