//! Cascaded loops (`[outer]`): the lifted two-rate loop checked against
//! outside facts, each source named beside its check.

use std::path::Path;

use looprate::case::Case;
use looprate::explore::cascade::{cascade_pick, cascade_rows, prepare_cascade};
use looprate::model::discretize::{Method, discretize};
use looprate::model::poly::{C64, Poly};
use looprate::model::transfer::{Controller, Transfer};
use looprate::output::cascade::{cascade_csv, finish_sweep};
use looprate::sampled::cascade::evaluate::{CascadePoint, PreparedCascade};
use looprate::sampled::evaluate::{Point, Status};
use looprate::sampled::frequency::{FrequencyRange, loop_figures};
use looprate::sampled::hold::{Actuation, HoldEquivalent, plant_and_sensor};
use looprate::spec::HoldKind;

mod common;

/// The shared servo drive (`common::drive`) over 8 inner rates.
fn drive(outer_sensor: &str, inner_delay: f64, extra: &str) -> String {
    common::drive(outer_sensor, inner_delay, 8, extra)
}

fn cascade(text: &str) -> (Case, PreparedCascade) {
    common::prepared(text, "cascade.toml")
}

fn point(rate_hz: f64, delay: f64, ratio: usize, outer_delay: f64) -> CascadePoint {
    CascadePoint {
        inner: Point {
            rate_hz,
            method: Some(Method::Tustin),
            delay,
            hold: HoldKind::ZeroOrder,
        },
        ratio,
        outer_method: Some(Method::Tustin),
        outer_delay,
        outer_hold: HoldKind::ZeroOrder,
    }
}

fn continuous(c: &Controller) -> &Transfer {
    match c {
        Controller::Continuous(t) => t,
        Controller::Discrete(_) => panic!("continuous controller expected"),
    }
}

/// Descending coefficients of a polynomial in z, padded to `len`.
fn desc(p: &Poly, len: usize) -> Vec<f64> {
    let mut d = p.descending();
    while d.len() < len {
        d.insert(0, 0.0);
    }
    d
}

/// Step response samples of `num/den` (polynomials in z) by its
/// difference equation, input 1 from k = 0.
fn step_samples(num: &Poly, den: &Poly, n: usize) -> Vec<f64> {
    let deg = den.degree();
    let a = desc(den, deg + 1);
    let b = desc(num, deg + 1);
    let mut y: Vec<f64> = Vec::with_capacity(n);
    for k in 0..n {
        // a0 y_k = sum_i b_i u_{k-i} - sum_{i>=1} a_i y_{k-i}, u = 1 for k >= 0.
        let mut acc = 0.0;
        for (i, bi) in b.iter().enumerate() {
            if k >= i {
                acc += bi;
            }
        }
        for i in 1..=deg {
            if k >= i {
                acc -= a[i] * y[k - i];
            }
        }
        y.push(acc / a[0]);
    }
    y
}

