//! The exact sampled-data loop against textbook values, closed forms and
//! brute-force simulation.

use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use looprate::sampled::continuous::HoldApprox;
use looprate::sampled::evaluate::{Point, PreparedLoop, Status};
use looprate::sampled::time_response::TimeOptions;
use looprate::spec::HoldKind;

fn transfer(num: &[f64], den: &[f64]) -> Transfer {
    Transfer::new(Poly::from_descending(num), Poly::from_descending(den))
}

/// Unity feedback around 1/(s(s+1)) with a gain `k` given in z at 1 Hz.
/// Step and load-step traces through every period of the loop's horizon
/// (the full walk the figures' shortcuts are checked against; a chart's
/// trace keeps fewer periods, see `TRACE_PERIODS`).
fn full_traces(
    lp: &PreparedLoop,
    p: &Point,
) -> (
    Vec<looprate::sampled::time_response::TracePoint>,
    Vec<looprate::sampled::time_response::TracePoint>,
) {
    use looprate::sampled::time_response::{horizon_periods, sampled_trace};
    let (hold, _, cl) = lp.sampled_loop(p).unwrap();
    let n = horizon_periods(&cl.poles().unwrap(), cl.a.nrows()) as usize;
    (
        sampled_trace(&cl, &hold, 1.0, 0.0, n),
        sampled_trace(&cl, &hold, 0.0, 1.0, n),
    )
}

fn textbook_loop(k: f64, opts: TimeOptions) -> PreparedLoop {
    let c = Controller::Discrete(DiscreteTransfer {
        transfer: Transfer::gain(k),
        period_s: 1.0,
    });
    PreparedLoop::new(
        &transfer(&[1.0], &[1.0, 1.0, 0.0]),
        &Transfer::gain(1.0),
        &c,
        None,
        opts,
    )
    .unwrap()
}

/// Two routes to a figure agree: the jumped route's states differ from a
/// walk's by rounding (up to about 2e-9 relative on stiff loops, see
/// `tests/stretch_equivalence.rs`).
fn agree(a: Option<f64>, b: Option<f64>, scale: f64) -> bool {
    match (a, b) {
        (Some(x), Some(y)) => (x - y).abs() <= 1e-8 * scale.max(x.abs()).max(y.abs()),
        (x, y) => x == y,
    }
}

#[test]
fn textbook_unity_feedback_step_samples() {
    // Unity feedback around the zoh equivalent of 1/(s(s+1)), T = 1 s,
    // gain 1, d = 0: closed-loop step samples (Ogata, Discrete-Time Control
    // Systems; from memory), to 1e-4.
    let want = [
        0.0, 0.3679, 1.0000, 1.3996, 1.3996, 1.1470, 0.8944, 0.8015, 0.8682, 0.9937, 1.0770,
    ];
    let lp = textbook_loop(1.0, TimeOptions::default());
    let p = Point {
        rate_hz: 1.0,
        method: None,
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    };
    let (step, _) = lp.sampled_traces(&p, Some(11)).unwrap();
    let samples: Vec<f64> = step.iter().filter(|q| q.sample).map(|q| q.y).collect();
    assert_eq!(samples.len(), 11);
    for (k, (g, w)) in samples.iter().zip(want).enumerate() {
        assert!((g - w).abs() < 1e-4, "k={k}: {g} vs {w}");
    }
    // Another rate is refused with a clear message.
    let e = lp.sampled(&Point { rate_hz: 2.0, ..p });
    assert!(
        matches!(e.status, Status::Error(ref m) if m.contains("cannot run at 2 Hz")),
        "{:?}",
        e.status
    );
}

