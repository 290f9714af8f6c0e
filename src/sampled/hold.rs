//! The exact discrete equivalent of hold + computation delay + plant +
//! sensor, and the matrices that give the plant output between samples.
//!
//! A computation delay of `d` periods, any `d >= 0`, is split as
//! `d = m + f` with `m` whole periods and `f` in `[0, 1]` (`m = 0` for
//! `d <= 1`, else `f` in `(0, 1]`, so `d = 1` stays the plain one-period
//! case). The applied command is `v_k = u_{k-m}`: the whole periods are
//! unit delays of the command, and over one period the actuator holds
//! `v_{k-1}` on `[kT, kT + fT)` and `v_k` on `[kT + fT, (k+1)T)`, the
//! fractional-delay zero-order-hold equivalent of Franklin, Powell and
//! Workman. Every state and output inside the period is then an exact linear
//! function of the state, `u_{k-1}`, `u_k` and `w`, with coefficients from
//! matrix exponentials (Van Loan's augmented form; no inverse of `A`).
//! With `m >= 1` the last `m` commands `u_{k-m-1} .. u_{k-2}` are extra
//! states after the plant's (see `HoldEquivalent` and DEVELOPERS.md).

use crate::spec::HoldKind;
use nalgebra::{DMatrix, DVector};

use crate::model::matrix::RampIntegrals;
use crate::model::matrix::{ModelError, hold_integrals, ramp_integrals};
use crate::model::poly::{C64, Poly};
use crate::model::state_space::StateSpace;
use crate::model::transfer::{DiscreteTransfer, Transfer};

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

impl HoldKind {
    /// The signal over the update interval that starts at `t_{k-i}` is
    /// `P + Q (t - t_{k-i}) / T`; returns `(P, Q)` for `i = 0` and `i = 1`
    /// as coefficients of `(v_k, v_{k-1}, v_{k-2})`, the commands applied
    /// at the last three updates.
    pub(crate) fn pieces(self) -> [[f64; 3]; 4] {
        let (p_now, q_now, p_prev, q_prev) = match self {
            HoldKind::ZeroOrder => ([1.0, 0.0, 0.0], [0.0; 3], [0.0, 1.0, 0.0], [0.0; 3]),
            HoldKind::FirstOrder => (
                [1.0, 0.0, 0.0],
                [1.0, -1.0, 0.0],
                [0.0, 1.0, 0.0],
                [0.0, 1.0, -1.0],
            ),
            HoldKind::Interpolating => (
                [0.0, 1.0, 0.0],
                [1.0, -1.0, 0.0],
                [0.0, 0.0, 1.0],
                [0.0, 1.0, -1.0],
            ),
        };
        [p_now, q_now, p_prev, q_prev]
    }

    /// Low-frequency delay of the hold alone, s: the phase of its transfer
    /// function (below) is `-w theta + O(w^3)`. Zero-order `T/2`,
    /// first-order 0 (the extrapolation cancels it), interpolating `T`.
    pub fn equivalent_delay_s(self, period_s: f64) -> f64 {
        match self {
            HoldKind::ZeroOrder => period_s / 2.0,
            HoldKind::FirstOrder => 0.0,
            HoldKind::Interpolating => period_s,
        }
    }

    /// The hold's frequency response per unit of sampled command (the
    /// transform of its response to one unit command, divided by T),
    /// without the delay: zero-order `(1 - e^{-sT})/(sT)`, first-order
    /// `(1 + sT) ((1 - e^{-sT})/(sT))^2`, interpolating
    /// `((1 - e^{-sT})/(sT))^2` (closed forms, see `docs/figures.md`, "Hold kinds").
    pub fn response(self, period_s: f64, w_rad_s: f64) -> C64 {
        let x = C64::new(0.0, w_rad_s * period_s);
        let zoh = if x.norm() < 1e-8 {
            C64::new(1.0, 0.0) - x / 2.0
        } else {
            (C64::new(1.0, 0.0) - (-x).exp()) / x
        };
        match self {
            HoldKind::ZeroOrder => zoh,
            HoldKind::FirstOrder => (C64::new(1.0, 0.0) + x) * zoh * zoh,
            HoldKind::Interpolating => zoh * zoh,
        }
    }

