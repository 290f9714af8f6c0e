//! The shipped demo cases: each loads, and on three of them the search
//! agrees with a brute-force scan of 3000 rates per method; the
//! recommended rates pass a rule-of-thumb sanity check.

use std::path::PathBuf;

use looprate::case::Case;
use looprate::explore::pick::{PickReport, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::explore::sweep;
use looprate::model::poly::C64;
use looprate::model::transfer::Controller;
use looprate::sampled::evaluate::PreparedLoop;

fn demo(name: &str) -> Case {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cases")
        .join(name);
    Case::load(&path).unwrap()
}

/// A demo case with its prepared loop and the answer of a full pick.
fn picked(name: &str) -> (Case, PreparedLoop, PickReport) {
    let c = demo(name);
    let lp = prepare(&c).unwrap();
    let report = sweep_and_pick(&c, &lp, &|| {}, &Silent).unwrap().report;
    (c, lp, report)
}

const ALL: [&str; 8] = [
    "belt-conveyor.toml",
    "oven-heater.toml",
    "gimbal-axis.toml",
    "buck-converter.toml",
    "pump-pressure-tight-cpu.toml",
    "motor-current-loop.toml",
    "dryer-transport-delay.toml",
    "hold-comparison.toml",
];

#[test]
fn every_demo_case_loads_and_its_design_meets_the_spec() {
    for name in ALL {
        let c = demo(name);
        let lp = prepare(&c).unwrap();
        let design = lp.design.as_ref().and_then(|d| d.figures.clone());
        let fails = looprate::sampled::feasibility::check_figures(&design.unwrap(), &c.spec);
        assert!(
            fails.iter().all(|f| f.pass),
            "{name}: the continuous design fails {fails:?}"
        );
    }
}

#[test]
fn search_matches_a_dense_scan_on_three_demo_cases() {
    // Brute force: 3000 log-spaced rates over the case's range, at the
    // recommendation's computation delay, every method of the case.
    for name in [
        "belt-conveyor.toml",
        "buck-converter.toml",
        "pump-pressure-tight-cpu.toml",
    ] {
        let (c, lp, report) = picked(name);
        let n = 3000;
        let (lo, hi) = (c.rates.min_hz, c.rates.max_hz);
        let scan: Vec<f64> = (0..n)
            .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
            .collect();
        for m in report
            .methods
            .iter()
            .filter(|m| m.compute_delay == report.design_delay)
        {
            let pts = sweep::grid(&scan, &[m.method.0], &[m.compute_delay]);
            let dense = sweep::run(&sweep::Plan::nominal(&lp, &c.spec, None), &pts, &|| {});
            let i = dense
                .iter()
                .rposition(|r| !r.assessment.feasible)
                .expect("the slow end fails");
            let f = m.slowest_rate_hz.expect("an answer");
            assert!(
                f > scan[i] * (1.0 - 1e-4) && f <= scan[i + 1] * (1.0 + 1e-4),
                "{name} {}: f_star {f} outside the scan bracket [{}, {}]",
                m.method,
                scan[i],
                scan[i + 1]
            );
            // The tolerance itself, beyond the scan's spacing: f_star
            // passes and 1e-4 below it fails (evaluated directly).
            let one = |rate: f64| {
                let p = sweep::grid(&[rate], &[m.method.0], &[m.compute_delay]);
                sweep::run(&sweep::Plan::nominal(&lp, &c.spec, None), &p, &|| {})[0]
                    .assessment
                    .feasible
            };
            assert!(one(f), "{name} {}: f_star {f} itself fails", m.method);
            assert!(
                !one(f * (1.0 - 1e-4)),
                "{name} {}: {f} x (1 - 1e-4) passes: f_star not within 1e-4",
                m.method
            );
            assert!(
                m.evaluations <= 40,
                "{name} {}: {} evaluations",
                m.method,
                m.evaluations
            );
        }
    }
}

/// -3 dB bandwidth of the continuous design's closed loop, Hz: the
/// lowest frequency where |T(jw)| = |L/(1+L)| falls below |T(0)|/sqrt(2),
/// from a log scan of the loop gain L = controller x plant x sensor (200
/// points a decade) refined by bisection.
fn closed_loop_bandwidth_hz(lp: &PreparedLoop) -> f64 {
    let Controller::Continuous(c) = &lp.controller else {
        panic!("a continuous design")
    };
    let t_mag = |w: f64| {
        let s = C64::new(0.0, w);
        let l = c.eval(s) * lp.plant.eval(s) * lp.sensor.eval(s);
        (l / (l + 1.0)).norm()
    };
    let (w0, w1): (f64, f64) = (1e-4, 1e8);
    let t0 = t_mag(w0);
    let level = t0 / 2f64.sqrt();
    let n = (200.0 * (w1 / w0).log10()) as usize;
    let mut prev = w0;
    for i in 1..=n {
        let w = w0 * (w1 / w0).powf(i as f64 / n as f64);
        if t_mag(w) < level {
            let (mut a, mut b): (f64, f64) = (prev, w);
            for _ in 0..60 {
                let m = (a * b).sqrt();
                if t_mag(m) < level { b = m } else { a = m }
            }
            return b / (2.0 * std::f64::consts::PI);
        }
        prev = w;
    }
    panic!("no bandwidth below 1e8 rad/s")
}

#[test]
fn recommended_rates_sample_well_above_the_closed_loop_bandwidth() {
    // Rule of thumb (common practice, no source): sample several to tens
    // of times faster than the closed loop's bandwidth. A sanity check on
    // the demo cases, not the criterion.
    for name in ALL {
        let (_, lp, report) = picked(name);
        let rec = report.recommended.unwrap();
        let bw = closed_loop_bandwidth_hz(&lp);
        let ratio = rec.rate_hz / bw;
        assert!(
            (4.0..=100.0).contains(&ratio),
            "{name}: {} Hz is {ratio:.1} times the closed-loop bandwidth {bw} Hz",
            rec.rate_hz
        );
        if name.starts_with("pump") {
            assert!(
                report.window.unwrap().empty,
                "the pump case is the empty-window demo"
            );
        }
    }
}

/// The first number in `text` after `after`.
fn number_after(text: &str, after: &str) -> f64 {
    let i = text
        .find(after)
        .unwrap_or_else(|| panic!("`{after}` in\n{text}"))
        + after.len();
    let t: String = text[i..]
        .trim_start()
        .chars()
        .take_while(|c| c.is_ascii_digit() || matches!(c, '.' | 'e' | '-' | '+'))
        .collect();
    let v: f64 = t
        .parse()
        .unwrap_or_else(|_| panic!("a number after `{after}`: {t:?}"));
    // A rate in engineering form carries an SI prefix before `Hz`.
    let rest = text[i..].trim_start()[t.len()..].trim_start();
    let scale = [("kHz", 1e3), ("MHz", 1e6), ("GHz", 1e9), ("mHz", 1e-3)]
        .iter()
        .find(|(u, _)| rest.starts_with(u))
        .map_or(1.0, |(_, s)| *s);
    v * scale
}

#[test]
fn the_summary_and_json_state_the_window_and_what_would_open_an_empty_one() {
    // A window that exists: both ends on stdout, in order, as computed.
    let (belt_case, _, belt) = picked("belt-conveyor.toml");
    let text = looprate::output::report::pick_text(&belt_case, &belt, &[]).unwrap();
    let [lo, hi] = belt.window_hz.unwrap();
    let win = &text[text.find("Rate window\n").expect("a window section")..];
    let (a, b) = (number_after(win, "From"), number_after(win, ") to"));
    assert!(
        (a - lo).abs() < 1e-3 * lo && (b - hi).abs() < 1e-3 * hi,
        "{text}"
    );
    // The CPU budget would allow more than the sweep checked: the window
    // stops at the last rate checked and says so.
    assert!(
        text.contains("last rate checked") && text.contains("CPU budget would allow"),
        "{text}"
    );
    assert_eq!(
        belt.window.as_ref().unwrap().high_hz,
        demo("belt-conveyor.toml").rates.max_hz
    );
    assert!(text.contains("the headroom covers model error"));
    let json = serde_json::to_value(&belt).unwrap();
    for m in json["methods"].as_array().unwrap() {
        for key in [
            "method",
            "compute_delay",
            "slowest_rate_hz",
            "limiting",
            "islands",
            "evaluations",
        ] {
            assert!(m.get(key).is_some(), "methods[].{key}");
        }
    }
    for key in [
        "method",
        "rate_hz",
        "period_s",
        "cpu_load_pct",
        "figures",
        "basis",
    ] {
        assert!(json["recommended"].get(key).is_some(), "recommended.{key}");
    }
    assert!(
        json["recommended"]["basis"]
            .as_str()
            .unwrap()
            .contains("covers model error")
    );

    // The empty window: said plainly, both numbers, what would open it.
    let (c, _, pump) = picked("pump-pressure-tight-cpu.toml");
    let text = looprate::output::report::pick_text(&c, &pump, &[]).unwrap();
    let w = pump.window.as_ref().unwrap();
    assert!(w.empty && pump.window_hz.is_none());
    assert!(serde_json::to_value(&pump).unwrap()["window_hz"].is_null());
    let need = number_after(&text, "the spec needs at least");
    let allows = number_after(&text, "allows at most");
    assert!((need - w.low_hz).abs() < 1e-3 * need, "{text}");
    assert!((allows - w.high_hz).abs() < 1e-3 * allows, "{text}");
    // Hand check: the PID with a derivative filter is second order, so
    // tustin gives b0, b1, b2, a1, a2 -> 5 MACs in direct form II
    // transposed -> 60 * 5 + 2200 = 2500 cycles; ceiling = 5 % of 16 MHz
    // / 2500 = 320 Hz.
    assert_eq!(c.budget.as_ref().unwrap().cpu_hz, 16e6);
    let rec = pump.recommended.as_ref().unwrap();
    assert_eq!(
        (rec.method.name(), rec.cycles_per_update),
        ("tustin", Some(2500.0))
    );
    assert!((w.high_hz - 320.0).abs() < 1e-9, "{}", w.high_hz);
    for item in [
        "a faster CPU",
        "a cheaper update",
        "a looser spec",
        "a method with a lower f_star",
    ] {
        assert!(text.contains(item), "advice `{item}` missing:\n{text}");
    }
}

#[test]
fn the_hold_comparison_recommends_the_cheapest_hold_and_says_why() {
    // Every (method, hold) at the design delay is searched; the
    // recommendation is the lowest f_star among them (ties to the first
    // listed), and its basis names each other hold's best rate.
    let (c, _, report) = picked("hold-comparison.toml");
    let rec = report.recommended.clone().unwrap();
    let best = report
        .methods
        .iter()
        .filter(|m| m.compute_delay == report.design_delay)
        .filter_map(|m| m.slowest_rate_hz)
        .fold(f64::INFINITY, f64::min);
    assert_eq!(rec.slowest_rate_hz, best);
    assert_eq!(report.methods.len(), c.methods.len() * c.holds.len());
    for h in &c.holds {
        assert!(rec.hold_basis.contains(h.name()), "{}", rec.hold_basis);
    }
    let text = looprate::output::report::pick_text(&c, &report, &[]).unwrap();
    // The terminal wraps lines: compare with single spaces.
    let words = |t: &str| t.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(words(&text).contains(&words(&rec.hold_basis)), "{text}");
}

#[test]
fn every_rate_inside_a_reported_window_meets_the_spec_when_evaluated_directly() {
    // The window claims only checked rates: 40 rates spread over it (ends
    // included), each evaluated on its own at the recommended method and
    // delay, all feasible; and the top is not above the swept range.
    let (mut checked, mut with_arithmetic) = (0, 0);
    for name in [
        "belt-conveyor.toml",
        "gimbal-axis.toml",
        "buck-converter.toml",
    ] {
        let (case, lp, report) = picked(name);
        let Some([lo, hi]) = report.window_hz else {
            panic!("{name}: a window was expected");
        };
        assert!(
            hi <= case.rates.max_hz,
            "{name}: window top {hi} above max_hz"
        );
        let rec = report.recommended.as_ref().unwrap();
        let method = rec.method.0;
        for i in 0..=40 {
            let rate = lo * (hi / lo).powf(i as f64 / 40.0);
            let p = looprate::sampled::evaluate::Point {
                rate_hz: rate,
                method,
                delay: rec.compute_delay,
                hold: rec.hold,
            };
            let a = looprate::sampled::feasibility::assess(&lp.sampled(&p), &case.spec);
            assert!(
                a.feasible,
                "{name}: {rate} Hz inside the window fails ({:?})",
                a.limiting
            );
            // The coefficient check: with `[arithmetic]` the controller
            // rounded to the format that bounds the window, in the case's
            // structure, passes too (the same check the precision ceiling
            // is searched on, evaluated here at each rate on its own).
            if let Some(arith) = &case.arithmetic {
                let check_hz = lp
                    .design
                    .as_ref()
                    .and_then(|d| d.figures.as_ref())
                    .and_then(|f| f.crossover_hz);
                let v = looprate::explore::precision::judge_point(
                    &lp,
                    &case.spec,
                    &p,
                    looprate::sampled::evaluate::Given::default(),
                    arith.structure,
                    arith.formats[0],
                    check_hz,
                );
                assert!(
                    v.assessment.feasible,
                    "{name}: {rate} Hz inside the window fails in {} ({:?}, {:?})",
                    arith.formats[0], v.assessment.limiting, v.reason
                );
            }
        }
        checked += 1;
        with_arithmetic += usize::from(case.arithmetic.is_some());
    }
    assert_eq!(checked, 3);
    assert!(
        with_arithmetic >= 1,
        "no window bounded by a format was checked"
    );
}
