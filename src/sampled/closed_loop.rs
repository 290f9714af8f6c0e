//! The sampled-data loop closed around the digital controller: one
//! discrete state-space model, its poles and its steady state.
//!
//! State `z_k = [x_k; u_{k-1}; xc_k]` (plant and sensor states, the command
//! still being held, controller states); inputs the reference `r_k` and a
//! load disturbance `w` added at the plant input.

use nalgebra::{DMatrix, DVector};

use crate::model::matrix::{ModelError, eigenvalues};
use crate::model::poly::C64;
use crate::model::state_space::StateSpace;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::hold::HoldEquivalent;

/// How far inside the unit circle a pole must be to count as stable;
/// a pole closer to |z| = 1 than this is "on the circle" (marginal).
pub const STABILITY_TOLERANCE: f64 = 1e-10;

/// Why the exact sampled loop at a point could not be built or solved:
/// the step that failed and the model error it met.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LoopError {
    #[error("plant equivalent: {0}")]
    PlantEquivalent(ModelError),
    #[error("closing the loop: {0}")]
    ClosingLoop(ModelError),
    #[error("closed-loop poles: {0}")]
    Poles(ModelError),
}

/// The closed sampled-data loop.
#[derive(Debug, Clone)]
pub struct ClosedLoop {
    /// `z_{k+1} = a z_k + br r_k + bw w`.
    pub a: DMatrix<f64>,
    pub br: DVector<f64>,
    pub bw: DVector<f64>,
    /// Command `u_k = ku . z_k + dur r_k + duw w`.
    pub ku: DVector<f64>,
    pub dur: f64,
    pub duw: f64,
    /// Number of plant + sensor states (the first entries of z).
    pub plant_states: usize,
}

/// Where the loop's poles put it.
#[derive(Debug, Clone, PartialEq)]
pub enum Stability {
    Stable,
    /// A pole outside the unit circle.
    Unstable,
    /// A pole on the unit circle (within `STABILITY_TOLERANCE`), e.g. at
    /// z = 1 exactly: the loop neither settles nor diverges.
    Marginal,
}

impl ClosedLoop {
    /// Close the loop around `controller` (in z, same period as `plant`).
    pub fn new(
        plant: &HoldEquivalent,
        controller: &DiscreteTransfer,
    ) -> Result<ClosedLoop, ModelError> {
        let c = StateSpace::from_transfer(&controller.transfer)?;
        let n = plant.phi.nrows();
        let m = c.order();
        let dim = n + 1 + m;
        let dc = c.d[0];
        let cc: DVector<f64> = if m > 0 {
            c.c.row(0).transpose()
        } else {
            DVector::zeros(0)
        };
        // e = r - cm.x - dm.up - dm_w.w ; u = cc.xc + dc e.
        let mut ku = DVector::zeros(dim);
        ku.rows_mut(0, n).copy_from(&(&plant.cm * -dc));
        ku[n] = -dc * plant.dm;
        ku.rows_mut(n + 1, m).copy_from(&cc);
        let dur = dc;
        let duw = -dc * plant.dm_w;

        let mut a = DMatrix::zeros(dim, dim);
        // x' = Phi x + G1 up + G0 u + Gw w
        a.view_mut((0, 0), (n, n)).copy_from(&plant.phi);
        a.view_mut((0, n), (n, 1)).copy_from(&plant.gamma1);
        let g0u = &plant.gamma0 * ku.transpose();
        let mut top = a.view_mut((0, 0), (n, dim));
        top += &g0u;
        // up' = u
        a.view_mut((n, 0), (1, dim)).copy_from(&ku.transpose());
        // xc' = Ac xc + Bc e
        if m > 0 {
            a.view_mut((n + 1, n + 1), (m, m)).copy_from(&c.a);
            let mut erow = DVector::zeros(dim);
            erow.rows_mut(0, n).copy_from(&(-&plant.cm));
            erow[n] = -plant.dm;
            let bce = &c.b * erow.transpose();
            let mut bottom = a.view_mut((n + 1, 0), (m, dim));
            bottom += &bce;
        }
        let mut br = DVector::zeros(dim);
        br.rows_mut(0, n).copy_from(&(&plant.gamma0 * dur));
        br[n] = dur;
        let mut bw = DVector::zeros(dim);
        bw.rows_mut(0, n)
            .copy_from(&(&plant.gamma0 * duw + &plant.gamma_w));
        bw[n] = duw;
        if m > 0 {
            br.rows_mut(n + 1, m).copy_from(&c.b);
            bw.rows_mut(n + 1, m).copy_from(&(&c.b * -plant.dm_w));
        }
        Ok(ClosedLoop {
            a,
            br,
            bw,
            ku,
            dur,
            duw,
            plant_states: n,
        })
    }

    /// Closed-loop poles (eigenvalues of the loop matrix).
    pub fn poles(&self) -> Result<Vec<C64>, ModelError> {
        eigenvalues(&self.a)
    }

    /// Stability from the poles.
    pub fn stability(poles: &[C64]) -> Stability {
        let rho = poles.iter().map(|p| p.norm()).fold(0.0, f64::max);
        if rho >= 1.0 + STABILITY_TOLERANCE {
            Stability::Unstable
        } else if rho > 1.0 - STABILITY_TOLERANCE {
            Stability::Marginal
        } else {
            Stability::Stable
        }
    }

    /// Steady state for constant inputs: the fixed point
    /// `z = (I - A)^{-1} (br r + bw w)`; `None` when `I - A` is singular.
    pub fn fixed_point(&self, r: f64, w: f64) -> Option<DVector<f64>> {
        let dim = self.a.nrows();
        let m = DMatrix::identity(dim, dim) - &self.a;
        let rhs = &self.br * r + &self.bw * w;
        let z = m.lu().solve(&rhs)?;
        z.iter().all(|v| v.is_finite()).then_some(z)
    }
}