/// Brute-force reference: integrate the continuous plant with many small
/// exact steps per period (RK4 on 1/(s(s+1)) in its own coordinates, 4000
/// steps per period), the controller updated at every sample.
fn brute_force_peak(k: f64, t: f64, periods: usize) -> (f64, f64) {
    // Plant y'' + y' = u. Controller u_k = k (1 - y_k), applied at once.
    let (mut y, mut v) = (0.0f64, 0.0f64);
    let sub = 4000;
    let h = t / sub as f64;
    let mut peak_all = 0.0f64;
    let mut peak_samples = 0.0f64;
    for _ in 0..periods {
        peak_samples = peak_samples.max(y);
        let u = k * (1.0 - y);
        for _ in 0..sub {
            let f = |_y: f64, v: f64| (v, u - v);
            let (k1y, k1v) = f(y, v);
            let (k2y, k2v) = f(y + h / 2.0 * k1y, v + h / 2.0 * k1v);
            let (k3y, k3v) = f(y + h / 2.0 * k2y, v + h / 2.0 * k2v);
            let (k4y, k4v) = f(y + h * k3y, v + h * k3v);
            y += h / 6.0 * (k1y + 2.0 * k2y + 2.0 * k3y + k4y);
            v += h / 6.0 * (k1v + 2.0 * k2v + 2.0 * k3v + k4v);
            peak_all = peak_all.max(y);
        }
    }
    (peak_all, peak_samples)
}

#[test]
fn intersample_overshoot_is_caught() {
    // Same loop, T = 1 s: the plant output peaks between samples. The exact
    // figure must match a brute-force fine-step simulation (RK4, 4000 steps
    // a period) and exceed what the samples alone show.
    let opts = TimeOptions {
        points_per_period: 400,
        ..TimeOptions::default()
    };
    let lp = textbook_loop(1.0, opts);
    let e = lp.sampled(&Point {
        rate_hz: 1.0,
        method: None,
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    });
    let f = e.figures.unwrap();
    let (peak_all, peak_samples) = brute_force_peak(1.0, 1.0, 40);
    let exact_os = f.overshoot_pct.unwrap();
    let brute_os = (peak_all - 1.0) * 100.0;
    let sample_os = (peak_samples - 1.0) * 100.0;
    assert!(
        (exact_os - brute_os).abs() < 1e-3,
        "{exact_os} vs {brute_os}"
    );
    assert!(
        exact_os > sample_os + 1.0,
        "{exact_os} vs samples {sample_os}"
    );
}

