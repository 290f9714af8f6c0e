//! The report as its reader meets it, on every demo case: the summary box
//! comes first and carries the caution's first line, an empty window is
//! never called a recommendation, each load stands beside its limit, and
//! each threshold the empty-window advice quotes, applied to the case
//! alone, opens the window (the pick re-run on the changed case, the
//! threshold recomputed from the case, not read back from the text).

use std::path::{Path, PathBuf};

use looprate::case::Case;
use looprate::explore::budget;
use looprate::explore::pick::{PickReport, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::output::chart_rows::ChartSeries;
use looprate::output::charts::{ChartInput, write_charts};
use looprate::output::report::{CAUTION_LINE, write_report};
use looprate::spec::Cycles;

const ALL: [&str; 5] = [
    "belt-conveyor.toml",
    "oven-heater.toml",
    "gimbal-axis.toml",
    "buck-converter.toml",
    "pump-pressure-tight-cpu.toml",
];

fn demo(name: &str) -> Case {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cases")
        .join(name);
    Case::load(&path).unwrap()
}

fn pick_of(c: &Case) -> PickReport {
    let lp = prepare(c).unwrap();
    sweep_and_pick(c, &lp, &|| {}, &Silent).unwrap().report
}

fn out_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!(
        "looprate-report-reading-{}-{name}",
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// report.md and report.html of a case, with its charts when asked.
fn render(name: &str, with_charts: bool) -> (Case, PickReport, String, String, PathBuf) {
    let c = demo(name);
    let lp = prepare(&c).unwrap();
    let picked = sweep_and_pick(&c, &lp, &|| {}, &Silent).unwrap();
    let dir = out_dir(name.trim_end_matches(".toml"));
    let charts = if with_charts {
        let rows = ChartSeries::from_rows(&c, &lp, &picked.rows);
        let input = ChartInput {
            case: &c,
            lp: &lp,
            rows: &rows,
            pick: Some(&picked.report),
        };
        write_charts(&dir, &input).unwrap()
    } else {
        Vec::new()
    };
    let md =
        std::fs::read_to_string(write_report(&dir, &c, &picked.report, &charts).unwrap()).unwrap();
    let html = std::fs::read_to_string(dir.join("report.html")).unwrap();
    (c, picked.report, md, html, dir)
}

/// The number right after `prefix` in `text` (digits, `.`, `e`, sign).
fn number_after(text: &str, prefix: &str) -> f64 {
    let i = text
        .find(prefix)
        .unwrap_or_else(|| panic!("no `{prefix}` in:\n{text}"))
        + prefix.len();
    let s: String = text[i..]
        .trim_start()
        .chars()
        .take_while(|c| c.is_ascii_digit() || matches!(c, '.' | 'e' | '-' | '+'))
        .collect();
    s.parse()
        .unwrap_or_else(|_| panic!("`{s}` after `{prefix}`"))
}

/// The advice item that starts with `start`.
fn advice<'a>(r: &'a PickReport, start: &str) -> &'a str {
    r.advice
        .iter()
        .find(|a| a.starts_with(start))
        .unwrap_or_else(|| panic!("no advice `{start}` in {:?}", r.advice))
}

/// Four significant digits, as every threshold is printed: a quoted
/// minimum must not be below the exact need, nor more than one unit of
/// its fourth digit above it (rounded up, not padded); a maximum likewise
/// from above.
fn assert_rounded_toward(quoted: f64, exact: f64, up: bool, what: &str) {
    let unit = 10f64.powf(exact.abs().log10().floor() - 3.0);
    if up {
        assert!(
            quoted >= exact && quoted - exact <= unit * 1.000001,
            "{what}: quoted {quoted}, needs at least {exact}"
        );
    } else {
        assert!(
            quoted <= exact && exact - quoted <= unit * 1.000001,
            "{what}: quoted {quoted}, allows at most {exact}"
        );
    }
}

