//! N evaluations of the evaluation bench's loop (`benches/evaluation.rs`,
//! `bench_loop`) at one rate, for instruction counts that do not depend on
//! the machine's load:
//! `valgrind --tool=callgrind target/release/examples/evaluation_count RATE_HZ N`
//! (defaults 1000 Hz, 20 evaluations).

use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, Transfer};
use looprate::sampled::evaluate::{Point, PreparedLoop};
use looprate::sampled::time_response::TimeOptions;
use looprate::spec::HoldKind;

/// The same loop as the bench's `bench_loop` (a positioning axis: motor with
/// two lags and a mode at 60 Hz, first-order sensor, 2nd-order controller).
fn bench_loop() -> PreparedLoop {
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

fn main() {
    let mut args = std::env::args().skip(1);
    let rate: f64 = args
        .next()
        .map_or(1000.0, |a| a.parse().expect("rate in Hz"));
    let n: usize = args
        .next()
        .map_or(20, |a| a.parse().expect("evaluation count"));
    let lp = bench_loop();
    let p = Point {
        rate_hz: rate,
        method: Some(Method::Tustin),
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    for _ in 0..n {
        assert!(
            std::hint::black_box(lp.sampled(std::hint::black_box(&p)))
                .figures
                .is_some()
        );
    }
}
