//! Real polynomials in one variable (`s` or `z`), stored in ascending powers.
//!
//! Arithmetic is exact in the sense that nothing is cancelled or rounded
//! away silently: only coefficients that are exactly zero at the top are
//! trimmed. Roots come from the companion matrix through a capped Schur
//! iteration (see `roots`), never through nalgebra's uncapped eigenvalue
//! routine, which can loop forever on some inputs.

use nalgebra::{Complex, DMatrix};

/// Complex number used for poles, zeros and frequency responses.
pub type C64 = Complex<f64>;

/// A real polynomial `c[0] + c[1] x + ... + c[n] x^n`.
#[derive(Debug, Clone, PartialEq)]
pub struct Poly {
    /// Ascending coefficients; empty means the zero polynomial. The last
    /// entry is never exactly zero.
    c: Vec<f64>,
}

impl Poly {
    /// From ascending coefficients (`c[i]` multiplies `x^i`).
    pub fn new(mut ascending: Vec<f64>) -> Self {
        while ascending.last() == Some(&0.0) {
            ascending.pop();
        }
        Poly { c: ascending }
    }

    /// From descending coefficients, the order used in files and output.
    pub fn from_descending(descending: &[f64]) -> Self {
        Poly::new(descending.iter().rev().copied().collect())
    }

    /// The constant polynomial `k`.
    pub fn constant(k: f64) -> Self {
        Poly::new(vec![k])
    }

    /// The polynomial `x` (the Laplace or z variable itself).
    pub fn var() -> Self {
        Poly::new(vec![0.0, 1.0])
    }

    /// The zero polynomial.
    pub fn zero() -> Self {
        Poly { c: Vec::new() }
    }

    /// The constant one.
    pub fn one() -> Self {
        Poly::constant(1.0)
    }

    /// Monic polynomial with the given roots; complex roots must come in
    /// conjugate pairs, and the (rounding-level) imaginary part of the
    /// product is dropped.
    pub fn from_roots(roots: &[C64]) -> Self {
        let mut c = vec![C64::new(1.0, 0.0)];
        for &r in roots {
            let mut next = vec![C64::new(0.0, 0.0); c.len() + 1];
            for (i, &ci) in c.iter().enumerate() {
                next[i + 1] += ci;
                next[i] -= ci * r;
            }
            c = next;
        }
        Poly::new(c.into_iter().map(|v| v.re).collect())
    }

    /// True for the zero polynomial.
    pub fn is_zero(&self) -> bool {
        self.c.is_empty()
    }

    /// Degree; the zero polynomial has degree 0 here (callers that care
    /// check `is_zero` first).
    pub fn degree(&self) -> usize {
        self.c.len().saturating_sub(1)
    }

    /// Ascending coefficients.
    pub fn coeffs(&self) -> &[f64] {
        &self.c
    }

    /// Coefficient of `x^i` (zero beyond the degree).
    pub fn coeff(&self, i: usize) -> f64 {
        self.c.get(i).copied().unwrap_or(0.0)
    }

    /// Descending coefficients (`[1.0]`-style output order); `[0.0]` for zero.
    pub fn descending(&self) -> Vec<f64> {
        if self.c.is_empty() {
            return vec![0.0];
        }
        self.c.iter().rev().copied().collect()
    }

    /// Leading (highest-power) coefficient; 0 for the zero polynomial.
    pub fn leading(&self) -> f64 {
        self.c.last().copied().unwrap_or(0.0)
    }

    /// Number of roots at `x = 0` (trailing zero coefficients).
    pub fn zero_root_count(&self) -> usize {
        self.c.iter().take_while(|&&v| v == 0.0).count()
    }

    /// The polynomial divided by `x^k` (drops `k` exact zero roots).
    pub fn shift_down(&self, k: usize) -> Poly {
        Poly::new(self.c.iter().skip(k).copied().collect())
    }

    /// True when every coefficient is finite.
    pub fn is_finite(&self) -> bool {
        self.c.iter().all(|v| v.is_finite())
    }