#[test]
fn summary_box_comes_first_and_carries_the_caution() {
    for name in ALL {
        let (_, report, md, html, _) = render(name, false);
        // Markdown: the box is the blockquote under the title, before
        // the first table.
        let lines: Vec<&str> = md.lines().collect();
        let first_box = lines.iter().position(|l| l.starts_with("> ")).unwrap();
        let first_table = lines.iter().position(|l| l.starts_with("| ")).unwrap();
        assert!(first_box < first_table, "{name}");
        assert!(
            lines[..first_box].iter().all(|l| !l.starts_with("##")),
            "{name}"
        );
        let boxed: String = lines
            .iter()
            .skip(first_box)
            .take_while(|l| l.starts_with("> "))
            .copied()
            .collect::<Vec<_>>()
            .join("\n");
        // The caution section at the end opens with the line the box holds.
        let caution = &md[md.find("## Caution").unwrap()..];
        let first_line = caution.lines().nth(2).unwrap();
        let first_sentence =
            &first_line[..first_line.find(". ").map_or(first_line.len(), |i| i + 1)];
        assert_eq!(first_sentence, CAUTION_LINE, "{name}");
        assert!(boxed.contains(first_sentence), "{name}: {boxed}");
        assert!(boxed.contains("**Answer:**"), "{name}");
        // Every load stands beside its limit.
        if let (Some(rec), Some(b)) = (&report.recommended, &b_of(name))
            && rec.cpu_load_pct.is_some()
        {
            let limit = format!("against a limit of {b} %");
            assert!(boxed.contains(&limit), "{name}: {boxed}");
            for l in md.lines().filter(|l| l.contains("CPU load ")) {
                if l.contains("CPU load against") {
                    continue;
                }
                assert!(l.contains(&limit), "{name}: load without its limit: {l}");
            }
        }
        // HTML: the box before the first table, the viewport tag, a head
        // row per table, every table in a scrolling wrapper.
        let b = html.find("<section class=\"summary\"").unwrap();
        assert!(b < html.find("<table").unwrap(), "{name}");
        assert!(html[b..].contains(CAUTION_LINE));
        assert!(html.contains("<meta name=\"viewport\""));
        let tables = html.matches("<table>").count();
        assert_eq!(html.matches("<thead>").count(), tables, "{name}");
        assert_eq!(
            html.matches("<div class=\"wide\"><table>").count(),
            tables,
            "{name}"
        );
    }
}

/// The load limit of a demo case, as the case wrote it.
fn b_of(name: &str) -> Option<f64> {
    demo(name).budget.map(|b| b.max_load_pct)
}

#[test]
fn an_empty_window_is_never_called_a_recommendation() {
    let (_, report, md, html, dir) = render("pump-pressure-tight-cpu.toml", true);
    assert!(report.window.as_ref().unwrap().empty);
    for (what, text) in [("report.md", &md), ("report.html", &html)] {
        assert!(
            !text.to_lowercase().contains("recommend"),
            "{what} says recommend with an empty window"
        );
    }
    assert!(md.contains("the rate the spec alone needs"));
    assert!(md.contains("> **Answer:** **none**"));
    // Each chart links to its own full-size file, which exists.
    let links = html.matches("<a href=\"").count();
    assert!(links >= 5, "{links}");
    for name in ["figures-vs-rate.png", "cpu-budget.png"] {
        assert!(html.contains(&format!("<a href=\"{name}\"")));
        assert!(md.contains(&format!("]({name})](")) || md.contains(&format!("]({name})")));
        assert!(Path::new(&dir.join(name)).is_file());
    }
    // With an answer the same words say "recommended".
    let (_, belt, md, _, _) = render("belt-conveyor.toml", false);
    assert!(!belt.window.as_ref().unwrap().empty);
    assert!(md.contains("Figures at the recommended rate"));
}

