//! One loop evaluation (the unit of every sweep): a 4th-order plant with
//! a first-order sensor and a 2nd-order controller, at a slow, a middle
//! and a fast rate, and near 1 kHz against near 100 kHz (the cost must not
//! grow with the number of periods the horizon holds); the time figures
//! alone at both; and the lightly damped loop of issue 16 (300 rad/s,
//! damping 0.0005, integral controller) whose horizon is millions of
//! periods at fast rates.

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, Transfer};
use looprate::sampled::evaluate::{Point, PreparedLoop};
use looprate::sampled::time_response::{TimeOptions, sampled_figures};
use looprate::spec::HoldKind;

/// An invented positioning axis: motor with two lags and a mode at 60 Hz.
pub fn bench_loop() -> PreparedLoop {
    let wn = 2.0 * std::f64::consts::PI * 60.0;
    let plant = Transfer::new(
        Poly::constant(400.0 * wn * wn),
        Poly::from_descending(&[1.0, 0.0])
            .mul(&Poly::from_descending(&[0.01, 1.0]))
            .mul(&Poly::from_descending(&[1.0, 2.0 * 0.3 * wn, wn * wn])),
    );
    let sensor = Transfer::new(Poly::one(), Poly::from_descending(&[1.0 / 2000.0, 1.0]));
    let controller = Transfer::new(
        Poly::from_descending(&[0.02, 0.4, 1.0]).scale(0.05),
        Poly::from_descending(&[1.0 / 400.0, 1.0, 0.0]),
    );
    PreparedLoop::new(
        &plant,
        &sensor,
        &Controller::Continuous(controller),
        None,
        TimeOptions::default(),
    )
    .expect("bench loop")
}

fn evaluation(c: &mut Criterion) {
    let lp = bench_loop();
    for rate in [200.0, 1000.0, 5000.0, 100_000.0] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: 0.5,
            hold: HoldKind::ZeroOrder,
        };
        assert!(
            lp.sampled(&p).figures.is_some(),
            "bench loop unstable at {rate} Hz"
        );
        c.bench_function(
            &format!("evaluate 4th-order plant + 2nd-order controller at {rate} Hz"),
            |b| b.iter(|| lp.sampled(std::hint::black_box(&p))),
        );
    }
}

/// The time figures alone (step and load step), the part whose cost used
/// to grow with the rate.
fn time_figures(c: &mut Criterion) {
    let lp = bench_loop();
    for rate in [1000.0, 100_000.0] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: 0.5,
            hold: looprate::spec::HoldKind::ZeroOrder,
        };
        let (hold, _, cl) = lp.sampled_loop(&p).expect("loop");
        let poles = cl.poles().expect("poles");
        c.bench_function(
            &format!("time figures of the bench loop at {rate} Hz"),
            |b| b.iter(|| sampled_figures(&cl, &hold, &poles, &lp.time)),
        );
    }
}

/// Plant 300^2 / (s^2 + 2 0.0005 300 s + 300^2) under the integral
/// controller 0.05 / s: settles in about 78 s.
fn lightly_damped(c: &mut Criterion) {
    let w = 300.0;
    let lp = PreparedLoop::new(
        &Transfer::new(
            Poly::constant(w * w),
            Poly::from_descending(&[1.0, 2.0 * 0.0005 * w, w * w]),
        ),
        &Transfer::gain(1.0),
        &Controller::Continuous(Transfer::new(
            Poly::constant(0.05),
            Poly::from_descending(&[1.0, 0.0]),
        )),
        None,
        TimeOptions::default(),
    )
    .expect("lightly damped loop");
    for rate in [1000.0, 100_000.0] {
        let p = Point {
            rate_hz: rate,
            method: Some(Method::Tustin),
            delay: 0.5,
            hold: looprate::spec::HoldKind::ZeroOrder,
        };
        assert!(lp.sampled(&p).figures.is_some());
        c.bench_function(
            &format!("evaluate the lightly damped loop at {rate} Hz"),
            |b| b.iter(|| lp.sampled(std::hint::black_box(&p))),
        );
    }
}

criterion_group!(benches, evaluation, time_figures, lightly_damped);
criterion_main!(benches);
