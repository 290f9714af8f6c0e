//! The sweep and the search: every grid point present, results identical
//! whatever the thread count, and the search against a brute-force scan.

use std::path::Path;

use looprate::case::Case;
use looprate::explore::pick::{case_grid, pick, prepare};
use looprate::explore::search::Silent;
use looprate::explore::sweep;
use looprate::output::tables::sweep_csv;

/// An invented speed loop whose slow end goes unstable and whose fast end
/// passes, with a second method that fails differently.
const CASE: &str = r#"
title = "Test speed loop"
[plant]
transfer = "38 / ((0.42*s + 1) * (0.004*s + 1))"
[sensor]
transfer = "1 / (0.0008*s + 1)"
[controller]
transfer = "0.4 * (s + 12) / s"
[timing]
compute_delay = [0, 1]
[rates]
min_hz = 5
max_hz = 2000
points = 40
[methods]
use = ["tustin", "forward-euler", "tustin-prewarped"]
prewarp_hz = 400
[spec]
max_overshoot_pct = 30
min_phase_margin_deg = 35
min_gain_margin_db = 6
[budget]
cpu_hz = 48e6
cycles_per_mac = 20
overhead_cycles = 400
max_load_pct = 10
"#;

fn case() -> Case {
    Case::parse(CASE, Path::new("speed.toml")).unwrap()
}

fn pool(n: usize) -> rayon::ThreadPool {
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build()
        .unwrap()
}

/// The nominal sweep of a case's grid (with its budget) and the pick on
/// it: the prepared loop, the number of rows, the report.
fn nominal_pick(
    c: &Case,
) -> (
    looprate::sampled::evaluate::PreparedLoop,
    usize,
    looprate::explore::pick::PickReport,
) {
    let lp = prepare(c).unwrap();
    let rows = sweep::run(
        &sweep::Plan::nominal(&lp, &c.spec, c.budget.as_ref()),
        &case_grid(c, &lp),
        &|| {},
    );
    let report = pick(c, &lp, None, &rows, &Silent);
    (lp, rows.len(), report)
}

#[test]
fn every_point_has_a_row_and_threads_do_not_change_a_byte() {
    let c = case();
    let lp = prepare(&c).unwrap();
    let points = case_grid(&c, &lp);
    // 40 rates x 3 methods x 2 delays, including unstable points and the
    // points where tustin-prewarped cannot run (w0 T >= pi below 800 Hz).
    assert_eq!(points.len(), 40 * 3 * 2);
    let one = pool(1).install(|| {
        sweep::run(
            &sweep::Plan::nominal(&lp, &c.spec, c.budget.as_ref()),
            &points,
            &|| {},
        )
    });
    let two = pool(2).install(|| {
        sweep::run(
            &sweep::Plan::nominal(&lp, &c.spec, c.budget.as_ref()),
            &points,
            &|| {},
        )
    });
    assert_eq!(one.len(), points.len());
    let (a, b) = (sweep_csv(&one, None), sweep_csv(&two, None));
    assert_eq!(a, b, "sweep.csv differs between 1 and 2 threads");
    let text = String::from_utf8(a).unwrap();
    assert_eq!(text.lines().count(), 1 + points.len());
    assert!(
        text.contains(",unstable,"),
        "the grid should include unstable points"
    );
    assert!(
        text.contains("error: tustin-prewarped"),
        "prewarp above Nyquist must be reported per point"
    );
}