#[test]
fn each_advice_threshold_alone_opens_the_window() {
    let c = demo("pump-pressure-tight-cpu.toml");
    let r = pick_of(&c);
    let w = r.window.clone().unwrap();
    assert!(w.empty);
    let rec = r.recommended.clone().unwrap();
    let b = c.budget.clone().unwrap();
    // From the case: the update's cycles (60 per MAC x 5 MACs of the
    // second-order tustin PID in direct form II transposed + 2200
    // overhead, by hand), the rate the spec needs, the budget.
    let cycles = 60.0 * 5.0 + 2200.0;
    assert_eq!(rec.cycles_per_update, Some(cycles));
    let rate = rec.rate_hz;
    let share = b.max_load_pct / 100.0;

    // A faster CPU: at least rate x cycles / share.
    let cpu_mhz = number_after(advice(&r, "a faster CPU"), "at least");
    assert_rounded_toward(cpu_mhz, rate * cycles / share / 1e6, true, "CPU");
    let mut faster = c.clone();
    faster.budget.as_mut().unwrap().cpu_hz = cpu_mhz * 1e6;
    assert!(
        pick_of(&faster).has_answer(),
        "a {cpu_mhz} MHz CPU does not open it"
    );

    // A cheaper update: at most share x cpu / rate cycles (whole cycles).
    let most = number_after(advice(&r, "a cheaper update"), "at most");
    let exact = share * b.cpu_hz / rate;
    assert!(most <= exact && exact - most < 1.0, "{most} vs {exact}");
    let mut cheaper = c.clone();
    cheaper.budget.as_mut().unwrap().cycles = Cycles::PerUpdate(most);
    assert!(
        pick_of(&cheaper).has_answer(),
        "{most} cycles do not open it"
    );
    // One cycle more does not fit: the threshold is the boundary.
    cheaper.budget.as_mut().unwrap().cycles = Cycles::PerUpdate(most + 1.0);
    assert!(!pick_of(&cheaper).has_answer());

    // A higher load limit: at least rate x cycles / cpu.
    let load = number_after(advice(&r, "a higher load limit"), "at least");
    assert_rounded_toward(load, rate * cycles / b.cpu_hz * 100.0, true, "load");
    let mut looser = c.clone();
    looser.budget.as_mut().unwrap().max_load_pct = load;
    assert!(pick_of(&looser).has_answer(), "{load} % does not open it");

    // A method with a lower f_star: at most N Hz, so N x headroom, rounded
    // up to a timer rate, fits under the ceiling.
    let n = number_after(advice(&r, "a method with a lower f_star"), "at most");
    let (timed, _) = budget::timer_rate_at_least(b.timer_hz.unwrap(), n * c.spec.headroom).unwrap();
    let ceiling = budget::ceiling_hz(&b, cycles);
    assert!(
        timed <= ceiling,
        "{n} Hz x headroom -> {timed} Hz > {ceiling} Hz"
    );
    assert_rounded_toward(n, ceiling / c.spec.headroom, false, "f_star");
}

#[test]
fn markdown_tables_read_as_plain_text() {
    let (_, _, md, _, _) = render("pump-pressure-tight-cpu.toml", false);
    let mut tables = 0;
    for block in md.split("\n\n").filter(|b| b.starts_with("| ")) {
        tables += 1;
        let lines: Vec<&str> = block.lines().collect();
        let width = lines[0].chars().count();
        assert!(
            lines.iter().all(|l| l.chars().count() == width),
            "unpadded table:\n{block}"
        );
        // Number columns are right-aligned.
        if lines[0].contains("value") {
            assert!(lines[1].contains("-:"), "{block}");
            // Right-aligned: padding before the number, one space after.
            assert!(
                lines.iter().any(|l| l
                    .split('|')
                    .any(|c| c.starts_with("  ") && c.ends_with(" 18.62 "))),
                "{block}"
            );
        }
    }
    assert!(tables >= 2);
}
