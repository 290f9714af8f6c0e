//! Ramped outer holds of a cascade (`[outer.timing] hold`): the outer
//! command shaped as the inner loop's reference by a first-order or
//! interpolating hold, its ramp read at the inner ticks
//! (`docs/figures.md`, "Cascaded loops"). Each check names its source.
//! The brute-force simulation of the ramps is in `tests/cascade.rs`
//! (`outer_step_matches_a_fine_step_simulation_at_ratios_4_and_10`).

use std::path::Path;

use looprate::case::Case;
use looprate::explore::cascade::{cascade_pick, cascade_rows, case_series};
use looprate::model::discretize::Method;
use looprate::model::transfer::{Controller, Transfer};
use looprate::output::cascade::cascade_csv;
use looprate::sampled::cascade::evaluate::{CascadePoint, PreparedCascade};
use looprate::sampled::evaluate::{Figures, Point};
use looprate::spec::HoldKind;

mod common;

/// The servo drive of `tests/cascade.rs` (`common::drive`) with a filtered
/// speed sensor, over 6 inner rates, `extra` more tables.
fn drive(extra: &str) -> String {
    common::drive(
        "[outer.sensor]\ntransfer = \"1 / (0.0002*s + 1)\"",
        1.0,
        6,
        extra,
    )
}

fn prepared(text: &str) -> (Case, PreparedCascade) {
    common::prepared(text, "holds.toml")
}

fn point(ratio: usize, outer_delay: f64, outer_hold: HoldKind) -> CascadePoint {
    CascadePoint {
        inner: Point {
            rate_hz: 20_000.0,
            method: Some(Method::Tustin),
            delay: 1.0,
            hold: HoldKind::ZeroOrder,
        },
        ratio,
        outer_method: Some(Method::Tustin),
        outer_delay,
        outer_hold,
    }
}

fn figures(pc: &PreparedCascade, p: &CascadePoint) -> Figures {
    pc.evaluate_outer(p, false)
        .figures
        .unwrap_or_else(|| panic!("no outer figures at {p:?}"))
}

/// The figures two realisations of one loop must share, to `tol` relative.
fn assert_same(a: &Figures, b: &Figures, tol: f64, what: &str) {
    let pairs = [
        ("y_final", Some(a.y_final), Some(b.y_final)),
        ("overshoot", a.overshoot_pct, b.overshoot_pct),
        ("settling", a.settling_time_s, b.settling_time_s),
        ("rise", a.rise_time_s, b.rise_time_s),
        (
            "disturbance peak",
            Some(a.disturbance_peak),
            Some(b.disturbance_peak),
        ),
        ("phase margin", a.phase_margin_deg, b.phase_margin_deg),
        ("gain margin", a.gain_margin_db, b.gain_margin_db),
        (
            "sensitivity peak",
            Some(a.sensitivity_peak),
            Some(b.sensitivity_peak),
        ),
    ];
    for (name, x, y) in pairs {
        let (x, y) = (x.unwrap(), y.unwrap());
        assert!(
            (x - y).abs() <= tol * x.abs().max(y.abs()).max(1e-12),
            "{what}: {name} {x} vs {y}"
        );
    }
}

/// Ratio 1 in closed form: with one inner tick per outer period the ramp
/// is read only at `j = 0`, so a first-order outer hold gives the
/// reference `v_k` (the zero-order hold's, at every outer delay) and an
/// interpolating one `v_{k-1}` (the zero-order hold one more outer period
/// late) (source: the hold definitions of `docs/figures.md`, "Hold kinds",
/// evaluated at j = 0, a closed form; the zero-order ratio-1 loop is
/// itself checked against block algebra in `tests/cascade.rs`).
#[test]
fn ratio_one_ramps_are_zero_order_holds_in_closed_form() {
    let (_, pc) = prepared(&drive(""));
    for delay in [0.0, 0.5, 1.0, 2.0] {
        let zoh = figures(&pc, &point(1, delay, HoldKind::ZeroOrder));
        let foh = figures(&pc, &point(1, delay, HoldKind::FirstOrder));
        assert_same(&foh, &zoh, 1e-12, &format!("first-order, delay {delay}"));
        let late = figures(&pc, &point(1, delay + 1.0, HoldKind::ZeroOrder));
        let interp = figures(&pc, &point(1, delay, HoldKind::Interpolating));
        assert_same(
            &interp,
            &late,
            1e-8,
            &format!("interpolating, delay {delay}"),
        );
    }
}

