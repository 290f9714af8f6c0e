//! The continuous design's time figures have no cap in grid steps: they
//! are found by jumping through the exact grid (`ContinuousLoop::
//! time_figures`) and must equal a walk through every grid step where the
//! walk is not capped, and a lightly damped loop whose settling needs
//! more steps than the walk's cap gets its answer.

use std::path::PathBuf;

use looprate::case::Case;
use looprate::explore::pick::{prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::model::discretize::Method;
use looprate::model::transfer::Controller;
use looprate::sampled::continuous::{ContinuousLoop, HoldApprox, grid_steps};
use looprate::sampled::evaluate::Point;
use looprate::sampled::time_response::{TimeFigure, TimeOptions};
use looprate::spec::HoldKind;

fn load(dir: &str, name: &str) -> Case {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join(dir)
        .join(name);
    Case::load(&path).unwrap()
}

fn close(a: f64, b: f64, rel: f64, what: &str) {
    let scale = a.abs().max(b.abs()).max(1e-300);
    assert!((a - b).abs() <= rel * scale, "{what}: {a} vs {b}");
}

fn close_opt(a: Option<f64>, b: Option<f64>, rel: f64, what: &str) {
    match (a, b) {
        (Some(a), Some(b)) => close(a, b, rel, what),
        (None, None) => {}
        _ => panic!("{what}: {a:?} vs {b:?}"),
    }
}

#[test]
fn jumped_continuous_figures_equal_the_walk_on_every_demo_case() {
    // Reference: the walk through every grid step (no shortcut), on loops
    // short enough for its cap; the design and its hold approximations.
    for name in [
        "belt-conveyor.toml",
        "oven-heater.toml",
        "gimbal-axis.toml",
        "buck-converter.toml",
        "pump-pressure-tight-cpu.toml",
    ] {
        let case = load("demo-cases", name);
        let lp = prepare(&case).unwrap();
        let Controller::Continuous(c) = &lp.controller else {
            panic!("{name}: a continuous design");
        };
        let theta = 0.5 / 1000.0;
        // The resolving grid of a slow loop behind a fast actuator has
        // more steps than the walk's default cap.
        let walk = TimeOptions {
            max_steps: 1 << 23,
            ..lp.time
        };
        let acts = [
            None,
            Some(HoldApprox::Lag.transfer(theta)),
            Some(HoldApprox::Pade22.transfer(theta)),
        ];
        for act in &acts {
            let cl = ContinuousLoop::new(
                &lp.plant_model,
                &lp.plant,
                &lp.sensor,
                c,
                act.as_ref(),
                None,
            )
            .unwrap();
            let poles = cl.poles().unwrap();
            if poles.iter().any(|p| p.re >= 0.0) {
                continue;
            }
            // On each grid the figures may be read on (`grid_steps`: the
            // one resolving the fastest mode, when finer, and the coarser
            // one), the jumps against the walk of that grid.
            for h in grid_steps(&poles) {
                let at = format!("{name} actuator {} step {h:e} s", act.is_some());
                let (js, jd) = cl.jumped_time_figures(h, &lp.time).unwrap().unwrap();
                let (ws, wd) = cl.walked_time_figures(&poles, h, &walk).unwrap();
                assert!(ws.undecided.is_empty(), "{at}: the walk is capped");
                assert!(js.undecided.is_empty() && jd.undecided.is_empty(), "{at}");
                // Tolerance: the walk repeats `x = e^{Ah} x + G(h)` from 0, so
                // it drifts toward that map's own fixed point, which on a fine
                // grid (`e^{Ah}` close to I) sits up to about 1e-6 relative
                // from the continuous one both are measured against (measured:
                // 3.8e-6 on the buck converter behind a [2/2] Pade); the jumps
                // measure every point from the continuous fixed point.
                let tol = 1e-5;
                close(js.y_final, ws.y_final, 1e-12, &at);
                close_opt(
                    js.overshoot_pct.map(|o| o + 100.0),
                    ws.overshoot_pct.map(|o| o + 100.0),
                    tol,
                    &at,
                );
                close_opt(js.settling_time_s, ws.settling_time_s, tol, &at);
                close_opt(js.rise_time_s, ws.rise_time_s, tol, &at);
                close(js.u_peak, ws.u_peak, tol, &at);
                close(jd.disturbance_peak, wd.disturbance_peak, tol, &at);
                close_opt(jd.recovery_time_s, wd.recovery_time_s, tol, &at);
            }
        }
    }
}

#[test]
fn lightly_damped_design_past_the_walks_cap_gets_its_answer() {
    // 300 rad/s, damping 0.0005, under 0.05/s: the walk needs more grid
    // steps than its cap (a fine step for the 300 rad/s mode over a
    // horizon set by the slow integral pole). The integral loop's slow
    // pole is close to -0.05 rad/s (loop gain 0.05/s times a unit DC
    // gain), so the step settles into the 2 % band after about
    // ln(50)/0.05 = 78.24 s (first-order settling, closed form); the
    // resonance's share of the response is of order 0.05/300.
    let case = load("benches/cases", "lightly-damped.toml");
    let lp = prepare(&case).unwrap();
    let Controller::Continuous(c) = &lp.controller else {
        panic!("a continuous design");
    };
    let cl = ContinuousLoop::new(&lp.plant_model, &lp.plant, &lp.sensor, c, None, None).unwrap();
    let poles = cl.poles().unwrap();
    let coarse = *grid_steps(&poles).last().unwrap();
    let (ws, _) = cl.walked_time_figures(&poles, coarse, &lp.time).unwrap();
    assert!(
        ws.undecided.contains(&TimeFigure::SettlingTime),
        "the walk is expected to hit its cap here: {ws:?}"
    );
    let design = lp.design.as_ref().and_then(|d| d.figures.clone()).unwrap();
    assert!(design.undecided.is_empty(), "{:?}", design.undecided);
    let settle = design.settling_time_s.unwrap();
    let first_order = 50f64.ln() / 0.05;
    assert!(
        (settle - first_order).abs() < 0.005 * first_order,
        "settling {settle} vs {first_order}"
    );
    let report = sweep_and_pick(&case, &lp, &|| {}, &Silent).unwrap().report;
    assert!(report.design_failures.iter().all(|f| f.pass));
    let rec = report.recommended.expect("an answer");
    assert!(rec.rate_hz > 0.0);
}

#[test]
fn hold_approximations_of_a_lightly_damped_loop_at_fast_rates_are_decided() {
    // The lightly damped case behind each hold approximation at rates up
    // to 100 kHz: the approximation's poles (near -1/theta, theta = 1.5
    // periods) decay within one step of the coarse grid, where the modal
    // bound fails and the figures were walked; on the grid that resolves
    // them every figure is decided by the jumps. Reference: the integral
    // loop's slow pole near -0.05 rad/s settles into the 2 % band after
    // about ln(50)/0.05 = 78.24 s (first-order settling, closed form; the
    // 300 rad/s resonance's share is of order 0.05/300), at every rate.
    let case = load("benches/cases", "lightly-damped.toml");
    let lp = prepare(&case).unwrap();
    let first_order = 50f64.ln() / 0.05;
    for rate_hz in [1e3, 2e4, 1e5] {
        let p = Point {
            rate_hz,
            method: Some(Method::Tustin),
            delay: 0.5,
            hold: HoldKind::ZeroOrder,
        };
        for kind in HoldApprox::ALL {
            let e = lp.hold_approx(&p, kind);
            let f = e.figures.expect("a stable loop");
            let at = format!("{rate_hz} Hz {kind:?}");
            assert!(f.undecided.is_empty(), "{at}: {:?}", f.undecided);
            let settle = f.settling_time_s.unwrap();
            assert!(
                (settle - first_order).abs() < 0.005 * first_order,
                "{at}: settling {settle} vs {first_order}"
            );
        }
    }
}
