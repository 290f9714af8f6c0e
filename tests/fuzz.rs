//! A bounded fuzz run over what a user can type: random expressions, case
//! files with fields replaced by extreme or odd values, both through
//! everything `check` does, and short picks on tiny grids. Any panic, any
//! run over the watchdog, or a printed NaN fails.
//!
//! The default run is short (it is part of `cargo test`). To run longer:
//! `LOOPRATE_FUZZ_CASES=20000 cargo test --release --test fuzz` (cases per
//! target; the pick target runs a tenth of that, at least 24).

use std::path::Path;
use std::sync::mpsc;
use std::time::Duration;

use proptest::prelude::*;
use proptest::test_runner::{Config, TestCaseError, TestRunner};

use looprate::case::Case;
use looprate::explore::pick::{prepare, sweep_and_pick};
use looprate::explore::search::Silent;

/// Longest one input may take through `check` (parse, prepare, print).
const CHECK_WATCHDOG: Duration = Duration::from_secs(5);
/// Longest one pick of a tiny grid may take.
const PICK_WATCHDOG: Duration = Duration::from_secs(8);

fn cases(default: u32) -> u32 {
    std::env::var("LOOPRATE_FUZZ_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// Run `f` on another thread; fail when it panics or takes over `limit`
/// (a hung thread is left behind, the test fails all the same).
fn watchdog<T: Send + 'static>(
    what: &str,
    limit: Duration,
    f: impl FnOnce() -> T + Send + 'static,
) -> Result<T, TestCaseError> {
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        let out = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f));
        let _ = tx.send(out);
    });
    match rx.recv_timeout(limit) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(_)) => Err(TestCaseError::fail(format!("panic on {what}"))),
        Err(_) => Err(TestCaseError::fail(format!("over {limit:?} on {what}"))),
    }
}

/// Everything `looprate check` does with a case file's text: the printed
/// text, or empty when the input is refused (an error may quote the
/// user's own `nan`).
fn check(text: &str) -> String {
    match Case::parse(text, Path::new("fuzz.toml")) {
        Err(e) => {
            // Every refusal names the file.
            assert!(e.to_string().contains("fuzz.toml"), "{e}");
            String::new()
        }
        Ok(c) => match prepare(&c) {
            Err(_) => String::new(),
            Ok(lp) => looprate::output::summary::check_text(&c, &lp),
        },
    }
}

/// Numbers that have broken things: subnormal, near overflow, zero, tiny
/// and huge rates, ordinary ones.
fn number() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("1e-320".to_string()),
        Just("1e-160".to_string()),
        Just("2e305".to_string()),
        Just("1e10".to_string()),
        Just("1e-9".to_string()),
        Just("0".to_string()),
        Just("-1e-303".to_string()),
        Just("1e-50".to_string()),
        (1u32..1000).prop_map(|v| v.to_string()),
        (-3.0f64..3.0).prop_map(|e| format!("{:.3e}", 10f64.powf(e))),
    ]
}

/// An expression in s built from those numbers: sums, products, quotients,
/// small and large powers, parentheses.
fn expression() -> impl Strategy<Value = String> {
    let leaf = prop_oneof![
        number(),
        Just("s".to_string()),
        number().prop_map(|k| format!("({k}*s + 1)")),
    ];
    leaf.prop_recursive(4, 24, 3, |inner| {
        prop_oneof![
            (inner.clone(), inner.clone()).prop_map(|(a, b)| format!("{a} + {b}")),
            (inner.clone(), inner.clone()).prop_map(|(a, b)| format!("({a}) * ({b})")),
            (inner.clone(), inner.clone()).prop_map(|(a, b)| format!("({a}) / ({b})")),
            (inner.clone(), 0u32..40).prop_map(|(a, n)| format!("({a})^{n}")),
            inner.prop_map(|a| format!("-({a})")),
        ]
    })
}