#[test]
fn fast_sampling_tends_to_continuous_second_order() {
    // L = wn^2/(s(s + 2 zeta wn)) closes to the standard second-order loop:
    // overshoot 100 exp(-zeta pi / sqrt(1-zeta^2)) (closed form). At 10 kHz
    // with wn = 10 rad/s and d = 0, the sampled loop must be within 0.1
    // percentage points, and its phase margin within 0.1 deg of the
    // continuous one.
    let (wn, zeta) = (10.0f64, 0.4f64);
    let plant = transfer(&[wn * wn], &[1.0, 2.0 * zeta * wn, 0.0]);
    let c = Controller::Continuous(Transfer::gain(1.0));
    let lp = PreparedLoop::new(
        &plant,
        &Transfer::gain(1.0),
        &c,
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let want = 100.0 * (-zeta * std::f64::consts::PI / (1.0 - zeta * zeta).sqrt()).exp();
    let design = lp.design.as_ref().unwrap().figures.clone().unwrap();
    assert!(
        (design.overshoot_pct.unwrap() - want).abs() < 0.05,
        "{design:?}"
    );
    let e = lp.sampled(&Point {
        rate_hz: 10_000.0,
        method: Some(Method::Tustin),
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    });
    let f = e.figures.unwrap();
    assert!(
        (f.overshoot_pct.unwrap() - want).abs() < 0.1,
        "{} vs {want}",
        f.overshoot_pct.unwrap()
    );
    let pm_c = design.phase_margin_deg.unwrap();
    assert!((f.phase_margin_deg.unwrap() - pm_c).abs() < 0.1);
}

#[test]
fn hold_costs_half_a_period_of_phase() {
    // Fact of the trade (common practice, no source): the hold costs about
    // w T / 2 rad of phase at crossover, plus w tau for the computation
    // delay. For small w T the exact loss must agree to within 10 % of the
    // predicted loss.
    let plant = transfer(&[40.0], &[1.0, 6.0, 0.0]);
    let c =
        Controller::Continuous(transfer(&[1.0, 3.0], &[1.0, 30.0]).cascade(&Transfer::gain(5.0)));
    let lp = PreparedLoop::new(
        &plant,
        &Transfer::gain(1.0),
        &c,
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let design = lp.design.clone().unwrap().figures.unwrap();
    let wc = design.crossover_hz.unwrap() * 2.0 * std::f64::consts::PI;
    for (rate, d) in [(400.0, 0.0), (400.0, 1.0), (1000.0, 0.5)] {
        let t = 1.0 / rate;
        let e = lp.sampled(&Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: d,
            hold: HoldKind::ZeroOrder,
        });
        let f = e.figures.unwrap();
        let loss = design.phase_margin_deg.unwrap() - f.phase_margin_deg.unwrap();
        let predicted = (wc * t / 2.0 + wc * d * t).to_degrees();
        assert!(
            (loss - predicted).abs() < 0.1 * predicted,
            "rate {rate} d {d}: {loss} vs {predicted}"
        );
    }
}

#[test]
fn lag_approximation_pole() {
    // Closed form: the [0/1] lag for T = 0.2 s, tau = 0 has its pole at
    // 1/(T/2) = 10 rad/s.
    let lag = HoldApprox::Lag.transfer(0.2 / 2.0);
    let p = lag.poles().unwrap();
    assert!((p[0].re + 10.0).abs() < 1e-12 && p[0].im == 0.0);
}

#[test]
fn unstable_loop_reports_poles_only() {
    // Gain 3 on the zoh equivalent of 1/(s(s+1)) at T = 1 s is unstable
    // (the sampled loop's critical gain is about 2.39; closed form of the
    // second-order characteristic polynomial's Jury test).
    let lp = textbook_loop(3.0, TimeOptions::default());
    let e = lp.sampled(&Point {
        rate_hz: 1.0,
        method: None,
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    });
    assert_eq!(e.status, Status::Unstable);
    assert!(e.figures.is_none());
    assert!(
        e.closed_loop_poles
            .iter()
            .any(|p| (p[0] * p[0] + p[1] * p[1]).sqrt() > 1.0)
    );
}

#[test]
fn loop_matrix_poles_agree_with_characteristic_polynomial() {
    // Two independent routes to the closed-loop poles must agree: the
    // eigenvalues of the assembled loop matrix, and the roots of
    // den_C(z) den_G(z) + num_C(z) num_G(z) from the pulse transfer
    // (algebraic identity for unity-gain negative feedback). An invented
    // positioning axis: integrator, lag, a lightly damped mode at 60 Hz,
    // a sensor lag and a controller with an integrator; its loop matrix is
    // badly scaled, which once gave a spurious unstable pole before
    // balancing.
    let lp = positioning_axis();
    for (rate, d) in [(5000.0, 0.0), (5000.0, 0.5), (1000.0, 1.0), (300.0, 0.5)] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: d,
            hold: HoldKind::ZeroOrder,
        };
        let (hold, ctrl, cl) = lp.sampled_loop(&p).unwrap();
        let g = hold.pulse_transfer().unwrap();
        let chp = ctrl
            .transfer
            .denominator
            .mul(&g.transfer.denominator)
            .add(&ctrl.transfer.numerator.mul(&g.transfer.numerator));
        let mut a: Vec<f64> = chp.roots().unwrap().iter().map(|z| z.norm()).collect();
        let mut b: Vec<f64> = cl.poles().unwrap().iter().map(|z| z.norm()).collect();
        a.sort_by(|x, y| x.total_cmp(y));
        b.sort_by(|x, y| x.total_cmp(y));
        assert_eq!(a.len(), b.len());
        for (x, y) in a.iter().zip(&b) {
            assert!((x - y).abs() < 1e-6, "rate {rate} d {d}: {a:?} vs {b:?}");
        }
    }
}