/// A constant command is a constant reference for every hold kind, so the
/// steady states do not move (source: the hold definitions, `v_k =
/// v_{k-1}` makes every ramp flat, a closed form); the ramps do change the
/// loop: the low-frequency delay of the holds (`docs/figures.md`, "Hold
/// kinds": first-order 0, zero-order half a period, interpolating a whole
/// period) orders the phase margins (common practice, no source).
#[test]
fn ramps_keep_the_steady_state_and_order_the_phase_margins() {
    let (_, pc) = prepared(&drive(""));
    for ratio in [4usize, 10] {
        let [zoh, foh, interp] = [
            HoldKind::ZeroOrder,
            HoldKind::FirstOrder,
            HoldKind::Interpolating,
        ]
        .map(|h| figures(&pc, &point(ratio, 0.5, h)));
        for f in [&foh, &interp] {
            assert!(
                (f.y_final - zoh.y_final).abs() <= 1e-9 * zoh.y_final.abs(),
                "ratio {ratio}: y_final {} vs {}",
                f.y_final,
                zoh.y_final
            );
        }
        let pm = |f: &Figures| f.phase_margin_deg.unwrap();
        eprintln!(
            "ratio {ratio}: phase margins first-order {}, zero-order {}, interpolating {}",
            pm(&foh),
            pm(&zoh),
            pm(&interp)
        );
        assert!(
            pm(&foh) > pm(&zoh) + 0.1 && pm(&zoh) > pm(&interp) + 0.1,
            "ratio {ratio}: {} {} {}",
            pm(&foh),
            pm(&zoh),
            pm(&interp)
        );
    }
}

/// The outer gain margin and delay margin by their meaning, for each
/// ramped hold: the outer controller scaled by the gain margin (0.1 dB
/// short / past) keeps / loses stability of the lifted loop; an outer delay
/// just short of / past the delay margin likewise (`docs/figures.md`,
/// "Loop figures": each margin checked by its meaning).
#[test]
fn outer_margins_of_ramped_holds_flip_stability_just_past_them() {
    let (_, pc) = prepared(&drive(""));
    let t = 1.0 / 20_000.0;
    for hold in [HoldKind::FirstOrder, HoldKind::Interpolating] {
        for ratio in [4usize, 10] {
            let p = point(ratio, 0.5, hold);
            let f = pc.evaluate_outer(&p, true).figures.unwrap();
            let gm = f.gain_margin_db.unwrap();
            for (db, stable) in [(gm - 0.1, true), (gm + 0.1, false)] {
                let mut scaled = pc.clone();
                let k = 10f64.powf(db / 20.0);
                let Controller::Continuous(c) = &pc.outer_models.controller else {
                    panic!("continuous outer controller expected");
                };
                let tf = Transfer::new(c.numerator.scale(k), c.denominator.clone());
                scaled.ideal.controller = Controller::Continuous(tf);
                assert_eq!(
                    scaled.screen(&p).is_none(),
                    stable,
                    "{hold} ratio {ratio}: gain x {db} dB"
                );
            }
            let dm = f.delay_margin_s.unwrap();
            let to = ratio as f64 * t;
            for (extra, stable) in [(dm - 0.5 * t, true), (dm + 1e-3 * t, false)] {
                let q = CascadePoint {
                    outer_delay: 0.5 + extra.max(0.0) / to,
                    ..p
                };
                assert_eq!(
                    pc.screen(&q).is_none(),
                    stable,
                    "{hold} ratio {ratio}: extra delay {extra} s (margin {dm} s)"
                );
            }
        }
    }
}