const BASE: &str = "title = \"fuzz\"
[plant]
transfer = \"@PLANT\"
[sensor]
transfer = \"@SENSOR\"
[controller]
transfer = \"@CONTROLLER\"
[timing]
compute_delay = [@DELAY]
[rates]
min_hz = @MIN
max_hz = @MAX
points = @POINTS
[methods]
use = [\"tustin\", \"step-invariant\"]
[spec]
max_overshoot_pct = 30
max_sensitivity_peak = @MS
";

/// A case file with each placeholder replaced by `values` in order.
fn fill(values: &[String]) -> String {
    let keys = [
        "@PLANT",
        "@SENSOR",
        "@CONTROLLER",
        "@DELAY",
        "@MIN",
        "@MAX",
        "@POINTS",
        "@MS",
    ];
    let mut text = BASE.to_string();
    for (k, v) in keys.iter().zip(values) {
        text = text.replace(k, v);
    }
    text
}

fn ordinary(k: usize) -> String {
    [
        "38 / ((0.42*s + 1) * (0.004*s + 1))",
        "1",
        "0.05 * (s + 12) / s",
        "0.5",
        "20",
        "5000",
        "4",
        "1.6",
    ][k]
        .to_string()
}

#[test]
fn fuzz_expressions_through_check() {
    let mut runner = TestRunner::new(Config {
        cases: cases(400),
        failure_persistence: None,
        ..Config::default()
    });
    runner
        .run(&(expression(), 0usize..3), |(e, slot)| {
            let mut values: Vec<String> = (0..8).map(ordinary).collect();
            values[slot] = e.clone();
            let text = fill(&values);
            let out = watchdog(&e, CHECK_WATCHDOG, move || check(&text))?;
            prop_assert!(!out.contains("NaN"), "{e}: {out}");
            Ok(())
        })
        .unwrap();
}

#[test]
fn fuzz_case_files_through_check() {
    let mut runner = TestRunner::new(Config {
        cases: cases(400),
        failure_persistence: None,
        ..Config::default()
    });
    let field = prop_oneof![
        number(),
        Just("nan".to_string()),
        Just("inf".to_string()),
        Just("-inf".to_string()),
        Just("\"text\"".to_string()),
        Just("[1, 2]".to_string()),
        Just("".to_string()),
    ];
    runner
        .run(
            &(
                proptest::collection::vec((0usize..8, field), 1..4),
                expression(),
            ),
            |(changes, e)| {
                let mut values: Vec<String> = (0..8).map(ordinary).collect();
                for (slot, v) in changes {
                    values[slot] = if slot < 3 { e.clone() } else { v };
                }
                let text = fill(&values);
                let shown = text.clone();
                let out = watchdog("a case file", CHECK_WATCHDOG, move || check(&text))?;
                prop_assert!(!out.contains("NaN"), "{shown}\n{out}");
                Ok(())
            },
        )
        .unwrap();
}

#[test]
fn fuzz_short_picks_on_tiny_grids() {
    let n = (cases(200) / 10).max(24);
    let mut runner = TestRunner::new(Config {
        cases: n,
        failure_persistence: None,
        ..Config::default()
    });
    let rate = prop_oneof![
        Just("1e-6".to_string()),
        Just("0.01".to_string()),
        Just("20".to_string()),
        Just("5000".to_string()),
        Just("1e9".to_string()),
    ];
    // The base case every input varies must itself get to a pick: when it
    // no longer parsed (a renamed key) every case stopped at parsing and
    // this fuzz did nothing. (A share of the random cases is no check: the
    // runner's seed changes from run to run.)
    let base: Vec<String> = (0..8).map(ordinary).collect();
    let c = Case::parse(&fill(&base), Path::new("fuzz.toml")).expect("the base case parses");
    prepare(&c).expect("the base case prepares");
    runner
        .run(
            &(
                proptest::collection::vec((0usize..3, expression()), 0..2),
                rate.clone(),
                rate,
                prop_oneof![Just("0"), Just("0.5"), Just("1")],
                // Transport delays on the plant and the sensor: at a fast
                // rate, millions of periods (once an abort asking for 29 GB).
                prop_oneof![Just("0"), Just("1e-3"), Just("0.5"), Just("6")],
                prop_oneof![Just("0"), Just("2e-4"), Just("2")],
            ),
            |(changes, lo, hi, delay, plant_delay, sensor_delay)| {
                let mut values: Vec<String> = (0..8).map(ordinary).collect();
                for (slot, e) in changes {
                    values[slot] = e;
                }
                values[3] = delay.to_string();
                values[4] = lo;
                values[5] = hi;
                values[6] = "3".into();
                let text = fill(&values)
                    .replace("[sensor]", &format!("delay_s = {plant_delay}\n[sensor]"))
                    .replace(
                        "[controller]",
                        &format!("delay_s = {sensor_delay}\n[controller]"),
                    );
                let shown = text.clone();
                let out = watchdog("a pick", PICK_WATCHDOG, move || {
                    let Ok(c) = Case::parse(&text, Path::new("fuzz.toml")) else {
                        return String::new();
                    };
                    let Ok(lp) = prepare(&c) else {
                        return String::new();
                    };
                    match sweep_and_pick(&c, &lp, &|| {}, &Silent) {
                        Ok(p) => {
                            let csv =
                                looprate::output::tables::sweep_csv(&p.rows, p.variants.as_ref());
                            let mut s = String::from_utf8_lossy(&csv).into_owned();
                            if let Ok(t) = looprate::output::report::pick_text(&c, &p.report, &[]) {
                                s.push_str(&t);
                            }
                            s
                        }
                        Err(_) => String::new(),
                    }
                })?;
                prop_assert!(!out.contains("NaN"), "{shown}\n{out}");
                Ok(())
            },
        )
        .unwrap();
}
