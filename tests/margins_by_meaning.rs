//! Every loop figure checked by its meaning (`docs/figures.md`), not by how
//! it is computed: scale the controller by the gain margin and stability
//! flips; add the delay margin as extra actuator delay and it flips;
//! 1/Ms and |PM| against a brute-force dense grid of the exact loop gain.
//! Property tests over random loops, and three named loops whose numbers come
//! from a brute-force dense scan.

use looprate::model::discretize::Method;
use looprate::model::poly::{C64, Poly};
use looprate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use looprate::sampled::closed_loop::{ClosedLoop, Stability};
use looprate::sampled::evaluate::{Figures, Given, Point, PreparedLoop, Transport};
use looprate::sampled::time_response::TimeOptions;
use looprate::spec::HoldKind;
use proptest::prelude::*;

const TWO_PI: f64 = 2.0 * std::f64::consts::PI;

fn transfer(num: &[f64], den: &[f64]) -> Transfer {
    Transfer::new(Poly::from_descending(num), Poly::from_descending(den))
}

fn prepared(plant: &Transfer, sensor: &Transfer, c: &Transfer) -> PreparedLoop {
    PreparedLoop::new(
        plant,
        sensor,
        &Controller::Continuous(c.clone()),
        None,
        TimeOptions::default(),
    )
    .unwrap()
}

/// Whether the exact sampled loop at `p` is stable with the controller in z
/// `c`.
fn stable_with(lp: &PreparedLoop, p: &Point, c: &DiscreteTransfer) -> bool {
    let (_, cl) = lp.closed_loop_around(p, c).unwrap();
    ClosedLoop::stability(&cl.poles().unwrap()) == Stability::Stable
}

/// The point's controller scaled by `k`.
fn scaled(lp: &PreparedLoop, p: &Point, k: f64) -> DiscreteTransfer {
    let c = lp.controller_at(p.rate_hz, p.method).unwrap();
    DiscreteTransfer {
        transfer: c.transfer.cascade(&Transfer::gain(k)),
        period_s: c.period_s,
    }
}

/// The point with `extra_s` seconds more actuator delay.
fn delayed(p: &Point, extra_s: f64) -> Point {
    Point {
        delay: p.delay + extra_s * p.rate_hz,
        ..*p
    }
}

/// Brute-force dense grid of the loop gain up to Nyquist: log-spaced from
/// far below the slowest mode plus evenly spaced near Nyquist.
fn dense_grid(l: &dyn Fn(f64) -> C64, w_lo: f64, w_hi: f64, n: usize) -> Vec<(f64, C64)> {
    let mut ws: Vec<f64> = (0..=n)
        .map(|i| w_lo * (w_hi / w_lo).powf(i as f64 / n as f64))
        .collect();
    ws.extend((0..=n / 4).map(|i| w_hi * (0.5 + 0.5 * i as f64 / (n / 4) as f64)));
    ws.sort_by(|a, b| a.total_cmp(b));
    ws.into_iter().map(|w| (w, l(w))).collect()
}

/// The smallest angle from -1 (deg) of the grid's |L| = 1 points, each
/// interpolated linearly in ln w between the two grid points around it.
fn grid_pm(grid: &[(f64, C64)], l: &dyn Fn(f64) -> C64) -> Option<f64> {
    let mut best: Option<f64> = None;
    for pair in grid.windows(2) {
        let ((w0, l0), (w1, l1)) = (pair[0], pair[1]);
        let (g0, g1) = (l0.norm().ln(), l1.norm().ln());
        if g0.is_finite() && g1.is_finite() && (g0 > 0.0) != (g1 > 0.0) {
            let x = w0.ln() + (w1.ln() - w0.ln()) * g0 / (g0 - g1);
            let v = l(x.exp());
            let angle = (180.0 - v.arg().to_degrees().abs()).abs();
            best = Some(best.map_or(angle, |b: f64| b.min(angle)));
        }
    }
    best
}