    /// The hold's own rational approximation: its transfer function
    /// (`response`) times `e^{-s delay_s}`, every exponential replaced by
    /// its Pade `[order/order]` approximant.
    pub fn rational(self, period_s: f64, delay_s: f64, order: usize) -> Transfer {
        // (1 - e^{-x})/x with e^{-x} = N(x)/D(x), N(x) = D(-x):
        // (D - N)/(x D), where D - N holds only odd powers.
        let (n, d) = pade_delay(period_s, order);
        let zoh = Transfer::new(d.sub(&n).shift_down(1).scale(1.0 / period_s), d);
        let shape = match self {
            HoldKind::ZeroOrder => zoh,
            HoldKind::FirstOrder => {
                Transfer::new(Poly::from_descending(&[period_s, 1.0]), Poly::one())
                    .cascade(&zoh)
                    .cascade(&zoh)
            }
            HoldKind::Interpolating => zoh.cascade(&zoh),
        };
        if delay_s > 0.0 {
            let (n, d) = pade_delay(delay_s, order);
            shape.cascade(&Transfer::new(n, d))
        } else {
            shape
        }
    }
}

/// The Pade `[order/order]` approximant of `e^{-s delay_s}` as
/// `(numerator, denominator)` in s: `D(s) = sum_k c_k (s L)^k`,
/// `c_k = (2n - k)! n! / ((2n)! k! (n - k)!)`, `N(s) = D(-s)`.
pub fn pade_delay(delay_s: f64, order: usize) -> (Poly, Poly) {
    let n = order;
    let mut c = 1.0;
    let mut den = vec![1.0];
    let mut num = vec![1.0];
    for k in 1..=n {
        // c_k / c_{k-1} = (n - k + 1) / (k (2n - k + 1)).
        c *= (n - k + 1) as f64 / (k * (2 * n - k + 1)) as f64;
        let v = c * delay_s.powi(k as i32);
        den.push(v);
        num.push(if k % 2 == 1 { -v } else { v });
    }
    (Poly::new(num), Poly::new(den))
}

/// Most whole periods of delay (the actuator's and the measurement's
/// together) the exact loop is built with. Each is one more state of the
/// loop, and its figures cost about the cube of the states: a loop with
/// 240 periods of delay took about 0.4 s a point, one with 800 a minute,
/// and 8 000 asked for 29 GB (the dryer demo at 30, 100 and 1 000 Hz). A
/// point past it is refused with its reason (`docs/figures.md`).
pub const MAX_DELAY_STATES: usize = 256;

/// What lies between the controller's output and the plant, and between
/// the sensor and the sampler, at one grid point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Actuation {
    pub hold: HoldKind,
    /// Delay from the sample to the update, in periods (computation delay
    /// plus the plant's transport delay), any finite value >= 0.
    pub delay_periods: f64,
    /// Transport delay of the measurement (the sensor's `delay_s`), s.
    pub sensor_delay_s: f64,
}

/// One sampled point inside a period: the plant output there is
/// `ey . x_k + cu1 u_{k-1} + cu0 u_k + cw w`, a linear function of the
/// loop state (extra states of the hold and the delays are in `x_k`).
#[derive(Debug, Clone)]
pub struct IntersampleRow {
    /// Time from the start of the period, s.
    pub offset_s: f64,
    pub ey: DVector<f64>,
    pub cu1: f64,
    pub cu0: f64,
    pub cw: f64,
}

