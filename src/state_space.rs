//! State-space models on nalgebra: realisation of a transfer function,
//! conversion back, eigenvalues with a capped iteration, and the guarded
//! matrix exponential.

use nalgebra::{DMatrix, DVector};

use crate::poly::{C64, Poly};
use crate::transfer::Transfer;

/// A single-input model `x' = A x + B u` (or `x+ = A x + B u`),
/// `y = C x + D u`, possibly with several outputs (rows of `C`).
#[derive(Debug, Clone, PartialEq)]
pub struct StateSpace {
    pub a: DMatrix<f64>,
    pub b: DVector<f64>,
    pub c: DMatrix<f64>,
    pub d: DVector<f64>,
}

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
}

impl StateSpace {
    /// Number of states.
    pub fn order(&self) -> usize {
        self.a.nrows()
    }

    /// Realise a proper transfer function in controllable canonical form,
    /// then balance it with an exact power-of-two diagonal similarity, so
    /// stiff models (time constants 1e-5 s next to 10 s) keep their digits
    /// in the matrix exponential.
    pub fn from_transfer(tf: &Transfer) -> Result<StateSpace, ModelError> {
        if tf.denominator.is_zero() {
            return Err(ModelError::ZeroDenominator);
        }
        if !tf.is_finite() {
            return Err(ModelError::NonFinite);
        }
        if !tf.is_proper() {
            return Err(ModelError::Improper {
                numerator: tf.numerator.degree(),
                denominator: tf.denominator.degree(),
            });
        }
        let n = tf.denominator.degree();
        let lead = tf.denominator.leading();
        let den: Vec<f64> = tf.denominator.coeffs().iter().map(|v| v / lead).collect();
        let num: Vec<f64> = (0..=n).map(|i| tf.numerator.coeff(i) / lead).collect();
        let d = num[n];
        let mut a = DMatrix::zeros(n, n);
        let mut b = DVector::zeros(n);
        let mut c = DMatrix::zeros(1, n);
        if n > 0 {
            for i in 0..n - 1 {
                a[(i, i + 1)] = 1.0;
            }
            for j in 0..n {
                a[(n - 1, j)] = -den[j];
                c[(0, j)] = num[j] - d * den[j];
            }
            b[n - 1] = 1.0;
        }
        let mut ss = StateSpace {
            a,
            b,
            c,
            d: DVector::from_element(1, d),
        };
        ss.balance();
        Ok(ss)
    }

    /// Diagonal similarity by powers of two that makes each state's row and
    /// column norms of `A` comparable (the classic balancing iteration).
    /// Exact in floating point, so the transfer function is unchanged.
    fn balance(&mut self) {
        let scale = balancing_scale(&self.a);
        for (i, &f) in scale.iter().enumerate() {
            if f == 1.0 {
                continue;
            }
            // x_i -> x_i / f: row i of A and B scale by 1/f, column i of A and C by f.
            let n = self.order();
            for j in 0..n {
                self.a[(i, j)] /= f;
                self.a[(j, i)] *= f;
            }
            self.b[i] /= f;
            for r in 0..self.c.nrows() {
                self.c[(r, i)] *= f;
            }
        }
    }

    /// Transfer function from the input to output `row`: the denominator
    /// is the characteristic polynomial (from eigenvalues), the numerator
    /// comes from the Markov parameters (see `to_transfer_with_denominator`).
    pub fn to_transfer(&self, row: usize) -> Result<Transfer, ModelError> {
        if self.order() == 0 {
            return Ok(Transfer::gain(self.d[row]));
        }
        let den = charpoly(&self.a)?;
        Ok(self.to_transfer_with_denominator(row, den))
    }

    /// Transfer function to output `row` with a known monic
    /// characteristic polynomial `denominator` of `A`.
    ///
    /// The numerator comes from the Markov parameters `h_j = C A^j B`:
    /// coefficient `m` (descending, m >= 1) is
    /// `D c_m + sum_{j<m} c_{m-1-j} h_j`. Unlike the determinant identity
    /// `det(xI - A + BC) - det(xI - A)`, nothing here subtracts two
    /// polynomials of size one to get a numerator of size `T^k`, so a
    /// fast-rate equivalent of an integrator chain keeps its digits.
    pub fn to_transfer_with_denominator(&self, row: usize, den: Poly) -> Transfer {
        let n = self.order();
        let d = self.d[row];
        let c = den.descending();
        let crow = self.c.row(row);
        let mut h = Vec::with_capacity(n);
        let mut v = self.b.clone();
        for _ in 0..n {
            h.push((crow * &v)[0]);
            v = &self.a * v;
        }
        let mut num = vec![0.0; n + 1];
        num[0] = d * c[0];
        for m in 1..=n {
            let mut acc = d * c[m];
            for j in 0..m {
                acc += c[m - 1 - j] * h[j];
            }
            num[m] = acc;
        }
        Transfer::new(Poly::from_descending(&num), den)
    }
}

/// Largest model `response_at` solves in stack storage.
const STACK_SOLVE: usize = 8;