/// Every check of one stable point; returns a reason on failure.
fn check_meaning(lp: &PreparedLoop, p: &Point, f: &Figures) -> Result<(), String> {
    // Gain margin: just short of it stays stable, just past it does not.
    if let Some(gm) = f.gain_margin_db {
        let short = 10f64.powf((gm - 0.1 * gm.signum()) / 20.0);
        let past = 10f64.powf((gm + 0.1 * gm.signum()) / 20.0);
        if !stable_with(lp, p, &scaled(lp, p, short)) {
            return Err(format!("GM {gm} dB: scaled by {short} is unstable"));
        }
        if stable_with(lp, p, &scaled(lp, p, past)) {
            return Err(format!("GM {gm} dB: scaled by {past} is still stable"));
        }
    }
    // Delay margin: the first loss of stability. Stable at 0.98 x and at
    // every delay of a scan 1/16 of a period apart below it (at most 200
    // trials, so a window of instability stepped over shows), unstable
    // just past it (1 + 1e-4). Not "1.02 x is unstable": a loop whose pole
    // hugs the unit circle can regain stability within 2 % of the margin
    // (`delay_margin_is_the_first_loss_even_where_stability_comes_back`).
    let c = lp.controller_at(p.rate_hz, p.method).unwrap();
    match f.delay_margin_s {
        Some(dm) => {
            if !stable_with(lp, &delayed(p, 0.98 * dm), &c) {
                return Err(format!("DM {dm} s: 0.98 x is unstable"));
            }
            let step = (1.0 / (16.0 * p.rate_hz)).max(0.98 * dm / 200.0);
            let trials = (0.98 * dm / step).floor() as usize;
            for i in 1..=trials {
                let x = i as f64 * step;
                if !stable_with(lp, &delayed(p, x), &c) {
                    return Err(format!("DM {dm} s: unstable already at {x} s"));
                }
            }
            if stable_with(lp, &delayed(p, dm * (1.0 + 1e-4)), &c) {
                return Err(format!("DM {dm} s: just past it is still stable"));
            }
        }
        None => {
            if f.phase_margin_deg.is_some() && f.loop_notes.is_empty() {
                return Err("a gain crossing but no delay margin and no note".into());
            }
        }
    }
    // Ms and PM against a dense grid.
    let l = lp.sampled_loop_gain(p).unwrap();
    let range = lp.sampled_range(p.rate_hz);
    let grid = dense_grid(&l, range.w_lo, range.w_hi, 60_000);
    let d_min = grid
        .iter()
        .map(|(_, v)| (v + 1.0).norm())
        .fold(f64::INFINITY, f64::min);
    let inv_ms = 1.0 / f.sensitivity_peak;
    if inv_ms > d_min * (1.0 + 1e-9) || d_min > inv_ms * 1.01 {
        return Err(format!("1/Ms {inv_ms} vs grid distance {d_min}"));
    }
    match (f.phase_margin_deg, grid_pm(&grid, &l)) {
        (Some(pm), Some(g)) if (pm.abs() - g).abs() > 0.05 => {
            return Err(format!("|PM| {} vs grid {g}", pm.abs()));
        }
        (Some(_), Some(_)) | (None, None) => {}
        (a, b) => return Err(format!("PM {a:?} vs grid {b:?}")),
    }
    Ok(())
}

/// One factor of a random plant: (numerator, denominator), descending.
#[derive(Debug, Clone)]
enum PlantFactor {
    Lag(f64),
    Unstable(f64),
    Integrator,
    Resonance(f64, f64),
}

impl PlantFactor {
    fn transfer(&self) -> Transfer {
        match *self {
            PlantFactor::Lag(p) => transfer(&[p], &[1.0, p]),
            PlantFactor::Unstable(p) => transfer(&[p], &[1.0, -p]),
            PlantFactor::Integrator => transfer(&[1.0], &[1.0, 0.0]),
            PlantFactor::Resonance(wn, z) => transfer(&[wn * wn], &[1.0, 2.0 * z * wn, wn * wn]),
        }
    }
    fn order(&self) -> usize {
        match self {
            PlantFactor::Resonance(..) => 2,
            _ => 1,
        }
    }
}

/// One factor of a random controller.
#[derive(Debug, Clone)]
enum CtrlFactor {
    Integral(f64),
    Lead(f64, f64),
    Notch(f64, f64, f64),
}

impl CtrlFactor {
    fn transfer(&self) -> Transfer {
        match *self {
            CtrlFactor::Integral(z) => transfer(&[1.0, z], &[1.0, 0.0]),
            CtrlFactor::Lead(z, ratio) => transfer(&[1.0 / z, 1.0], &[1.0 / (z * ratio), 1.0]),
            CtrlFactor::Notch(wn, zn, zd) => transfer(
                &[1.0, 2.0 * zn * wn, wn * wn],
                &[1.0, 2.0 * zd * wn, wn * wn],
            ),
        }
    }
}

