//! The continuous loops a designer reasons with: the design itself
//! (C(s) P(s) H(s), no sampling), and the design with the hold and
//! computation delay replaced by a rational approximation of
//! `e^{-s (T/2 + tau)}`. Their figures are set beside the exact sampled
//! loop's so the user sees how far each prediction is off.

use nalgebra::{DMatrix, DVector};
use serde::Serialize;

use crate::model::matrix::{ModelError, eigenvalues, hold_integrals};
use crate::model::poly::{C64, Poly};
use crate::model::state_space::StateSpace;
use crate::model::transfer::Transfer;
use crate::sampled::closed_loop::{ClosedLoop, Stability};
use crate::sampled::hold::{HoldEquivalent, IntersampleRow};
use crate::sampled::time_response::{
    DisturbanceFigures, StepFigures, TimeOptions, TracePoint, continuous_metrics,
    sampled_figures_around,
};
use crate::spec::HoldKind;

/// The continuous figures' horizon and grid step, s: the slowest pole's
/// decay to `DECAY_TARGET` (twice over), and a step of 1/4000 of it or
/// 1/32 of the fastest oscillatory mode's period, whichever is shorter.
fn grid_step(poles: &[C64]) -> (f64, f64) {
    let slowest = poles
        .iter()
        .map(|p| -p.re)
        .fold(f64::INFINITY, f64::min)
        .max(1e-300);
    let horizon = -crate::sampled::time_response::DECAY_TARGET.ln() / slowest * 2.0;
    let osc = poles
        .iter()
        .filter(|p| p.im.abs() > -p.re)
        .map(|p| p.im.abs())
        .fold(0.0, f64::max);
    let mut h = horizon / 4000.0;
    if osc > 0.0 {
        h = h.min(std::f64::consts::PI / (16.0 * osc));
    }
    (horizon, h)
}

/// How far the fastest mode may decay over one step of the continuous
/// figures' finer grid: by at most `e^4` (about 55 times). A mode that
/// decays by far more within a step is invisible on the grid, and its
/// eigenvalue of `e^{A h}` (down to 1e-85 and below) crowds against the
/// held command's zero in the sampled form: the modal bound then fails
/// and the figures are walked, step by step (`grid_steps`).
const RESOLVED_DECAY: f64 = 4.0;

/// The grid steps the continuous figures are tried on, s, finest first:
/// the step over which the fastest mode decays by `e^RESOLVED_DECAY`,
/// when it is shorter than `grid_step`'s, then `grid_step`'s own. The
/// finer grid also resolves that mode's transient (a fast actuator's
/// command kick) which the coarser one steps over.
pub fn grid_steps(poles: &[C64]) -> Vec<f64> {
    let (_, h) = grid_step(poles);
    let fastest = poles.iter().map(|p| -p.re).fold(0.0, f64::max);
    let fine = RESOLVED_DECAY / fastest;
    if fine > 0.0 && fine < h {
        vec![fine, h]
    } else {
        vec![h]
    }
}

/// A rational stand-in for the delay `e^{-s theta}` of hold plus
/// computation, `theta = T/2 + tau`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub enum HoldApprox {
    /// First-order lag 1 / (1 + s theta).
    #[serde(rename = "lag")]
    Lag,
    /// [1/1] Pade: (1 - s theta/2) / (1 + s theta/2).
    #[serde(rename = "pade-1-1")]
    Pade11,
    /// [2/2] Pade: (1 - s theta/2 + (s theta)^2/12) / (1 + s theta/2 + (s theta)^2/12).
    #[serde(rename = "pade-2-2")]
    Pade22,
    /// The hold's own transfer function (`HoldKind::rational`, e.g.
    /// (1 - e^{-sT})/(sT) for zero-order) times the computation delay,
    /// every exponential by its [2/2] Pade approximant.
    #[serde(rename = "hold-pade-2-2")]
    HoldPade22,
}

impl HoldApprox {
    pub const ALL: [HoldApprox; 4] = [
        HoldApprox::Lag,
        HoldApprox::Pade11,
        HoldApprox::Pade22,
        HoldApprox::HoldPade22,
    ];

