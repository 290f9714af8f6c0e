//! The shipped demo cases: each loads, and on three of them the search
//! agrees with a brute-force scan of 3000 rates per method; the
//! recommended rates pass a rule-of-thumb sanity check.

use std::path::PathBuf;

use looprate::case::Case;
use looprate::evaluate::PreparedLoop;
use looprate::pick::{PickReport, prepare, sweep_and_pick};
use looprate::search::Silent;
use looprate::sweep;

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

const ALL: [&str; 5] = [
    "belt-conveyor.toml",
    "oven-heater.toml",
    "gimbal-axis.toml",
    "buck-converter.toml",
    "pump-pressure-tight-cpu.toml",
];

#[test]
fn every_demo_case_loads_and_its_design_meets_the_spec() {
    for name in ALL {
        let c = demo(name);
        let lp = prepare(&c).unwrap();
        let design = lp.design.as_ref().and_then(|d| d.figures.clone());
        let fails = looprate::feasibility::check_figures(&design.unwrap(), &c.spec);
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
            let pts = sweep::grid(&scan, &[m.method.parse().ok()], &[m.compute_delay]);
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
            assert!(
                m.evaluations <= 40,
                "{name} {}: {} evaluations",
                m.method,
                m.evaluations
            );
        }
    }
}

#[test]
fn recommended_rates_sample_well_above_the_crossover() {
    // Rule of thumb (common practice, no source): sample several to tens
    // of times faster than the loop's bandwidth. A sanity check on the
    // demo cases, not the criterion: the recommended rate is at least 5x
    // the continuous crossover.
    for name in [
        "belt-conveyor.toml",
        "buck-converter.toml",
        "pump-pressure-tight-cpu.toml",
    ] {
        let (_, lp, report) = picked(name);
        let rec = report.recommended.unwrap();
        let fc = lp.design.unwrap().figures.unwrap().crossover_hz.unwrap();
        assert!(
            rec.rate_hz >= 5.0 * fc,
            "{name}: {} Hz vs crossover {fc} Hz",
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