/// Exact hold + delay equivalent at one period and delay.
///
/// `x_{k+1} = Phi x_k + Gamma0 u_k + Gamma1 u_{k-1} + Gamma_w w` for a load
/// disturbance `w` held constant; the controller samples
/// `y_k = c_m x_k + d_m u_{k-1} + d_mw w` (the sample is taken just before
/// the new command is applied). The state `x` is the plant's, followed by
/// what the hold and the delays keep: `u_{k-2}` for a ramping hold that
/// needs it (`hold_states`), the commands `u_{k-m-1} .. u_{k-2}` still on
/// their way with whole periods of delay (`delay_periods = m >= 1`, then
/// `Gamma0 = 0` and `d_m = 0`), and the measurements still on their way
/// with a sensor transport delay (`measure_periods`, then `c_m` picks the
/// oldest and `d_m = d_mw = 0`).
#[derive(Debug, Clone)]
pub struct HoldEquivalent {
    pub period_s: f64,
    pub hold: HoldKind,
    /// The fraction `f` of the actuator delay, 0..=1 (the delay is
    /// `delay_periods + delay_fraction` periods).
    pub delay_fraction: f64,
    /// Whole periods `m` of the actuator delay, held as unit delays of
    /// the command.
    pub delay_periods: usize,
    /// States the hold adds (1 when a ramp needs the command before the
    /// previous one, else 0).
    pub hold_states: usize,
    /// Measurement pipeline length (sensor transport delay), periods.
    pub measure_periods: usize,
    /// The sensor transport delay it was built for, s.
    pub sensor_delay_s: f64,
    pub phi: DMatrix<f64>,
    pub gamma0: DVector<f64>,
    pub gamma1: DVector<f64>,
    /// The load disturbance's column.
    pub gamma_w: DVector<f64>,
    /// Measured-output row and the feedthrough of `u_{k-1}`.
    pub cm: DVector<f64>,
    pub dm: f64,
    /// Feedthrough of the load disturbance into the sample.
    pub dm_w: f64,
    /// Plant-output row and feedthrough at the sample instant: `cy . x +
    /// dy u + dy_w w` is the plant output when every command equals `u`
    /// (the steady state).
    pub cy: DVector<f64>,
    pub dy: f64,
    pub dy_w: f64,
    /// Evenly spaced points inside a period (the first at the sample).
    pub intersample: Vec<IntersampleRow>,
    /// Index of the first point at or after the update: points before it
    /// still belong to the previous update interval.
    pub switch_index: usize,
    /// The measured output at `measure_offset` into the period, for the
    /// sensor transport delay (None without one, or when it falls on the
    /// sample instant).
    pub(crate) measure: Option<IntersampleRow>,
    /// The pulse transfer without its whole periods of delay, when
    /// `with` built it with some (see [`Pulse`]); None: `augmented` is it.
    /// Every other constructor sets None, so a model built from this one
    /// (`delayed_by`, `measured_late`, a lift) never inherits it.
    pub(crate) pulse_core: Option<Pulse>,
}

/// The pulse transfer from `u_k` to the measured sample with its whole
/// periods of delay (the actuator's and the measurement's) taken out:
/// `G(z) = z^-periods (C (zI - A)^-1 B + D)`. Each period of delay is a
/// state of the loop, but not of this model, so a response costs the same
/// however many periods the delays span.
#[derive(Debug, Clone)]
pub struct Pulse {
    pub model: StateSpace,
    pub periods: usize,
}

impl Pulse {
    /// `G(z)` at a point `z` of the unit circle.
    pub fn response(&self, z: C64) -> C64 {
        let g = self.model.response_at(z, 0);
        match self.periods {
            0 => g,
            p => g * z.conj().powi(p.min(i32::MAX as usize) as i32),
        }
    }
}

/// Coefficients of `(v_k, v_{k-1}, v_{k-2})`.
type Coef = [f64; 3];

/// `sum_i x_i c_i` over the terms with `c_i != 0`, a unit coefficient
/// taken without a product (so a zero-order hold sums exactly the terms it
/// always summed).
fn lin(terms: &[(f64, f64)]) -> f64 {
    let mut out: Option<f64> = None;
    for &(x, c) in terms {
        if c == 0.0 {
            continue;
        }
        let v = if c == 1.0 { x } else { x * c };
        out = Some(match out {
            None => v,
            Some(o) => o + v,
        });
    }
    out.unwrap_or(0.0)
}

/// `sum_i v_i c_i` for vectors, as `lin`.
fn lin_vec(n: usize, terms: &[(&DVector<f64>, f64)]) -> DVector<f64> {
    let mut out: Option<DVector<f64>> = None;
    for &(v, c) in terms {
        if c == 0.0 {
            continue;
        }
        let t = if c == 1.0 { v.clone() } else { v * c };
        out = Some(match out {
            None => t,
            Some(o) => o + t,
        });
    }
    out.unwrap_or_else(|| DVector::zeros(n))
}

/// A row over `(x, v_k, v_{k-1}, v_{k-2}, w)` before the hold's state is
/// placed.
struct Row3 {
    offset_s: f64,
    ey: DVector<f64>,
    c: Coef,
    cw: f64,
}

/// The signal over one period: on `[0, tau)` it starts at `a1` with slope
/// `b1` (per second), on `[tau, T)` (local time from the update) at `a2`
/// with slope `b2`, each a combination of `(v_k, v_{k-1}, v_{k-2})`.
struct Segments {
    a1: Coef,
    b1: Coef,
    a2: Coef,
    b2: Coef,
}

