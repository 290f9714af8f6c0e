//! Dense-matrix numerics every model rests on: balancing, eigenvalues
//! with a capped iteration, the guarded matrix exponential and the hold
//! integrals built from it, and the error a model can fail with. No
//! polynomials here, so polynomial roots (companion eigenvalues) and
//! state space both build on it.

use nalgebra::{Complex, DMatrix, DVector};

/// A complex number (the same type as `model::poly::C64`).
type C64 = Complex<f64>;

/// A model that cannot be realised or converted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelError {
    #[error(
        "the transfer function is improper (numerator degree {numerator} > denominator degree {denominator})"
    )]
    Improper {
        numerator: usize,
        denominator: usize,
    },
    #[error("the denominator is zero")]
    ZeroDenominator,
    #[error("a coefficient is not finite")]
    NonFinite,
    #[error("the eigenvalue iteration did not converge")]
    Eigen,
    #[error("the matrix exponential overflowed (time constant far shorter than the step)")]
    Exponential,
    #[error(
        "the delays span {} whole periods at this rate, more than the {max} the exact loop is built with (each period of delay is one more state of the loop): use a slower rate, or write the delay into the plant's transfer function as a rational approximation",
        whole_count(*periods)
    )]
    DelayTooLong { periods: f64, max: usize },
}

/// A whole count that may be past any integer type: digits up to a
/// billion, then three significant figures.
fn whole_count(v: f64) -> String {
    if v < 1e9 {
        format!("{v:.0}")
    } else {
        format!("{v:.3e}")
    }
}

/// Power-of-two scale factors `t` such that `T^{-1} A T`, `T = diag(t)`,
/// has comparable row and column norms (the classic balancing iteration,
/// as eigenvalue libraries do before a Schur decomposition). Powers of two
/// make the similarity exact in floating point.
pub fn balancing_scale(a: &DMatrix<f64>) -> Vec<f64> {
    let n = a.nrows();
    let mut m = a.clone();
    let mut t = vec![1.0; n];
    for _ in 0..60 {
        let mut changed = false;
        for i in 0..n {
            let mut r = 0.0;
            let mut c = 0.0;
            for j in 0..n {
                if j != i {
                    r += m[(i, j)].abs();
                    c += m[(j, i)].abs();
                }
            }
            // A non-finite norm (an entry that overflowed) has no balance to
            // find: leave the row alone rather than loop on infinity.
            if r == 0.0 || c == 0.0 || !r.is_finite() || !c.is_finite() {
                continue;
            }
            let s = r + c;
            let (mut rr, mut cc, mut f) = (r, c, 1.0f64);
            // Each step moves the ratio by 4; 1100 steps span the whole
            // double range, so the cap is never what ends a finite pair.
            for _ in 0..1100 {
                if cc < rr / 2.0 {
                    cc *= 2.0;
                    rr /= 2.0;
                    f *= 2.0;
                } else if cc >= rr * 2.0 {
                    cc /= 2.0;
                    rr *= 2.0;
                    f /= 2.0;
                } else {
                    break;
                }
            }
            if !(f.is_finite() && f > 0.0) {
                continue;
            }
            if (rr + cc) < 0.95 * s && f != 1.0 {
                changed = true;
                t[i] *= f;
                for j in 0..n {
                    m[(i, j)] /= f;
                    m[(j, i)] *= f;
                }
            }
        }
        if !changed {
            break;
        }
    }
    t
}

/// Eigenvalues of a real square matrix with a capped Schur iteration.
///
/// nalgebra's uncapped routine can loop forever on some inputs (see the
/// dependency notes), so the iteration count is capped and, when the cap
/// is hit, the matrix is shifted by `sigma I` and tried again; the shift is
/// removed from the answer.
pub fn eigenvalues(m: &DMatrix<f64>) -> Result<Vec<C64>, ModelError> {
    let n = m.nrows();
    if n == 0 {
        return Ok(Vec::new());
    }
    if !m.iter().all(|v| v.is_finite()) {
        return Err(ModelError::NonFinite);
    }
    if n == 1 {
        return Ok(vec![C64::new(m[(0, 0)], 0.0)]);
    }
    let t = balancing_scale(m);
    let m = &DMatrix::from_fn(n, n, |i, j| m[(i, j)] * t[j] / t[i]);
    let scale = m.iter().fold(0.0f64, |acc, v| acc.max(v.abs())).max(1e-300);
    for &shift in &[0.0, 0.173, -0.291, 0.457, -0.613, 1.0, -1.37] {
        let sigma = shift * scale;
        let mut s = m.clone();
        for i in 0..n {
            s[(i, i)] += sigma;
        }
        if let Some(schur) = s.try_schur(f64::EPSILON, 200 * n) {
            let vals: Vec<C64> = schur
                .complex_eigenvalues()
                .iter()
                .map(|e| e - sigma)
                .collect();
            if vals.iter().all(|v| v.re.is_finite() && v.im.is_finite()) {
                return Ok(vals);
            }
        }
    }
    Err(ModelError::Eigen)
}