    /// Value at a real point (Horner).
    pub fn eval(&self, x: f64) -> f64 {
        self.c.iter().rev().fold(0.0, |acc, &ci| acc * x + ci)
    }

    /// Value at a complex point (Horner).
    pub fn eval_c(&self, x: C64) -> C64 {
        self.c
            .iter()
            .rev()
            .fold(C64::new(0.0, 0.0), |acc, &ci| acc * x + ci)
    }

    /// Value and first derivative at a complex point (for Newton polishing).
    fn eval_with_derivative(&self, x: C64) -> (C64, C64) {
        let mut p = C64::new(0.0, 0.0);
        let mut dp = C64::new(0.0, 0.0);
        for &ci in self.c.iter().rev() {
            dp = dp * x + p;
            p = p * x + ci;
        }
        (p, dp)
    }

    /// Sum.
    pub fn add(&self, other: &Poly) -> Poly {
        let n = self.c.len().max(other.c.len());
        Poly::new((0..n).map(|i| self.coeff(i) + other.coeff(i)).collect())
    }

    /// Difference.
    pub fn sub(&self, other: &Poly) -> Poly {
        self.add(&other.scale(-1.0))
    }

    /// Product.
    pub fn mul(&self, other: &Poly) -> Poly {
        if self.is_zero() || other.is_zero() {
            return Poly::zero();
        }
        let mut c = vec![0.0; self.c.len() + other.c.len() - 1];
        for (i, &a) in self.c.iter().enumerate() {
            for (j, &b) in other.c.iter().enumerate() {
                c[i + j] += a * b;
            }
        }
        Poly::new(c)
    }

    /// Product with a scalar.
    pub fn scale(&self, k: f64) -> Poly {
        Poly::new(self.c.iter().map(|&v| v * k).collect())
    }

    /// Integer power.
    pub fn pow(&self, n: u32) -> Poly {
        (0..n).fold(Poly::one(), |acc, _| acc.mul(self))
    }

    /// Substitute `x -> (a x + b) / (c x + d)` and multiply through by
    /// `(c x + d)^n` with `n = target_degree` (>= own degree): the numerator
    /// of the bilinear-type maps used by Tustin and the Euler methods.
    pub fn compose_mobius(&self, a: f64, b: f64, c: f64, d: f64, target_degree: usize) -> Poly {
        let top = Poly::new(vec![b, a]);
        let bottom = Poly::new(vec![d, c]);
        let mut out = Poly::zero();
        for (i, &ci) in self.c.iter().enumerate() {
            let term = top
                .pow(i as u32)
                .mul(&bottom.pow((target_degree - i) as u32))
                .scale(ci);
            out = out.add(&term);
        }
        out
    }

    /// All roots, as accurate as double precision allows.
    ///
    /// Companion-matrix eigenvalues through the capped Schur iteration of
    /// `ss::eigenvalues`. Each root is then polished with Newton steps on the
    /// polynomial itself. Exact zero roots are split off first.
    pub fn roots(&self) -> Option<Vec<C64>> {
        if self.is_zero() || !self.is_finite() {
            return None;
        }
        let k0 = self.zero_root_count();
        let p = self.shift_down(k0);
        let n = p.degree();
        let mut roots = vec![C64::new(0.0, 0.0); k0];
        if n == 0 {
            return Some(roots);
        }
        if n == 1 {
            roots.push(C64::new(-p.c[0] / p.c[1], 0.0));
            return Some(roots);
        }
        let lead = p.leading();
        let mut comp = DMatrix::<f64>::zeros(n, n);
        for j in 0..n {
            comp[(0, j)] = -p.c[n - 1 - j] / lead;
        }
        for i in 1..n {
            comp[(i, i - 1)] = 1.0;
        }
        let mut vals = crate::state_space::eigenvalues(&comp).ok()?;
        for v in vals.iter_mut() {
            *v = p.polish_root(*v);
        }
        // Tidy conjugate pairs: roots with a rounding-level imaginary part
        // are real; the rest are paired so conjugates are exact mirrors.
        for v in vals.iter_mut() {
            if v.im.abs() <= 1e-12 * v.norm().max(1e-300) {
                v.im = 0.0;
            }
        }
        vals.sort_by(|a, b| {
            a.re.partial_cmp(&b.re)
                .unwrap_or(std::cmp::Ordering::Equal)
                .then(a.im.partial_cmp(&b.im).unwrap_or(std::cmp::Ordering::Equal))
        });
        roots.extend(vals);
        Some(roots)
    }