/// A case listing several outer holds: one series per hold (as `[timing]
/// hold` lists several for the single loop), an `outer_hold` column in the
/// cascade rows and an `outer_hold` key on each series of `pick.json`;
/// zero-order alone keeps the outputs without them (the project's own
/// output rules, `docs/figures.md`, "Cascaded loops").
#[test]
fn several_outer_holds_are_series_named_in_the_outputs() {
    let listed = "[outer.timing]\ncompute_delay = [0.5]\nhold = [\"zero-order\", \"first-order\"]";
    let (c, pc) = prepared(&drive(listed));
    let outer = c.outer.as_ref().unwrap();
    assert_eq!(outer.holds, [HoldKind::ZeroOrder, HoldKind::FirstOrder]);
    let series = case_series(&c, outer);
    assert_eq!(series.len(), 2);
    let rows = cascade_rows(&c, &pc, false);
    let csv = String::from_utf8(cascade_csv(&rows, outer.hold_named())).unwrap();
    let header: Vec<&str> = csv.lines().next().unwrap().split(',').collect();
    let col = header.iter().position(|h| *h == "outer_hold").unwrap();
    assert_eq!(header[col - 1], "outer_method");
    for kind in ["zero-order", "first-order"] {
        assert!(
            csv.lines()
                .skip(1)
                .any(|l| l.split(',').nth(col) == Some(kind)),
            "no {kind} row"
        );
    }
    let pick = cascade_pick(&c, &pc, &rows);
    let v = serde_json::to_value(&pick).unwrap();
    let named: Vec<&str> = v["series"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["outer_hold"].as_str().unwrap())
        .collect();
    assert!(named.contains(&"zero-order") && named.contains(&"first-order"));
    if let Some(chosen) = v.get("chosen").filter(|c| !c.is_null()) {
        assert!(chosen["outer_hold"].is_string());
    }

    // Zero-order alone (written or not): no column, no key.
    for extra in ["", "[outer.timing]\nhold = \"zero-order\""] {
        let (c, pc) = prepared(&drive(extra));
        let outer = c.outer.as_ref().unwrap();
        assert!(!outer.hold_named());
        let rows = cascade_rows(&c, &pc, false);
        let csv = String::from_utf8(cascade_csv(&rows, outer.hold_named())).unwrap();
        assert!(!csv.contains("outer_hold"));
        let v = serde_json::to_value(cascade_pick(&c, &pc, &rows)).unwrap();
        assert!(!v.to_string().contains("outer_hold"));
    }
}

/// An outer controller given in z runs only with the hold it was designed
/// for (`[outer.controller] hold`), as the single loop's does; listing
/// another is an error naming the field (the project's case-file rules).
#[test]
fn an_outer_controller_in_z_keeps_its_own_hold() {
    let z = |hold_line: &str, timing: &str| {
        drive(timing)
            .replace(
                "pid = { kp = 0.25, ki = 12 }",
                &format!(
                    "numerator_z = [0.25, -0.24]\ndenominator_z = [1, -1]\nrate_hz = 2000\n{hold_line}"
                ),
            )
            .replace("[outer.methods]\nuse = [\"tustin\"]", "")
    };
    let c = Case::parse(&z("hold = \"first-order\"", ""), Path::new("z.toml")).unwrap();
    assert_eq!(c.outer.as_ref().unwrap().holds, [HoldKind::FirstOrder]);
    let e = Case::parse(
        &z(
            "",
            "[outer.timing]\nhold = [\"zero-order\", \"interpolating\"]",
        ),
        Path::new("z.toml"),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.contains("z.toml")
            && e.contains("outer.timing.hold[1]")
            && e.contains("[outer.controller] hold"),
        "{e}"
    );
}

/// `eval --ratio N --outer-hold KIND` evaluates that outer hold and names
/// it in the `outer` object; an unknown kind is an error (exit 2) naming
/// the flag.
#[test]
fn eval_outer_hold_flag() {
    let bin = env!("CARGO_BIN_EXE_looprate");
    let case = "demo-cases/motor-drive-cascade.toml";
    let run = |hold: &str| {
        std::process::Command::new(bin)
            .args(["eval", case, "--rate", "20000", "--ratio", "10", "--json"])
            .args(["--outer-hold", hold])
            .output()
            .unwrap()
    };
    let out = run("staircase");
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--outer-hold"));
    let mut pms = Vec::new();
    for hold in ["zero-order", "first-order"] {
        let out = run(hold);
        assert_eq!(out.status.code(), Some(0), "{hold}");
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["outer"]["hold"], hold);
        pms.push(v["outer"]["phase_margin_deg"].as_f64().unwrap());
    }
    assert!(pms[0] != pms[1], "{pms:?}");
}
