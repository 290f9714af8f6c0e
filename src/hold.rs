//! The exact discrete equivalent of hold + computation delay + plant +
//! sensor, and the matrices that give the plant output between samples.
//!
//! Over one period the input is piecewise constant: `u_{k-1}` on
//! `[kT, kT + tau)` and `u_k` on `[kT + tau, (k+1)T)`, so every state and
//! output inside the period is an exact linear function of
//! `(x_k, u_{k-1}, u_k, w)` whose coefficients come from matrix
//! exponentials (Van Loan's augmented form; no inverse of `A`).

use nalgebra::{DMatrix, DVector};

use crate::state_space::{ModelError, StateSpace, hold_integrals};
use crate::transfer::{DiscreteTransfer, Transfer};

/// Plant and sensor in series as one continuous model with two outputs:
/// row 0 is the plant output `y` (what the figures are taken on), row 1 the
/// measured output `y_m` (what the controller samples). The input is the
/// plant input (actuator command plus load disturbance).
pub fn plant_and_sensor(plant: &Transfer, sensor: &Transfer) -> Result<StateSpace, ModelError> {
    let p = StateSpace::from_transfer(plant)?;
    let h = StateSpace::from_transfer(sensor)?;
    let (np, nh) = (p.order(), h.order());
    let n = np + nh;
    let mut a = DMatrix::zeros(n, n);
    a.view_mut((0, 0), (np, np)).copy_from(&p.a);
    a.view_mut((np, np), (nh, nh)).copy_from(&h.a);
    // Sensor state driven by the plant output y = Cp x + Dp u.
    a.view_mut((np, 0), (nh, np))
        .copy_from(&(&h.b * p.c.row(0)));
    let mut b = DVector::zeros(n);
    b.rows_mut(0, np).copy_from(&p.b);
    b.rows_mut(np, nh).copy_from(&(&h.b * p.d[0]));
    let mut c = DMatrix::zeros(2, n);
    c.view_mut((0, 0), (1, np)).copy_from(&p.c.row(0));
    c.view_mut((1, 0), (1, np))
        .copy_from(&(p.c.row(0) * h.d[0]));
    c.view_mut((1, np), (1, nh)).copy_from(&h.c.row(0));
    let d = DVector::from_vec(vec![p.d[0], h.d[0] * p.d[0]]);
    Ok(StateSpace { a, b, c, d })
}

/// One sampled point inside a period: the plant output there is
/// `ey . x_k + cu1 u_{k-1} + cu0 u_k + cw w`.
#[derive(Debug, Clone)]
pub struct IntersampleRow {
    /// Time from the start of the period, s.
    pub offset_s: f64,
    pub ey: DVector<f64>,
    pub cu1: f64,
    pub cu0: f64,
    pub cw: f64,
}

/// Exact hold + fractional-delay equivalent at one period and delay.
///
/// `x_{k+1} = Phi x_k + Gamma0 u_k + Gamma1 u_{k-1} + (Gamma0 + Gamma1) w`
/// for a load disturbance `w` held constant; the controller samples
/// `y_k = c_m x_k + d_m (u_{k-1} + w)` (the sample is taken just before
/// the new command is applied).
#[derive(Debug, Clone)]
pub struct HoldEquivalent {
    pub period_s: f64,
    /// Computation delay as a fraction of the period, 0..=1.
    pub delay_fraction: f64,
    pub phi: DMatrix<f64>,
    pub gamma0: DVector<f64>,
    pub gamma1: DVector<f64>,
    /// Measured-output row and feedthrough.
    pub cm: DVector<f64>,
    pub dm: f64,
    /// Plant-output row and feedthrough.
    pub cy: DVector<f64>,
    pub dy: f64,
    /// Evenly spaced points inside a period (the first at the sample).
    pub intersample: Vec<IntersampleRow>,
    /// Index of the first point at or after the computation delay: points
    /// before it still see `u_{k-1}`.
    pub switch_index: usize,
}

