//! Charts and the report from a real pick run on a small invented case
//! (invented data: a demo loop, not a reference).

use std::path::{Path, PathBuf};

use looprate::case::Case;
use looprate::engineering::{hz, seconds, sig4};
use looprate::explore::pick::{PickReport, Picked, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::output::chart_rows::ChartSeries;
use looprate::output::charts::{ChartInput, write_charts};
use looprate::output::report::write_report;
use looprate::sampled::evaluate::PreparedLoop;

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
    chart_rows: ChartSeries,
    report: PickReport,
}

fn run(text: &str, dir: &Path) -> Run {
    let path = dir.join("case.toml");
    std::fs::write(&path, text).unwrap();
    let case = Case::load(&path).unwrap();
    let lp = prepare(&case).unwrap();
    let Picked { rows, report, .. } = sweep_and_pick(&case, &lp, &|| {}, &Silent).unwrap();
    Run {
        chart_rows: ChartSeries::from_rows(&case, &lp, &rows),
        case,
        lp,
        report,
    }
}

impl Run {
    /// The charts' input: what the sweep gathered and the pick.
    fn input(&self) -> ChartInput<'_> {
        ChartInput {
            case: &self.case,
            lp: &self.lp,
            rows: &self.chart_rows,
            pick: Some(&self.report),
        }
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
    let charts = write_charts(&dir, &r.input()).unwrap();
    let names: Vec<String> = charts
        .iter()
        .map(|c| c.path.file_name().unwrap().to_string_lossy().into_owned())
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
        check_png(&c.path);
        // The bytes the report embeds are the file written.
        assert_eq!(std::fs::read(&c.path).unwrap(), c.png);
    }

    let md_path = write_report(&dir, &r.case, &r.report, &charts).unwrap();
    let md = std::fs::read_to_string(&md_path).unwrap();
    // The numbers of report.md against pick.json (the serialized report).
    let json = serde_json::to_value(&r.report).unwrap();
    let rec = &json["recommended"];
    let printed = |v: &serde_json::Value| sig4(v.as_f64().unwrap());
    assert_same(
        between(&md, "at **", "**"),
        &hz(rec["rate_hz"].as_f64().unwrap()),
        rec["rate_hz"].as_f64().unwrap(),
    );
    assert_same(
        between(&md, "(period **", "**"),
        &seconds(rec["period_s"].as_f64().unwrap()),
        rec["period_s"].as_f64().unwrap(),
    );
    assert_same(
        between(&md, "; CPU load ", " % against"),
        &printed(&rec["cpu_load_pct"]),
        rec["cpu_load_pct"].as_f64().unwrap(),
    );
    for m in json["methods"].as_array().unwrap() {
        let name = m["method"].as_str().unwrap();
        let row = md
            .lines()
            .find(|l| first_cell(l) == Some(name))
            .unwrap_or_else(|| panic!("no table row for {name}"));
        let cells: Vec<&str> = row.split('|').map(str::trim).collect();
        let f = m["slowest_rate_hz"].as_f64().unwrap();
        // Columns: method, hold, delay, f*, limiting figure (in words; the
        // JSON keeps the key).
        assert_eq!(cells[2], m["hold"].as_str().unwrap());
        assert_same(cells[4], &hz(f), f);
        let key = m["limiting"].as_str().unwrap();
        let words = looprate::sampled::figure::Figure::from_key(key).map_or(key, |f| f.label());
        assert_eq!(cells[5], words);
    }
    // Every chart embedded by relative path; the caution is there.
    for name in &names {
        assert!(md.contains(&format!("]({name})")), "{name} not embedded");
    }
    assert!(md.contains("protective limits"));
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    assert_eq!(html.matches("data:image/png;base64,").count(), names.len());
}

/// The first cell of a Markdown table row (cells are padded to the
/// column's width), None for a line that is not a row.
fn first_cell(line: &str) -> Option<&str> {
    line.strip_prefix("| ")?.split('|').next().map(str::trim)
}

/// The text between `start` and the next `end` after it.
fn between<'a>(text: &'a str, start: &str, end: &str) -> &'a str {
    let i = text.find(start).unwrap_or_else(|| panic!("no `{start}`")) + start.len();
    let j = text[i..].find(end).unwrap_or_else(|| panic!("no `{end}`")) + i;
    &text[i..j]
}

/// A printed quantity read back in SI units: `1.396 kHz` -> 1396,
/// `716.3 µs` -> 7.163e-4, `21.90` -> 21.9.
fn read_back(printed: &str) -> f64 {
    let (number, unit) = printed.split_once(' ').unwrap_or((printed, ""));
    let scale = match unit.chars().next() {
        Some('k') => 1e3,
        Some('M') => 1e6,
        Some('m') => 1e-3,
        Some('µ') => 1e-6,
        Some('n') => 1e-9,
        _ => 1.0,
    };
    number.parse::<f64>().unwrap() * scale
}