fn plant_factor(wc: f64) -> impl Strategy<Value = PlantFactor> {
    prop_oneof![
        3 => (0.05f64..20.0).prop_map(move |k| PlantFactor::Lag(k * wc)),
        1 => (0.05f64..0.4).prop_map(move |k| PlantFactor::Unstable(k * wc)),
        2 => Just(PlantFactor::Integrator),
        2 => (0.3f64..8.0, 0.005f64..0.2).prop_map(move |(k, z)| PlantFactor::Resonance(k * wc, z)),
    ]
}

fn ctrl_factor(wc: f64) -> impl Strategy<Value = CtrlFactor> {
    prop_oneof![
        (0.05f64..0.5).prop_map(move |k| CtrlFactor::Integral(k * wc)),
        (0.2f64..1.0, 2.0f64..10.0).prop_map(move |(k, r)| CtrlFactor::Lead(k * wc, r)),
        (0.5f64..8.0, 0.01f64..0.1, 0.3f64..0.8).prop_map(move |(k, zn, zd)| CtrlFactor::Notch(
            k * wc,
            zn,
            zd
        )),
    ]
}

/// A random loop: plant of order 1 to 5 from lags, unstable poles,
/// integrators and lightly damped resonances; a sensor lag or none;
/// a controller with integral action, lead and notches; the gain set so
/// that |L(j wc)| = 1 at the continuous level; a random rate (6 to 60
/// times the crossover), method and delay (0 to 2.5 periods).
#[derive(Debug, Clone)]
struct RandomLoop {
    plant: Vec<PlantFactor>,
    sensor_lag: Option<f64>,
    ctrl: Vec<CtrlFactor>,
    wc: f64,
    rate_ratio: f64,
    method: Method,
    delay: f64,
}

fn random_loop() -> impl Strategy<Value = RandomLoop> {
    (1.0f64..3.0).prop_flat_map(|log_wc| {
        let wc = 10f64.powf(log_wc);
        (
            prop::collection::vec(plant_factor(wc), 1..4),
            prop::option::of((3.0f64..30.0).prop_map(move |k| k * wc)),
            prop::collection::vec(ctrl_factor(wc), 0..3),
            6.0f64..60.0,
            prop_oneof![
                Just(Method::Tustin),
                Just(Method::StepInvariant),
                Just(Method::PoleZeroMatch),
                Just(Method::BackwardEuler)
            ],
            prop_oneof![Just(0.0), Just(0.5), Just(1.0), Just(1.5), 0.0f64..2.5],
        )
            .prop_map(
                move |(plant, sensor_lag, ctrl, rate_ratio, method, delay)| {
                    let mut plant = plant;
                    // Orders 1 to 5.
                    while plant.iter().map(PlantFactor::order).sum::<usize>() > 5 {
                        plant.pop();
                    }
                    RandomLoop {
                        plant,
                        sensor_lag,
                        ctrl,
                        wc,
                        rate_ratio,
                        method,
                        delay,
                    }
                },
            )
    })
}

impl RandomLoop {
    fn build(&self) -> Option<(PreparedLoop, Point)> {
        let plant = self
            .plant
            .iter()
            .fold(Transfer::gain(1.0), |acc, f| acc.cascade(&f.transfer()));
        let sensor = self
            .sensor_lag
            .map_or(Transfer::gain(1.0), |p| transfer(&[p], &[1.0, p]));
        let c0 = self
            .ctrl
            .iter()
            .fold(Transfer::gain(1.0), |acc, f| acc.cascade(&f.transfer()));
        let jw = C64::new(0.0, self.wc);
        let l0 = c0.eval(jw) * plant.eval(jw) * sensor.eval(jw);
        let k: f64 = 1.0 / l0.norm();
        if !k.is_finite() || k <= 0.0 {
            return None;
        }
        let c = c0.cascade(&Transfer::gain(k));
        let lp = PreparedLoop::new(
            &plant,
            &sensor,
            &Controller::Continuous(c),
            None,
            TimeOptions::default(),
        )
        .ok()?;
        let p = Point {
            rate_hz: self.rate_ratio * self.wc / TWO_PI,
            method: Some(self.method),
            delay: self.delay,
            hold: HoldKind::ZeroOrder,
        };
        Some((lp, p))
    }
}