#[test]
fn search_agrees_with_a_brute_force_scan() {
    // Brute force: 3000 log-spaced rates; f_star_brute is the lowest scan
    // rate above the fastest infeasible one. The search's f_star must lie
    // in the scan interval around that (to its 1e-4 tolerance): the search
    // and the scan share only the evaluation of single points.
    let c = case();
    let (lp, _, report) = nominal_pick(&c);
    let n = 3000;
    let (lo, hi) = (c.rates.min_hz, c.rates.max_hz);
    let scan: Vec<f64> = (0..n)
        .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
        .collect();
    for m in &report.methods {
        let method = m.method.0;
        let pts = sweep::grid(&scan, &[method], &[m.compute_delay]);
        let dense = sweep::run(&sweep::Plan::nominal(&lp, &c.spec, None), &pts, &|| {});
        let last_bad = dense.iter().rposition(|r| !r.assessment.feasible);
        match (last_bad, m.slowest_rate_hz) {
            (Some(i), Some(f)) if i + 1 < n => {
                let (a, b) = (scan[i], scan[i + 1]);
                assert!(
                    f > a * (1.0 - 1e-4) && f <= b * (1.0 + 1e-4),
                    "{} d={}: f_star {f} outside the scan bracket [{a}, {b}]",
                    m.method,
                    m.compute_delay
                );
                // Within the scan's spacing, the 1e-4 tolerance itself:
                // f_star passes, 1e-4 below it fails.
                let one = |rate: f64| {
                    let p = sweep::grid(&[rate], &[method], &[m.compute_delay]);
                    sweep::run(&sweep::Plan::nominal(&lp, &c.spec, None), &p, &|| {})[0]
                        .assessment
                        .feasible
                };
                assert!(
                    one(f) && !one(f * (1.0 - 1e-4)),
                    "{} d={}: tolerance",
                    m.method,
                    m.compute_delay
                );
            }
            (Some(i), None) => {
                assert_eq!(i, n - 1, "{}: search found none, scan disagrees", m.method)
            }
            (None, Some(f)) => assert!(m.at_range_floor && f == lo),
            other => panic!(
                "{} d={}: scan and search disagree: {other:?}",
                m.method, m.compute_delay
            ),
        }
        assert!(
            m.evaluations <= 40,
            "{}: {} evaluations beyond the sweep",
            m.method,
            m.evaluations
        );
    }
    // The recommendation is the lowest f_star at the design delay (the
    // largest listed, 1) times the headroom.
    let rec = report.recommended.as_ref().unwrap();
    let best = report
        .methods
        .iter()
        .filter(|m| m.compute_delay == 1.0)
        .filter_map(|m| m.slowest_rate_hz)
        .fold(f64::INFINITY, f64::min);
    assert_eq!(rec.slowest_rate_hz, best);
    assert!((rec.rate_hz - best * 1.25).abs() < 1e-9 * best);
    // Hand computation of the CPU budget: every method here (tustin,
    // forward Euler, pre-warped tustin) turns the PI into one first-order
    // section with b0, b1, a1 non-zero -> 3 MACs in direct form II
    // transposed -> 20 * 3 + 400 = 460 cycles per update; ceiling
    // = 0.10 * 48e6 / 460 = 10434.78 Hz; load at the recommended rate
    // = 460 * rate / 48e6 * 100 %.
    assert_eq!(rec.cycles_per_update, Some(460.0), "{}", rec.method);
    assert!((report.cpu_ceiling_hz.unwrap() - 10434.782608695652).abs() < 1e-6);
    let load = rec.cpu_load_pct.unwrap();
    assert!((load - 460.0 * rec.rate_hz / 48e6 * 100.0).abs() < 1e-9 * load);
    // The CPU ceiling lies above the swept range (max_hz = 2000 Hz): the
    // window claims only checked rates and stops at max_hz, saying so.
    let w = report.window_hz.expect("a window");
    assert_eq!(w, [rec.rate_hz, 2000.0]);
    let bound = &report.window.as_ref().unwrap().high_bound;
    assert_eq!(
        *bound,
        looprate::explore::budget::WindowBound::LastRateChecked {
            checked_hz: 2000.0,
            beyond: Box::new(looprate::explore::budget::WindowBound::CpuBudget),
            beyond_hz: report.cpu_ceiling_hz.unwrap(),
        }
    );
    assert!(bound.to_string().starts_with("last rate checked"));
    // In pick.json: a typed bound with its kind, the CPU ceiling beside it.
    let json = serde_json::to_value(report.window.as_ref().unwrap()).unwrap();
    assert_eq!(json["high_bound"]["kind"], "last-rate-checked");
    assert_eq!(json["high_bound"]["beyond"]["kind"], "cpu-budget");
    assert_eq!(json["cpu_ceiling_hz"], report.cpu_ceiling_hz.unwrap());
}

#[test]
fn a_controller_given_in_z_is_recommended_at_its_own_rate() {
    // It cannot run anywhere else, so headroom does not apply (found in
    // review: the recommendation once moved it to 1.25 times its rate).
    let text = r#"
[plant]
transfer = "1 / (s * (s + 1))"
[controller]
numerator_z = [0.5]
denominator_z = [1.0]
rate_hz = 20
[rates]
min_hz = 10
max_hz = 40
[spec]
max_overshoot_pct = 60
[budget]
cpu_hz = 1e6
cycles_per_update = 100
max_load_pct = 50
timer_hz = 1e6
"#;
    let c = Case::parse(text, Path::new("z.toml")).unwrap();
    let (_, rows, report) = nominal_pick(&c);
    assert_eq!(rows, 1);
    let rec = report.recommended.unwrap();
    assert_eq!(rec.rate_hz, 20.0);
    assert_eq!(rec.timer_divider, Some(50_000));
}

