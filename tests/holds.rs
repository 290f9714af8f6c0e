//! Hold kinds, delays of any length and transport delays: the exact hold
//! equivalent against SciPy's triangle-hold and zero-order-hold
//! equivalents, closed forms, the hold's own frequency response (the
//! aliasing sum), a fine-step RK4 simulation of the whole closed loop, and
//! the margins by their meaning with every hold kind.

use looprate::model::discretize::Method;
use looprate::model::poly::{C64, Poly};
use looprate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use looprate::sampled::evaluate::{Given, Point, PreparedLoop, Transport};
use looprate::sampled::hold::{Actuation, HoldEquivalent, plant_and_sensor};
use looprate::sampled::time_response::TimeOptions;
use looprate::spec::HoldKind;
use nalgebra::DVector;
use serde_json::Value;

fn transfer(num: &[f64], den: &[f64]) -> Transfer {
    Transfer::new(Poly::from_descending(num), Poly::from_descending(den))
}

fn vecf(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect()
}

fn pulse(plant: &Transfer, sensor: &Transfer, t: f64, act: Actuation) -> DiscreteTransfer {
    let m = plant_and_sensor(plant, sensor).unwrap();
    HoldEquivalent::with(&m, t, &act, 16)
        .unwrap()
        .pulse_transfer()
        .unwrap()
}

fn act(hold: HoldKind, delay_periods: f64) -> Actuation {
    Actuation {
        hold,
        delay_periods,
        sensor_delay_s: 0.0,
    }
}

#[test]
fn interpolating_and_zero_order_holds_match_scipy() {
    // SciPy 1.17.1, scipy.signal.cont2discrete (tests/reference/
    // discretize.json, written by generate.py): the interpolating hold at
    // delay 0 is SciPy's `ramp-invariant` (the triangle hold) one period late, and the
    // zero-order hold with m whole periods of delay is z^-m times `step-invariant`.
    let path = format!(
        "{}/tests/reference/discretize.json",
        env!("CARGO_MANIFEST_DIR")
    );
    let data: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let mut checked = 0;
    let mut worst = 0.0f64;
    for e in data["entries"].as_array().unwrap() {
        // SciPy's own method names (keep-name): foh and zoh.
        let method = e["scipy_method"].as_str().unwrap();
        if method != "foh" && method != "zoh" {
            // keep-name
            continue;
        }
        let t = e["period_s"].as_f64().unwrap();
        let plant = transfer(&vecf(&e["num"]), &vecf(&e["den"]));
        let reference = transfer(&vecf(&e["num_z"]), &vecf(&e["den_z"])); // keep-name
        let tol = e["rel_tol"].as_f64().unwrap().max(1e-9);
        let cases: Vec<(HoldKind, f64, i32)> = if method == "foh" {
            // keep-name
            vec![(HoldKind::Interpolating, 0.0, 1)]
        } else {
            vec![(HoldKind::ZeroOrder, 2.0, 2), (HoldKind::ZeroOrder, 3.0, 3)]
        };
        for (hold, delay, shift) in cases {
            let ours = pulse(&plant, &Transfer::gain(1.0), t, act(hold, delay));
            // Compare on the unit circle, relative to the largest value
            // seen (a zero of the reference there makes a point meaningless
            // alone).
            let ws: Vec<f64> = [0.05, 0.3, 1.0, 2.0, 2.9].to_vec();
            let refs: Vec<C64> = ws
                .iter()
                .map(|wt| {
                    let z = C64::from_polar(1.0, *wt);
                    reference.eval(z) / z.powi(shift)
                })
                .collect();
            let scale = refs.iter().fold(0.0f64, |m, v| m.max(v.norm()));
            for (wt, r) in ws.iter().zip(&refs) {
                let v = ours.transfer.eval(C64::from_polar(1.0, *wt));
                let err = (v - r).norm() / scale;
                worst = worst.max(err / tol);
                assert!(
                    err < 1e3 * tol,
                    "{} {method} {hold} delay {delay}: wT={wt}: {v} vs {r} ({err:e})",
                    e["name"]
                );
            }
            checked += 1;
        }
    }
    assert!(checked > 100, "only {checked} reference comparisons");
    eprintln!("{checked} comparisons, worst error {worst:.2} x the entry's tolerance");
}

