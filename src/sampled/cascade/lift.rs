//! The two-rate loop as one system at the outer rate (lifting).
//!
//! The whole continuous plant is the inner plant and sensor followed by the
//! outer plant (driven continuously by the inner plant's output plus the
//! outer load) and the outer sensor (`combined_plant`). The inner loop is
//! closed at its own rate on that plant with the existing hold equivalent
//! and `ClosedLoop` (the load column there is the outer load). Over one
//! outer period of `N` inner ticks the inner reference is the outer command
//! held since the last update (or ramped, `[outer.timing] hold`), so the
//! state after `N` ticks is a linear function of the state, the previous
//! and the new outer command and the load (and, for a ramp of the previous
//! update still running at the outer sample, the command before the
//! previous one): a `HoldEquivalent` at the outer period whose "plant" is
//! the closed inner loop. Every existing piece (closing the outer loop, the exact
//! simulation with points between samples, the loop gain) then works on it
//! unchanged (`docs/figures.md`, "Cascaded loops").

use std::sync::Mutex;

use nalgebra::{DMatrix, DVector};

use crate::model::matrix::{ModelError, hold_integrals};
use crate::model::state_space::StateSpace;
use crate::model::transfer::{DiscreteTransfer, Transfer};
use crate::sampled::closed_loop::ClosedLoop;
use crate::sampled::hold::{Actuation, HoldEquivalent, IntersampleRow, plant_and_sensor};
use crate::spec::HoldKind;

/// The whole continuous plant of a cascade: input the inner actuator
/// command; `model.c` row 0 the outer plant output (what the outer figures
/// are taken on), row 1 the inner measured output (what the inner
/// controller samples).
#[derive(Debug, Clone)]
pub struct CombinedPlant {
    pub model: StateSpace,
    /// The outer load's input column (added at the outer plant's input).
    pub b_load: DVector<f64>,
    /// The outer measured output's row over the combined states.
    pub c_outer_measured: DVector<f64>,
    /// Feedthrough of the outer load into the outer plant output and into
    /// the outer measured output.
    pub d_load_output: f64,
    pub d_load_measured: f64,
}

/// Why a cascade cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LiftError {
    #[error("{0}")]
    Model(#[from] ModelError),
    #[error(
        "the outer measured output responds at once to the inner command (inner plant, outer plant and outer sensor all biproper): the outer sample would depend on the command of the same instant"
    )]
    OuterFeedthrough,
}

/// Build the whole continuous plant from the inner plant and sensor and the
/// outer plant and sensor.
pub fn combined_plant(
    inner_plant: &Transfer,
    inner_sensor: &Transfer,
    outer_plant: &Transfer,
    outer_sensor: &Transfer,
) -> Result<CombinedPlant, LiftError> {
    let m1 = plant_and_sensor(inner_plant, inner_sensor)?;
    let m2 = plant_and_sensor(outer_plant, outer_sensor)?;
    let (n1, n2) = (m1.order(), m2.order());
    let n = n1 + n2;
    let mut a = DMatrix::zeros(n, n);
    a.view_mut((0, 0), (n1, n1)).copy_from(&m1.a);
    a.view_mut((n1, n1), (n2, n2)).copy_from(&m2.a);
    // The outer plant is driven by the inner plant output y = c1_0 x1 + d1_0 u.
    a.view_mut((n1, 0), (n2, n1))
        .copy_from(&(&m2.b * m1.c.row(0)));
    let mut b = DVector::zeros(n);
    b.rows_mut(0, n1).copy_from(&m1.b);
    b.rows_mut(n1, n2).copy_from(&(&m2.b * m1.d[0]));
    let mut b_load = DVector::zeros(n);
    b_load.rows_mut(n1, n2).copy_from(&m2.b);
    let row = |k: usize| -> (DVector<f64>, f64) {
        let mut c = DVector::zeros(n);
        c.rows_mut(0, n1)
            .copy_from(&(m1.c.row(0).transpose() * m2.d[k]));
        c.rows_mut(n1, n2).copy_from(&m2.c.row(k).transpose());
        (c, m2.d[k] * m1.d[0])
    };
    let (c_out, d_out) = row(0);
    let (c_om, d_om) = row(1);
    if d_om != 0.0 {
        return Err(LiftError::OuterFeedthrough);
    }
    let mut c = DMatrix::zeros(2, n);
    c.row_mut(0).copy_from(&c_out.transpose());
    c.view_mut((1, 0), (1, n1)).copy_from(&m1.c.row(1));
    let d = DVector::from_vec(vec![d_out, m1.d[1]]);
    Ok(CombinedPlant {
        model: StateSpace { a, b, c, d },
        b_load,
        c_outer_measured: c_om,
        d_load_output: m2.d[0],
        d_load_measured: m2.d[1],
    })
}