impl HoldEquivalent {
    /// Build the equivalent of `model` (from `plant_and_sensor`) at period
    /// `period_s` with delay `delay_fraction * period_s`, and the rows for
    /// `points` evenly spaced output points per period.
    pub fn new(
        model: &StateSpace,
        period_s: f64,
        delay_fraction: f64,
        points: usize,
    ) -> Result<HoldEquivalent, ModelError> {
        let n = model.order();
        let t = period_s;
        let tau = delay_fraction * t;
        let (a, b) = (&model.a, &model.b);
        // e^{A tau}, G(tau) and e^{A (T - tau)}, G(T - tau).
        let (e_tau, g_tau) = if tau > 0.0 {
            hold_integrals(a, b, tau)?
        } else {
            (DMatrix::identity(n, n), DVector::zeros(n))
        };
        let rest = t - tau;
        let (e_rest, g_rest) = if rest > 0.0 {
            hold_integrals(a, b, rest)?
        } else {
            (DMatrix::identity(n, n), DVector::zeros(n))
        };
        let phi = &e_rest * &e_tau;
        let gamma0 = g_rest;
        let gamma1 = &e_rest * &g_tau;

        let cy: DVector<f64> = model.c.row(0).transpose();
        let cm: DVector<f64> = model.c.row(1).transpose();
        let (dy, dm) = (model.d[0], model.d[1]);

        // Points s_j = j h. Before the switch: x = E(s) x_k + G(s)(u1 + w).
        // After it: x = E(r) [E_tau x_k + G_tau (u1 + w)] + G(r)(u0 + w),
        // r = s - tau = b + m h, b the first offset past the switch.
        let points = points.max(1);
        let h = t / points as f64;
        let (e_h, g_h) = hold_integrals(a, b, h)?;
        let mut grid_e = vec![DMatrix::identity(n, n)];
        let mut grid_g = vec![DVector::zeros(n)];
        for j in 0..points {
            let e_next = &grid_e[j] * &e_h;
            let g_next = &grid_g[j] + &grid_e[j] * &g_h;
            grid_e.push(e_next);
            grid_g.push(g_next);
        }
        let switch = tau / h; // in units of h
        // First index with s_j >= tau; the tolerance keeps a switch that
        // lands on a grid point (tau/h = 12.000000000000002) on that point.
        let first_after = ((switch - 1e-9).ceil().max(0.0) as usize).min(points);
        let b_off = (first_after as f64 * h - tau).max(0.0); // 0 <= b_off < h
        let (e_b, g_b) = if b_off > 1e-15 * h {
            hold_integrals(a, b, b_off)?
        } else {
            (DMatrix::identity(n, n), DVector::zeros(n))
        };
        let mut intersample = Vec::with_capacity(points);
        for j in 0..points {
            let s = j as f64 * h;
            let row = if j < first_after {
                let ey = grid_e[j].tr_mul(&cy);
                let cg = cy.dot(&grid_g[j]);
                IntersampleRow {
                    offset_s: s,
                    ey,
                    cu1: cg + dy,
                    cu0: 0.0,
                    cw: cg + dy,
                }
            } else {
                let m = j - first_after;
                let e_r = &grid_e[m] * &e_b;
                let g_r = &g_b + &e_b * &grid_g[m];
                let ey = (&e_r * &e_tau).tr_mul(&cy);
                let c1 = cy.dot(&(&e_r * &g_tau));
                let c0 = cy.dot(&g_r);
                IntersampleRow {
                    offset_s: s,
                    ey,
                    cu1: c1,
                    cu0: c0 + dy,
                    cw: c1 + c0 + dy,
                }
            };
            intersample.push(row);
        }
        Ok(HoldEquivalent {
            period_s,
            delay_fraction,
            phi,
            gamma0,
            gamma1,
            cm,
            dm,
            cy,
            dy,
            intersample,
            switch_index: first_after,
        })
    }

    /// The augmented discrete model from `u_k` to `y_k`, states
    /// `[x_k; u_{k-1}]`.
    pub fn augmented(&self) -> StateSpace {
        let n = self.phi.nrows();
        let mut a = DMatrix::zeros(n + 1, n + 1);
        a.view_mut((0, 0), (n, n)).copy_from(&self.phi);
        a.view_mut((0, n), (n, 1)).copy_from(&self.gamma1);
        let mut b = DVector::zeros(n + 1);
        b.rows_mut(0, n).copy_from(&self.gamma0);
        b[n] = 1.0;
        let mut c = DMatrix::zeros(1, n + 1);
        c.view_mut((0, 0), (1, n)).copy_from(&self.cm.transpose());
        c[(0, n)] = self.dm;
        StateSpace {
            a,
            b,
            c,
            d: DVector::zeros(1),
        }
    }

    /// Pulse transfer function `G(z)` from `u_k` to `y_k` (hold, delay,
    /// plant and sensor).
    pub fn pulse_transfer(&self) -> Result<DiscreteTransfer, ModelError> {
        Ok(DiscreteTransfer {
            transfer: self.augmented().to_transfer(0)?,
            period_s: self.period_s,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::poly::Poly;

    fn first_order() -> StateSpace {
        let p = Transfer::new(Poly::constant(2.0), Poly::from_descending(&[1.0, 2.0]));
        plant_and_sensor(&p, &Transfer::gain(1.0)).unwrap()
    }

    #[test]
    fn intersample_rows_match_closed_form() {
        // 2/(s+2) with x_k = 0, u_{k-1} = 0, u_k = 1 applied at tau = 0.3 T:
        // y(s) = 1 - e^{-2 (s - tau)} for s >= tau, 0 before (closed form).
        let m = first_order();
        let t = 0.1;
        let eq = HoldEquivalent::new(&m, t, 0.3, 16).unwrap();
        for row in &eq.intersample {
            let y = row.cu0; // x_k = 0, u_{k-1} = 0, w = 0, u_k = 1
            let s = row.offset_s;
            let want = if s >= 0.3 * t {
                1.0 - (-2.0 * (s - 0.3 * t)).exp()
            } else {
                0.0
            };
            assert!((y - want).abs() < 1e-14, "s={s}: {y} vs {want}");
        }
    }

    #[test]
    fn switch_on_a_grid_point_is_not_lost_to_rounding() {
        // 10 Hz, d = 0.75, 16 points: tau/h computes as 12.000000000000002;
        // the point at exactly tau must already see the new command.
        let eq = HoldEquivalent::new(&first_order(), 0.1, 0.75, 16).unwrap();
        assert_eq!(eq.switch_index, 12);
    }

    #[test]
    fn delay_one_is_a_unit_delay() {
        // d = 1 equals z^-1 times the plain zoh equivalent (definition).
        let m = first_order();
        let g0 = HoldEquivalent::new(&m, 0.1, 0.0, 16)
            .unwrap()
            .pulse_transfer()
            .unwrap();
        let g1 = HoldEquivalent::new(&m, 0.1, 1.0, 16)
            .unwrap()
            .pulse_transfer()
            .unwrap();
        for w in [0.3, 3.0, 30.0] {
            let z = nalgebra::Complex::from_polar(1.0, w * 0.1);
            let a = g1.transfer.eval(z);
            let b = g0.transfer.eval(z) / z;
            assert!((a - b).norm() < 1e-12 * b.norm());
        }
    }
}