#[test]
fn ramp_hold_equivalents_of_integrators_match_closed_forms() {
    // Closed forms (derived from the hold's input over one period; the
    // triangle-hold ones are the textbook results, from memory):
    //   1/s,   first-order:   T (3z - 1) / (2 z (z - 1))
    //   1/s^2, first-order:   T^2 (2z^2 + 2z - 1) / (3 z (z - 1)^2)
    //   1/s,   interpolating: z^-1 T (z + 1) / (2 (z - 1))
    //   1/s^2, interpolating: z^-1 T^2 (z^2 + 4z + 1) / (6 (z - 1)^2)
    let t = 0.01;
    type Form = Box<dyn Fn(C64) -> C64>;
    let forms: Vec<(Transfer, HoldKind, Form)> = vec![
        (
            transfer(&[1.0], &[1.0, 0.0]),
            HoldKind::FirstOrder,
            Box::new(move |z| t * (3.0 * z - 1.0) / (2.0 * z * (z - 1.0))),
        ),
        (
            transfer(&[1.0], &[1.0, 0.0, 0.0]),
            HoldKind::FirstOrder,
            Box::new(move |z| {
                t * t * (2.0 * z * z + 2.0 * z - 1.0) / (3.0 * z * (z - 1.0) * (z - 1.0))
            }),
        ),
        (
            transfer(&[1.0], &[1.0, 0.0]),
            HoldKind::Interpolating,
            Box::new(move |z| t * (z + 1.0) / (2.0 * z * (z - 1.0))),
        ),
        (
            transfer(&[1.0], &[1.0, 0.0, 0.0]),
            HoldKind::Interpolating,
            Box::new(move |z| t * t * (z * z + 4.0 * z + 1.0) / (6.0 * z * (z - 1.0) * (z - 1.0))),
        ),
    ];
    for (plant, hold, form) in forms {
        let g = pulse(&plant, &Transfer::gain(1.0), t, act(hold, 0.0));
        for wt in [0.01, 0.4, 1.5, 3.1] {
            let z = C64::from_polar(1.0, wt);
            let (a, b) = (g.transfer.eval(z), form(z));
            assert!(
                (a - b).norm() < 1e-9 * b.norm(),
                "{hold} {plant:?} wT={wt}: {a} vs {b}"
            );
        }
    }
}

#[test]
fn pulse_transfer_is_the_aliasing_sum_of_each_holds_response() {
    // Sampling theorem for a hold followed by a plant (closed form, from
    // memory): G(e^{jwT}) = sum_k Hh(j w_k) e^{-j w_k tau} P(j w_k),
    // w_k = w + 2 pi k / T, where Hh is the hold's response per sampled
    // command: (1 - e^{-sT})/(sT) for zero-order, (1 + sT) times its
    // square for first-order, its square for interpolating. Plant
    // 60/((s+2)(s+6)(s+10)): terms fall as k^-4 or faster, so 20 000
    // aliases leave ~1e-12.
    let plant = transfer(&[60.0], &[1.0, 18.0, 92.0, 120.0]);
    let t = 0.05;
    let two_pi_t = 2.0 * std::f64::consts::PI / t;
    for hold in HoldKind::ALL {
        for delay in [0.0, 0.4] {
            let g = pulse(&plant, &Transfer::gain(1.0), t, act(hold, delay));
            for w in [0.5, 7.0, 40.0, 62.0] {
                let mut sum = C64::new(0.0, 0.0);
                for k in -20_000i64..=20_000 {
                    let wk = w + two_pi_t * k as f64;
                    sum += hold.response(t, wk)
                        * C64::from_polar(1.0, -wk * delay * t)
                        * plant.eval(C64::new(0.0, wk));
                }
                let ours = g.transfer.eval(C64::from_polar(1.0, w * t));
                assert!(
                    (ours - sum).norm() < 1e-7 * sum.norm(),
                    "{hold} delay {delay} w={w}: {ours} vs {sum}"
                );
            }
        }
    }
}