/// `a.norm() > b.norm()`, decided exactly as the two `hypot` values would
/// decide it, mostly without calling `hypot`: when the squared moduli are
/// in the safe range and differ by more than a relative 1e-12, their order
/// is the order of the moduli and of the (faithfully rounded) `hypot`
/// values; exact zeros are decided without it too; near-ties and extreme
/// magnitudes go to `hypot` itself.
fn norm_greater(a: C64, b: C64) -> bool {
    // An exact zero (common: the loop matrices are sparse) has modulus 0
    // and every other number a positive one, exactly as `hypot` says.
    let zero = |c: C64| c.re == 0.0 && c.im == 0.0;
    if zero(b) {
        return !zero(a);
    }
    if zero(a) {
        return false;
    }
    let (sa, sb) = (a.norm_sqr(), b.norm_sqr());
    let safe = |v: f64| (1e-280..=1e280).contains(&v);
    if safe(sa) && safe(sb) {
        if sa > sb * (1.0 + 1e-12) {
            return true;
        }
        if sb > sa * (1.0 + 1e-12) {
            return false;
        }
    }
    a.norm() > b.norm()
}

impl StateSpace {
    /// Transfer value to output `row` at the complex point `x`:
    /// `C (xI - A)^{-1} B + D`, by Gaussian elimination with partial
    /// pivoting (no polynomial coefficients involved, so poles crowded near
    /// z = 1 at fast rates cost no digits).
    pub fn response_at(&self, x: C64, row: usize) -> C64 {
        let n = self.order();
        // Stack storage for the usual sizes (this runs thousands of times
        // per evaluation); the same arithmetic either way.
        let mut stack = [C64::new(0.0, 0.0); STACK_SOLVE * (STACK_SOLVE + 1)];
        let mut heap = Vec::new();
        let m: &mut [C64] = if n <= STACK_SOLVE {
            &mut stack[..n * (n + 1)]
        } else {
            heap.resize(n * (n + 1), C64::new(0.0, 0.0));
            &mut heap
        };
        for i in 0..n {
            for j in 0..n {
                let d = if i == j { x } else { C64::new(0.0, 0.0) };
                m[i * (n + 1) + j] = d - self.a[(i, j)];
            }
            m[i * (n + 1) + n] = C64::new(self.b[i], 0.0);
        }
        let w = n + 1;
        for col in 0..n {
            // Partial pivoting on |entry| (hypot, computed once per entry).
            let mut piv = col;
            for r in col + 1..n {
                if norm_greater(m[r * w + col], m[piv * w + col]) {
                    piv = r;
                }
            }
            if piv != col {
                for j in 0..w {
                    m.swap(col * w + j, piv * w + j);
                }
            }
            let p = m[col * w + col];
            // |p| == 0 exactly when both parts are zero (no hypot needed).
            if p.re == 0.0 && p.im == 0.0 {
                return C64::new(f64::INFINITY, 0.0);
            }
            for r in col + 1..n {
                let f = m[r * w + col] / p;
                if f.re != 0.0 || f.im != 0.0 {
                    for j in col..w {
                        let v = m[col * w + j];
                        m[r * w + j] -= f * v;
                    }
                }
            }
        }
        let mut sol_stack = [C64::new(0.0, 0.0); STACK_SOLVE];
        let mut sol_heap = Vec::new();
        let sol: &mut [C64] = if n <= STACK_SOLVE {
            &mut sol_stack[..n]
        } else {
            sol_heap.resize(n, C64::new(0.0, 0.0));
            &mut sol_heap
        };
        for i in (0..n).rev() {
            let mut acc = m[i * w + n];
            for j in i + 1..n {
                acc -= m[i * w + j] * sol[j];
            }
            sol[i] = acc / m[i * w + i];
        }
        let mut y = C64::new(self.d[row], 0.0);
        for (j, v) in sol.iter().enumerate() {
            y += v * self.c[(row, j)];
        }
        y
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

/// Characteristic polynomial `det(xI - M)` from the eigenvalues.
pub fn charpoly(m: &DMatrix<f64>) -> Result<Poly, ModelError> {
    Ok(Poly::from_roots(&eigenvalues(m)?))
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_tf_ss_tf() {
        // (2 s^2 + 3 s + 5) / (s^3 + 4 s^2 + 6 s + 4): any realisation must
        // give back the same coefficients (algebraic identity).
        let tf = Transfer::new(
            Poly::from_descending(&[2.0, 3.0, 5.0]),
            Poly::from_descending(&[1.0, 4.0, 6.0, 4.0]),
        );
        let back = StateSpace::from_transfer(&tf)
            .unwrap()
            .to_transfer(0)
            .unwrap();
        for (a, b) in back.numerator.descending().iter().zip([2.0, 3.0, 5.0]) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
        for (a, b) in back
            .denominator
            .descending()
            .iter()
            .zip([1.0, 4.0, 6.0, 4.0])
        {
            assert!((a - b).abs() < 1e-12);
        }
        // Biproper: (s + 3) / (s + 1) = 1 + 2/(s+1).
        let tf = Transfer::new(
            Poly::from_descending(&[1.0, 3.0]),
            Poly::from_descending(&[1.0, 1.0]),
        );
        let ss = StateSpace::from_transfer(&tf).unwrap();
        assert_eq!(ss.d[0], 1.0);
        let back = ss.to_transfer(0).unwrap();
        assert!((back.numerator.coeff(0) - 3.0).abs() < 1e-12);
    }

    #[test]
    fn van_loan_first_order() {
        // x' = -a x + a u held for h: e^{-ah} and 1 - e^{-ah} (closed form).
        let a = DMatrix::from_element(1, 1, -3.0);
        let b = DVector::from_element(1, 3.0);
        let (phi, gam) = hold_integrals(&a, &b, 0.1).unwrap();
        assert!((phi[(0, 0)] - (-0.3f64).exp()).abs() < 1e-15);
        assert!((gam[0] - (1.0 - (-0.3f64).exp())).abs() < 1e-15);
    }
}
