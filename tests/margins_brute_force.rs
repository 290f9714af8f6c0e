//! Loop figures against a brute-force dense scan of the exact loop gain,
//! and the fractional-delay hold equivalent against a fine-step
//! simulation of the continuous model.

use looprate::discretize::Method;
use looprate::evaluate::{Point, PreparedLoop};
use looprate::hold::{HoldEquivalent, HoldKind, plant_and_sensor};
use looprate::poly::{C64, Poly};
use looprate::time_response::TimeOptions;
use looprate::transfer::{Controller, Transfer};

fn transfer(num: &[f64], den: &[f64]) -> Transfer {
    Transfer::new(Poly::from_descending(num), Poly::from_descending(den))
}

/// Brute force: 400 000 log-spaced points up to Nyquist; crossings by
/// sign change; margins from the nearest scan point, plus both ends where
/// the loop gain is real and negative (`docs/figures.md`). Returns (the PM
/// of smallest size, sign kept; the GM nearest 0 dB, sign kept; Ms).
fn scan(l: &dyn Fn(f64) -> C64, w_lo: f64, w_hi: f64) -> (Option<f64>, Option<f64>, f64) {
    let n = 400_000;
    let mut pm: Option<f64> = None;
    let mut gm: Option<f64> = None;
    let mut ms = 0.0f64;
    let mut prev: Option<(f64, C64, f64)> = None; // (w, L, unwrapped phase)
    for i in 0..=n {
        let w = w_lo * (w_hi / w_lo).powf(i as f64 / n as f64);
        let v = l(w);
        ms = ms.max(1.0 / (C64::new(1.0, 0.0) + v).norm());
        let phase = match prev {
            None => v.arg().to_degrees(),
            Some((_, pv, pp)) => pp + (v / pv).arg().to_degrees(),
        };
        if let Some((_, pv, pp)) = prev {
            if (pv.norm() - 1.0) * (v.norm() - 1.0) < 0.0 {
                let mut p = 180.0 + v.arg().to_degrees();
                if p > 180.0 {
                    p -= 360.0;
                }
                pm = Some(pm.map_or(p, |m: f64| if p.abs() < m.abs() { p } else { m }));
            }
            let (q0, q1) = (
                ((pp + 180.0) / 360.0).floor(),
                ((phase + 180.0) / 360.0).floor(),
            );
            if q0 != q1 {
                let g = -20.0 * v.norm().log10();
                gm = Some(gm.map_or(g, |m: f64| if g.abs() < m.abs() { g } else { m }));
            }
        }
        prev = Some((w, v, phase));
    }
    // The ends: w -> 0 when the loop gain is finite there, and Nyquist.
    for v in [l(0.0), l(w_hi)] {
        if v.re < 0.0 && v.im.abs() <= 1e-9 * v.norm() && v.norm().is_finite() {
            let g = -20.0 * v.norm().log10();
            gm = Some(gm.map_or(g, |m: f64| if g.abs() < m.abs() { g } else { m }));
        }
    }
    (pm, gm, ms)
}