/// Brute force: the closed loop simulated with RK4 at `sub` steps per
/// period: the continuous plant driven by the hold's piecewise-linear
/// signal, the sensor's output delayed by `sensor_delay` (a whole number of
/// RK4 steps), the controller a difference equation. Returns y at every
/// 1/16 of a period for `periods` periods (unit reference step).
#[allow(clippy::too_many_arguments)]
fn rk4_closed_loop(
    plant: &Transfer,
    sensor: &Transfer,
    c: &DiscreteTransfer,
    hold: HoldKind,
    delay_periods: f64,
    sensor_delay_steps: usize,
    sub: usize,
    periods: usize,
) -> Vec<f64> {
    let m = plant_and_sensor(plant, sensor).unwrap();
    let t = c.period_s;
    let h = t / sub as f64;
    let n = m.order();
    // Controller: y[k] = (sum b_i e[k-i] - sum_{i>0} a_i u[k-i]) / a_0.
    let b = c.transfer.numerator.descending();
    let a = c.transfer.denominator.descending();
    let (nb, na) = (b.len(), a.len());
    let pad = na - nb; // the numerator's leading zeros
    let mut e_hist = vec![0.0; na];
    let mut u_hist: Vec<f64> = vec![0.0; na];
    let mut commands: Vec<f64> = Vec::new(); // u_k for k = 0..
    let update =
        |k: i64, commands: &[f64]| -> f64 { if k < 0 { 0.0 } else { commands[k as usize] } };
    // The actuator signal at time s, given the commands so far.
    let signal = |s: f64, commands: &[f64]| -> f64 {
        let tau = delay_periods * t;
        let x = (s - tau) / t;
        let i = x.floor() as i64; // update interval index
        let frac = x - i as f64;
        let (vi, vp) = (update(i, commands), update(i - 1, commands));
        match hold {
            HoldKind::ZeroOrder => vi,
            HoldKind::FirstOrder => vi + (vi - vp) * frac,
            HoldKind::Interpolating => vp + (vi - vp) * frac,
        }
    };
    let f = |x: &DVector<f64>, uu: f64| &m.a * x + &m.b * uu;
    let mut x = DVector::zeros(n);
    let mut ym_hist: Vec<f64> = Vec::new(); // measured output at each RK4 step
    let mut out = Vec::new();
    let mut step = 0usize;
    for k in 0..periods {
        // Sample: the measured output sensor_delay_steps steps ago
        // (0 before t = 0), taken before the new command applies.
        let s0 = k as f64 * t;
        let u_now = signal(s0 - 1e-9 * t, &commands);
        let ym_now = (m.c.row(1) * &x)[0] + m.d[1] * u_now;
        let ym = if step >= sensor_delay_steps {
            if sensor_delay_steps == 0 {
                ym_now
            } else {
                ym_hist[step - sensor_delay_steps]
            }
        } else {
            0.0
        };
        let e = 1.0 - ym;
        e_hist.rotate_right(1);
        e_hist[0] = e;
        let mut acc = 0.0;
        for i in 0..nb {
            acc += b[i] * e_hist[i + pad];
        }
        for i in 1..na {
            acc -= a[i] * u_hist[i - 1];
        }
        let u = acc / a[0];
        u_hist.rotate_right(1);
        u_hist[0] = u;
        commands.push(u);
        for i in 0..sub {
            let s = s0 + i as f64 * h;
            if i % (sub / 16) == 0 {
                let uu = signal(s + 1e-9 * t, &commands);
                out.push((m.c.row(0) * &x)[0] + m.d[0] * uu);
            }
            if ym_hist.len() == step {
                let uu = signal(s - 1e-9 * t, &commands);
                ym_hist.push((m.c.row(1) * &x)[0] + m.d[1] * uu);
            }
            // RK4 across the step; the signal is smooth inside it unless an
            // update falls inside, which the step grid avoids (updates land
            // on step boundaries for the delays used here).
            let (u0, um, u1) = (
                signal(s + 1e-7 * h, &commands),
                signal(s + h / 2.0, &commands),
                signal(s + h - 1e-7 * h, &commands),
            );
            let k1 = f(&x, u0);
            let k2 = f(&(&x + &k1 * (h / 2.0)), um);
            let k3 = f(&(&x + &k2 * (h / 2.0)), um);
            let k4 = f(&(&x + &k3 * h), u1);
            x += (k1 + k2 * 2.0 + k3 * 2.0 + k4) * (h / 6.0);
            step += 1;
        }
    }
    out
}