impl Segments {
    fn new(kind: HoldKind, period_s: f64, f: f64) -> Segments {
        let [p_now, q_now, p_prev, q_prev] = kind.pieces();
        // At the sample instant the previous interval has run (1 - f) T.
        let a1 = std::array::from_fn(|j| {
            if q_prev[j] == 0.0 {
                p_prev[j]
            } else {
                p_prev[j] + (1.0 - f) * q_prev[j]
            }
        });
        Segments {
            a1,
            b1: q_prev.map(|q| q / period_s),
            a2: p_now,
            b2: q_now.map(|q| q / period_s),
        }
    }
}

/// `(e^{A h}, G(h), H(h))` of `ramp_integrals`, with `H` left zero (and not
/// computed) for a zero-order hold, and the identity for `h = 0`.
fn integrals(
    a: &DMatrix<f64>,
    b: &DVector<f64>,
    h: f64,
    ramp: bool,
) -> Result<RampIntegrals, ModelError> {
    let n = a.nrows();
    if h <= 0.0 {
        return Ok((
            DMatrix::identity(n, n),
            DVector::zeros(n),
            DVector::zeros(n),
        ));
    }
    if ramp {
        ramp_integrals(a, b, h)
    } else {
        let (e, g) = hold_integrals(a, b, h)?;
        Ok((e, g, DVector::zeros(n)))
    }
}

impl HoldEquivalent {
    /// Build the zero-order-hold equivalent of `model` (from
    /// `plant_and_sensor`) at period `period_s` with a computation delay of
    /// `delay_periods * period_s` (any finite `delay_periods >= 0`), and the
    /// rows for `points` evenly spaced output points per period.
    pub fn new(
        model: &StateSpace,
        period_s: f64,
        delay_periods: f64,
        points: usize,
    ) -> Result<HoldEquivalent, ModelError> {
        HoldEquivalent::with(
            model,
            period_s,
            &Actuation {
                hold: HoldKind::ZeroOrder,
                delay_periods,
                sensor_delay_s: 0.0,
            },
            points,
        )
    }

    /// Build the equivalent of `model` at period `period_s` for any hold,
    /// actuator delay and sensor transport delay.
    pub fn with(
        model: &StateSpace,
        period_s: f64,
        act: &Actuation,
        points: usize,
    ) -> Result<HoldEquivalent, ModelError> {
        let (whole, fraction) = split_delay(act.delay_periods);
        // The sample at kT reads the sensor at kT - L = (k - q) T + o.
        let (q, offset) = if act.sensor_delay_s > 0.0 {
            let q = (act.sensor_delay_s / period_s).ceil().max(1.0);
            (q as usize, (q * period_s - act.sensor_delay_s).max(0.0))
        } else {
            (0, 0.0)
        };
        if whole.saturating_add(q) > MAX_DELAY_STATES {
            let periods = (act.delay_periods - fraction) + (act.sensor_delay_s / period_s).ceil();
            let max = MAX_DELAY_STATES;
            return Err(ModelError::DelayTooLong { periods, max });
        }
        let measure_at = (q > 0 && offset > 0.0).then_some(offset);
        let mut eq =
            HoldEquivalent::fractional(model, period_s, fraction, act.hold, points, measure_at)?;
        let pulse_core = (whole + q > 0).then(|| eq.core_pulse(whole + q, q > 0));
        if whole > 0 {
            eq = eq.delayed_by(whole);
        }
        if q > 0 {
            eq = eq.measured_late(q);
        }
        eq.sensor_delay_s = act.sensor_delay_s;
        eq.pulse_core = pulse_core;
        Ok(eq)
    }