    /// Newton steps from `x0`, kept only while they reduce |p(x)|; a root
    /// that Newton cannot improve (a repeated root) is returned as it came.
    fn polish_root(&self, x0: C64) -> C64 {
        let mut x = x0;
        let mut fx = self.eval_c(x).norm();
        for _ in 0..8 {
            let (p, dp) = self.eval_with_derivative(x);
            if dp.norm() == 0.0 || p.norm() == 0.0 {
                break;
            }
            let next = x - p / dp;
            let fn_ = self.eval_c(next).norm();
            if fn_.partial_cmp(&fx) != Some(std::cmp::Ordering::Less) {
                break;
            }
            x = next;
            fx = fn_;
        }
        x
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roots_of_known_polynomials() {
        // (s+1)(s+2)(s^2+2s+5): roots -1, -2, -1+-2j (closed form).
        let p = Poly::from_roots(&[
            C64::new(-1.0, 0.0),
            C64::new(-2.0, 0.0),
            C64::new(-1.0, 2.0),
            C64::new(-1.0, -2.0),
        ]);
        let r = p.roots().unwrap();
        assert_eq!(r.len(), 4);
        for want in [(-2.0, 0.0), (-1.0, -2.0), (-1.0, 0.0), (-1.0, 2.0)] {
            assert!(
                r.iter()
                    .any(|g| (g.re - want.0).abs() < 1e-12 && (g.im - want.1).abs() < 1e-12),
                "{r:?}"
            );
        }
    }

    #[test]
    fn roots_where_plain_eigenvalue_routines_can_hang() {
        // s^4 + 1: roots e^{j pi (2k+1)/4} (closed form). The dependency
        // notes record nalgebra's uncapped routine looping on this one.
        let p = Poly::from_descending(&[1.0, 0.0, 0.0, 0.0, 1.0]);
        let r = p.roots().unwrap();
        let h = std::f64::consts::FRAC_1_SQRT_2;
        for v in &r {
            assert!((v.re.abs() - h).abs() < 1e-12 && (v.im.abs() - h).abs() < 1e-12);
        }
        // (s^2+1)^3: triple roots at +-j, accurate to about eps^(1/3).
        let p = Poly::from_descending(&[1.0, 0.0, 1.0]).pow(3);
        for v in p.roots().unwrap() {
            assert!(v.re.abs() < 1e-4 && (v.im.abs() - 1.0).abs() < 1e-4);
        }
        // s^3: exact zero roots are split off.
        let p = Poly::from_descending(&[1.0, 0.0, 0.0, 0.0]);
        assert!(p.roots().unwrap().iter().all(|v| v.norm() == 0.0));
    }

    #[test]
    fn arithmetic() {
        let a = Poly::from_descending(&[1.0, 2.0]); // s + 2
        let b = Poly::from_descending(&[1.0, -3.0]); // s - 3
        assert_eq!(a.mul(&b).descending(), vec![1.0, -1.0, -6.0]);
        assert_eq!(a.sub(&a), Poly::zero());
        assert_eq!(a.pow(2).descending(), vec![1.0, 4.0, 4.0]);
        // Tustin-style map of s: s -> (z-1)/(z+1), degree 1: numerator z - 1.
        assert_eq!(
            Poly::var()
                .compose_mobius(1.0, -1.0, 1.0, 1.0, 1)
                .descending(),
            vec![1.0, -1.0]
        );
    }
}