#[test]
fn closed_loop_with_every_hold_and_delay_matches_rk4() {
    // Brute force (RK4, 1600 steps a period, every update on a step
    // boundary): plant 20/((s+2)(s+5)), sensor 1/(0.01 s + 1), a PI
    // controller by Tustin at 40 Hz; each hold with computation delays 0,
    // 0.4 and 1.5 periods, a plant transport delay of 0.35 T (as 0.35 more
    // delay) and a sensor transport delay of 1.25 T.
    let plant = transfer(&[20.0], &[1.0, 7.0, 10.0]);
    let sensor = transfer(&[1.0], &[0.01, 1.0]);
    let controller = transfer(&[0.4, 2.0], &[1.0, 0.0]);
    let rate = 40.0;
    let t = 1.0 / rate;
    let sub = 1600;
    let periods = 40;
    for (plant_s, sensor_s) in [(0.0, 0.0), (0.35 * t, 0.0), (0.0, 1.25 * t)] {
        let lp = PreparedLoop::with_transport(
            &plant,
            &sensor,
            &Controller::Continuous(controller.clone()),
            None,
            TimeOptions::default(),
            Transport { plant_s, sensor_s },
        )
        .unwrap();
        for hold in HoldKind::ALL {
            for delay in [0.0, 0.4, 1.5] {
                let p = Point {
                    rate_hz: rate,
                    method: Some(Method::Tustin),
                    delay,
                    hold,
                };
                let c = lp.controller_at(rate, p.method).unwrap();
                let (step, _) = lp.sampled_traces(&p, Some(periods)).unwrap();
                let sensor_steps = (sensor_s / t * sub as f64).round() as usize;
                let brute = rk4_closed_loop(
                    &plant,
                    &sensor,
                    &c,
                    hold,
                    delay + plant_s / t,
                    sensor_steps,
                    sub,
                    periods,
                );
                assert_eq!(step.len(), brute.len());
                let scale = brute.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                for (i, (a, b)) in step.iter().zip(&brute).enumerate() {
                    assert!(
                        (a.y - b).abs() < 1e-7 * scale,
                        "{hold} delay {delay} plant {plant_s} sensor {sensor_s}: point {i} (t={}): {} vs {b}",
                        a.t,
                        a.y
                    );
                }
            }
        }
    }
}