    /// Name used in output keys and columns.
    pub fn name(self) -> &'static str {
        match self {
            HoldApprox::Lag => "lag",
            HoldApprox::Pade11 => "pade-1-1",
            HoldApprox::Pade22 => "pade-2-2",
            HoldApprox::HoldPade22 => "hold-pade-2-2",
        }
    }

    /// The stand-in for hold `hold` at period `period_s` followed by a
    /// delay of `delay_s`: the hold's own rational approximation, or a
    /// delay approximation of `theta = hold.equivalent_delay_s(T) +
    /// delay_s` (None when theta is 0: nothing to approximate).
    pub fn actuator(self, hold: HoldKind, period_s: f64, delay_s: f64) -> Option<Transfer> {
        match self {
            HoldApprox::HoldPade22 => Some(hold.rational(period_s, delay_s, 2)),
            k => {
                let theta = hold.equivalent_delay_s(period_s) + delay_s;
                (theta > 0.0).then(|| k.transfer(theta))
            }
        }
    }

    /// The approximation for a delay of `theta` seconds (`HoldPade22`:
    /// the zero-order hold's own, whose delay is `theta`, i.e. T = 2 theta).
    pub fn transfer(self, theta: f64) -> Transfer {
        let p = |d: &[f64]| Poly::from_descending(d);
        match self {
            HoldApprox::HoldPade22 => HoldKind::ZeroOrder.rational(2.0 * theta, 0.0, 2),
            HoldApprox::Lag => Transfer::new(p(&[1.0]), p(&[theta, 1.0])),
            HoldApprox::Pade11 => Transfer::new(p(&[-theta / 2.0, 1.0]), p(&[theta / 2.0, 1.0])),
            HoldApprox::Pade22 => {
                let q = theta * theta / 12.0;
                Transfer::new(p(&[q, -theta / 2.0, 1.0]), p(&[q, theta / 2.0, 1.0]))
            }
        }
    }
}

/// A continuous closed loop: reference `r` and load disturbance `w` in,
/// plant output `y` and controller command `u` out.
#[derive(Debug, Clone)]
pub struct ContinuousLoop {
    pub a: DMatrix<f64>,
    pub br: DVector<f64>,
    pub bw: DVector<f64>,
    pub cy: DVector<f64>,
    pub dyr: f64,
    pub dyw: f64,
    pub cu: DVector<f64>,
    pub dur: f64,
    pub duw: f64,
    /// Loop gain pieces, for the frequency figures (rational part).
    pub loop_gain: Transfer,
    /// Pure delay around the loop, s: the loop gain is
    /// `loop_gain(jw) e^{-jw loop_delay_s}` exactly.
    pub loop_delay_s: f64,
}