/// The inner loop closed at its rate on the whole plant, its load column
/// being the outer load.
#[derive(Debug)]
pub struct InnerClosed {
    /// The inner hold equivalent of the whole plant (rows between samples:
    /// the outer plant output; load: the outer load).
    pub hold: HoldEquivalent,
    pub cl: ClosedLoop,
    /// The outer measured output's row over the inner loop's state.
    pub outer_measured: DVector<f64>,
    pub d_load_measured: f64,
    /// The inner closed loop's poles mapped to s (`ln z / T`, rad/s; the
    /// outer frequency grid is dense around them).
    pub poles_s: Vec<crate::model::poly::C64>,
    /// `A^j` of the inner closed loop, j = 0, 1, ..., as far as a lift has
    /// asked: each the product `A A^(j-1)`, the same sequence whichever
    /// ratio asks first, kept for the next ratio at this inner rate. An
    /// `InnerClosed` is not changed after `new` (the cache is of `cl.a`).
    powers: Mutex<Vec<DMatrix<f64>>>,
}

/// `integral_0^s e^{A r} dr b` at each row's offset `s`. The rows of a
/// period are usually evenly spaced (`s_j = j h`): then one exponential
/// gives `e^{A h}` and the step's integral, and the rest follow by
/// `G(s_{j+1}) = G(s_j) + e^{A s_j} G(h)` (the integral split at `s_j`);
/// otherwise one exponential per row.
fn load_integrals_at(
    a: &DMatrix<f64>,
    b: &DVector<f64>,
    rows: &[IntersampleRow],
) -> Result<Vec<DVector<f64>>, ModelError> {
    let n = a.nrows();
    let h = rows.get(1).map_or(0.0, |r| r.offset_s);
    let even = h > 0.0
        && rows
            .iter()
            .enumerate()
            .all(|(j, r)| (r.offset_s - j as f64 * h).abs() <= 1e-12 * h * (j as f64 + 1.0));
    if !even {
        return rows
            .iter()
            .map(|row| {
                if row.offset_s > 0.0 {
                    hold_integrals(a, b, row.offset_s).map(|(_, g)| g)
                } else {
                    Ok(DVector::zeros(n))
                }
            })
            .collect();
    }
    let (e_h, g_h) = hold_integrals(a, b, h)?;
    let mut out = Vec::with_capacity(rows.len());
    let mut g = DVector::zeros(n);
    let mut e_step = g_h;
    for _ in rows {
        out.push(g.clone());
        g += &e_step;
        e_step = &e_h * &e_step;
    }
    Ok(out)
}

fn pad(v: &DVector<f64>, dim: usize) -> DVector<f64> {
    let mut out = DVector::zeros(dim);
    out.rows_mut(0, v.len()).copy_from(v);
    out
}

/// The output rows a lifted loop carries (`InnerClosed::lifted`): each
/// row is the outer plant output at one point of the outer period, built
/// the same way whichever set is asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Rows {
    /// None: the loop's poles and loop gain need no rows.
    None,
    /// One a tick, at each inner sample instant (the search's short
    /// simulation reads only these).
    Samples,
    /// Every point between inner samples too (the time figures).
    All,
}

impl Rows {
    /// Rows a lifted loop carries per inner tick, when the inner loop has
    /// `points` output points a period (`HoldEquivalent::intersample`).
    pub fn per_tick(self, points: usize) -> usize {
        match self {
            Rows::None => 0,
            Rows::Samples => points.min(1),
            Rows::All => points,
        }
    }
}