/// Seeds of the property test: fixed, so CI sees the same loops every run
/// (`LOOPRATE_PROPTEST_SEED=<n>` runs that seed alone, to explore new
/// loops).
const SEEDS: [u64; 6] = [20_261_203, 1, 7, 42, 1_234_567, 987_654_321];

/// Each case evaluates one loop with its exact delay margin, a handful of
/// closed loops and a 75 000-point grid: 40 stable cases a seed keep the
/// test at a few seconds a seed on two cores.
#[test]
fn every_figure_holds_by_its_meaning() {
    let seeds: Vec<u64> = match std::env::var("LOOPRATE_PROPTEST_SEED") {
        Ok(s) => vec![s.parse().expect("LOOPRATE_PROPTEST_SEED: a whole number")],
        Err(_) => SEEDS.to_vec(),
    };
    for seed in seeds {
        let config = ProptestConfig {
            cases: 40,
            max_global_rejects: 20_000,
            rng_seed: proptest::test_runner::RngSeed::Fixed(seed),
            failure_persistence: Some(Box::new(
                proptest::test_runner::FileFailurePersistence::SourceParallel(
                    "proptest-regressions",
                ),
            )),
            source_file: Some(file!()),
            ..ProptestConfig::default()
        };
        let mut runner = proptest::test_runner::TestRunner::new(config);
        if let Err(e) = runner.run(&random_loop(), one_random_loop) {
            panic!("seed {seed}: {e}");
        }
    }
}

/// The property for one random loop: skipped when unstable or on a knife
/// edge, else every figure by its meaning.
fn one_random_loop(rl: RandomLoop) -> Result<(), TestCaseError> {
    let built = rl.build();
    prop_assume!(built.is_some());
    let (lp, p) = built.unwrap();
    let e = lp.evaluate(&p, Given::with_delay_margin());
    prop_assume!(e.stable);
    let f = e.figures.unwrap();
    // A loop whose |L| stays within a hair of 1 over a band (Ms above
    // 3, or |L| nearly flat through its crossover) sits on a knife
    // edge: its stability can flip back and forth within a period of
    // extra delay, so "1.02 x the margin is unstable" need not hold
    // (docs/figures.md). Such loops are left out here.
    prop_assume!(f.sensitivity_peak <= 3.0);
    if let Some(fc) = f.crossover_hz {
        let l = lp.sampled_loop_gain(&p).unwrap();
        let w = TWO_PI * fc;
        let slope = (l(w * 1.01).norm().ln() - l(w / 1.01).norm().ln()) / (2.0 * 1.01f64.ln());
        prop_assume!(slope.abs() >= 0.2);
    }
    if let Err(why) = check_meaning(&lp, &p, &f) {
        return Err(TestCaseError::fail(format!("{why}; figures {f:?}")));
    }
    Ok(())
}

/// Brute-force dense scan for the gain margin: every -180 deg (mod 360)
/// crossing of the unwrapped phase on the grid (the nearer grid point's
/// magnitude), plus the ends where the loop gain is real and negative
/// (`end_values`: L at w -> 0 when finite, and at Nyquist). Returns the
/// margin nearest 0 dB, sign kept.
fn grid_gm(grid: &[(f64, C64)], end_values: &[C64]) -> Option<f64> {
    let mut all: Vec<f64> = Vec::new();
    let mut phase = grid[0].1.arg().to_degrees();
    for pair in grid.windows(2) {
        let next = phase + (pair[1].1 / pair[0].1).arg().to_degrees();
        let (q0, q1) = (
            ((phase + 180.0) / 360.0).floor(),
            ((next + 180.0) / 360.0).floor(),
        );
        if q0 != q1 {
            all.push(-20.0 * pair[1].1.norm().log10());
        }
        phase = next;
    }
    for v in end_values {
        if v.re < 0.0 && v.im.abs() <= 1e-9 * v.norm() && v.norm().is_finite() {
            all.push(-20.0 * v.norm().log10());
        }
    }
    all.into_iter().min_by(|a, b| a.abs().total_cmp(&b.abs()))
}