impl ContinuousLoop {
    /// Close `controller` around `plant_model` (from `hold::plant_and_sensor`),
    /// with `actuator` (a hold approximation) between command and plant.
    /// `delays` adds pure delays: their total (s) to the loop gain exactly,
    /// and to the simulated loop as the given rational stand-ins (the
    /// plant's after the actuator; the measurement's must already be in
    /// `plant_model`).
    pub fn new(
        plant_model: &StateSpace,
        plant: &Transfer,
        sensor: &Transfer,
        controller: &Transfer,
        actuator: Option<&Transfer>,
        delays: Option<(f64, &Transfer)>,
    ) -> Result<ContinuousLoop, ModelError> {
        let c = StateSpace::from_transfer(controller)?;
        let simulated = match (actuator, delays) {
            (Some(a), Some((_, d))) => Some(a.cascade(d)),
            (Some(a), None) => Some(a.clone()),
            (None, Some((_, d))) => Some(d.clone()),
            (None, None) => None,
        };
        let act = match &simulated {
            Some(a) => StateSpace::from_transfer(a)?,
            None => StateSpace::from_transfer(&Transfer::gain(1.0))?,
        };
        let p = plant_model;
        let (np, na, nc) = (p.order(), act.order(), c.order());
        let dim = np + na + nc;
        let (dc, da) = (c.d[0], act.d[0]);
        let (dy, dm) = (p.d[0], p.d[1]);
        let cm: DVector<f64> = p.c.row(1).transpose();
        let cy: DVector<f64> = p.c.row(0).transpose();
        // u = cc xc + dc (r - cm xp - dm (v + w)), v = ca xa + da u.
        // Solve the algebraic loop: u (1 + dc dm da) = ...
        let den = 1.0 + dc * dm * da;
        if den.abs() < 1e-12 {
            return Err(ModelError::NonFinite);
        }
        let k = 1.0 / den;
        let mut cu = DVector::zeros(dim);
        cu.rows_mut(0, np).copy_from(&(&cm * (-dc * k)));
        if na > 0 {
            cu.rows_mut(np, na)
                .copy_from(&(act.c.row(0).transpose() * (-dc * dm * k)));
        }
        if nc > 0 {
            cu.rows_mut(np + na, nc)
                .copy_from(&(c.c.row(0).transpose() * k));
        }
        let dur = dc * k;
        let duw = -dc * dm * k;
        // v = ca xa + da u
        let mut cv = &cu * da;
        if na > 0 {
            let mut part = cv.rows_mut(np, na);
            part += act.c.row(0).transpose();
        }
        let (dvr, dvw) = (da * dur, da * duw);
        // e = r - cm xp - dm (v + w)
        let mut ce = -&cv * dm;
        {
            let mut part = ce.rows_mut(0, np);
            part -= &cm;
        }
        let (der, dew) = (1.0 - dm * dvr, -dm * (dvw + 1.0));

        let mut a = DMatrix::zeros(dim, dim);
        let mut br = DVector::zeros(dim);
        let mut bw = DVector::zeros(dim);
        // xp' = Ap xp + Bp (v + w)
        a.view_mut((0, 0), (np, np)).copy_from(&p.a);
        {
            let mut rows = a.view_mut((0, 0), (np, dim));
            rows += &p.b * cv.transpose();
        }
        br.rows_mut(0, np).copy_from(&(&p.b * dvr));
        bw.rows_mut(0, np).copy_from(&(&p.b * (dvw + 1.0)));
        // xa' = Aa xa + Ba u
        if na > 0 {
            a.view_mut((np, np), (na, na)).copy_from(&act.a);
            let mut rows = a.view_mut((np, 0), (na, dim));
            rows += &act.b * cu.transpose();
            br.rows_mut(np, na).copy_from(&(&act.b * dur));
            bw.rows_mut(np, na).copy_from(&(&act.b * duw));
        }
        // xc' = Ac xc + Bc e
        if nc > 0 {
            a.view_mut((np + na, np + na), (nc, nc)).copy_from(&c.a);
            let mut rows = a.view_mut((np + na, 0), (nc, dim));
            rows += &c.b * ce.transpose();
            br.rows_mut(np + na, nc).copy_from(&(&c.b * der));
            bw.rows_mut(np + na, nc).copy_from(&(&c.b * dew));
        }
        // y = cy xp + dy (v + w)
        let mut cyf = &cv * dy;
        {
            let mut part = cyf.rows_mut(0, np);
            part += &cy;
        }
        let mut loop_gain = plant.cascade(sensor).cascade(controller);
        if let Some(a) = actuator {
            loop_gain = loop_gain.cascade(a);
        }
        Ok(ContinuousLoop {
            a,
            br,
            bw,
            cy: cyf,
            dyr: dy * dvr,
            dyw: dy * (dvw + 1.0),
            cu,
            dur,
            duw,
            loop_gain,
            loop_delay_s: delays.map_or(0.0, |d| d.0),
        })
    }

    /// Closed-loop poles, rad/s.
    pub fn poles(&self) -> Result<Vec<C64>, ModelError> {
        eigenvalues(&self.a)
    }

    /// Step and disturbance figures, exact (matrix-exponential steps) on a
    /// grid fine enough for the fastest oscillatory mode (`grid_step`),
    /// found by jumping through the grid (`jumped_time_figures`: no cap in
    /// steps, work that does not grow with the horizon), or by the walk
    /// (`walked_time_figures`) when the loop does not fit that route.
    /// First on the finer grid that resolves the fastest mode
    /// (`grid_steps`), kept when the jumps alone decide every figure there
    /// (no walk is tried on it); else on `grid_step`'s.
    pub fn time_figures(
        &self,
        poles: &[C64],
        opts: &TimeOptions,
    ) -> Result<(StepFigures, DisturbanceFigures), ModelError> {
        if let Some(figs) = self.static_figures(opts) {
            return Ok(figs);
        }
        let steps = grid_steps(poles);
        if let [fine, _] = steps[..] {
            let jumps_only = TimeOptions {
                walk_budget: 0,
                ..*opts
            };
            if let Some(figs) = self.jumped_time_figures(fine, &jumps_only)?
                && figs.0.undecided.is_empty()
                && figs.1.undecided.is_empty()
            {
                return Ok(figs);
            }
        }
        let h = grid_step(poles).1;
        if let Some(figs) = self.jumped_time_figures(h, opts)? {
            return Ok(figs);
        }
        self.walked_time_figures(poles, h, opts)
    }

