//! Discretization checked against closed forms and a textbook example.

use looprate::discretize::{Method, discretize};
use looprate::poly::{C64, Poly};
use looprate::transfer::Transfer;

fn transfer(num: &[f64], den: &[f64]) -> Transfer {
    Transfer::new(Poly::from_descending(num), Poly::from_descending(den))
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()).max(1e-300)
}

/// Compare a discrete result (normalised so den[0] = 1) with expected
/// descending coefficients.
fn assert_coeffs(got: &Poly, want: &[f64], rel: f64, what: &str) {
    let g = got.descending();
    assert_eq!(g.len(), want.len(), "{what}: {g:?} vs {want:?}");
    let scale = want.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    for (a, b) in g.iter().zip(want) {
        assert!((a - b).abs() <= rel * scale, "{what}: {g:?} vs {want:?}");
    }
}

#[test]
fn zoh_of_first_order_lag() {
    // Closed form: zoh of a/(s+a) is (1-e^{-aT})/(z-e^{-aT}).
    for &(a, t) in &[(3.0, 0.1), (50.0, 1e-3), (1e5, 1e-6), (0.1, 5e-6)] {
        let d = discretize(&transfer(&[a], &[1.0, a]), Method::StepInvariant, t, None).unwrap();
        let p = (-a * t).exp();
        assert_coeffs(&d.transfer.denominator, &[1.0, -p], 1e-12, "den");
        assert_coeffs(&d.transfer.numerator, &[1.0 - p], 1e-9, "num");
    }
}

#[test]
fn tustin_of_integrator() {
    // Closed form: tustin of K/s is (KT/2)(z+1)/(z-1).
    let (k, t) = (7.5, 0.01);
    let d = discretize(&transfer(&[k], &[1.0, 0.0]), Method::Tustin, t, None).unwrap();
    assert_coeffs(
        &d.transfer.numerator,
        &[k * t / 2.0, k * t / 2.0],
        1e-14,
        "num",
    );
    assert_coeffs(&d.transfer.denominator, &[1.0, -1.0], 1e-14, "den");
}

#[test]
fn prewarp_matches_at_w0() {
    // Closed form: the pre-warped bilinear map is exact at w0, gain and phase.
    let c = transfer(&[2.0, 30.0, 100.0], &[1.0, 40.0, 0.0]); // (2s^2+30s+100)/(s^2+40s)
    let t = 1e-2;
    let w0 = 60.0;
    let d = discretize(&c, Method::TustinPrewarped, t, Some(w0)).unwrap();
    let cz = d.freq(w0);
    let cs = c.eval(C64::new(0.0, w0));
    assert!((cz - cs).norm() < 1e-12 * cs.norm(), "{cz} vs {cs}");
    // And refuses w0 T >= pi.
    assert!(discretize(&c, Method::TustinPrewarped, 0.1, Some(40.0)).is_err());
}

#[test]
fn matched_lead_lag() {
    // Closed form: matched of (s+a)/(s+b) is K (z - e^{-aT})/(z - e^{-bT})
    // with K set so the DC gains agree: a/b = K (1-e^{-aT})/(1-e^{-bT}).
    let (a, b, t) = (2.0, 20.0, 0.01);
    let d = discretize(
        &transfer(&[1.0, a], &[1.0, b]),
        Method::PoleZeroMatch,
        t,
        None,
    )
    .unwrap();
    let (za, pb) = ((-a * t).exp(), (-b * t).exp());
    let k = (a / b) * (1.0 - pb) / (1.0 - za);
    assert_coeffs(&d.transfer.numerator, &[k, -k * za], 1e-13, "num");
    assert_coeffs(&d.transfer.denominator, &[1.0, -pb], 1e-13, "den");
}

