//! State-space models on nalgebra: realisation of a transfer function,
//! conversion back, and transfer values at complex points. The dense
//! matrix numerics they rest on are in `model::matrix`.

use nalgebra::{DMatrix, DVector};

use crate::model::matrix::{ModelError, balancing_scale, eigenvalues};
use crate::model::poly::{C64, Poly};
use crate::model::transfer::Transfer;

/// A single-input model `x' = A x + B u` (or `x+ = A x + B u`),
/// `y = C x + D u`, possibly with several outputs (rows of `C`).
#[derive(Debug, Clone, PartialEq)]
pub struct StateSpace {
    pub a: DMatrix<f64>,
    pub b: DVector<f64>,
    pub c: DMatrix<f64>,
    pub d: DVector<f64>,
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
        let zero = C64::new(0.0, 0.0);
        // Stack storage for the usual sizes (this runs thousands of times
        // per evaluation), each size its own copy of `solve` with the
        // order known at compile time (loops unrolled); the same
        // arithmetic, in the same order, for every size.
        macro_rules! fixed {
            ($($k:literal)*) => {
                match self.order() {
                    $($k => self.solve(x, row, $k, &mut [zero; $k * ($k + 1)], &mut [zero; $k]),)*
                    n => self.solve(x, row, n, &mut vec![zero; n * (n + 1)], &mut vec![zero; n]),
                }
            };
        }
        fixed!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16)
    }

    /// `response_at` in the scratch `m` (`n` rows of `n + 1`: `xI - A`
    /// beside `B`) and `sol` (`n`).
    #[inline(always)]
    fn solve(&self, x: C64, row: usize, n: usize, m: &mut [C64], sol: &mut [C64]) -> C64 {
        let w = n + 1;
        for i in 0..n {
            for j in 0..n {
                let d = if i == j { x } else { C64::new(0.0, 0.0) };
                m[i * w + j] = d - self.a[(i, j)];
            }
            m[i * w + n] = C64::new(self.b[i], 0.0);
        }
        for col in 0..n {
            // Partial pivoting on |entry| (hypot, computed once per entry).
            let mut piv = col;
            for r in col + 1..n {
                if norm_greater(m[r * w + col], m[piv * w + col]) {
                    piv = r;
                }
            }
            // Entries left of `col` are never read again: not swapped.
            if piv != col {
                for j in col..w {
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
                    // Column `col` below the pivot is never read again.
                    for j in col + 1..w {
                        let v = m[col * w + j];
                        m[r * w + j] -= f * v;
                    }
                }
            }
        }
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

/// Characteristic polynomial `det(xI - M)` from the eigenvalues.
pub fn charpoly(m: &DMatrix<f64>) -> Result<Poly, ModelError> {
    Ok(Poly::from_roots(&eigenvalues(m)?))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::matrix::hold_integrals;

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