#[test]
fn early_stop_certificate_changes_no_figure() {
    // The Lyapunov stop must give the same step figures as running the
    // full pole-based horizon (self-consistency of two routes).
    use looprate::sampled::time_response::StepMetrics;
    let plant = transfer(&[38.0], &[0.00168, 0.424, 1.0]);
    let sensor = transfer(&[1.0], &[0.0008, 1.0]);
    let c = Controller::Continuous(transfer(&[0.05, 0.6], &[1.0, 0.0]));
    let lp = PreparedLoop::new(&plant, &sensor, &c, None, TimeOptions::default()).unwrap();
    for (rate, d) in [(60.0, 0.5), (400.0, 1.0), (3000.0, 0.0)] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::PoleZeroMatch),
            delay: d,
            hold: HoldKind::ZeroOrder,
        };
        let f = lp.sampled(&p).figures.unwrap();
        let (step, _) = full_traces(&lp, &p);
        let mut m = StepMetrics::new(f.y_final, 0.02);
        for q in &step {
            m.push(q.t, q.y, q.u);
        }
        let full = m.finish(0.0, false);
        assert!(
            agree(full.overshoot_pct, f.overshoot_pct, 100.0),
            "rate {rate}"
        );
        let ts = f.horizon_s;
        assert!(
            agree(full.settling_time_s, f.settling_time_s, ts),
            "rate {rate}"
        );
        assert!(agree(full.rise_time_s, f.rise_time_s, ts), "rate {rate}");
        assert!(agree(Some(full.u_peak), Some(f.u_peak), 1.0), "rate {rate}");
        assert!(f.undecided.is_empty(), "rate {rate}");
    }
}