#[test]
fn matched_with_integrators() {
    // Pure integrator 1/s: zero at infinity -> z = -1, pole -> z = 1, and
    // ((z-1)/T) C(z) -> 1 at z = 1 gives (T/2)(z+1)/(z-1) (closed form).
    let t = 0.02;
    let d = discretize(
        &transfer(&[1.0], &[1.0, 0.0]),
        Method::PoleZeroMatch,
        t,
        None,
    )
    .unwrap();
    assert_coeffs(
        &d.transfer.numerator,
        &[t / 2.0, t / 2.0],
        1e-14,
        "integrator num",
    );
    // PI kp + ki/s = (kp s + ki)/s: the zero -ki/kp maps to e^{-ki T/kp} and
    // ((z-1)/T) C(z) at z = 1 equals ki (closed form).
    let (kp, ki) = (0.8, 12.0);
    let d = discretize(
        &transfer(&[kp, ki], &[1.0, 0.0]),
        Method::PoleZeroMatch,
        t,
        None,
    )
    .unwrap();
    let zero = (-ki / kp * t).exp();
    let g = ki * t / (1.0 - zero);
    assert_coeffs(&d.transfer.numerator, &[g, -g * zero], 1e-13, "PI num");
    assert_coeffs(&d.transfer.denominator, &[1.0, -1.0], 1e-15, "PI den");
    // PID with filter, kp + ki/s + kd s/(1+s/wf): two poles (0, -wf), two
    // finite zeros; k = 1 and s C(s) -> ki at s = 0.
    let (kd, wf) = (0.05, 400.0);
    let num = Poly::from_descending(&[kp, ki])
        .mul(&Poly::from_descending(&[1.0 / wf, 1.0]))
        .add(&Poly::from_descending(&[kd, 0.0, 0.0]));
    let den = Poly::from_descending(&[1.0 / wf, 1.0, 0.0]);
    let d = discretize(&Transfer::new(num, den), Method::PoleZeroMatch, t, None).unwrap();
    let near = 1.0 + 1e-7;
    let v = (near - 1.0) / t * d.transfer.numerator.eval(near) / d.transfer.denominator.eval(near);
    assert!(close(v, ki, 1e-5), "{v}");
}

#[test]
fn zoh_textbook_double_pole() {
    // Zero-order-hold equivalent of 1/(s(s+1)) at T = 1 s is
    // (0.3679 z + 0.2642)/((z-1)(z-0.3679)) (Ogata, Discrete-Time Control
    // Systems; from memory), to half a unit of the 4th decimal quoted.
    let d = discretize(
        &transfer(&[1.0], &[1.0, 1.0, 0.0]),
        Method::StepInvariant,
        1.0,
        None,
    )
    .unwrap();
    for (g, w) in d
        .transfer
        .numerator
        .descending()
        .iter()
        .zip([0.3679, 0.2642])
    {
        assert!((g - w).abs() <= 5e-5, "num {g} vs {w}");
    }
    for (g, w) in d
        .transfer
        .denominator
        .descending()
        .iter()
        .zip([1.0, -1.3679, 0.3679])
    {
        assert!((g - w).abs() <= 5e-5, "den {g} vs {w}");
    }
    // Exact closed form: num = (e^{-1}) z + (1 - 2 e^{-1}).
    let e = (-1.0f64).exp();
    assert_coeffs(
        &d.transfer.numerator,
        &[e, 1.0 - 2.0 * e],
        1e-13,
        "num exact",
    );
}

#[test]
fn euler_maps() {
    // Closed forms: forward Euler of a/(s+a) is aT/(z - 1 + aT); backward
    // Euler is aT z/((1 + aT) z - 1).
    let (a, t) = (10.0, 0.01);
    let f = discretize(&transfer(&[a], &[1.0, a]), Method::ForwardEuler, t, None).unwrap();
    assert_coeffs(&f.transfer.numerator, &[a * t], 1e-14, "fe num");
    assert_coeffs(
        &f.transfer.denominator,
        &[1.0, a * t - 1.0],
        1e-14,
        "fe den",
    );
    let b = discretize(&transfer(&[a], &[1.0, a]), Method::BackwardEuler, t, None).unwrap();
    let l = 1.0 + a * t;
    assert_coeffs(&b.transfer.numerator, &[a * t / l, 0.0], 1e-14, "be num");
    assert_coeffs(&b.transfer.denominator, &[1.0, -1.0 / l], 1e-14, "be den");
}