#[test]
fn open_loop_unstable_plant_with_lead_gain_margin_is_at_the_low_end() {
    // Plant 1/(s^2 - 400), lead 4880 (s + 28.52)/(s + 108), sensor lag at
    // 500 Hz; 848 Hz, zoh, delay 1. The loop gain at z = 1 is
    // C(0) P(0) H(0) = -4880 * 28.52 / (108 * 400) (closed form: the zoh
    // equivalent keeps the DC gain), on the negative real axis: the low end
    // is a -180 deg crossing with GM = -20 log10 |L(1)| = -10.16 dB.
    let ws = TWO_PI * 500.0;
    let lp = prepared(
        &transfer(&[1.0], &[1.0, 0.0, -400.0]),
        &transfer(&[ws], &[1.0, ws]),
        &transfer(&[4880.0, 4880.0 * 28.52], &[1.0, 108.0]),
    );
    let p = Point {
        rate_hz: 848.0,
        method: Some(Method::StepInvariant),
        delay: 1.0,
        hold: HoldKind::ZeroOrder,
    };
    let e = lp.evaluate(&p, Given::with_delay_margin());
    let f = e.figures.clone().expect("stable");
    let closed_form: f64 = -20.0 * (4880.0f64 * 28.52 / (108.0 * 400.0)).log10();
    let gm = f.gain_margin_db.unwrap();
    assert!((gm - closed_form).abs() < 1e-6, "GM {gm} vs {closed_form}");
    assert!((gm + 10.16).abs() < 0.01);
    // Brute-force dense scan (300 000 points and both ends) agrees.
    let l = lp.sampled_loop_gain(&p).unwrap();
    let range = lp.sampled_range(p.rate_hz);
    let grid = dense_grid(&l, range.w_lo * 1e-2, range.w_hi, 300_000);
    let scan = grid_gm(&grid, &[l(0.0), l(range.w_hi)]).unwrap();
    assert!((gm - scan).abs() < 0.01, "GM {gm} vs scan {scan}");
    // Its meaning, with the scalings the loop was reported with: 0.30
    // (-10.5 dB) loses stability, 0.33 keeps it.
    assert!(!stable_with(&lp, &p, &scaled(&lp, &p, 0.30)));
    assert!(stable_with(&lp, &p, &scaled(&lp, &p, 0.33)));
    check_meaning(&lp, &p, &f).unwrap();
}

#[test]
fn resonance_with_a_notch_takes_the_crossing_nearest_minus_one() {
    // Speed loop: 1/(0.001 s + 0.0005) with a motor-load resonance (zero
    // pair at 250 Hz, damping 0.05; pole pair at 350 Hz, damping 0.02), PI
    // with a notch at 300 Hz (depth set by damping 0.05 over 0.5); 1300 Hz,
    // tustin, delay 1. |L| crosses 1 several times; the reported PM is the
    // crossing nearest -1, checked against a brute-force dense scan of
    // every crossing's angle from -1, and the delay margin against the
    // phase still to go at each crossing (the estimate) and by its meaning.
    let (wa, wr, wn) = (TWO_PI * 250.0, TWO_PI * 350.0, TWO_PI * 300.0);
    let plant = transfer(&[1.0], &[0.001, 0.0005]).cascade(&transfer(
        &[1.0 / (wa * wa), 0.1 / wa, 1.0],
        &[1.0 / (wr * wr), 0.04 / wr, 1.0],
    ));
    let ctrl = transfer(&[0.2, 0.2 * TWO_PI * 10.0], &[1.0, 0.0]).cascade(&transfer(
        &[1.0, 0.1 * wn, wn * wn],
        &[1.0, 1.0 * wn, wn * wn],
    ));
    let lp = prepared(&plant, &Transfer::gain(1.0), &ctrl);
    let p = Point {
        rate_hz: 1300.0,
        method: Some(Method::Tustin),
        delay: 1.0,
        hold: HoldKind::ZeroOrder,
    };
    let e = lp.evaluate(&p, Given::with_delay_margin());
    let f = e.figures.clone().expect("stable");
    let detail = e.loop_detail.clone().unwrap();
    assert!(
        detail.gain_crossings_hz.len() >= 3,
        "crossings {:?}",
        detail.gain_crossings_hz
    );
    let l = lp.sampled_loop_gain(&p).unwrap();
    let range = lp.sampled_range(p.rate_hz);
    let grid = dense_grid(&l, range.w_lo, range.w_hi, 400_000);
    let scan = grid_pm(&grid, &l).unwrap();
    let pm = f.phase_margin_deg.unwrap();
    assert!((pm.abs() - scan).abs() < 0.01, "PM {pm} vs scan {scan}");
    // The crossover is the crossing of that margin.
    let wc = TWO_PI * f.crossover_hz.unwrap();
    let at = l(wc);
    assert!((at.norm() - 1.0).abs() < 1e-6);
    assert!((180.0 - at.arg().to_degrees().abs() - pm.abs()).abs() < 1e-6);
    check_meaning(&lp, &p, &f).unwrap();
}