#[test]
fn early_stop_never_misses_a_later_command_peak() {
    // Plant (5s+1)/(s+1)^2 under a pure integral controller: the command
    // creeps up to its final value long after the output has settled. The
    // reported peak command must equal the full-horizon trace's (route
    // independence; found in review).
    let plant = transfer(&[5.0, 1.0], &[1.0, 2.0, 1.0]);
    let c = Controller::Continuous(transfer(&[2.0], &[1.0, 0.0]));
    let lp = PreparedLoop::new(
        &plant,
        &Transfer::gain(1.0),
        &c,
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let p = Point {
        rate_hz: 50.0,
        method: Some(Method::Tustin),
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    let f = lp.sampled(&p).figures.unwrap();
    let (step, _) = full_traces(&lp, &p);
    let full = step.iter().fold(0.0f64, |m, q| m.max(q.u.abs()));
    assert!(
        (f.u_peak - full).abs() <= 1e-6 * full,
        "{} vs {full}",
        f.u_peak
    );
}

#[test]
fn crossover_below_the_default_grid_is_found() {
    // Plant 1/s with gain 0.05: |L| = 0.05/w crosses 1 at 0.05 rad/s with
    // 90 deg of phase margin less the hold and delay lag (closed form);
    // at 1 MHz the default grid starts above it.
    let c = Controller::Continuous(Transfer::gain(0.05));
    let lp = PreparedLoop::new(
        &transfer(&[1.0], &[1.0, 0.0]),
        &Transfer::gain(1.0),
        &c,
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let f = lp
        .sampled(&Point {
            rate_hz: 1e6,
            method: Some(Method::Tustin),
            delay: 1.0,
            hold: HoldKind::ZeroOrder,
        })
        .figures
        .unwrap();
    let wc = f.crossover_hz.unwrap() * 2.0 * std::f64::consts::PI;
    assert!((wc - 0.05).abs() < 1e-6, "{wc}");
    assert!((f.phase_margin_deg.unwrap() - 90.0).abs() < 1e-3);
}

#[test]
fn skipped_and_deferred_points_change_no_figure() {
    // The simulation skips the points between samples where an interval
    // bound proves they cannot matter, defers those that matter only to a
    // peak, and stops on a modal (or output-energy) bound. Every step and
    // load-disturbance figure must equal the one read off the full-horizon
    // trace with every point (self-consistency of two routes), on the
    // invented positioning axis of the compare bench, across methods and
    // delays.
    use looprate::sampled::time_response::StepMetrics;
    let lp = positioning_axis();
    let mut checked = 0;
    for (rate, method, d) in [
        (150.0, Method::Tustin, 0.5),
        (300.0, Method::StepInvariant, 1.0),
        (500.0, Method::PoleZeroMatch, 0.0),
        (800.0, Method::BackwardEuler, 0.5),
        (1200.0, Method::RampInvariant, 1.0),
        (2500.0, Method::ImpulseInvariant, 0.0),
    ] {
        let p = Point {
            rate_hz: rate,
            method: Some(method),
            delay: d,
            hold: HoldKind::ZeroOrder,
        };
        let Some(f) = lp.sampled(&p).figures else {
            continue;
        };
        checked += 1;
        let (step, dist) = full_traces(&lp, &p);
        let mut m = StepMetrics::new(f.y_final, 0.02);
        for q in &step {
            m.push(q.t, q.y, q.u);
        }
        let full = m.finish(0.0, false);
        let at = format!("{rate} Hz {method:?} d={d}");
        let ts = f.horizon_s;
        assert!(agree(full.overshoot_pct, f.overshoot_pct, 100.0), "{at}");
        assert!(agree(full.settling_time_s, f.settling_time_s, ts), "{at}");
        assert!(agree(full.rise_time_s, f.rise_time_s, ts), "{at}");
        let u_full = step.iter().fold(0.0f64, |a, q| a.max(q.u.abs()));
        assert!(
            f.u_peak >= u_full * (1.0 - 1e-8) && f.u_peak <= u_full * (1.0 + 1e-6),
            "{at}"
        );
        // Disturbance: peak of |y|, then the last entry into the band.
        let peak = dist.iter().fold(0.0f64, |a, q| a.max(q.y.abs()));
        assert!(agree(Some(peak), Some(f.disturbance_peak), peak), "{at}");
        // Integral action: the disturbance's own steady state is zero
        // (closed form); the evaluation solves it from the fixed point, to
        // rounding.
        let yd = 0.0;
        let thr = 0.02 * peak;
        let mut since: Option<f64> = None;
        let mut prev: Option<(f64, f64)> = None;
        for q in &dist {
            let dev = (q.y - yd).abs();
            if dev > thr {
                since = None;
            } else if since.is_none() {
                since = Some(match prev {
                    Some((tp, dp)) if dp > dev => tp + (q.t - tp) * (dp - thr) / (dp - dev),
                    _ => q.t,
                });
            }
            prev = Some((q.t, dev));
        }
        let (a, b) = (since.unwrap(), f.recovery_time_s.unwrap());
        assert!((a - b).abs() <= 1e-8 * ts, "{at}: {a} vs {b}");
    }
    assert!(checked >= 4, "too few stable points checked: {checked}");
}

/// The invented positioning axis of the compare bench: integrator, lag, a
/// lightly damped 60 Hz mode, a sensor lag and a controller with an
/// integrator, prepared for evaluation.
fn positioning_axis() -> PreparedLoop {
    let wn = 2.0 * std::f64::consts::PI * 60.0;
    let plant = Transfer::new(
        Poly::constant(400.0 * wn * wn),
        Poly::from_descending(&[0.01, 1.0, 0.0]).mul(&Poly::from_descending(&[
            1.0,
            0.6 * wn,
            wn * wn,
        ])),
    );
    let sensor = transfer(&[1.0], &[1.0 / 2000.0, 1.0]);
    let c = Controller::Continuous(transfer(&[0.001, 0.02, 0.05], &[1.0 / 400.0, 1.0, 0.0]));
    PreparedLoop::new(&plant, &sensor, &c, None, TimeOptions::default()).unwrap()
}

/// A trace longer than `TRACE_PERIODS` keeps one period in every few,
/// reached by matrix powers: each kept point equals the point of a full
/// walk at the same instant (brute force named as such), and the trace
/// holds at most `TRACE_PERIODS` periods of points however long the span.
#[test]
fn a_long_trace_keeps_bounded_periods_and_the_walk_values() {
    use looprate::sampled::time_response::{TRACE_PERIODS, sampled_trace, sampled_trace_spanning};
    let lp = textbook_loop(0.5, TimeOptions::default());
    let p = Point {
        rate_hz: 1.0,
        method: None,
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    let (hold, _, cl) = lp.sampled_loop(&p).unwrap();
    let periods = 3 * TRACE_PERIODS + 7;
    let walked = sampled_trace(&cl, &hold, 1.0, 0.0, periods as usize);
    let kept = sampled_trace_spanning(&cl, &hold, 1.0, 0.0, periods);
    let np = hold.intersample.len();
    assert!(kept.len() <= TRACE_PERIODS as usize * np, "{}", kept.len());
    assert!(kept.len() >= (TRACE_PERIODS as usize / 2) * np);
    let stride = periods.div_ceil(TRACE_PERIODS) as usize;
    let scale = walked.iter().fold(0.0f64, |m, q| m.max(q.y.abs()));
    for (i, q) in kept.iter().enumerate() {
        let w = walked[(i / np) * stride * np + i % np];
        assert!(
            (q.t - w.t).abs() <= 1e-9 * w.t.max(1.0),
            "{i}: t {} vs {}",
            q.t,
            w.t
        );
        assert!(
            (q.y - w.y).abs() <= 1e-9 * scale,
            "{i}: y {} vs {}",
            q.y,
            w.y
        );
        assert!(
            (q.u - w.u).abs() <= 1e-9 * scale.max(w.u.abs()),
            "{i}: u {} vs {}",
            q.u,
            w.u
        );
        assert_eq!(q.sample, w.sample);
    }
    // A span of a billion periods costs the same bounded trace.
    let far = sampled_trace_spanning(&cl, &hold, 1.0, 0.0, 1_000_000_000);
    assert!(far.len() <= TRACE_PERIODS as usize * np);
    assert!(far.last().unwrap().t > 0.99 * 1e9);
}

/// A loop without integral action settles a load step at a lasting offset:
/// plant 1/(s+1) under a gain of 10, a unit load at the plant input, ends
/// at yd_final = 1/(1 + 10) (closed form: final-value theorem), reached
/// from below without passing it. The load-step peak is the supremum of
/// |y| over t >= 0, that offset, decided on the sampled loop and on the
/// continuous design (it read `undecided` before 2026-12-05: no sample
/// ever reaches the limit).
#[test]
fn load_step_peak_of_a_lasting_offset_is_the_offset() {
    let plant = transfer(&[1.0], &[1.0, 1.0]);
    let sensor = transfer(&[1.0], &[1.0]);
    let c = Controller::Continuous(transfer(&[10.0], &[1.0]));
    let lp = PreparedLoop::new(&plant, &sensor, &c, None, TimeOptions::default()).unwrap();
    let offset = 1.0 / 11.0;
    let design = lp.design.as_ref().and_then(|e| e.figures.as_ref()).unwrap();
    assert!(design.undecided.is_empty(), "{:?}", design.undecided);
    assert!((design.disturbance_peak - offset).abs() < 1e-12);
    for (rate, d) in [(100.0, 0.0), (1000.0, 0.5), (20_000.0, 1.0)] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: d,
            hold: HoldKind::ZeroOrder,
        };
        let f = lp.sampled(&p).figures.unwrap();
        assert!(f.undecided.is_empty(), "{rate} Hz: {:?}", f.undecided);
        assert!(
            (f.disturbance_peak - offset).abs() < 1e-12,
            "{rate} Hz: {}",
            f.disturbance_peak
        );
        assert!(f.recovery_time_s.is_some_and(|t| t > 0.0), "{rate} Hz");
    }
}