    /// A loop of pure gains (no state): its outputs jump to their final
    /// values at t = 0 and stay there, so the figures are those of that one
    /// point (no overshoot, settled and risen at 0). None for a loop with
    /// states.
    fn static_figures(&self, opts: &TimeOptions) -> Option<(StepFigures, DisturbanceFigures)> {
        if self.a.nrows() > 0 {
            return None;
        }
        let step = (self.dyr, self.dur);
        Some(continuous_metrics(
            self.dyr,
            self.dyw,
            0.0,
            0,
            false,
            opts.band,
            |_| step,
            &[self.dyw],
        ))
    }

    /// The same figures by walking every step of the grid of step `h`
    /// seconds over `grid_step`'s horizon (capped at `opts.max_steps`;
    /// figures past the cap are undecided): the reference the jumps are
    /// checked against, and the route for a plant with feedthrough behind
    /// a hold approximation.
    pub fn walked_time_figures(
        &self,
        poles: &[C64],
        h: f64,
        opts: &TimeOptions,
    ) -> Result<(StepFigures, DisturbanceFigures), ModelError> {
        if let Some(figs) = self.static_figures(opts) {
            return Ok(figs);
        }
        let (horizon, _) = grid_step(poles);
        let want = (horizon / h).ceil();
        let capped = want > opts.max_steps as f64;
        let steps = want.min(opts.max_steps as f64) as usize;
        let (e, gr) = hold_integrals(&self.a, &self.br, h)?;
        let (_, gw) = hold_integrals(&self.a, &self.bw, h)?;
        let dim = self.a.nrows();
        let fixed = |r: f64, w: f64| -> Result<DVector<f64>, ModelError> {
            // A loop of pure gains has no state (nalgebra's LU of a 0 x 0
            // matrix panics).
            if dim == 0 {
                return Ok(DVector::zeros(0));
            }
            let rhs = -(&self.br * r + &self.bw * w);
            self.a.clone().lu().solve(&rhs).ok_or(ModelError::NonFinite)
        };
        let xr = fixed(1.0, 0.0)?;
        let xw = fixed(0.0, 1.0)?;
        let y_final = self.cy.dot(&xr) + self.dyr;
        let yd_final = self.cy.dot(&xw) + self.dyw;
        let mut x = DVector::zeros(dim);
        let mut step = Vec::with_capacity(steps + 1);
        for _ in 0..=steps {
            step.push((self.cy.dot(&x) + self.dyr, self.cu.dot(&x) + self.dur));
            x = &e * &x + &gr;
        }
        let mut x = DVector::zeros(dim);
        let mut dist = Vec::with_capacity(steps + 1);
        for _ in 0..=steps {
            dist.push(self.cy.dot(&x) + self.dyw);
            x = &e * &x + &gw;
        }
        Ok(continuous_metrics(
            y_final,
            yd_final,
            h,
            steps,
            capped,
            opts.band,
            |i| step[i],
            &dist,
        ))
    }