/// Ratio 1 is one loop at one rate: built by block algebra from the
/// pulse transfers of the two plants (outer loop gain
/// `Co Guo Ci / (1 + Ci Gui)`), its margins and its step samples must equal
/// the lifted system's (source: block-diagram algebra of the sampled loop,
/// a closed form; `docs/figures.md`, "Cascaded loops").
#[test]
fn ratio_one_equals_the_single_rate_loop_by_block_algebra() {
    let (_, pc) = cascade(&drive("", 0.5, ""));
    let rate = 10_000.0;
    let t = 1.0 / rate;
    let p = point(rate, 0.5, 1, 0.0);
    let act = Actuation {
        hold: HoldKind::ZeroOrder,
        delay_periods: 0.5,
        sensor_delay_s: 0.0,
    };
    let inner = &pc.inner;
    let gui = HoldEquivalent::with(
        &plant_and_sensor(&inner.plant, &inner.sensor).unwrap(),
        t,
        &act,
        1,
    )
    .unwrap()
    .pulse_transfer()
    .unwrap()
    .transfer;
    let whole = inner.plant.cascade(&pc.outer_models.plant);
    let guo = HoldEquivalent::with(
        &plant_and_sensor(&whole, &pc.outer_models.sensor).unwrap(),
        t,
        &act,
        1,
    )
    .unwrap()
    .pulse_transfer()
    .unwrap()
    .transfer;
    let ci = discretize(continuous(&inner.controller), Method::Tustin, t, None)
        .unwrap()
        .transfer;
    let co = discretize(
        continuous(&pc.outer_models.controller),
        Method::Tustin,
        t,
        None,
    )
    .unwrap()
    .transfer;
    // L = Co Guo Ci Gui_d / (Guo_d (Ci_d Gui_d + Ci_n Gui_n)), each a polynomial.
    let l_num = co
        .numerator
        .mul(&guo.numerator)
        .mul(&ci.numerator)
        .mul(&gui.denominator);
    let l_den = co.denominator.mul(&guo.denominator).mul(
        &ci.denominator
            .mul(&gui.denominator)
            .add(&ci.numerator.mul(&gui.numerator)),
    );
    let l = |w: f64| {
        let z = C64::from_polar(1.0, w * t);
        l_num.eval_c(z) / l_den.eval_c(z)
    };
    let roots: Vec<C64> = [&inner.plant, &inner.sensor, &pc.outer_models.plant]
        .iter()
        .flat_map(|tf| tf.poles().unwrap())
        .chain([
            C64::new(-1000.0, 0.0),
            C64::new(-48.0, 0.0),
            C64::new(-6000.0, 0.0),
        ])
        .collect();
    let range = FrequencyRange::from_roots(&roots, Some(std::f64::consts::PI / t));
    let reference = loop_figures(&l, &range);
    let outer = pc.evaluate_outer(&p, false);
    assert_eq!(outer.status, Status::Ok);
    let f = outer.figures.unwrap();
    let close = |a: f64, b: f64, what: &str| {
        assert!(
            (a - b).abs() <= 1e-6 * b.abs().max(1.0),
            "{what}: lifted {a}, block algebra {b}"
        )
    };
    close(
        f.phase_margin_deg.unwrap(),
        reference.phase_margin_deg.unwrap(),
        "phase margin",
    );
    close(
        f.crossover_hz.unwrap(),
        reference.crossover_hz.unwrap(),
        "crossover",
    );
    close(
        f.gain_margin_db.unwrap(),
        reference.gain_margin_db.unwrap(),
        "gain margin",
    );
    close(
        f.sensitivity_peak,
        reference.sensitivity_peak,
        "sensitivity peak",
    );

    // Step samples: y/r = L / (1 + L) on the outer plant output (unit
    // outer sensor, so the measured and the figure output are one).
    let (step, _) = pc.outer_traces(&p, Some(400)).unwrap();
    let samples: Vec<f64> = step.iter().filter(|q| q.sample).map(|q| q.y).collect();
    let reference = step_samples(&l_num, &l_den.add(&l_num), samples.len());
    // The expanded polynomials' difference equation (order 7, poles near
    // z = 1) loses a few digits over hundreds of samples: 1e-8 of the peak
    // is far below any figure's resolution and far above that drift.
    let peak = reference.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let worst = samples
        .iter()
        .zip(&reference)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    assert!(
        worst <= 1e-8 * peak,
        "lifted and block-algebra samples differ by {worst}"
    );
}

/// Brute force: the whole continuous plant integrated with RK4 (64 steps
/// per inner period), the two PI controllers run as their Tustin difference
/// equations written out by hand, the inner command held from `kT + 0.5 T`,
/// the outer command reaching the inner reference at the first inner tick
/// at or after half an outer period. The outer plant output at the 16
/// points per inner period must match the lifted system's trace (source:
/// brute-force fine-step simulation of the ODEs, written independently of
/// the library's realisations). For every outer hold: zero-order, and the
/// ramps of `docs/figures.md` ("Hold kinds") stepped at the inner ticks as
/// the cascade section defines them (the reference `j` ticks after the
/// command `v_k` takes effect is `v_k + (v_k - v_{k-1}) j/N` or
/// `v_{k-1} + (v_k - v_{k-1}) j/N`).
#[test]
fn outer_step_matches_a_fine_step_simulation_at_ratios_4_and_10() {
    let outer_sensor = "[outer.sensor]\ntransfer = \"1 / (0.0002*s + 1)\"";
    let (_, pc) = cascade(&drive(outer_sensor, 0.5, ""));
    let rate = 10_000.0;
    let t = 1.0 / rate;
    let kinds = [
        HoldKind::ZeroOrder,
        HoldKind::FirstOrder,
        HoldKind::Interpolating,
    ];
    for (hold, ratio) in kinds.into_iter().flat_map(|h| [(h, 4usize), (h, 10)]) {
        let p = CascadePoint {
            outer_hold: hold,
            ..point(rate, 0.5, ratio, 0.5)
        };
        let (step, dist) = pc.outer_traces(&p, Some(60)).unwrap();
        for (load, trace) in [(0.0, &step), (1.0, &dist)] {
            let r_outer = 1.0 - load;
            let brute = simulate(
                t,
                ratio,
                0.5,
                (ratio as f64 * 0.5).ceil() as usize,
                r_outer,
                load,
                60 * ratio,
                hold,
            );
            let peak = brute.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            assert_eq!(brute.len(), trace.len());
            let worst = brute
                .iter()
                .zip(trace.iter())
                .map(|(a, q)| (a - q.y).abs() / peak)
                .fold(0.0, f64::max);
            eprintln!("{hold} ratio {ratio}, load {load}: worst relative gap to RK4 {worst:.2e}");
            for (i, (a, q)) in brute.iter().zip(trace.iter()).enumerate() {
                assert!(
                    (a - q.y).abs() <= 1e-8 * peak,
                    "{hold} ratio {ratio}, load {load}, point {i} (t = {}): brute force {a}, lifted {}",
                    q.t,
                    q.y
                );
            }
        }
        // The overshoot read off the brute-force points equals the figure.
        let brute = simulate(
            t,
            ratio,
            0.5,
            (ratio as f64 * 0.5).ceil() as usize,
            1.0,
            0.0,
            400 * ratio,
            hold,
        );
        let f = pc.evaluate_outer(&p, false).figures.unwrap();
        let max = brute.iter().fold(f64::MIN, |m, v| m.max(*v));
        let os = (max - f.y_final) / f.y_final * 100.0;
        assert!(
            (os - f.overshoot_pct.unwrap()).abs() < 1e-4,
            "{hold} ratio {ratio}: brute force overshoot {os} %, lifted {} %",
            f.overshoot_pct.unwrap()
        );
    }
}