#[test]
fn margins_match_a_dense_scan_on_five_loops() {
    // Invented loops: a PI speed loop; a lightly damped resonance (several
    // crossings); an open-loop-unstable plant held by a lead; a type-2
    // loop; a stiff fourth-order loop with a sensor lag.
    let wn = 2.0 * std::f64::consts::PI * 60.0;
    let wz = 2.0 * std::f64::consts::PI * 42.0;
    let loops: Vec<(&str, Transfer, Transfer, Transfer, f64)> = vec![
        (
            "pi speed",
            transfer(&[38.0], &[0.00168, 0.424, 1.0]),
            transfer(&[1.0], &[0.0008, 1.0]),
            transfer(&[0.8, 16.0], &[1.0, 0.0]),
            400.0,
        ),
        (
            // Collocated-style mode: zero pair at 42 Hz, pole pair at 60 Hz,
            // damping 0.02; |L| crosses 1 three times, one crossing with a
            // negative phase margin in a stable loop.
            "resonance",
            transfer(&[30.0], &[1.0, 0.0]).cascade(&transfer(
                &[1.0 / (wz * wz), 0.04 / wz, 1.0],
                &[1.0 / (wn * wn), 0.04 / wn, 1.0],
            )),
            Transfer::gain(1.0),
            transfer(&[0.02, 1.0], &[0.002, 1.0]).cascade(&Transfer::gain(1.2)),
            2000.0,
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
        (
            "stiff fourth order",
            transfer(&[1.0], &[1.0, 0.0])
                .cascade(&transfer(&[1.0], &[0.01, 1.0]))
                .cascade(&transfer(&[1.0], &[1e-5, 1.0]))
                .cascade(&transfer(&[50.0], &[1.0, 10.0])),
            transfer(&[1.0], &[1e-4, 1.0]),
            transfer(&[0.3, 1.0], &[0.01, 1.0]).cascade(&Transfer::gain(8.0)),
            1000.0,
        ),
    ];
    for (name, plant, sensor, c, rate) in loops {
        let lp = PreparedLoop::new(
            &plant,
            &sensor,
            &Controller::Continuous(c),
            None,
            TimeOptions::default(),
        )
        .unwrap();
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: 0.5,
            hold: HoldKind::ZeroOrder,
        };
        let e = lp.sampled(&p);
        let f = e
            .figures
            .clone()
            .unwrap_or_else(|| panic!("{name}: {:?}", e.status));
        let l = lp.sampled_loop_gain(&p).unwrap();
        let w_hi = std::f64::consts::PI * rate;
        let (pm, gm, ms) = scan(&l, w_hi * 1e-6, w_hi);
        // The scan resolves frequency to 4e-5 relative: figures agree to
        // what that resolution allows.
        match (pm, f.phase_margin_deg) {
            (Some(a), Some(b)) => assert!((a - b).abs() < 0.05, "{name}: PM scan {a} vs {b}"),
            (a, b) => assert_eq!(a.is_some(), b.is_some(), "{name}: PM {a:?} vs {b:?}"),
        }
        match (gm, f.gain_margin_db) {
            (Some(a), Some(b)) => assert!((a - b).abs() < 0.05, "{name}: GM scan {a} vs {b}"),
            (a, b) => assert_eq!(a.is_some(), b.is_some(), "{name}: GM {a:?} vs {b:?}"),
        }
        assert!(
            f.sensitivity_peak >= ms * (1.0 - 1e-9),
            "{name}: Ms {} below the scan's {ms}",
            f.sensitivity_peak
        );
        assert!(
            (f.sensitivity_peak - ms) / ms < 1e-3,
            "{name}: Ms {} vs scan {ms}",
            f.sensitivity_peak
        );
        if name == "resonance" {
            let detail = e.loop_detail.unwrap();
            assert!(
                detail.gain_crossings_hz.len() >= 3,
                "{name}: crossings {:?}",
                detail.gain_crossings_hz
            );
        }
    }
}

#[test]
fn half_period_delay_matches_fine_step_simulation() {
    // x' = A x + B u with u_{k-1} on [kT, kT + T/2) and u_k after: the
    // exact equivalent must match RK4 with 20 000 steps per period over a
    // few periods of an arbitrary input sequence (plant 20/((s+2)(s+5)),
    // sensor 1/(0.01 s + 1); both outputs compared).
    let model = plant_and_sensor(
        &transfer(&[20.0], &[1.0, 7.0, 10.0]),
        &transfer(&[1.0], &[0.01, 1.0]),
    )
    .unwrap();
    let t = 0.05;
    let eq = HoldEquivalent::new(&model, t, 0.5, 16).unwrap();
    let u = [1.0, -0.5, 2.0, 0.0, 0.7];
    let n = model.order();
    // Fine-step reference.
    let f = |x: &nalgebra::DVector<f64>, uu: f64| &model.a * x + &model.b * uu;
    let mut x = nalgebra::DVector::zeros(n);
    let sub = 20_000;
    let h = t / sub as f64;
    let mut xe = nalgebra::DVector::zeros(n);
    let mut u_prev = 0.0;
    for &uk in &u {
        for i in 0..sub {
            let uu = if (i as f64) < sub as f64 / 2.0 {
                u_prev
            } else {
                uk
            };
            let k1 = f(&x, uu);
            let k2 = f(&(&x + &k1 * (h / 2.0)), uu);
            let k3 = f(&(&x + &k2 * (h / 2.0)), uu);
            let k4 = f(&(&x + &k3 * h), uu);
            x += (k1 + k2 * 2.0 + k3 * 2.0 + k4) * (h / 6.0);
        }
        xe = &eq.phi * &xe + &eq.gamma0 * uk + &eq.gamma1 * u_prev;
        u_prev = uk;
        let err = (&x - &xe).amax();
        assert!(err < 1e-10 * (1.0 + x.amax()), "state error {err}");
    }
}