    /// The equivalent with a delay of `delay_fraction` (0..=1) of a
    /// period, for `kind`; with `measure_at`, also the measured output's
    /// row at that offset into the period.
    fn fractional(
        model: &StateSpace,
        period_s: f64,
        delay_fraction: f64,
        kind: HoldKind,
        points: usize,
        measure_at: Option<f64>,
    ) -> Result<HoldEquivalent, ModelError> {
        let n = model.order();
        let t = period_s;
        let tau = delay_fraction * t;
        let (a, b) = (&model.a, &model.b);
        let ramp = kind != HoldKind::ZeroOrder;
        let seg = Segments::new(kind, t, delay_fraction);
        // e^{A tau}, G(tau), H(tau) and the same over T - tau.
        let (e_tau, g_tau, h_tau) = integrals(a, b, tau, ramp)?;
        let rest = t - tau;
        let (e_rest, g_rest, h_rest) = integrals(a, b, rest, ramp)?;
        let phi = &e_rest * &e_tau;
        // The state the first segment leaves, carried to the period's end.
        let eg = &e_rest * &g_tau;
        let eh = &e_rest * &h_tau;
        let gamma: [DVector<f64>; 3] = std::array::from_fn(|j| {
            lin_vec(
                n,
                &[
                    (&eg, seg.a1[j]),
                    (&eh, seg.b1[j]),
                    (&g_rest, seg.a2[j]),
                    (&h_rest, seg.b2[j]),
                ],
            )
        });
        let gamma_w = &g_rest + &eg;

        let cy: DVector<f64> = model.c.row(0).transpose();
        let cm: DVector<f64> = model.c.row(1).transpose();
        let (dy, dm) = (model.d[0], model.d[1]);

        // A row at local time s (from the sample) for output (c, d), from
        // the integrals over s (before the update) or over r = s - tau.
        let before = |s: f64,
                      e_s: &DMatrix<f64>,
                      g_s: &DVector<f64>,
                      h_s: &DVector<f64>,
                      c: &DVector<f64>,
                      d: f64| {
            let cg = c.dot(g_s);
            let ch = if ramp { c.dot(h_s) } else { 0.0 };
            Row3 {
                offset_s: s,
                ey: e_s.tr_mul(c),
                c: std::array::from_fn(|j| {
                    lin(&[
                        (cg, seg.a1[j]),
                        (ch, seg.b1[j]),
                        (d, seg.a1[j]),
                        (d * s, seg.b1[j]),
                    ])
                }),
                cw: cg + d,
            }
        };
        let after = |s: f64,
                     r: f64,
                     e_r: &DMatrix<f64>,
                     g_r: &DVector<f64>,
                     h_r: &DVector<f64>,
                     c: &DVector<f64>,
                     d: f64| {
            let c1 = c.dot(&(e_r * &g_tau));
            let c1h = if ramp { c.dot(&(e_r * &h_tau)) } else { 0.0 };
            let c0 = c.dot(g_r);
            let c0h = if ramp { c.dot(h_r) } else { 0.0 };
            Row3 {
                offset_s: s,
                ey: (e_r * &e_tau).tr_mul(c),
                c: std::array::from_fn(|j| {
                    lin(&[
                        (c1, seg.a1[j]),
                        (c1h, seg.b1[j]),
                        (c0, seg.a2[j]),
                        (c0h, seg.b2[j]),
                        (d, seg.a2[j]),
                        (d * r, seg.b2[j]),
                    ])
                }),
                cw: c1 + c0 + d,
            }
        };

        // Points s_j = j h; after the update r = s - tau = b_off + m h,
        // b_off the first offset past the update.
        let points = points.max(1);
        let h = t / points as f64;
        let (e_h, g_h, h_h) = integrals(a, b, h, ramp)?;
        let mut grid_e = vec![DMatrix::identity(n, n)];
        let mut grid_g = vec![DVector::zeros(n)];
        let mut grid_h = vec![DVector::zeros(n)];
        for j in 0..points {
            let e_next = &grid_e[j] * &e_h;
            let g_next = &grid_g[j] + &grid_e[j] * &g_h;
            if ramp {
                // H(s + h) = e^{A h} H(s) + s G(h) + H(h).
                let h_next = &e_h * &grid_h[j] + &g_h * (j as f64 * h) + &h_h;
                grid_h.push(h_next);
            } else {
                grid_h.push(DVector::zeros(n));
            }
            grid_e.push(e_next);
            grid_g.push(g_next);
        }
        let switch = tau / h; // in units of h
        // First index with s_j >= tau; the tolerance keeps a switch that
        // lands on a grid point (tau/h = 12.000000000000002) on that point.
        let first_after = ((switch - 1e-9).ceil().max(0.0) as usize).min(points);
        let b_off = (first_after as f64 * h - tau).max(0.0); // 0 <= b_off < h
        let (e_b, g_b, h_b) = if b_off > 1e-15 * h {
            integrals(a, b, b_off, ramp)?
        } else {
            (
                DMatrix::identity(n, n),
                DVector::zeros(n),
                DVector::zeros(n),
            )
        };
        let mut rows = Vec::with_capacity(points);
        for j in 0..points {
            let s = j as f64 * h;
            let row = if j < first_after {
                before(s, &grid_e[j], &grid_g[j], &grid_h[j], &cy, dy)
            } else {
                let m = j - first_after;
                let e_r = &grid_e[m] * &e_b;
                let g_r = &g_b + &e_b * &grid_g[m];
                // H(b + m h) = e^{A m h} H(b) + b G(m h) + H(m h).
                let h_r = if ramp {
                    &grid_e[m] * &h_b + &grid_g[m] * b_off + &grid_h[m]
                } else {
                    DVector::zeros(n)
                };
                after(s, b_off + m as f64 * h, &e_r, &g_r, &h_r, &cy, dy)
            };
            rows.push(row);
        }
        let measure = match measure_at {
            None => None,
            Some(s) if s < tau => {
                let (e_s, g_s, h_s) = integrals(a, b, s, ramp)?;
                Some(before(s, &e_s, &g_s, &h_s, &cm, dm))
            }
            Some(s) => {
                let (e_r, g_r, h_r) = integrals(a, b, s - tau, ramp)?;
                Some(after(s, s - tau, &e_r, &g_r, &h_r, &cm, dm))
            }
        };

        // u_{k-2} is a state when anything depends on it: a ramp that is
        // still running at the sample (f > 0), or a first-order hold's end
        // value feeding through into the sample.
        let keep_prev2 = match kind {
            HoldKind::ZeroOrder => false,
            HoldKind::Interpolating => delay_fraction > 0.0,
            HoldKind::FirstOrder => delay_fraction > 0.0 || dm != 0.0,
        };
        let k = usize::from(keep_prev2);
        let dim = n + k;
        let widen = |v: &DVector<f64>, last: f64| {
            if k == 0 {
                v.clone()
            } else {
                let mut out = DVector::zeros(dim);
                out.rows_mut(0, n).copy_from(v);
                out[n] = last;
                out
            }
        };
        let to_row = |r: Row3| IntersampleRow {
            offset_s: r.offset_s,
            ey: widen(&r.ey, r.c[2]),
            cu1: r.c[1],
            cu0: r.c[0],
            cw: r.cw,
        };
        let [gamma0, gamma1, gamma2] = gamma;
        let mut phi_k = DMatrix::zeros(dim, dim);
        phi_k.view_mut((0, 0), (n, n)).copy_from(&phi);
        if k == 1 {
            phi_k.view_mut((0, n), (n, 1)).copy_from(&gamma2);
        }
        let mut gamma1_k = widen(&gamma1, 0.0);
        if k == 1 {
            // The state u_{k-2} of the next period is this one's u_{k-1}.
            gamma1_k[n] = 1.0;
        }
        let dm_k = if seg.a1[1] == 1.0 { dm } else { dm * seg.a1[1] };
        // Without the state, the plant output's feedthrough at the sample
        // is only read at the steady state, where every command is equal
        // (and the coefficients of a1 sum to 1).
        let dy_k = if seg.a1[1] == 1.0 || k == 0 {
            dy
        } else {
            dy * seg.a1[1]
        };
        Ok(HoldEquivalent {
            period_s,
            hold: kind,
            delay_fraction,
            delay_periods: 0,
            hold_states: k,
            measure_periods: 0,
            sensor_delay_s: 0.0,
            gamma_w: widen(&gamma_w, 0.0),
            phi: phi_k,
            gamma0: widen(&gamma0, 0.0),
            gamma1: gamma1_k,
            cm: widen(&cm, dm * seg.a1[2]),
            dm: dm_k,
            dm_w: dm,
            cy: widen(&cy, if k == 0 { 0.0 } else { dy * seg.a1[2] }),
            dy: dy_k,
            dy_w: dy,
            intersample: rows.into_iter().map(to_row).collect(),
            switch_index: first_after,
            measure: measure.map(to_row),
            pulse_core: None,
        })
    }