/// The drive's ODEs: current i (winding), measured current im, speed w,
/// measured speed wm; `v` the applied voltage, `load` added at the outer
/// plant's input (torque current).
fn deriv(x: [f64; 4], v: f64, load: f64) -> [f64; 4] {
    let [i, im, w, wm] = x;
    [
        (v - 0.5 * i) / 0.0005,
        (i - im) / 1e-5,
        (0.1 * (i + load) - 1e-4 * w) / 1e-4,
        (w - wm) / 0.0002,
    ]
}

fn rk4(x: [f64; 4], v: f64, load: f64, h: f64) -> [f64; 4] {
    let add = |a: [f64; 4], b: [f64; 4], s: f64| std::array::from_fn(|k| a[k] + s * b[k]);
    let k1 = deriv(x, v, load);
    let k2 = deriv(add(x, k1, h / 2.0), v, load);
    let k3 = deriv(add(x, k2, h / 2.0), v, load);
    let k4 = deriv(add(x, k3, h), v, load);
    std::array::from_fn(|k| x[k] + h / 6.0 * (k1[k] + 2.0 * k2[k] + 2.0 * k3[k] + k4[k]))
}

/// Outer plant output (speed) at 16 points per inner period, `ticks`
/// inner periods long; the outer command shaped as the inner reference by
/// `hold`, its ramp read at the inner ticks.
#[allow(clippy::too_many_arguments)]
fn simulate(
    t: f64,
    ratio: usize,
    inner_delay: f64,
    outer_ticks: usize,
    r_outer: f64,
    load: f64,
    ticks: usize,
    hold: HoldKind,
) -> Vec<f64> {
    const SUB: usize = 64;
    let h = t / SUB as f64;
    let to = t * ratio as f64;
    // Tustin PI by hand: u_k = u_{k-1} + kp (e_k - e_{k-1}) + ki T/2 (e_k + e_{k-1}).
    let (kp_i, ki_i, kp_o, ki_o) = (3.1, 3100.0, 0.25, 12.0);
    let mut x = [0.0; 4];
    let (mut ui, mut ei) = (0.0, 0.0);
    let (mut uo, mut eo) = (0.0, 0.0);
    let mut pending: Vec<(usize, f64)> = Vec::new();
    // The command in force, the one before it, and the tick it took effect.
    let (mut v_now, mut v_before, mut since) = (0.0, 0.0, 0usize);
    let mut u_prev = 0.0;
    let mut out = Vec::with_capacity(ticks * 16);
    let switch = (inner_delay * SUB as f64).round() as usize;
    for j in 0..ticks {
        if j % ratio == 0 {
            let e = r_outer - x[3];
            uo = uo + kp_o * (e - eo) + ki_o * to / 2.0 * (e + eo);
            eo = e;
            pending.push((j + outer_ticks, uo));
        }
        for &(at, v) in &pending {
            if at == j {
                (v_before, v_now, since) = (v_now, v, j);
            }
        }
        let ramp = (j - since) as f64 / ratio as f64;
        let reference = match hold {
            HoldKind::ZeroOrder => v_now,
            HoldKind::FirstOrder => v_now + (v_now - v_before) * ramp,
            HoldKind::Interpolating => v_before + (v_now - v_before) * ramp,
        };
        let e = reference - x[1];
        ui = ui + kp_i * (e - ei) + ki_i * t / 2.0 * (e + ei);
        ei = e;
        for s in 0..SUB {
            if s % (SUB / 16) == 0 {
                out.push(x[2]);
            }
            let v = if s < switch { u_prev } else { ui };
            x = rk4(x, v, load, h);
        }
        u_prev = ui;
    }
    out
}

