//! The exact delay margin's cost: one point's full figures with the margin
//! searched (`sampled_exact`) against the same point without it
//! (`sampled`), on the loop of README's delay-margin case (about 14 periods
//! of margin) and on loops sampled 120 and 1000 times its crossover (the
//! margin near and far past the 64 periods a search on poles stopped at);
//! and the motor-drive cascade's outer loop with
//! and without its margin (whole inner ticks).

use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::case::Case;
use looprate::explore::cascade::prepare_cascade;
use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, Transfer};
use looprate::sampled::cascade::evaluate::CascadePoint;
use looprate::sampled::evaluate::{Given, Point, PreparedLoop};
use looprate::sampled::time_response::TimeOptions;
use looprate::spec::HoldKind;

/// Plant lags at 372.3 and 4234 rad/s, a lead at 79.07 rad/s (ratio 5.06)
/// and an integral at 107.9 rad/s, |L(j 315.3)| = 1 in continuous time.
fn margin_loop() -> (PreparedLoop, f64) {
    let lag = |p: f64| Transfer::new(Poly::constant(p), Poly::from_descending(&[1.0, p]));
    let plant = lag(372.3).cascade(&lag(4234.0));
    let lead = Transfer::new(
        Poly::from_descending(&[1.0 / 79.07, 1.0]),
        Poly::from_descending(&[1.0 / (79.07 * 5.06), 1.0]),
    );
    let integral = Transfer::new(
        Poly::from_descending(&[1.0, 107.9]),
        Poly::from_descending(&[1.0, 0.0]),
    );
    let c0 = lead.cascade(&integral);
    let wc = 315.3;
    let jw = looprate::model::poly::C64::new(0.0, wc);
    let k = 1.0 / (c0.eval(jw) * plant.eval(jw)).norm();
    let lp = PreparedLoop::new(
        &plant,
        &Transfer::gain(1.0),
        &Controller::Continuous(c0.cascade(&Transfer::gain(k))),
        None,
        TimeOptions::default(),
    )
    .expect("margin loop");
    (lp, wc / (2.0 * std::f64::consts::PI))
}

fn single_loop(c: &mut Criterion) {
    let (lp, fc) = margin_loop();
    for ratio in [36.85, 120.0, 1000.0] {
        let p = Point {
            rate_hz: ratio * fc,
            method: Some(Method::Tustin),
            delay: 0.0,
            hold: HoldKind::ZeroOrder,
        };
        let e = lp.evaluate(&p, Given::with_delay_margin());
        assert!(
            e.figures.as_ref().and_then(|f| f.delay_margin_s).is_some(),
            "no delay margin at {ratio} x crossover"
        );
        c.bench_function(
            &format!("figures without delay margin, {ratio} x crossover"),
            |b| b.iter(|| lp.sampled(std::hint::black_box(&p))),
        );
        c.bench_function(
            &format!("figures with exact delay margin, {ratio} x crossover"),
            |b| b.iter(|| lp.evaluate(std::hint::black_box(&p), Given::with_delay_margin())),
        );
    }
}

fn cascade(c: &mut Criterion) {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cases")
        .join("motor-drive-cascade.toml");
    let text = std::fs::read_to_string(&path).expect("demo case");
    let case = Case::parse(&text, &path).expect("demo case");
    let pc = prepare_cascade(&case).expect("prepare").expect("cascade");
    let p = CascadePoint {
        inner: Point {
            rate_hz: 10_000.0,
            method: Some(Method::Tustin),
            delay: 1.0,
            hold: HoldKind::ZeroOrder,
        },
        ratio: 10,
        outer_method: Some(Method::Tustin),
        outer_delay: 0.0,
        outer_hold: HoldKind::ZeroOrder,
    };
    let e = pc.evaluate_outer(&p, true);
    assert!(
        e.figures.as_ref().and_then(|f| f.delay_margin_s).is_some(),
        "no outer delay margin"
    );
    c.bench_function(
        "cascade outer figures without delay margin, 10 kHz / 10",
        |b| b.iter(|| pc.evaluate_outer(std::hint::black_box(&p), false)),
    );
    c.bench_function(
        "cascade outer figures with exact delay margin, 10 kHz / 10",
        |b| b.iter(|| pc.evaluate_outer(std::hint::black_box(&p), true)),
    );
}

criterion_group!(benches, single_loop, cascade);
criterion_main!(benches);