    /// This fractional equivalent (in terms of the applied command `v`)
    /// behind `m >= 1` more unit delays of the command: `v_k = u_{k-m}`.
    /// New states `r_1 .. r_m = u_{k-m-1} .. u_{k-2}` follow the others, so
    /// `v_{k-1} = r_1` and `v_k` is `r_2` (or `u_{k-1}` when `m = 1`).
    pub(crate) fn delayed_by(self, m: usize) -> HoldEquivalent {
        let n = self.phi.nrows();
        let dim = n + m;
        let mut phi = DMatrix::zeros(dim, dim);
        phi.view_mut((0, 0), (n, n)).copy_from(&self.phi);
        // x' = Phi x + Gamma0 v_k + Gamma1 v_{k-1} + Gamma_w w.
        phi.view_mut((0, n), (n, 1)).copy_from(&self.gamma1);
        let mut gamma1 = DVector::zeros(dim);
        if m == 1 {
            gamma1.rows_mut(0, n).copy_from(&self.gamma0);
        } else {
            phi.view_mut((0, n + 1), (n, 1)).copy_from(&self.gamma0);
        }
        // The command line shifts by one each period; u_{k-1} enters last.
        for j in 0..m - 1 {
            phi[(n + j, n + j + 1)] = 1.0;
        }
        gamma1[n + m - 1] = 1.0;
        let mut gamma_w = DVector::zeros(dim);
        gamma_w.rows_mut(0, n).copy_from(&self.gamma_w);
        let extend = |row: &DVector<f64>, held: f64| {
            let mut out = DVector::zeros(dim);
            out.rows_mut(0, n).copy_from(row);
            out[n] = held;
            out
        };
        let cm = extend(&self.cm, self.dm);
        let cy = extend(&self.cy, self.dy);
        let shift = |row: IntersampleRow| {
            // cu1 weighs v_{k-1} = r_1, cu0 weighs v_k.
            let mut ey = extend(&row.ey, row.cu1);
            let cu1 = if m == 1 {
                row.cu0
            } else {
                ey[n + 1] += row.cu0;
                0.0
            };
            IntersampleRow {
                offset_s: row.offset_s,
                ey,
                cu1,
                cu0: 0.0,
                cw: row.cw,
            }
        };
        let intersample = self.intersample.into_iter().map(shift).collect::<Vec<_>>();
        // No point of the period sees u_k yet.
        let switch_index = intersample.len();
        HoldEquivalent {
            period_s: self.period_s,
            hold: self.hold,
            delay_fraction: self.delay_fraction,
            delay_periods: m,
            hold_states: self.hold_states,
            measure_periods: self.measure_periods,
            sensor_delay_s: self.sensor_delay_s,
            phi,
            gamma0: DVector::zeros(dim),
            gamma1,
            gamma_w,
            cm,
            dm: 0.0,
            dm_w: self.dm_w,
            cy,
            dy: 0.0,
            dy_w: self.dy_w,
            intersample,
            switch_index,
            measure: self.measure.map(shift),
            pulse_core: None,
        }
    }

