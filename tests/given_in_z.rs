//! A controller given in z runs at its own rate only: `[rates]` is
//! optional, each listed computation delay gets its own verdict at that
//! rate (checked against a direct evaluation of the same point), and
//! `check` says what is run instead of listing methods.

use looprate::spec::HoldKind;
use std::path::Path;

use looprate::case::Case;
use looprate::explore::pick::{PickReport, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::sampled::evaluate::Point;
use looprate::sampled::feasibility::assess;

/// A gain of 2 in z at 5 Hz around 1/(s(s+1)). Its phase margin is
/// 24.4 deg at computation delay 0.5 and 17.3 deg at delay 1 (as this
/// tool evaluates them; the test below checks the verdicts against a
/// direct evaluation, not against these numbers), so a 20 deg limit
/// passes the first delay and fails the second.
const Z_LOOP: &str = r#"
[plant]
transfer = "1 / (s * (s + 1))"
[controller]
numerator_z = [2.0]
denominator_z = [1.0]
rate_hz = 5
[timing]
compute_delay = [0.5, 1]
[spec]
min_phase_margin_deg = 20
"#;

fn run(c: &Case) -> PickReport {
    let lp = prepare(c).unwrap();
    sweep_and_pick(c, &lp, &|| {}, &Silent).unwrap().report
}

#[test]
fn each_delay_gets_its_own_verdict_and_rates_are_optional() {
    let c = Case::parse(Z_LOOP, Path::new("z.toml")).unwrap();
    assert_eq!(c.rates.grid(), vec![5.0], "the one rate it runs at");
    let lp = prepare(&c).unwrap();
    let report = run(&c);
    assert_eq!(report.methods.len(), 2, "one answer per delay");
    let mut passing = Vec::new();
    for m in &report.methods {
        // The verdict against the same point evaluated on its own.
        let p = Point {
            rate_hz: 5.0,
            method: None,
            delay: m.compute_delay,
            hold: HoldKind::ZeroOrder,
        };
        let a = assess(&lp.sampled(&p), &c.spec);
        assert_eq!(
            m.slowest_rate_hz.is_some(),
            a.feasible,
            "delay {}: {m:?} vs {a:?}",
            m.compute_delay
        );
        if a.feasible {
            assert_eq!(m.slowest_rate_hz, Some(5.0));
            passing.push(m.compute_delay);
        } else {
            assert_eq!(m.limiting.map(|l| l.key()), Some("phase_margin_deg"));
        }
        let said = report
            .notes
            .iter()
            .find(|n| n.starts_with(&format!("computation delay {}:", m.compute_delay)))
            .unwrap_or_else(|| panic!("no verdict for delay {}", m.compute_delay));
        assert_eq!(said.contains("meets the spec"), a.feasible, "{said}");
    }
    assert_eq!(passing, vec![0.5], "the case is built so only 0.5 passes");
    // The recommendation is made at the largest delay (1), which fails:
    // the notes say so and name the delay that passes, and never claim
    // that nothing passes.
    assert!(report.recommended.is_none());
    assert!(
        !report.notes.iter().any(|n| n.contains("no method meets")),
        "{:?}",
        report.notes
    );
    assert!(
        report
            .notes
            .iter()
            .any(|n| n.contains("fails the spec at computation delay 1")
                && n.contains("meets it at computation delay 0.5")),
        "{:?}",
        report.notes
    );
}

#[test]
fn rates_given_for_a_controller_in_z_are_not_used_and_a_note_says_so() {
    let text = format!("{Z_LOOP}[rates]\nmin_hz = 2000\nmax_hz = 100000\n");
    let c = Case::parse(&text, Path::new("z.toml")).unwrap();
    assert_eq!(c.rates.grid(), vec![5.0]);
    assert!(
        c.notes
            .iter()
            .any(|n| n.contains("[rates] does not apply") && n.contains("5 Hz")),
        "{:?}",
        c.notes
    );
    // A broken [rates] table is still reported, not silently dropped.
    let bad = format!("{Z_LOOP}[rates]\nmin_hz = -1\nmax_hz = 10\n");
    let e = Case::parse(&bad, Path::new("z.toml")).unwrap_err();
    assert!(e.to_string().contains("rates.min_hz"), "{e}");
}

#[test]
fn check_says_the_controller_is_given_in_z_instead_of_listing_methods() {
    let c = Case::parse(Z_LOOP, Path::new("z.toml")).unwrap();
    let lp = prepare(&c).unwrap();
    let text = looprate::output::summary::check_text(&c, &lp);
    assert!(!text.contains("methods ;"), "{text}");
    assert!(!text.contains("methods"), "{text}");
    assert!(text.contains("given in z at 5.000 Hz"), "{text}");
}

#[test]
fn with_a_budget_the_window_claims_only_the_one_rate() {
    // Delay 0.5 only, so the design delay passes and there is a
    // recommendation; the CPU budget would allow far more than 5 Hz, but
    // only 5 Hz was checked.
    let text = Z_LOOP.replace("compute_delay = [0.5, 1]", "compute_delay = [0.5]")
        + "[budget]\ncpu_hz = 1e6\ncycles_per_update = 100\nmax_load_pct = 50\n";
    let c = Case::parse(&text, Path::new("z.toml")).unwrap();
    let report = run(&c);
    let rec = report.recommended.as_ref().unwrap();
    assert_eq!(rec.rate_hz, 5.0);
    let w = report.window.as_ref().unwrap();
    assert_eq!([w.low_hz, w.high_hz], [5.0, 5.0]);
    assert!(w.high_bound.is_last_rate_checked(), "{:?}", w.high_bound);
    assert_eq!(w.cpu_ceiling_hz, Some(5000.0), "50 % of 1 MHz / 100 cycles");
}