impl InnerClosed {
    /// Close the inner loop around `controller` at `period_s` with the
    /// inner loop's actuation `act`, `points` output points per period.
    pub fn new(
        plant: &CombinedPlant,
        controller: &DiscreteTransfer,
        period_s: f64,
        act: &Actuation,
        points: usize,
    ) -> Result<InnerClosed, ModelError> {
        let mut hold = HoldEquivalent::with(&plant.model, period_s, act, points)?;
        let nx = hold.phi.nrows();
        let a = &plant.model.a;
        let c_out: DVector<f64> = plant.model.c.row(0).transpose();
        // The outer load is constant: over h seconds it moves the state by
        // integral_0^h e^{As} ds b_load, whatever the hold does.
        let (_, g_period) = hold_integrals(a, &plant.b_load, period_s)?;
        hold.gamma_w = pad(&g_period, nx);
        hold.dm_w = 0.0;
        hold.dy_w = plant.d_load_output;
        let loads = load_integrals_at(a, &plant.b_load, &hold.intersample)?;
        for (row, g) in hold.intersample.iter_mut().zip(loads) {
            row.cw = c_out.dot(&g) + plant.d_load_output;
        }
        if let Some(m) = hold.measure.as_mut() {
            // The inner measurement does not see the outer load.
            m.cw = 0.0;
        }
        let cl = ClosedLoop::new(&hold, controller)?;
        let dim = cl.a.nrows();
        let poles_s = cl
            .poles()?
            .iter()
            .filter(|z| z.norm() > 0.0)
            .map(|z| z.ln() / period_s)
            .collect();
        Ok(InnerClosed {
            poles_s,
            outer_measured: pad(&plant.c_outer_measured, dim),
            d_load_measured: plant.d_load_measured,
            hold,
            powers: Mutex::new(vec![DMatrix::identity(dim, dim)]),
            cl,
        })
    }

    /// Inner ticks from an outer update to the inner tick where its command
    /// becomes the reference: the first at or after `delay` outer periods.
    pub fn delay_ticks(ratio: usize, delay: f64) -> usize {
        let x = delay * ratio as f64;
        // A hair of rounding (0.3 * 10 = 3.0000000000000004) is not a tick.
        (x - 1e-9 * x.max(1.0)).ceil().max(0.0) as usize
    }