#[test]
fn a_demo_with_plant_variants_and_number_formats_is_byte_identical_on_any_thread_count() {
    // The belt conveyor sweeps three plant variants and two number formats
    // per point: the shared plant side and the nested parallel loops must
    // not make the output depend on scheduling. 1 thread, 3 threads, and
    // the default pool (every core of the machine).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-cases/belt-conveyor.toml");
    let c = Case::load(&path).unwrap();
    let lp = prepare(&c).unwrap();
    let variants = looprate::explore::pick::case_variants(&c, &lp)
        .unwrap()
        .unwrap();
    let run = || {
        // As `sweep --variants` (every variant's row kept), then `pick`.
        let plan = sweep::Plan {
            keep_variants: true,
            ..sweep::Plan::for_case(&c, &lp, Some(&variants))
        };
        let rows = sweep::run(&plan, &case_grid(&c, &lp), &|| {});
        let report = pick(&c, &lp, Some(&variants), &rows, &Silent);
        (
            sweep_csv(&rows, Some(&variants)),
            looprate::output::tables::variants_csv(&rows, &variants),
            serde_json::to_vec(&report).unwrap(),
        )
    };
    let one = pool(1).install(run);
    let three = pool(3).install(run);
    let all = run();
    assert_eq!(one, three, "1 vs 3 threads");
    assert_eq!(one, all, "1 thread vs the default pool");
    let rows = String::from_utf8_lossy(&one.0).lines().count() - 1;
    let points = case_grid(&c, &lp).len();
    assert_eq!(rows, points, "one row per grid point");
    let variant_rows = String::from_utf8_lossy(&one.1).lines().count() - 1;
    assert_eq!(
        variant_rows,
        points * variants.len(),
        "a row per point and variant"
    );
}

#[test]
fn an_empty_window_names_another_method_whose_cheaper_update_fits() {
    // An invented loop with a strictly proper controller k (s + 8) /
    // (s (s/200 + 1)). By hand: foh and tustin give a second-order
    // section with b0, b1, b2, a1, a2 -> 5 MACs -> 5 x 1000 = 5000 cycles;
    // forward Euler and zoh leave b0 = 0 -> 4 MACs -> 4000 cycles. CPU
    // ceilings at 50 % of 8 MHz: 800 Hz (5 MACs), 1000 Hz (4 MACs). foh
    // has the lowest f_star, but f_star x 1.25 is above 800 Hz; forward
    // Euler's f_star is a little higher and x 1.25 fits under 1000 Hz.
    let text = r#"
[plant]
transfer = "20 / ((0.3*s + 1) * (0.01*s + 1))"
[controller]
transfer = "0.8 * (s + 8) / (s * (s/200 + 1))"
[timing]
compute_delay = 1
[rates]
min_hz = 20
max_hz = 5000
points = 60
[methods]
use = ["tustin", "ramp-invariant", "forward-euler", "step-invariant"]
[spec]
max_overshoot_pct = 35
min_phase_margin_deg = 40
[budget]
cpu_hz = 8e6
cycles_per_mac = 1000
overhead_cycles = 0
max_load_pct = 50
"#;
    let c = Case::parse(text, Path::new("other-method.toml")).unwrap();
    let (_, _, report) = nominal_pick(&c);
    let f_star = |name: &str| {
        report
            .methods
            .iter()
            .find(|m| m.method.name() == name)
            .and_then(|m| m.slowest_rate_hz)
            .unwrap()
    };
    let rec = report.recommended.as_ref().unwrap();
    // Preconditions of the scenario (if the figures move, re-tune the case).
    assert_eq!(rec.method.name(), "ramp-invariant");
    assert_eq!(rec.cycles_per_update, Some(5000.0));
    assert_eq!(report.cpu_ceiling_hz, Some(800.0));
    let fe = f_star("forward-euler");
    assert!(fe * 1.25 <= 1000.0 && f_star("step-invariant") * 1.25 > 1000.0);
    let w = report.window.as_ref().unwrap();
    assert!(w.empty);
    let line = report
        .advice
        .iter()
        .find(|a| a.starts_with("another method fits"))
        .unwrap_or_else(|| panic!("no method advice in {:?}", report.advice));
    assert!(
        line.contains("forward-euler (4000 cycles per update)"),
        "{line}"
    );
    assert!(!line.contains("step-invariant"), "zoh does not fit: {line}");
    assert!(
        line.contains(&format!(
            "window {} to 1.000 kHz",
            // The low end rounded up, so the quoted window lies inside.
            looprate::engineering::hz_at_least(fe * 1.25)
        )),
        "{line}"
    );
}