#[test]
fn shallow_bump_of_the_loop_gain_just_above_one_is_a_crossing() {
    // A random loop the property test once reported with no gain crossing:
    // plant resonances at 16.3 rad/s (damping 0.189) and 90.8 rad/s
    // (0.0645), two leads (zeros at 0.451 and 0.424 of wc = 16.55 rad/s,
    // ratios 8.37 and 4.15), gain set so that the continuous |L(j wc)| = 1;
    // 31.6 x wc, backward-euler, delay 0. The sampled |L| rises to about
    // 1.0018 over roughly 16.33 .. 16.70 rad/s and falls back below 1:
    // two gain crossings between grid points with ln|L| < 0 on both sides.
    let wc = 16.55;
    let (w1, z1, w2, z2) = (
        16.3,
        0.189_145_796_897_688_15,
        90.8,
        0.064_513_278_289_132_88,
    );
    let rl = RandomLoop {
        plant: vec![
            PlantFactor::Resonance(w1, z1),
            PlantFactor::Resonance(w2, z2),
        ],
        sensor_lag: None,
        ctrl: vec![
            CtrlFactor::Lead(0.450_686_602_387_741_7 * wc, 8.372_503_172_655_257),
            CtrlFactor::Lead(0.424_175_404_651_953_46 * wc, 4.154_070_699_190_35),
        ],
        wc,
        rate_ratio: 31.6,
        method: Method::BackwardEuler,
        delay: 0.0,
    };
    let (lp, p) = rl.build().unwrap();
    let e = lp.evaluate(&p, Given::with_delay_margin());
    assert!(e.stable);
    let f = e.figures.clone().unwrap();
    let detail = e.loop_detail.clone().unwrap();
    // Brute-force dense scan (400 000 points): the crossings and the
    // smallest angle from -1 among them.
    let l = lp.sampled_loop_gain(&p).unwrap();
    let range = lp.sampled_range(p.rate_hz);
    let grid = dense_grid(&l, range.w_lo, range.w_hi, 400_000);
    let scan = grid_pm(&grid, &l).expect("the scan finds a gain crossing");
    let peak = grid
        .iter()
        .filter(|(w, _)| (16.0..17.0).contains(w))
        .map(|(_, v)| v.norm())
        .fold(0.0, f64::max);
    assert!(peak > 1.001 && peak < 1.01, "peak |L| {peak}");
    let pm = f.phase_margin_deg.expect("a gain crossing is reported");
    assert!((pm.abs() - scan).abs() < 0.01, "PM {pm} vs scan {scan}");
    // Both sides of the bump, each exactly on |L| = 1.
    let bump: Vec<f64> = detail
        .gain_crossings_hz
        .iter()
        .map(|hz| TWO_PI * hz)
        .filter(|w| (16.0..17.0).contains(w))
        .collect();
    assert_eq!(bump.len(), 2, "crossings {:?}", detail.gain_crossings_hz);
    for w in &bump {
        assert!(
            (l(*w).norm() - 1.0).abs() < 1e-8,
            "|L({w})| = {}",
            l(*w).norm()
        );
    }
    assert!(l((bump[0] * bump[1]).sqrt()).norm() > 1.0);
}

#[test]
fn delay_margin_finds_a_window_of_instability_shorter_than_half_a_period() {
    // A random loop within the rounding of one the property test once
    // reported with too large a margin (docs/figures.md): plant lags at 372.3 and 4234 rad/s, a lead at 79.07 rad/s
    // of ratio 5.064, an integral at 107.9 rad/s, wc = 315.3 rad/s, 36.85 x
    // wc, Tustin, no computation delay. |L| crosses 1 at about 56, 314 and
    // 345 rad/s; with extra delay a closed-loop pole near 342 rad/s comes
    // to hug the unit circle (|z| within 1e-4 of 1), and the change of the
    // hold's shape with the fraction of the delay (it repeats every period)
    // makes it cross out, back in within about half a period, and out
    // again. A scan in steps of half a period once stepped over that first
    // window and reported the second one (about 7.78 ms, 0.98 x of which is
    // unstable). Brute-force dense scan of extra delays, 1/200 of a period
    // apart up to 20 periods.
    let rl = RandomLoop {
        plant: vec![
            PlantFactor::Lag(372.266_957_371_995_7),
            PlantFactor::Lag(4_234.259_780_649_98),
        ],
        sensor_lag: None,
        ctrl: vec![
            CtrlFactor::Lead(79.068_193_917_312_23, 5.063_931_178_838_856),
            CtrlFactor::Integral(107.861_642_359_559_16),
        ],
        wc: 315.316_406_753_32,
        rate_ratio: 36.852_841_886_009_48,
        method: Method::Tustin,
        delay: 0.0,
    };
    let (period, flips) = first_loss_against_dense_scan(&rl, 200, 4000);
    assert!(flips[1].0 - flips[0].0 < period, "flips {flips:?}");
}

