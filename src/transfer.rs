//! Transfer functions: a ratio of two real polynomials in `s` (continuous)
//! or in `z` (discrete, with the sample period kept beside it).

use crate::poly::{C64, Poly};

/// A rational function `num(x) / den(x)`, `x` being `s` or `z`.
///
/// Nothing is cancelled automatically: a pole-zero pair that the user
/// wrote stays, because silently cancelling an unstable pole hides a
/// loop that cannot work.
#[derive(Debug, Clone, PartialEq)]
pub struct Transfer {
    pub numerator: Poly,
    pub denominator: Poly,
}

/// A transfer function in `z` at a fixed sample period (seconds).
#[derive(Debug, Clone, PartialEq)]
pub struct DiscreteTransfer {
    pub transfer: Transfer,
    pub period_s: f64,
}

impl Transfer {
    /// `num / den`.
    pub fn new(num: Poly, den: Poly) -> Self {
        Transfer {
            numerator: num,
            denominator: den,
        }
    }

    /// The constant gain `k`.
    pub fn gain(k: f64) -> Self {
        Transfer::new(Poly::constant(k), Poly::one())
    }

    /// Proper: degree of numerator <= degree of denominator.
    pub fn is_proper(&self) -> bool {
        self.numerator.is_zero() || self.numerator.degree() <= self.denominator.degree()
    }

    /// Strictly proper: numerator degree below denominator degree.
    pub fn is_strictly_proper(&self) -> bool {
        self.numerator.is_zero() || self.numerator.degree() < self.denominator.degree()
    }

    /// Order (denominator degree).
    pub fn order(&self) -> usize {
        self.denominator.degree()
    }

    /// Value at a complex point.
    pub fn eval(&self, x: C64) -> C64 {
        self.numerator.eval_c(x) / self.denominator.eval_c(x)
    }

    /// Series connection `self * other`.
    pub fn cascade(&self, other: &Transfer) -> Transfer {
        Transfer::new(
            self.numerator.mul(&other.numerator),
            self.denominator.mul(&other.denominator),
        )
    }

    /// Negative-feedback loop `self / (1 + self * feedback)`.
    pub fn closed_by(&self, feedback: &Transfer) -> Transfer {
        let num = self.numerator.mul(&feedback.denominator);
        let den = self
            .denominator
            .mul(&feedback.denominator)
            .add(&self.numerator.mul(&feedback.numerator));
        Transfer::new(num, den)
    }

    /// Poles (roots of the denominator); `None` when the root finder fails.
    pub fn poles(&self) -> Option<Vec<C64>> {
        self.denominator.roots()
    }

    /// Finite zeros (roots of the numerator); empty for a zero numerator.
    pub fn zeros(&self) -> Option<Vec<C64>> {
        if self.numerator.is_zero() {
            return Some(Vec::new());
        }
        self.numerator.roots()
    }

    /// Gain of the continuous model at s = 0: `None` when there is a pole
    /// at the origin (the gain is infinite).
    pub fn dc_gain_s(&self) -> Option<f64> {
        let d = self.denominator.eval(0.0);
        (d != 0.0).then(|| self.numerator.eval(0.0) / d)
    }

    /// Normalised so the leading denominator coefficient is one.
    pub fn monic(&self) -> Transfer {
        let l = self.denominator.leading();
        Transfer::new(
            self.numerator.scale(1.0 / l),
            self.denominator.scale(1.0 / l),
        )
    }

    /// The same function with numerator and denominator multiplied by one
    /// power of two, so the denominator's largest coefficient is near 1,
    /// when it lies outside `[1e-100, 1e100]` (a sensor written
    /// `1e-320/1e-320`, say, whose products with other models would
    /// underflow to 0/0). A power of two is exact, so nothing else changes;
    /// ordinary models are returned as they are.
    pub fn with_sane_scale(&self) -> Transfer {
        let big = self
            .denominator
            .coeffs()
            .iter()
            .fold(0.0f64, |m, c| m.max(c.abs()));
        if !(big.is_finite() && big > 0.0) || (1e-100..=1e100).contains(&big) {
            return self.clone();
        }
        // Two steps, since 2^-e alone is not representable for the
        // subnormal range's e.
        let e = big.log2().round() as i32;
        let half = -e / 2;
        let rest = -e - half;
        let k1 = 2f64.powi(half);
        let k2 = 2f64.powi(rest);
        Transfer::new(
            self.numerator.scale(k1).scale(k2),
            self.denominator.scale(k1).scale(k2),
        )
    }

    /// Every coefficient finite.
    pub fn is_finite(&self) -> bool {
        self.numerator.is_finite() && self.denominator.is_finite()
    }
}

impl DiscreteTransfer {
    /// Gain of the discrete model at z = 1; `None` with a pole at z = 1.
    pub fn dc_gain_z(&self) -> Option<f64> {
        let d = self.transfer.denominator.eval(1.0);
        (d != 0.0).then(|| self.transfer.numerator.eval(1.0) / d)
    }

    /// Frequency response at `w` rad/s: the value at z = e^{jwT}.
    pub fn freq(&self, w_rad_s: f64) -> C64 {
        self.transfer
            .eval(C64::from_polar(1.0, w_rad_s * self.period_s))
    }
}

/// The controller as the case gives it: a continuous design to be
/// discretized at each rate, or a fixed design in z at its own rate.
#[derive(Debug, Clone, PartialEq)]
pub enum Controller {
    Continuous(Transfer),
    Discrete(DiscreteTransfer),
}