    /// This equivalent with the measurement `q >= 1` periods late: new
    /// states `p_1 .. p_q` hold the measured outputs still on their way,
    /// `p_1` taking the measured output at the `measure` offset of this
    /// period (or at the sample instant without one), and the controller
    /// samples `p_q`.
    fn measured_late(self, q: usize) -> HoldEquivalent {
        let n = self.phi.nrows();
        let dim = n + q;
        let pad = |v: &DVector<f64>| {
            let mut out = DVector::zeros(dim);
            out.rows_mut(0, n).copy_from(v);
            out
        };
        let row = self.measure.clone().unwrap_or_else(|| IntersampleRow {
            offset_s: 0.0,
            ey: self.cm.clone(),
            cu1: self.dm,
            cu0: 0.0,
            cw: self.dm_w,
        });
        let mut phi = DMatrix::zeros(dim, dim);
        phi.view_mut((0, 0), (n, n)).copy_from(&self.phi);
        phi.view_mut((n, 0), (1, n)).copy_from(&row.ey.transpose());
        for i in 1..q {
            phi[(n + i, n + i - 1)] = 1.0;
        }
        let mut gamma0 = pad(&self.gamma0);
        let mut gamma1 = pad(&self.gamma1);
        let mut gamma_w = pad(&self.gamma_w);
        gamma0[n] = row.cu0;
        gamma1[n] = row.cu1;
        gamma_w[n] = row.cw;
        let mut cm = DVector::zeros(dim);
        cm[dim - 1] = 1.0;
        HoldEquivalent {
            period_s: self.period_s,
            hold: self.hold,
            delay_fraction: self.delay_fraction,
            delay_periods: self.delay_periods,
            hold_states: self.hold_states,
            measure_periods: q,
            sensor_delay_s: self.sensor_delay_s,
            phi,
            gamma0,
            gamma1,
            gamma_w,
            cm,
            dm: 0.0,
            dm_w: 0.0,
            cy: pad(&self.cy),
            dy: self.dy,
            dy_w: self.dy_w,
            intersample: self
                .intersample
                .into_iter()
                .map(|r| IntersampleRow {
                    ey: pad(&r.ey),
                    ..r
                })
                .collect(),
            switch_index: self.switch_index,
            measure: None,
            pulse_core: None,
        }
    }