/// The loop `rl`'s exact delay margin against a brute-force dense scan of
/// extra delays, `1 / per_period` of a period apart for `trials` steps,
/// each with the exact loop's poles: stability is lost, found again and
/// lost again on the scan, and the margin is the first loss (within one
/// scan step); every figure holds by its meaning. Returns the period (s)
/// and the scan's flips (delay s, stable after it).
fn first_loss_against_dense_scan(
    rl: &RandomLoop,
    per_period: usize,
    trials: usize,
) -> (f64, Vec<(f64, bool)>) {
    let (lp, p) = rl.build().unwrap();
    let e = lp.evaluate(&p, Given::with_delay_margin());
    let f = e.figures.clone().expect("stable");
    let dm = f.delay_margin_s.expect("a delay margin");
    let c = lp.controller_at(p.rate_hz, p.method).unwrap();
    let period = 1.0 / p.rate_hz;
    let step = period / per_period as f64;
    let mut flips: Vec<(f64, bool)> = Vec::new();
    let mut was = true;
    for i in 1..=trials {
        let x = i as f64 * step;
        let now = stable_with(&lp, &delayed(&p, x), &c);
        if now != was {
            flips.push((x, now));
            was = now;
        }
    }
    assert!(flips.len() >= 3, "flips {flips:?}");
    assert!(!flips[0].1 && flips[1].1 && !flips[2].1, "flips {flips:?}");
    let first = flips[0].0;
    assert!(
        dm > first - step && dm <= first,
        "margin {dm} s vs the dense scan's first unstable delay {first} s"
    );
    check_meaning(&lp, &p, &f).unwrap();
    (period, flips)
}

#[test]
fn delay_margin_is_the_first_loss_even_where_stability_comes_back() {
    // A random loop margins_by_meaning found: a plant lag at 114.6 rad/s,
    // a notch at 269.7 rad/s (zero damping 0.0728, pole damping 0.314), wc
    // = 56.39 rad/s, 16.87 x wc, backward Euler, no computation delay. A
    // closed-loop pole near the crossover (8.4 Hz) comes to hug the unit
    // circle with extra delay: it crosses out at about 6.98 periods, back
    // in at about 7.12 (a window of 2 % of the margin) and out again at
    // about 7.59.
    // The margin is the first crossing, so 1.02 x the margin is stable.
    let rl = RandomLoop {
        plant: vec![PlantFactor::Lag(114.597_903_565_678_72)],
        sensor_lag: None,
        ctrl: vec![CtrlFactor::Notch(
            269.714_467_540_788_86,
            0.072_804_434_275_492_62,
            0.314_142_236_363_203_26,
        )],
        wc: 56.392_911_532_985_7,
        rate_ratio: 16.865_415_835_461_718,
        method: Method::BackwardEuler,
        delay: 0.0,
    };
    // Brute-force dense scan of extra delays, 1/400 of a period apart up to
    // 10 periods.
    let (_, flips) = first_loss_against_dense_scan(&rl, 400, 4000);
    assert!(flips[1].0 < 1.05 * flips[0].0, "flips {flips:?}");
}

