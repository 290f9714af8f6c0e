//! One loop evaluation (the unit of every sweep): a 4th-order plant with
//! a first-order sensor and a 2nd-order controller, at a slow, a middle
//! and a fast rate.

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, Transfer};
use looprate::sampled::evaluate::{Point, PreparedLoop};
use looprate::sampled::time_response::TimeOptions;
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
    for rate in [200.0, 1000.0, 5000.0] {
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

criterion_group!(benches, evaluation);
criterion_main!(benches);