    /// What this equivalent was built for (hold, whole delay, sensor
    /// delay): `HoldEquivalent::with` of it builds it again.
    pub fn actuation(&self) -> Actuation {
        Actuation {
            hold: self.hold,
            delay_periods: self.delay_total(),
            sensor_delay_s: self.sensor_delay_s,
        }
    }

    /// The whole actuator delay in periods, `delay_periods + delay_fraction`.
    pub fn delay_total(&self) -> f64 {
        self.delay_periods as f64 + self.delay_fraction
    }

    /// The pulse transfer from `u_k` to the measured sample, its whole
    /// periods of delay apart ([`Pulse`]).
    pub fn pulse(&self) -> Pulse {
        self.pulse_core.clone().unwrap_or_else(|| Pulse {
            model: self.augmented(),
            periods: 0,
        })
    }

    /// This fractional equivalent's pulse transfer behind `periods` whole
    /// periods of delay: from its own `v_k` to its measured sample, or,
    /// when the measurement comes `q >= 1` periods late (`late`), to the
    /// row `measured_late` stores (the `measure` row, else the sample's).
    fn core_pulse(&self, periods: usize, late: bool) -> Pulse {
        let mut model = self.augmented();
        if late && let Some(row) = &self.measure {
            let n = self.phi.nrows();
            model
                .c
                .view_mut((0, 0), (1, n))
                .copy_from(&row.ey.transpose());
            model.c[(0, n)] = row.cu1;
            model.d[0] = row.cu0;
        }
        Pulse { model, periods }
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

/// Split a delay of `d` periods into whole periods `m` and a fraction `f`
/// with `d = m + f`: `m = 0, f = d` for `d <= 1`, else `f` in `(0, 1]`, so
/// a whole number of periods keeps the plain one-period equivalent at its
/// end (`d = 2` is `z^-1` times `d = 1`).
pub fn split_delay(d: f64) -> (usize, f64) {
    if d <= 1.0 {
        return (0, d.max(0.0));
    }
    let m = (d.ceil() - 1.0).max(0.0);
    (m as usize, d - m)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::poly::Poly;

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

    /// A second-order plant with feedthrough in the sensor and a lightly
    /// damped mode, so every block of the extended state is exercised.
    fn second_order_with_sensor() -> StateSpace {
        let p = Transfer::new(
            Poly::from_descending(&[1.0, 30.0]),
            Poly::from_descending(&[1.0, 2.0, 400.0]),
        );
        let h = Transfer::new(
            Poly::from_descending(&[0.5, 100.0]),
            Poly::from_descending(&[1.0, 100.0]),
        );
        plant_and_sensor(&p, &h).unwrap()
    }

    #[test]
    fn whole_periods_are_unit_delays_of_the_fractional_one() {
        // Definition of a delay of m + f periods (Franklin, Powell and
        // Workman's fractional-delay equivalent behind m unit delays):
        // G_{m+f}(z) = z^-m G_f(z), for f = 0, a fraction, and f = 1.
        let m = second_order_with_sensor();
        let t = 0.01;
        for (d, whole, f) in [
            (1.5, 1, 0.5),
            (2.0, 2, 0.0),
            (2.0, 1, 1.0),
            (3.25, 3, 0.25),
            (4.7, 4, 0.7),
        ] {
            let gd = HoldEquivalent::new(&m, t, d, 16)
                .unwrap()
                .pulse_transfer()
                .unwrap();
            let gf = HoldEquivalent::new(&m, t, f, 16)
                .unwrap()
                .pulse_transfer()
                .unwrap();
            for w in [0.3, 3.0, 30.0, 300.0] {
                let z = nalgebra::Complex::from_polar(1.0, w * t);
                let a = gd.transfer.eval(z);
                let b = gf.transfer.eval(z) / z.powi(whole);
                assert!((a - b).norm() < 1e-9 * b.norm(), "d={d} w={w}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn split_delay_keeps_whole_periods_at_the_end() {
        assert_eq!(split_delay(0.0), (0, 0.0));
        assert_eq!(split_delay(0.5), (0, 0.5));
        assert_eq!(split_delay(1.0), (0, 1.0));
        assert_eq!(split_delay(1.5), (1, 0.5));
        assert_eq!(split_delay(2.0), (1, 1.0));
    }
}