#[test]
fn delay_margin_of_a_loop_sampled_far_faster_than_its_crossover() {
    // An integrator plant 1/s under a gain of 1: the continuous loop 1/s
    // crosses over at 1 rad/s with 90 deg of phase margin, so its delay
    // margin is pi/2 s (closed form). Sampled at 100 Hz behind a zero-order
    // hold, which to first order in wT acts as a delay of half a period
    // (from memory), the exact sampled margin is about pi/2 - T/2 =
    // 1.5658 s, 157 periods: past the 64 periods the search on poles once
    // stopped at ("not located").
    let lp = prepared(
        &transfer(&[1.0], &[1.0, 0.0]),
        &Transfer::gain(1.0),
        &Transfer::gain(1.0),
    );
    let p = Point {
        rate_hz: 100.0,
        method: Some(Method::Tustin),
        delay: 0.0,
        hold: HoldKind::ZeroOrder,
    };
    let f = lp
        .evaluate(&p, Given::with_delay_margin())
        .figures
        .expect("stable");
    let dm = f.delay_margin_s.expect("a delay margin");
    let first_order = std::f64::consts::FRAC_PI_2 - 0.5 / p.rate_hz;
    assert!(
        // The next term is second order in wT = 0.01 (measured: 8e-6).
        (dm - first_order).abs() < 1e-4 * first_order,
        "margin {dm} s against pi/2 - T/2 = {first_order} s"
    );
    // By its meaning, on the exact loop's poles (a 160-state loop).
    let c = lp.controller_at(p.rate_hz, p.method).unwrap();
    for k in [0.5, 0.98, 0.9999] {
        assert!(stable_with(&lp, &delayed(&p, k * dm), &c), "{k} x margin");
    }
    assert!(!stable_with(&lp, &delayed(&p, dm * (1.0 + 1e-4)), &c));
}

/// The exact delay margin by its meaning on loops the first property test
/// does not reach: every hold kind, a transport delay on the measurement
/// (a fraction of a period up to a few periods), and rates from 6 to 300
/// times the crossover (margins of up to about 50 periods). Stable at 0.5 x
/// and 0.98 x the margin, unstable just past it, on the exact loop's poles.
#[test]
fn delay_margin_holds_with_every_hold_sensor_delays_and_fast_rates() {
    let config = ProptestConfig {
        cases: 60,
        max_global_rejects: 20_000,
        rng_seed: proptest::test_runner::RngSeed::Fixed(
            std::env::var("LOOPRATE_PROPTEST_SEED")
                .map_or(20_261_205, |s| s.parse().expect("a whole number")),
        ),
        failure_persistence: None,
        ..ProptestConfig::default()
    };
    let strategy = (
        random_loop(),
        prop::sample::select(HoldKind::ALL.to_vec()),
        0.0f64..3.0,
        6.0f64..300.0,
    );
    let checked = std::sync::atomic::AtomicUsize::new(0);
    let mut runner = proptest::test_runner::TestRunner::new(config);
    let result = runner.run(&strategy, |(rl, hold, sensor_periods, ratio)| {
        let rl = RandomLoop {
            rate_ratio: ratio,
            ..rl
        };
        let built = rl.build();
        prop_assume!(built.is_some());
        let (lp0, p) = built.unwrap();
        let p = Point { hold, ..p };
        let transport = Transport {
            plant_s: 0.0,
            sensor_s: sensor_periods / p.rate_hz,
        };
        let lp = PreparedLoop::with_transport(
            &lp0.plant,
            &lp0.sensor,
            &lp0.controller,
            None,
            TimeOptions::default(),
            transport,
        )
        .unwrap();
        let e = lp.evaluate(&p, Given::with_delay_margin());
        prop_assume!(e.stable);
        let f = e.figures.unwrap();
        // The knife-edge loops the first property test leaves out.
        prop_assume!(f.sensitivity_peak <= 3.0);
        let Some(dm) = f.delay_margin_s else {
            prop_assert!(f.phase_margin_deg.is_none() || !f.loop_notes.is_empty());
            return Ok(());
        };
        let c = lp.controller_at(p.rate_hz, p.method).unwrap();
        for k in [0.5, 0.98] {
            prop_assert!(
                stable_with(&lp, &delayed(&p, k * dm), &c),
                "{hold} {sensor_periods} periods of sensor delay, {ratio} x: unstable at {k} x margin {dm}"
            );
        }
        prop_assert!(
            !stable_with(&lp, &delayed(&p, dm * (1.0 + 1e-4)), &c),
            "{hold} {sensor_periods} periods of sensor delay, {ratio} x: stable past margin {dm}"
        );
        checked.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        Ok(())
    });
    if let Err(e) = result {
        panic!("{e}");
    }
    let checked = checked.into_inner();
    assert!(checked >= 30, "only {checked} margins checked");
}