#[test]
fn transport_delay_is_computation_delay_and_whole_periods_are_unit_delays() {
    // Definitions: a plant transport delay of 0.3 T is 0.3 more
    // computation delay (the same figures); one of 2 T is z^-2; a sensor
    // delay gives the same loop gain as the same delay at the plant.
    let plant = transfer(&[38.0], &[0.00168, 0.424, 1.0]);
    let sensor = transfer(&[1.0], &[0.0008, 1.0]);
    let c = Controller::Continuous(transfer(&[0.8, 16.0], &[1.0, 0.0]));
    let rate = 500.0;
    let t = 1.0 / rate;
    let at = |plant_s: f64, sensor_s: f64| {
        PreparedLoop::with_transport(
            &plant,
            &sensor,
            &c,
            None,
            TimeOptions::default(),
            Transport { plant_s, sensor_s },
        )
        .unwrap()
    };
    for hold in HoldKind::ALL {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: 0.2,
            hold,
        };
        let with_transport = at(0.3 * t, 0.0).sampled(&p);
        let more_delay = at(0.0, 0.0).sampled(&Point { delay: 0.5, ..p });
        let (a, b) = (with_transport.figures.unwrap(), more_delay.figures.unwrap());
        for (x, y) in [
            (a.overshoot_pct.unwrap(), b.overshoot_pct.unwrap()),
            (a.phase_margin_deg.unwrap(), b.phase_margin_deg.unwrap()),
            (a.settling_time_s.unwrap(), b.settling_time_s.unwrap()),
            (a.sensitivity_peak, b.sensitivity_peak),
        ] {
            assert!(
                (x - y).abs() <= 1e-9 * y.abs().max(1.0),
                "{hold}: {x} vs {y}"
            );
        }
        // 2 T of plant transport delay: z^-2 times no delay.
        let g0 = pulse(&plant, &sensor, t, act(hold, 0.0));
        let g2 = pulse(&plant, &sensor, t, act(hold, 2.0));
        // The measurement delayed instead: the same loop gain.
        let gs = pulse(
            &plant,
            &sensor,
            t,
            Actuation {
                hold,
                delay_periods: 0.0,
                sensor_delay_s: 2.0 * t,
            },
        );
        let gs_frac = pulse(
            &plant,
            &sensor,
            t,
            Actuation {
                hold,
                delay_periods: 0.0,
                sensor_delay_s: 1.3 * t,
            },
        );
        let ga_frac = pulse(&plant, &sensor, t, act(hold, 1.3));
        for wt in [0.02, 0.5, 2.0, 3.0] {
            let z = C64::from_polar(1.0, wt);
            let want = g0.transfer.eval(z) / (z * z);
            for (name, g) in [("plant 2T", &g2), ("sensor 2T", &gs)] {
                let v = g.transfer.eval(z);
                assert!(
                    (v - want).norm() < 1e-9 * want.norm(),
                    "{hold} {name} wT={wt}: {v} vs {want}"
                );
            }
            let (v, w) = (gs_frac.transfer.eval(z), ga_frac.transfer.eval(z));
            assert!(
                (v - w).norm() < 1e-9 * w.norm(),
                "{hold} 1.3 T sensor vs actuator wT={wt}: {v} vs {w}"
            );
        }
    }
}