/// With the inner loop far faster than the outer one, the outer figures
/// tend to those of the outer loop around an ideal inner loop (the outer
/// plant driven by the reference itself), and the gap closes as the inner
/// loop gets faster (source: limit of the closed inner loop -> 1, a fact
/// of the trade; the ideal loop is evaluated by the single-loop code).
#[test]
fn a_very_fast_inner_loop_tends_to_an_ideal_one() {
    let outer_rate = 2000.0;
    let mut gaps = Vec::new();
    for (wc_hz, ratio) in [(1000.0, 10usize), (10_000.0, 100), (100_000.0, 1000)] {
        let wc = 2.0 * std::f64::consts::PI * wc_hz;
        let text = format!(
            r#"
[plant]
transfer = "1 / (0.0005*s + 0.5)"
[controller]
pid = {{ kp = {kp}, ki = {ki} }}
[rates]
min_hz = 1000
max_hz = 1e7
[methods]
use = ["tustin"]
[outer.plant]
transfer = "0.1 / (1e-4*s + 1e-4)"
[outer.controller]
pid = {{ kp = 0.25, ki = 12 }}
[outer.methods]
use = ["tustin"]
"#,
            kp = 0.0005 * wc,
            ki = 0.5 * wc
        );
        let (_, pc) = cascade(&text);
        let p = point(outer_rate * ratio as f64, 0.0, ratio, 0.0);
        let f = pc.evaluate_outer(&p, false).figures.unwrap();
        let ideal = pc
            .ideal
            .sampled(&Point {
                rate_hz: outer_rate,
                method: Some(Method::Tustin),
                delay: 0.0,
                hold: HoldKind::ZeroOrder,
            })
            .figures
            .unwrap();
        let gap = [
            (f.phase_margin_deg.unwrap() - ideal.phase_margin_deg.unwrap()).abs() / 45.0,
            (f.sensitivity_peak - ideal.sensitivity_peak).abs(),
            (f.overshoot_pct.unwrap() - ideal.overshoot_pct.unwrap()).abs() / 10.0,
            (f.crossover_hz.unwrap() / ideal.crossover_hz.unwrap() - 1.0).abs(),
        ]
        .into_iter()
        .fold(0.0, f64::max);
        gaps.push(gap);
    }
    eprintln!("gaps to the ideal inner loop: {gaps:?}");
    assert!(
        gaps[0] > gaps[1] && gaps[1] > gaps[2],
        "gaps do not shrink: {gaps:?}"
    );
    assert!(
        gaps[2] < 2e-3,
        "the fastest inner loop is still {} away",
        gaps[2]
    );
}

/// The outer gain margin and delay margin by their meaning: the outer
/// controller scaled by the margin (0.1 dB short / past) keeps / loses
/// stability; an outer delay just short of / past the delay margin keeps /
/// loses it (`docs/figures.md`).
#[test]
fn outer_margins_flip_stability_just_past_them() {
    let outer_sensor = "[outer.sensor]\ntransfer = \"1 / (0.0002*s + 1)\"";
    let (_, pc) = cascade(&drive(outer_sensor, 1.0, ""));
    // Ratio 50: more ticks an outer period than the search builds loops
    // for, so it brackets between fractions and bisects in whole ticks.
    for ratio in [10usize, 50] {
        let p = point(20_000.0, 1.0, ratio, 0.5);
        let f = pc.evaluate_outer(&p, true).figures.unwrap();
        let gm = f.gain_margin_db.unwrap();
        for (db, stable) in [(gm - 0.1, true), (gm + 0.1, false)] {
            let mut scaled = pc.clone();
            let k = 10f64.powf(db / 20.0);
            let c = continuous(&pc.outer_models.controller);
            let tf = Transfer::new(c.numerator.scale(k), c.denominator.clone());
            scaled.ideal.controller = Controller::Continuous(tf);
            assert_eq!(scaled.screen(&p).is_none(), stable, "gain x {db} dB");
        }
        let dm = f.delay_margin_s.unwrap();
        let t = 1.0 / 20_000.0;
        let to = ratio as f64 * t;
        for (extra, stable) in [(dm - 0.5 * t, true), (dm + 1e-3 * t, false)] {
            let q = CascadePoint {
                outer_delay: 0.5 + extra / to,
                ..p
            };
            assert_eq!(
                pc.screen(&q).is_none(),
                stable,
                "ratio {ratio}: extra delay {extra} s"
            );
        }
        // The estimate from the phase sits near the exact figure here.
        assert!((dm / f.delay_margin_estimate_s.unwrap() - 1.0).abs() < 0.2);
    }
}

/// CPU load by hand for the demo drive (900 cycles an inner update, 1500
/// an outer one, 100 MHz): at 20 kHz and ratio 10, (900 x 20000 + 1500 x
/// 2000) / 1e8 = 21 % (arithmetic by hand).
#[test]
fn cpu_load_is_the_sum_of_both_updates() {
    let text = std::fs::read_to_string("demo-cases/motor-drive-cascade.toml").unwrap();
    let c = Case::parse(&text, Path::new("demo-cases/motor-drive-cascade.toml")).unwrap();
    let pc = prepare_cascade(&c).unwrap().unwrap();
    let rows = cascade_rows(&c, &pc, true);
    let r = rows
        .iter()
        .find(|r| r.point.inner.rate_hz == 40_000.0 && r.point.ratio == 10)
        .unwrap();
    let load = r.cost.total_load_pct.unwrap();
    assert!((load - (900.0 * 40_000.0 + 1500.0 * 4000.0) / 1e8 * 100.0).abs() < 1e-9);
    assert!((r.cost.inner_load_pct.unwrap() - 36.0).abs() < 1e-9);
    // The pick's search agrees with the full grid: per inner rate the
    // largest passing ratio, and the cheapest passing pair within budget.
    let searched = cascade_rows(&c, &pc, false);
    let pick = cascade_pick(&c, &pc, &searched);
    let full = cascade_pick(&c, &pc, &rows);
    assert_eq!(pick.series, full.series);
    let chosen = pick.chosen.expect("the demo has an answer");
    let best = rows
        .iter()
        .filter(|r| r.passes() && r.cost.total_load_pct.unwrap() <= 35.0)
        .map(|r| r.cost.total_load_pct.unwrap())
        .fold(f64::INFINITY, f64::min);
    assert_eq!(chosen.cost.total_load_pct.unwrap(), best);
    assert!(pick.not_evaluated > 0, "the search skipped nothing");
}

