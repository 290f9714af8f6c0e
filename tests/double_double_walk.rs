//! The load-step peak of two stiff sampled loops against a walk carried in
//! double-double arithmetic (about 32 digits: brute force named as such,
//! exact arithmetic on the loop matrices as built), to tell which route's
//! rounding a gap between the stretch route and the plain walk comes from.
//! Measured and explained in `docs/rounding.md`.

use std::path::PathBuf;

use looprate::case::Case;
use looprate::explore::pick::prepare;
use looprate::model::discretize::Method;
use looprate::model::poly::Poly;
use looprate::model::transfer::{Controller, Transfer};
use looprate::sampled::evaluate::{Point, PreparedLoop};
use looprate::sampled::time_response::{
    TimeOptions, horizon_periods, sampled_figures, walked_figures,
};
use looprate::spec::HoldKind;

/// `hi + lo`, two doubles (Knuth's two-sum, a fused multiply-add for the
/// product's error).
#[derive(Clone, Copy)]
struct Dd(f64, f64);

fn two_sum(a: f64, b: f64) -> Dd {
    let s = a + b;
    let bb = s - a;
    Dd(s, (a - (s - bb)) + (b - bb))
}

impl Dd {
    fn add(self, o: Dd) -> Dd {
        let s = two_sum(self.0, o.0);
        two_sum(s.0, s.1 + self.1 + o.1)
    }
    fn mul(self, a: f64) -> Dd {
        let p = self.0 * a;
        two_sum(p, self.0.mul_add(a, -p) + self.1 * a)
    }
}

/// Largest |y| over every output point of the load-step response, walked
/// in double-double over the loop's horizon.
fn double_double_peak(lp: &PreparedLoop, p: &Point) -> f64 {
    let (hold, _, cl) = lp.sampled_loop(p).unwrap();
    let poles = cl.poles().unwrap();
    let dim = cl.a.nrows();
    let n = cl.plant_states;
    // Output point j: y_j = g_j . z + h_j (as `sampled::output_map` builds it).
    let rows: Vec<(Vec<f64>, f64)> = hold
        .intersample
        .iter()
        .map(|row| {
            let mut g: Vec<f64> = cl.ku.iter().map(|k| k * row.cu0).collect();
            for (gi, e) in g.iter_mut().zip(row.ey.iter()).take(n) {
                *gi += e;
            }
            g[n] += row.cu1;
            (g, row.cu0 * cl.duw + row.cw)
        })
        .collect();
    let mut z = vec![Dd(0.0, 0.0); dim];
    let mut peak = 0.0f64;
    for _ in 0..horizon_periods(&poles, dim) {
        for (g, h) in &rows {
            let y = g
                .iter()
                .zip(&z)
                .fold(Dd(*h, 0.0), |y, (gi, zi)| y.add(zi.mul(*gi)));
            peak = peak.max((y.0 + y.1).abs());
        }
        z = (0..dim)
            .map(|i| (0..dim).fold(Dd(cl.bw[i], 0.0), |s, k| s.add(z[k].mul(cl.a[(i, k)]))))
            .collect();
    }
    peak
}

/// (stretch route, plain walk, double-double walk) load-step peaks.
fn peaks(lp: &PreparedLoop, p: &Point) -> (f64, f64, f64) {
    let (hold, _, cl) = lp.sampled_loop(p).unwrap();
    let poles = cl.poles().unwrap();
    let j = sampled_figures(&cl, &hold, &poles, &lp.time).unwrap();
    let w = walked_figures(&cl, &hold, &poles, &lp.time).unwrap();
    (
        j.1.disturbance_peak,
        w.1.disturbance_peak,
        double_double_peak(lp, p),
    )
}

/// The gimbal demo at 16.2 kHz, pole-zero match, no computation delay
/// (where the powers in plain double were 1.1e-8 off): both routes within
/// 1e-9 of the double-double walk (measured: walk 4e-14, stretches 2e-11).
#[test]
fn gimbal_at_16_khz_both_routes_agree_with_double_double() {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-cases/gimbal-axis.toml");
    let lp = prepare(&Case::load(&path).unwrap()).unwrap();
    let p = Point {
        rate_hz: 16199.449160688539,
        method: Some(Method::PoleZeroMatch),
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    };
    let (s, w, dd) = peaks(&lp, &p);
    assert!(((w - dd) / dd).abs() < 1e-12, "walk {w} vs {dd}");
    assert!(((s - dd) / dd).abs() < 1e-9, "stretches {s} vs {dd}");
}

/// The bench loop at 50 kHz (figures found in the controller's modal
/// coordinates): the walk is within 1e-11 of the double-double walk, the
/// stretch route within 2e-9 (measured 1.3e-12 and 1.7e-9): the gap is the
/// rounding of the moved loop matrix, not of the jumps.
#[test]
fn bench_loop_at_50_khz_gap_is_the_basis_rounding() {
    let wn = 2.0 * std::f64::consts::PI * 60.0;
    let plant = Transfer::new(
        Poly::constant(400.0 * wn * wn),
        Poly::from_descending(&[1.0, 0.0])
            .mul(&Poly::from_descending(&[0.01, 1.0]))
            .mul(&Poly::from_descending(&[1.0, 2.0 * 0.3 * wn, wn * wn])),
    );
    let lp = PreparedLoop::new(
        &plant,
        &Transfer::new(Poly::one(), Poly::from_descending(&[1.0 / 2000.0, 1.0])),
        &Controller::Continuous(Transfer::new(
            Poly::from_descending(&[0.001, 0.02, 0.05]),
            Poly::from_descending(&[1.0 / 400.0, 1.0, 0.0]),
        )),
        None,
        TimeOptions::default(),
    )
    .unwrap();
    let p = Point {
        rate_hz: 50e3,
        method: Some(Method::StepInvariant),
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    let (s, w, dd) = peaks(&lp, &p);
    assert!(((w - dd) / dd).abs() < 1e-11, "walk {w} vs {dd}");
    assert!(((s - dd) / dd).abs() < 2e-9, "stretches {s} vs {dd}");
}