/// A printed number equals the formatted value and reads back to it
/// within the printed precision (4 significant digits).
fn assert_same(printed: &str, expected: &str, value: f64) {
    assert_eq!(printed, expected);
    let back = read_back(printed);
    assert!(
        ((back - value) / value).abs() <= 5e-4,
        "{printed} vs {value}"
    );
}

#[test]
fn no_answer_draws_what_still_makes_sense() {
    // Only slow rates: no method meets the spec at the top of the sweep.
    let dir = out_dir("none");
    let text = CASE
        .replace("max_hz = 2000", "max_hz = 60")
        .replace("points = 30", "points = 6");
    let r = run(&text, &dir);
    assert!(r.report.recommended.is_none());
    let charts = write_charts(&dir, &r.input()).unwrap();
    let names: Vec<String> = charts
        .iter()
        .map(|c| c.path.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names, ["figures-vs-rate.png", "cpu-budget.png"]);
    for c in &charts {
        check_png(&c.path);
        // The bytes the report embeds are the file written.
        assert_eq!(std::fs::read(&c.path).unwrap(), c.png);
    }
    let md =
        std::fs::read_to_string(write_report(&dir, &r.case, &r.report, &charts).unwrap()).unwrap();
    assert!(md.contains("**No method meets the spec**"));
    let row = md
        .lines()
        .find(|l| first_cell(l) == Some("tustin"))
        .unwrap();
    let cells: Vec<&str> = row.split('|').map(str::trim).collect();
    assert_eq!(cells[2..5], ["zero-order", "0.5 of a period", "none"]);
}

#[test]
fn empty_window_is_stated_with_both_numbers() {
    // A CPU so slow that the spec's rate does not fit.
    let dir = out_dir("empty");
    let r = run(&CASE.replace("cpu_hz = 16e6", "cpu_hz = 0.5e6"), &dir);
    let w = r.report.window.clone().unwrap();
    assert!(w.empty);
    let charts = write_charts(&dir, &r.input()).unwrap();
    assert_eq!(charts.len(), 6);
    let md =
        std::fs::read_to_string(write_report(&dir, &r.case, &r.report, &charts).unwrap()).unwrap();
    assert!(md.contains(&format!(
        "needs at least {} and the CPU budget allows at most {}",
        hz(w.low_hz),
        hz(w.high_hz)
    )));
    for a in &r.report.advice {
        assert!(md.contains(&format!("- {a}")), "advice missing: {a}");
    }
}

#[test]
fn variants_and_precision_reach_every_output() {
    let dir = out_dir("robust");
    let text = CASE
        .replace("transfer = \"20 / (s * (0.05*s + 1))\"", "transfer = \"k / (s * (0.05*s + 1))\"")
        .replace(
            "[plant]",
            "[params]\nk = { nominal = 20, min = 16, max = 24 }\n[uncertainty]\nmode = \"corners\"\n[arithmetic]\nformats = [\"q11\", \"f32\"]\nstructure = \"sos\"\n[plant]",
        );
    let r = run(&text, &dir);
    let charts = write_charts(&dir, &r.input()).unwrap();
    let png = dir.join("precision.png");
    assert!(charts.iter().any(|c| c.path == png), "{charts:?}");
    check_png(&png);
    let md_path = write_report(&dir, &r.case, &r.report, &charts).unwrap();
    let md = std::fs::read_to_string(&md_path).unwrap();
    assert!(md.contains("## Slowest rate over the plant variants"));
    assert!(md.contains("## Coefficient precision"));
    // The robust table's numbers are pick.json's.
    let json = serde_json::to_value(&r.report).unwrap();
    let robust = &json["robust"];
    assert_eq!(robust["variants"], 3);
    let table = &md[md.find("## Slowest rate over the plant variants").unwrap()..];
    for m in robust["methods"].as_array().unwrap() {
        let name = m["method"].as_str().unwrap();
        let row = table
            .lines()
            .find(|l| first_cell(l) == Some(name))
            .unwrap_or_else(|| panic!("no robust row for {name}"));
        let cells: Vec<&str> = row.split('|').map(str::trim).collect();
        let f = m["slowest_rate_hz"].as_f64().unwrap();
        assert_same(cells[4], &hz(f), f);
        let n = m["nominal_slowest_rate_hz"].as_f64().unwrap();
        assert_same(cells[5], &hz(n), n);
    }
    // Both formats are in the precision table and in pick.json.
    for f in ["q11", "f32"] {
        assert!(md.lines().any(|l| first_cell(l) == Some(f)), "{f}");
        assert!(
            json["precision"]["at_recommended"]
                .as_array()
                .unwrap()
                .iter()
                .any(|a| a["format"] == f)
        );
    }
}