/// `sweep` writes the cascade's rows as they are finished, a batch at a
/// time (memory flat in the grid): the file is the one written from every
/// row held at once, byte for byte, and no temporary is left beside it.
#[test]
fn streamed_cascade_sweep_is_the_whole_grid_byte_for_byte() {
    let text = std::fs::read_to_string("demo-cases/motor-drive-cascade.toml").unwrap();
    let c = Case::parse(&text, Path::new("demo-cases/motor-drive-cascade.toml")).unwrap();
    let pc = prepare_cascade(&c).unwrap().unwrap();
    let held = cascade_csv(&cascade_rows(&c, &pc, true), false);
    let dir = std::env::temp_dir().join(format!("looprate-cascade-stream-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    // A small pool: several batches over the demo's 40 inner rates.
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    pool.install(|| finish_sweep(&dir, &c)).unwrap();
    let streamed = std::fs::read(dir.join("sweep.csv")).unwrap();
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    std::fs::remove_dir_all(&dir).unwrap();
    assert_eq!(names, ["sweep.csv"]);
    assert!(streamed == held, "the streamed sweep.csv differs");
    assert_eq!(
        String::from_utf8(held).unwrap().lines().count(),
        1 + 40 * 12
    );
}

/// Bad input names the field (or the flag).
#[test]
fn bad_cascade_input_names_the_field() {
    let err = |extra: &str| {
        Case::parse(&drive("", 1.0, extra), Path::new("bad.toml"))
            .unwrap_err()
            .to_string()
    };
    let e = err("[outer.rates]\nratios = [1, 0]");
    assert!(
        e.contains("outer.rates.ratios[1]") && e.contains("got 0"),
        "{e}"
    );
    let e = err("[outer.rates]\nratios = [2.5]");
    assert!(
        e.contains("outer.rates.ratios[0]") && e.contains("whole number"),
        "{e}"
    );
    let e = err("[outer.timing]\nhold = \"staircase\"");
    assert!(
        e.contains("bad.toml")
            && e.contains("outer.timing.hold")
            && e.contains("unknown hold kind"),
        "{e}"
    );
    let e = err("[outer.timing]\nhold = [\"first-order\", \"cubic\"]");
    assert!(e.contains("outer.timing.hold[1]"), "{e}");
    let text = drive("", 1.0, "").replace(
        "transfer = \"0.1 / (1e-4*s + 1e-4)\"",
        "transfer = \"s^2 / (s + 1)\"",
    );
    let e = Case::parse(&text, Path::new("bad.toml"))
        .unwrap_err()
        .to_string();
    assert!(e.contains("outer.plant") && e.contains("improper"), "{e}");
    // An outer controller in z at 3 kHz: no listed ratio of 5..40 kHz.
    let text = drive("", 1.0, "")
        .replace(
            "pid = { kp = 0.25, ki = 12 }",
            "numerator_z = [0.25, -0.24]\ndenominator_z = [1, -1]\nrate_hz = 3\n",
        )
        .replace("[outer.methods]\nuse = [\"tustin\"]", "");
    let e = Case::parse(&text, Path::new("bad.toml"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("outer.controller.rate_hz") && e.contains("no listed ratio"),
        "{e}"
    );
    // The same controller at 2 kHz: 10 kHz / 5 and 20 kHz / 10 fit.
    let ok = text.replace("rate_hz = 3\n", "rate_hz = 2000\n");
    let c = Case::parse(&ok, Path::new("ok.toml")).unwrap();
    let pc = prepare_cascade(&c).unwrap().unwrap();
    let rows = cascade_rows(&c, &pc, true);
    assert!(!rows.is_empty());
    assert!(
        rows.iter()
            .all(|r| (r.point.outer_rate_hz() - 2000.0).abs() < 1e-6)
    );
    // An outer spec without an inner one is allowed: the inner loop is
    // then checked for stability only.
    let c = Case::parse(
        &drive("", 1.0, "[outer.spec]\nmin_phase_margin_deg = 45"),
        Path::new("ok.toml"),
    )
    .unwrap();
    let outer = c.outer.as_ref().unwrap();
    assert!(!outer.inner_spec_given);
    let pc = prepare_cascade(&c).unwrap().unwrap();
    let rows = cascade_rows(&c, &pc, false);
    let pick = cascade_pick(&c, &pc, &rows);
    assert!(pick.notes.iter().any(|n| n.contains("stability only")));
    assert!(
        rows.iter()
            .all(|r| r.inner_verdict.feasible == (r.inner.status == Status::Ok))
    );
}

/// `eval --ratio` refuses 0 and non-integers with exit 2, and prints an
/// `outer` object with the loop's own figure keys.
#[test]
fn eval_ratio_flag() {
    let bin = env!("CARGO_BIN_EXE_looprate");
    let case = "demo-cases/motor-drive-cascade.toml";
    for bad in ["0", "2.5", "x"] {
        let out = std::process::Command::new(bin)
            .args(["eval", case, "--rate", "20000", "--ratio", bad])
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "--ratio {bad}");
        assert!(String::from_utf8_lossy(&out.stderr).contains("--ratio"));
    }
    let out = std::process::Command::new(bin)
        .args(["eval", case, "--rate", "20000", "--ratio", "10", "--json"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let outer = v.get("outer").unwrap();
    for key in [
        "status",
        "overshoot_pct",
        "settling_time_s",
        "phase_margin_deg",
        "gain_margin_db",
        "delay_margin_s",
        "sensitivity_peak",
        "disturbance_peak",
    ] {
        assert!(v.get(key).is_some(), "inner {key}");
        assert!(outer.get(key).is_some(), "outer {key}");
    }
    assert_eq!(outer["ratio"], 10);
    assert_eq!(outer["rate_hz"], 2000.0);
}

/// Advice when nothing fits: a budget below the cheapest passing pair
/// names the load it needs, and each threshold it quotes, applied alone,
/// gives an answer; an outer spec no pair meets names the outer loop's
/// limiting figure. `sweep` writes every pair, `pick` exits 1 (source:
/// the project's own rules for advice, `docs/figures.md`).
#[test]
fn advice_when_nothing_fits_and_every_pair_in_sweep() {
    let text = std::fs::read_to_string("demo-cases/motor-drive-cascade.toml").unwrap();
    let tight = text.replace("max_load_pct = 35", "max_load_pct = 5");
    let c = Case::parse(&tight, Path::new("tight.toml")).unwrap();
    let pc = prepare_cascade(&c).unwrap().unwrap();
    let rows = cascade_rows(&c, &pc, false);
    let pick = cascade_pick(&c, &pc, &rows);
    assert!(pick.chosen.is_none() && pick.window_hz.is_none());
    let advice = pick.advice.join(" ");
    assert!(advice.contains("max_load_pct"), "{advice}");
    // The quoted load limit, applied alone, opens it.
    let quoted: f64 = advice
        .split("raise max_load_pct to ")
        .nth(1)
        .and_then(|t| t.split_whitespace().next())
        .and_then(|t| t.parse().ok())
        .unwrap();
    let opened = text.replace("max_load_pct = 35", &format!("max_load_pct = {quoted}"));
    let c2 = Case::parse(&opened, Path::new("opened.toml")).unwrap();
    let rows2 = cascade_rows(&c2, &pc, false);
    assert!(cascade_pick(&c2, &pc, &rows2).chosen.is_some());

    // (The outer overshoot limit is lifted so that the phase margin is what
    // fails: the search's short simulation would otherwise prove the
    // overshoot failed first and name it.)
    let strict = text
        .replace("min_phase_margin_deg = 45", "min_phase_margin_deg = 89")
        .replace("max_overshoot_pct = 20", "max_overshoot_pct = 1000");
    let c3 = Case::parse(&strict, Path::new("strict.toml")).unwrap();
    let pc3 = prepare_cascade(&c3).unwrap().unwrap();
    let rows3 = cascade_rows(&c3, &pc3, false);
    let pick3 = cascade_pick(&c3, &pc3, &rows3);
    assert!(pick3.chosen.is_none());
    assert!(
        pick3.advice.join(" ").contains("phase margin"),
        "{:?}",
        pick3.advice
    );

    let bin = env!("CARGO_BIN_EXE_looprate");
    let dir = std::env::temp_dir().join(format!("looprate-cascade-{}", std::process::id()));
    let case_path = dir.join("tight.toml");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(&case_path, &tight).unwrap();
    let out = std::process::Command::new(bin)
        .args(["pick", case_path.to_str().unwrap(), "--out"])
        .arg(dir.join("pick"))
        .args(["--quiet", "--no-charts"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let out = std::process::Command::new(bin)
        .args(["sweep", "demo-cases/motor-drive-cascade.toml", "--out"])
        .arg(dir.join("sweep"))
        .args(["--quiet", "--no-charts"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let csv = std::fs::read_to_string(dir.join("sweep").join("sweep.csv")).unwrap();
    // 40 inner rates x 12 ratios, each evaluated.
    assert_eq!(csv.lines().count(), 1 + 40 * 12);
    assert!(!csv.contains("not evaluated"));
    assert!(dir.join("sweep").join("inner-sweep.csv").exists());
    std::fs::remove_dir_all(&dir).ok();
}

/// The search's short exact simulation only ever proves what the full
/// figures confirm: on the motor-drive demo (every inner rate, every
/// ratio), each pair it screens out fails the outer spec in the full
/// evaluation too, with an overshoot at least the bound it quoted (source:
/// the definition, `overshoot = max_t y(t) - y_final` over every point,
/// so it is at least the excursion seen at any one point), and the pairs
/// the search keeps pass or fail exactly as in the full sweep. Also: the
/// search answers as the full sweep would (same largest passing ratio at
/// every inner rate).
/// The cascade demo case on a 12-point inner grid, prepared.
fn small_demo() -> (String, Case, PreparedCascade) {
    let text = std::fs::read_to_string("demo-cases/motor-drive-cascade.toml")
        .unwrap()
        .replace("points = 40", "points = 12");
    let (c, pc) = cascade(&text);
    (text, c, pc)
}

#[test]
fn search_screens_agree_with_the_full_figures() {
    let (_, c, pc) = small_demo();
    let search = cascade_rows(&c, &pc, false);
    let full = cascade_rows(&c, &pc, true);
    assert_eq!(search.len(), full.len());
    let mut screened_by_simulation = 0;
    for (s, f) in search.iter().zip(&full) {
        assert_eq!(s.point, f.point);
        let fv = f.outer_verdict.as_ref().unwrap();
        let Some(sv) = s.outer_verdict.as_ref() else {
            continue;
        };
        assert_eq!(sv.feasible, fv.feasible, "{:?}", s.point);
        if s.skipped
            .as_deref()
            .is_some_and(|w| w.contains("short exact simulation"))
        {
            screened_by_simulation += 1;
            let full_os = f
                .outer
                .as_ref()
                .unwrap()
                .figures
                .as_ref()
                .unwrap()
                .overshoot_pct;
            for chk in sv.checks.iter().filter(|c| !c.pass) {
                if chk.figure.key() == "overshoot_pct" {
                    let bound = chk.value.unwrap();
                    let os = full_os.unwrap();
                    assert!(bound <= os * (1.0 + 1e-9) + 1e-12, "{bound} > {os}");
                    assert!(bound > chk.limit);
                }
            }
        }
    }
    assert!(screened_by_simulation > 0, "the demo exercises the screen");
    let answer = |rows: &[looprate::explore::cascade::CascadeRow]| {
        let mut v: Vec<(u64, usize)> = rows
            .iter()
            .filter(|r| r.passes())
            .map(|r| (r.point.inner.rate_hz.to_bits(), r.point.ratio))
            .collect();
        v.sort();
        let mut best: Vec<(u64, usize)> = Vec::new();
        for (f, n) in v {
            match best.last_mut() {
                Some(b) if b.0 == f => b.1 = b.1.max(n),
                _ => best.push((f, n)),
            }
        }
        best
    };
    assert_eq!(answer(&search), answer(&full));
}

/// A pair the search evaluates carries every figure the outer spec reads
/// as the full evaluation makes it, bit for bit, and leaves out exactly
/// the time figures the spec does not limit (`not computed`, never a
/// value or a missing figure's meaning); with every time figure limited it
/// carries the whole full evaluation. The search's shortcuts (screens, the
/// inner figures handed over, the figures a verdict does not read) decide
/// which pairs are evaluated and how far, never what a figure is (source:
/// the search's rule, `docs/figures.md`, "Cascaded loops"; the full
/// evaluation is `evaluate_outer`, all figures, no spec).
#[test]
fn pairs_the_search_evaluates_carry_the_full_evaluations_figures() {
    use looprate::sampled::figure::{Figure, Missing};
    use looprate::sampled::time_response::Wanted;
    let (text, c, pc) = small_demo();
    // The demo's outer spec limits overshoot and the margins only; the
    // second run limits every time figure too (limits loose enough to
    // keep passing pairs); the third limits settling and the command peak
    // but not the overshoot, whose search then still runs (the others
    // reuse its bounds).
    let limited = text.replace(
        "[outer.spec]\n",
        "[outer.spec]\nmax_settling_s = 10\nmax_rise_s = 10\nmax_u_peak = 1e6\nmax_disturbance_peak = 1e6\nmax_recovery_s = 10\n",
    );
    assert_ne!(limited, text);
    let (cl, pcl) = cascade(&limited);
    let no_overshoot = text.replace(
        "[outer.spec]\nmax_overshoot_pct = 20\n",
        "[outer.spec]\nmax_settling_s = 10\nmax_u_peak = 1e6\n",
    );
    assert_ne!(no_overshoot, text);
    let (co, pco) = cascade(&no_overshoot);
    for (case, prepared, all_limited) in [(&c, &pc, false), (&cl, &pcl, true), (&co, &pco, false)] {
        let spec = &case.outer.as_ref().unwrap().spec;
        let w = Wanted::limited_by(spec);
        let wanted = |fig: Figure| match fig {
            Figure::Overshoot => w.overshoot,
            Figure::SettlingTime => w.settling,
            Figure::RiseTime => w.rise,
            Figure::CommandPeak => w.u_peak,
            Figure::DisturbancePeak | Figure::RecoveryTime => w.load_step,
            _ => true,
        };
        if spec.max_overshoot_pct.is_none() {
            assert!(w.overshoot && w.settling && !w.rise && !w.load_step);
        }
        let mut compared = 0;
        for r in cascade_rows(case, prepared, false) {
            let Some(outer) = r.outer.as_deref().filter(|_| !r.screened) else {
                continue;
            };
            let full = prepared.evaluate_outer(&r.point, false);
            let (f, ff) = (
                outer.figures.as_ref().unwrap(),
                full.figures.as_ref().unwrap(),
            );
            for fig in Figure::ALL {
                let left_out = !wanted(fig);
                if left_out {
                    assert_eq!(fig.value(f), None, "{fig:?} {:?}", r.point);
                    assert_eq!(fig.missing(f), Missing::NotComputed);
                    assert_eq!(fig.cell(f), "not computed");
                } else {
                    let bits = |v: Option<f64>| v.map(f64::to_bits);
                    assert_eq!(
                        bits(fig.value(f)),
                        bits(fig.value(ff)),
                        "{fig:?} {:?}",
                        r.point
                    );
                }
            }
            assert_eq!(outer.closed_loop_poles, full.closed_loop_poles);
            if all_limited {
                assert!(f.not_computed.is_empty());
                assert_eq!(outer, &full, "{:?}", r.point);
            } else {
                assert!(!f.not_computed.is_empty(), "the demo leaves figures out");
            }
            compared += 1;
        }
        assert!(compared > 0, "the demo evaluates pairs");
    }
}

/// The chosen pair with headroom, as the single loop recommends
/// `f_star x headroom`: the inner rate times the headroom with the ratio
/// kept (closed form), its load by hand (inner cycles x f + outer cycles x
/// f/N over the clock), its verdicts those of an evaluation of that pair
/// made here; with a timer, the rate rounded up to a timer division; a
/// headroom that leaves the budget is said, and the chosen pair stays the
/// answer (source: the project's own rule for the single loop's
/// recommendation, `docs/figures.md`).
#[test]
fn the_chosen_pair_with_headroom() {
    let (text, c, pc) = small_demo();
    let pick = cascade_pick(&c, &pc, &cascade_rows(&c, &pc, false));
    let chosen = pick.chosen.as_ref().unwrap();
    let r = pick.recommended.as_ref().unwrap();
    assert_eq!(r.headroom, 1.25);
    assert!((r.inner_rate_hz - chosen.inner_rate_hz * 1.25).abs() < 1e-9 * r.inner_rate_hz);
    assert_eq!(r.ratio, chosen.ratio);
    assert!((r.outer_rate_hz - r.inner_rate_hz / r.ratio as f64).abs() < 1e-9);
    // By hand: 900 cycles at f, 1500 at f/N, 100 MHz clock.
    let by_hand = (900.0 * r.inner_rate_hz + 1500.0 * r.outer_rate_hz) / 100e6 * 100.0;
    assert!((r.cost.total_load_pct.unwrap() - by_hand).abs() < 1e-9 * by_hand);
    assert!(r.fits_budget);
    let e = pc.evaluate(
        &CascadePoint {
            inner: Point {
                rate_hz: r.inner_rate_hz,
                method: Some(Method::Tustin),
                delay: 1.0,
                hold: HoldKind::ZeroOrder,
            },
            ratio: r.ratio,
            outer_method: Some(Method::Tustin),
            outer_delay: 0.5,
            outer_hold: HoldKind::ZeroOrder,
        },
        false,
    );
    let outer = c.outer.as_ref().unwrap();
    assert_eq!(
        r.inner_verdict.feasible,
        looprate::sampled::feasibility::assess(&e.inner, &c.spec).feasible
    );
    assert_eq!(
        r.outer_verdict.feasible,
        looprate::sampled::feasibility::assess(&e.outer, &outer.spec).feasible
    );
    assert_eq!(
        r.outer.figures.as_ref().unwrap().overshoot_pct,
        e.outer.figures.as_ref().unwrap().overshoot_pct
    );

    // A timer of 1 MHz: the rate is rounded up to 1 MHz / d.
    let timed = text.replace("max_load_pct = 35", "max_load_pct = 35\ntimer_hz = 1e6");
    let ct = Case::parse(&timed, Path::new("timed.toml")).unwrap();
    let pt = cascade_pick(&ct, &pc, &cascade_rows(&ct, &pc, false));
    let rt = pt.recommended.unwrap();
    let want = pt.chosen.unwrap().inner_rate_hz * 1.25;
    let d = (1e6 / rt.inner_rate_hz).round();
    assert!(
        (rt.inner_rate_hz - 1e6 / d).abs() < 1e-6,
        "{}",
        rt.inner_rate_hz
    );
    assert!(rt.inner_rate_hz >= want * (1.0 - 1e-12) && 1e6 / (d + 1.0) < want);
    assert!(rt.basis.contains("timer"), "{}", rt.basis);

    // A budget the chosen pair just fits but its headroom pair does not.
    let tight_load = chosen.cost.total_load_pct.unwrap() * 1.05;
    let tight = text.replace("max_load_pct = 35", &format!("max_load_pct = {tight_load}"));
    let cb = Case::parse(&tight, Path::new("tight.toml")).unwrap();
    let pb = cascade_pick(&cb, &pc, &cascade_rows(&cb, &pc, false));
    let rb = pb.recommended.unwrap();
    assert!(!rb.fits_budget);
    assert!(
        rb.notes.iter().any(|n| n.contains("max_load_pct")),
        "{:?}",
        rb.notes
    );
}