    /// The time figures on the grid of step `h` seconds with work that does
    /// not grow with the horizon: the loop sampled exactly every `h`
    /// (`x_{k+1} = e^{A h} x_k + G(h) (br r + bw w)`, exact for the step
    /// inputs) is written in the sampled loop's form, one output point per
    /// step and a state `z[n]` holding the previous command (its row reads
    /// `u_k`, a pole at 0 that touches no output), and its figures come from
    /// `time_response::sampled_figures` (stretch jumps with proved bounds,
    /// horizon from the slowest pole, no cap in steps; a figure the bound
    /// at the horizon cannot settle is undecided). `None` when the output's
    /// feedthrough does not fit that form (`y = cy x + c0 (u + w)`), or the
    /// form has no steady state: the caller walks instead.
    pub fn jumped_time_figures(
        &self,
        h: f64,
        opts: &TimeOptions,
    ) -> Result<Option<(StepFigures, DisturbanceFigures)>, ModelError> {
        // y = cy x + dyr r + dyw w must read ey x + c0 (u + w), u the command.
        let c0 = if self.dyr == 0.0 && self.dyw == 0.0 {
            0.0
        } else if self.dur != 0.0 {
            self.dyr / self.dur
        } else {
            return Ok(None);
        };
        let scale = self.dyr.abs().max(self.dyw.abs());
        if (self.dyw - c0 * (self.duw + 1.0)).abs() > 1e-12 * scale {
            return Ok(None);
        }
        let n = self.a.nrows();
        let (e, gr) = hold_integrals(&self.a, &self.br, h)?;
        let (_, gw) = hold_integrals(&self.a, &self.bw, h)?;
        let mut a = DMatrix::zeros(n + 1, n + 1);
        a.view_mut((0, 0), (n, n)).copy_from(&e);
        for j in 0..n {
            a[(n, j)] = self.cu[j];
        }
        let stack = |v: &DVector<f64>, last: f64| {
            let mut out = DVector::zeros(n + 1);
            out.rows_mut(0, n).copy_from(v);
            out[n] = last;
            out
        };
        let mut ku = DVector::zeros(n + 1);
        ku.rows_mut(0, n).copy_from(&self.cu);
        let cl = ClosedLoop {
            a,
            br: stack(&gr, self.dur),
            bw: stack(&gw, self.duw),
            ku,
            dur: self.dur,
            duw: self.duw,
            plant_states: n,
        };
        let ey = &self.cy - &self.cu * c0;
        let hold = HoldEquivalent {
            period_s: h,
            hold: HoldKind::ZeroOrder,
            delay_fraction: 0.0,
            delay_periods: 0,
            hold_states: 0,
            measure_periods: 0,
            sensor_delay_s: 0.0,
            phi: e,
            gamma0: DVector::zeros(n),
            gamma1: DVector::zeros(n),
            gamma_w: DVector::zeros(n),
            cm: DVector::zeros(n),
            dm: 0.0,
            dm_w: 0.0,
            cy: ey.clone(),
            dy: c0,
            dy_w: c0,
            measure: None,
            pulse_core: None,
            intersample: vec![IntersampleRow {
                offset_s: 0.0,
                ey,
                cu1: 0.0,
                cu0: c0,
                cw: c0,
            }],
            switch_index: 0,
        };
        let poles = cl.poles()?;
        if ClosedLoop::stability(&poles) != Stability::Stable {
            return Ok(None);
        }
        // Fixed points from the continuous matrix (`e^{A h}` is close to I
        // on a fine grid: solving with `I - e^{A h}` would lose digits).
        let fixed = |b: &DVector<f64>, du: f64| -> Option<DVector<f64>> {
            let x = self.a.clone().lu().solve(&(-b))?;
            let u = self.cu.dot(&x) + du;
            Some(stack(&x, u))
        };
        let (Some(zr), Some(zw)) = (fixed(&self.br, self.dur), fixed(&self.bw, self.duw)) else {
            return Ok(None);
        };
        Ok(Some(sampled_figures_around(
            &cl, &hold, &poles, opts, zr, zw,
        )))
    }

    /// Exact step (`r = 1`) and load-disturbance (`w = 1`) traces of the
    /// plant output `y` and command `u` on `[0, t_end_s]`, `steps` equal
    /// intervals, by matrix-exponential steps (exact for these piecewise
    /// constant inputs). Every point is flagged `sample: false`: a
    /// continuous loop has no sampling instants.
    pub fn traces(
        &self,
        t_end_s: f64,
        steps: usize,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), ModelError> {
        if !(t_end_s > 0.0 && t_end_s.is_finite()) || steps == 0 {
            return Err(ModelError::NonFinite);
        }
        let h = t_end_s / steps as f64;
        let run = |b: &DVector<f64>, dy: f64, du: f64| -> Result<Vec<TracePoint>, ModelError> {
            let (e, g) = hold_integrals(&self.a, b, h)?;
            let mut x = DVector::zeros(self.a.nrows());
            let mut out = Vec::with_capacity(steps + 1);
            for i in 0..=steps {
                out.push(TracePoint {
                    t: i as f64 * h,
                    y: self.cy.dot(&x) + dy,
                    u: self.cu.dot(&x) + du,
                    sample: false,
                });
                x = &e * &x + &g;
            }
            Ok(out)
        };
        Ok((
            run(&self.br, self.dyr, self.dur)?,
            run(&self.bw, self.dyw, self.duw)?,
        ))
    }

    /// Loop gain at `w` rad/s.
    pub fn loop_at(&self, w: f64) -> C64 {
        let l = self.loop_gain.eval(C64::new(0.0, w));
        if self.loop_delay_s > 0.0 {
            l * C64::from_polar(1.0, -w * self.loop_delay_s)
        } else {
            l
        }
    }
}