#[test]
fn margins_keep_their_meaning_with_every_hold() {
    // Definitions (loop model): the controller scaled by the gain margin
    // (just short / just past) keeps / loses stability, and so does the
    // loop with 0.98 / 1.02 times the delay margin added to the actuator
    // delay, with every hold kind, delays 0, 0.5 and 1.5 periods, and a
    // plant and a sensor transport delay. Invented loops: a PI on a
    // second-order plant with a sensor lag, an open-loop-unstable plant
    // held by a lead, a type-2 loop.
    let loops: Vec<(&str, Transfer, Transfer, Transfer, f64)> = vec![
        (
            "pi",
            transfer(&[20.0], &[1.0, 7.0, 10.0]),
            transfer(&[1.0], &[0.01, 1.0]),
            transfer(&[0.4, 2.0], &[1.0, 0.0]),
            40.0,
        ),
        (
            "unstable open loop",
            transfer(&[4.0], &[1.0, 0.0, -4.0]),
            Transfer::gain(1.0),
            transfer(&[3.0, 6.0], &[0.02, 1.0]),
            300.0,
        ),
        (
            "type 2",
            transfer(&[10.0], &[1.0, 0.0, 0.0]),
            transfer(&[1.0], &[0.002, 1.0]),
            transfer(&[1.0, 2.0], &[0.05, 1.0]),
            200.0,
        ),
    ];
    let mut checked = 0;
    for (name, plant, sensor, c, rate) in loops {
        let t = 1.0 / rate;
        for transport in [
            Transport::default(),
            Transport {
                plant_s: 0.3 * t,
                sensor_s: 0.45 * t,
            },
        ] {
            let lp = PreparedLoop::with_transport(
                &plant,
                &sensor,
                &Controller::Continuous(c.clone()),
                None,
                TimeOptions::default(),
                transport,
            )
            .unwrap();
            for hold in HoldKind::ALL {
                for delay in [0.0, 0.5, 1.5] {
                    let p = Point {
                        rate_hz: rate,
                        method: Some(Method::Tustin),
                        delay,
                        hold,
                    };
                    let e = lp.evaluate(&p, Given::with_delay_margin());
                    let Some(f) = e.figures else {
                        continue; // too much delay for this loop: nothing to check
                    };
                    let what = format!("{name} {hold} delay {delay} {transport:?}");
                    let ctl = lp.controller_at(p.rate_hz, p.method).unwrap();
                    let scaled = |s: f64| DiscreteTransfer {
                        transfer: Transfer::new(
                            ctl.transfer.numerator.scale(s),
                            ctl.transfer.denominator.clone(),
                        ),
                        period_s: ctl.period_s,
                    };
                    if let Some(gm) = f.gain_margin_db {
                        let k = |d: f64| 10f64.powf((gm + d * gm.signum()) / 20.0);
                        assert!(
                            lp.evaluate(&p, Given::around(&scaled(k(-0.05)))).stable,
                            "{what}: unstable just short of GM {gm}"
                        );
                        assert!(
                            !lp.evaluate(&p, Given::around(&scaled(k(0.05)))).stable,
                            "{what}: stable just past GM {gm}"
                        );
                    }
                    let dm = f.delay_margin_s.expect("a delay margin");
                    let later = |x: f64| Point {
                        delay: delay + x * dm * rate,
                        ..p
                    };
                    assert!(
                        lp.sampled(&later(0.98)).stable,
                        "{what}: unstable at 0.98 x DM {dm}"
                    );
                    assert!(
                        !lp.sampled(&later(1.02)).stable,
                        "{what}: stable at 1.02 x DM {dm}"
                    );
                    checked += 1;
                }
            }
        }
    }
    assert!(checked >= 30, "only {checked} stable points checked");
}

/// A first-order hold (no low-frequency delay of its own) with a vanishing
/// computation delay: the delay's stand-in put a pole near 2 / delay, so
/// the continuous approximations of the belt loop (invented scenario) read
/// `marginal` at 1e-10 of a period and failed with "a coefficient is not
/// finite" at 1e-300. A delay whose phase stays below a millionth of a
/// radian is now left out: every approximation is stable, with the
/// figures of no delay at all.
#[test]
fn a_vanishing_delay_leaves_the_hold_approximations_alone() {
    use looprate::sampled::continuous::HoldApprox;
    let lag = |tau: f64| Transfer::new(Poly::constant(1.0), Poly::from_descending(&[tau, 1.0]));
    let plant = lag(0.42)
        .cascade(&lag(0.004))
        .cascade(&Transfer::gain(38.0));
    let c = Transfer::new(
        Poly::from_descending(&[0.8, 16.0]),
        Poly::from_descending(&[1.0, 0.0]),
    );
    let lp = PreparedLoop::new(
        &plant,
        &lag(0.0008),
        &Controller::Continuous(c),
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let at = |delay: f64| Point {
        rate_hz: 100.0,
        method: Some(Method::Tustin),
        delay,
        hold: HoldKind::FirstOrder,
    };
    for kind in HoldApprox::ALL {
        let none = lp.hold_approx(&at(0.0), kind);
        for delay in [1e-300, 1e-12, 1e-10] {
            let e = lp.hold_approx(&at(delay), kind);
            assert!(
                e.stable,
                "{} at {delay} periods: {:?}",
                kind.name(),
                e.status
            );
            assert_eq!(
                e.figures,
                none.figures,
                "{} at {delay} periods",
                kind.name()
            );
        }
    }
}