/// Matrix exponential, refusing an overflowed or non-finite result.
pub fn expm(m: &DMatrix<f64>) -> Result<DMatrix<f64>, ModelError> {
    if !m.iter().all(|v| v.is_finite()) {
        return Err(ModelError::NonFinite);
    }
    // nalgebra picks its number of squarings from a norm of a high power
    // of the matrix; when that power overflows, the count becomes
    // `u64::MAX` and the squaring never ends (a period of 1e38 s, say). So
    // a matrix with a large norm is scaled here by an exact power of two
    // down to `EXPM_NORM`, whose 27th power stays in range, and the result
    // is squared back a bounded number of times (at most about 1100 for a
    // finite norm), stopping as soon as it stops being finite.
    let norm = m.one_norm();
    if !norm.is_finite() {
        return Err(ModelError::Exponential);
    }
    let mut squarings = 0u32;
    let mut scaled = None;
    if norm > EXPM_NORM {
        let mut k = 0i32;
        while norm * 2f64.powi(-k) > EXPM_NORM && k < 1100 {
            k += 1;
        }
        squarings = k as u32;
        scaled = Some(m * 2f64.powi(-k));
    }
    let mut e = scaled.as_ref().unwrap_or(m).exp();
    for _ in 0..squarings {
        if !e.iter().all(|v| v.is_finite()) {
            break;
        }
        e = &e * &e;
    }
    if e.iter().all(|v| v.is_finite()) {
        Ok(e)
    } else {
        Err(ModelError::Exponential)
    }
}

/// Largest 1-norm handed to nalgebra's exponential as it is (see `expm`).
const EXPM_NORM: f64 = 1e8;

/// Van Loan's augmented exponential for a held input over `h` seconds:
/// returns `(e^{A h}, integral_0^h e^{A s} ds B)` from one exponential of
/// `[[A, B], [0, 0]] h`, with no inverse of `A` (A is often singular).
pub fn hold_integrals(
    a: &DMatrix<f64>,
    b: &DVector<f64>,
    h: f64,
) -> Result<(DMatrix<f64>, DVector<f64>), ModelError> {
    let n = a.nrows();
    let mut m = DMatrix::zeros(n + 1, n + 1);
    m.view_mut((0, 0), (n, n)).copy_from(&(a * h));
    m.view_mut((0, n), (n, 1)).copy_from(&(b * h));
    let e = expm(&m)?;
    Ok((
        e.view((0, 0), (n, n)).into_owned(),
        e.view((0, n), (n, 1)).column(0).into_owned(),
    ))
}

/// `(e^{A h}, G, H)` of `ramp_integrals`.
pub type RampIntegrals = (DMatrix<f64>, DVector<f64>, DVector<f64>);

/// Van Loan's augmented exponential for an input that ramps over `h`
/// seconds: returns `(e^{A h}, G, H)` with `G = integral_0^h e^{A s} ds B`
/// (the held input's integral, as `hold_integrals`) and
/// `H = integral_0^h e^{A (h - s)} s ds B` (a unit-slope ramp's), so an
/// input `a + b s` on `[0, h)` moves the state by `G a + H b`. One
/// exponential of `[[A, B, 0], [0, 0, 1], [0, 0, 0]] h`; no inverse of `A`.
pub fn ramp_integrals(
    a: &DMatrix<f64>,
    b: &DVector<f64>,
    h: f64,
) -> Result<RampIntegrals, ModelError> {
    let n = a.nrows();
    let mut m = DMatrix::zeros(n + 2, n + 2);
    m.view_mut((0, 0), (n, n)).copy_from(&(a * h));
    m.view_mut((0, n), (n, 1)).copy_from(&(b * h));
    m[(n, n + 1)] = h;
    let e = expm(&m)?;
    Ok((
        e.view((0, 0), (n, n)).into_owned(),
        e.view((0, n), (n, 1)).column(0).into_owned(),
        e.view((0, n + 1), (n, 1)).column(0).into_owned(),
    ))
}