    /// The outer loop's plant over one outer period of `ratio` inner ticks,
    /// the outer command reaching the inner reference `ticks` inner ticks
    /// after its update and shaped there by the outer hold `hold`: a hold
    /// equivalent at the outer period, with the output rows `rows` asks
    /// for.
    ///
    /// The inner loop reads its reference only at its ticks, so a ramped
    /// outer hold is its ramp evaluated there: at the `j`-th inner tick
    /// after the command `v_k` takes effect the reference is `v_k + (v_k -
    /// v_{k-1}) j/N` (first-order) or `v_{k-1} + (v_k - v_{k-1}) j/N`
    /// (interpolating); when a ramp of the previous update is still running
    /// at the outer sample, `v_{k-2}` becomes a state (`docs/figures.md`,
    /// "Cascaded loops").
    pub fn lifted(&self, ratio: usize, ticks: usize, hold: HoldKind, rows: Rows) -> HoldEquivalent {
        let n = ratio;
        // Whole outer periods as unit delays of the outer command, the
        // rest inside the period (as `hold::split_delay`: s in (0, N] once
        // a whole period is delayed).
        let (whole, s) = if ticks <= n {
            (0, ticks)
        } else {
            let m = ticks.div_ceil(n) - 1;
            (m, ticks - m * n)
        };
        let cl = &self.cl;
        let dim = cl.a.nrows();
        let nx = self.hold.phi.nrows();
        let np = rows.per_tick(self.hold.intersample.len());
        // The reference at each inner tick of the period as coefficients of
        // (v_k, v_{k-1}, v_{k-2}): before tick s the previous update's ramp,
        // N - s + i ticks into it; from tick s on the new one's.
        let [p_now, q_now, p_prev, q_prev] = hold.pieces();
        let coefs: Vec<[f64; 3]> = (0..n)
            .map(|i| {
                let (p, q, j) = if i >= s {
                    (p_now, q_now, i - s)
                } else {
                    (p_prev, q_prev, i + n - s)
                };
                let x = j as f64 / n as f64;
                std::array::from_fn(|c| if q[c] == 0.0 { p[c] } else { p[c] + q[c] * x })
            })
            .collect();
        // v_{k-2} is a state only when some tick reads it.
        let k = usize::from(coefs.iter().any(|c| c[2] != 0.0));
        // `h c` with the zero-order hold's unit and zero coefficients taken
        // without a product, so that it sums exactly what it always summed.
        let part = |h: f64, c: f64| {
            if c == 0.0 {
                0.0
            } else if c == 1.0 {
                h
            } else {
                h * c
            }
        };
        let add_input = |p: &mut DVector<f64>, c: f64| {
            if c == 1.0 {
                *p += &cl.br;
            } else if c != 0.0 {
                *p += &cl.br * c;
            }
        };
        // A^0 .. A^n, each power computed once per inner rate.
        let mut powers = self.powers.lock().unwrap_or_else(|e| e.into_inner());
        while powers.len() <= n {
            let next = &cl.a * powers.last().expect("starts with A^0");
            powers.push(next);
        }
        let mut p1 = DVector::<f64>::zeros(dim);
        let mut p0 = DVector::<f64>::zeros(dim);
        let mut p2 = DVector::<f64>::zeros(if k == 1 { dim } else { 0 });
        let mut q = DVector::<f64>::zeros(dim);
        let widen = |v: DVector<f64>, last: f64| {
            if k == 0 {
                v
            } else {
                let mut out = DVector::zeros(dim + 1);
                out.rows_mut(0, dim).copy_from(&v);
                out[dim] = last;
                out
            }
        };
        // Each inner row as a function of (z_j, r_j, w).
        let inner_rows: Vec<(DVector<f64>, f64, f64, f64)> = self.hold.intersample[..np]
            .iter()
            .map(|row| {
                let mut g = &cl.ku * row.cu0;
                for i in 0..nx {
                    g[i] += row.ey[i];
                }
                g[nx] += row.cu1;
                (g, row.cu0 * cl.dur, row.cu0 * cl.duw + row.cw, row.offset_s)
            })
            .collect();
        let mut intersample = Vec::with_capacity(n * np);
        for (j, c) in coefs.iter().enumerate() {
            for (g, hr, hw, offset) in &inner_rows {
                let held2 = if k == 1 {
                    g.dot(&p2) + part(*hr, c[2])
                } else {
                    0.0
                };
                intersample.push(IntersampleRow {
                    offset_s: j as f64 * self.hold.period_s + offset,
                    ey: widen(powers[j].tr_mul(g), held2),
                    cu1: g.dot(&p1) + part(*hr, c[1]),
                    cu0: g.dot(&p0) + part(*hr, c[0]),
                    cw: g.dot(&q) + hw,
                });
            }
            p1 = &cl.a * &p1;
            p0 = &cl.a * &p0;
            q = &cl.a * &q + &cl.bw;
            if k == 1 {
                p2 = &cl.a * &p2;
                add_input(&mut p2, c[2]);
            }
            add_input(&mut p1, c[1]);
            add_input(&mut p0, c[0]);
        }
        let m = &powers[n];
        let phi = if k == 0 {
            m.clone()
        } else {
            let mut phi = DMatrix::zeros(dim + 1, dim + 1);
            phi.view_mut((0, 0), (dim, dim)).copy_from(m);
            phi.view_mut((0, dim), (dim, 1)).copy_from(&p2);
            phi
        };
        let (cy, dy, dy_w) = match intersample.first() {
            Some(r) => (r.ey.clone(), r.cu0 + r.cu1, r.cw),
            None => (DVector::zeros(dim + k), 0.0, self.hold.dy_w),
        };
        let lifted = HoldEquivalent {
            period_s: n as f64 * self.hold.period_s,
            hold,
            delay_fraction: s as f64 / n as f64,
            delay_periods: 0,
            hold_states: k,
            measure_periods: 0,
            sensor_delay_s: 0.0,
            phi,
            gamma0: widen(p0, 0.0),
            // The next period's v_{k-2} is this one's v_{k-1}.
            gamma1: widen(p1, 1.0),
            gamma_w: widen(q, 0.0),
            cm: widen(self.outer_measured.clone(), 0.0),
            dm: 0.0,
            dm_w: self.d_load_measured,
            cy,
            dy,
            dy_w,
            intersample,
            switch_index: s * np,
            measure: None,
            pulse_core: None,
        };
        if whole > 0 {
            lifted.delayed_by(whole)
        } else {
            lifted
        }
    }
}
