//! Step and load-disturbance responses of the sampled-data loop, with the
//! continuous plant output evaluated exactly between samples, and the
//! time figures of the loop model taken from that output.

use nalgebra::{DMatrix, DVector};
use serde::Serialize;

use crate::closed_loop::ClosedLoop;
use crate::hold::HoldEquivalent;
use crate::poly::C64;

/// The remaining transient must fall below this fraction of its start
/// before the horizon ends (loop model: 1e-4).
pub const DECAY_TARGET: f64 = 1e-4;

/// Settings of a time-response run.
#[derive(Debug, Clone, Copy)]
pub struct TimeOptions {
    /// Output points per period (>= 16 per the loop model).
    pub points_per_period: usize,
    /// Settling band as a fraction (0.02 for 2 %).
    pub band: f64,
    /// Cap on the horizon, in periods (sampled loop) or steps (continuous).
    pub max_steps: usize,
}

impl Default for TimeOptions {
    fn default() -> Self {
        TimeOptions {
            points_per_period: 16,
            band: 0.02,
            max_steps: 200_000,
        }
    }
}

/// Figures of the unit reference step.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StepFigures {
    pub y_final: f64,
    /// None when `y_final` is zero (no overshoot figure exists).
    pub overshoot_pct: Option<f64>,
    /// None: not settled within the horizon.
    pub settling_time_s: Option<f64>,
    /// None: never reached 90 % of `y_final` within the horizon.
    pub rise_time_s: Option<f64>,
    /// Largest |u| the controller commands, in actuator units.
    pub u_peak: f64,
    /// Simulated length, s.
    pub horizon_s: f64,
    /// True when the horizon hit its cap before the slowest mode decayed.
    pub horizon_capped: bool,
}

/// Figures of the unit load-disturbance step at the plant input.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DisturbanceFigures {
    pub disturbance_peak: f64,
    pub yd_final: f64,
    /// None: not recovered within the horizon.
    pub recovery_time_s: Option<f64>,
}

/// One output point of a response, for traces and charts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TracePoint {
    pub t: f64,
    pub y: f64,
    pub u: f64,
    /// True at a sampling instant.
    pub sample: bool,
}

/// Accumulates the step figures from a stream of exact output points.
#[derive(Debug, Clone)]
pub struct StepMetrics {
    y_final: f64,
    band_abs: f64,
    peak_dev: f64,
    u_peak: f64,
    t10: Option<f64>,
    t90: Option<f64>,
    settled_since: Option<f64>,
    prev: Option<(f64, f64)>,
    /// Final command; infinite (never finished early) until set.
    u_final: f64,
}

impl StepMetrics {
    /// For a response heading to `y_final`, band `band` (fraction).
    pub fn new(y_final: f64, band: f64) -> Self {
        StepMetrics {
            y_final,
            band_abs: band * y_final.abs(),
            peak_dev: 0.0,
            u_peak: 0.0,
            t10: None,
            t90: None,
            settled_since: None,
            prev: None,
            u_final: f64::INFINITY,
        }
    }

    /// With the command's final value, so a run may stop early once no
    /// later command can raise the command peak.
    pub fn with_u_final(mut self, u_final: f64) -> Self {
        self.u_final = u_final;
        self
    }

    /// Feed the next point (times strictly increasing).
    pub fn push(&mut self, t: f64, y: f64, u: f64) {
        let yf = self.y_final;
        self.u_peak = self.u_peak.max(u.abs());
        if yf != 0.0 {
            let dev = (y - yf) * yf.signum();
            self.peak_dev = self.peak_dev.max(dev);
            let frac = y / yf;
            if let Some((tp, yp)) = self.prev {
                let fp = yp / yf;
                if self.t10.is_none() && frac >= 0.1 {
                    self.t10 = Some(crossing(tp, fp, t, frac, 0.1));
                }
                if self.t90.is_none() && frac >= 0.9 {
                    self.t90 = Some(crossing(tp, fp, t, frac, 0.9));
                }
            } else if frac >= 0.1 {
                self.t10 = Some(t);
                if frac >= 0.9 {
                    self.t90 = Some(t);
                }
            }
        }
        let inside = (y - yf).abs() <= self.band_abs;
        if !inside {
            self.settled_since = None;
        } else if self.settled_since.is_none() {
            self.settled_since = Some(match self.prev {
                // Entry into the band located by linear interpolation
                // between the two exact points around it.
                Some((tp, yp)) => {
                    let dp = (yp - yf).abs() - self.band_abs;
                    let dn = (y - yf).abs() - self.band_abs;
                    if dp > dn {
                        tp + (t - tp) * dp / (dp - dn)
                    } else {
                        t
                    }
                }
                None => t,
            });
        }
        self.prev = Some((t, y));
    }

    /// The figures; `horizon_s` and `capped` describe the run.
    pub fn finish(&self, horizon_s: f64, capped: bool) -> StepFigures {
        let yf = self.y_final;
        StepFigures {
            y_final: yf,
            overshoot_pct: (yf != 0.0).then(|| (self.peak_dev / yf.abs() * 100.0).max(0.0)),
            settling_time_s: if yf == 0.0 { None } else { self.settled_since },
            rise_time_s: match (self.t10, self.t90) {
                (Some(a), Some(b)) => Some(b - a),
                _ => None,
            },
            // The supremum of |u| over all time is at least |u_final|, which a
            // command creeping up to its final value approaches but never
            // reaches in a finite run.
            u_peak: if self.u_final.is_finite() {
                self.u_peak.max(self.u_final.abs())
            } else {
                self.u_peak
            },
            horizon_s,
            horizon_capped: capped,
        }
    }
}

/// Time where a linear interpolation between `(t0, v0)` and `(t1, v1)`
/// reaches `level`.
fn crossing(t0: f64, v0: f64, t1: f64, v1: f64, level: f64) -> f64 {
    if v1 == v0 {
        t1
    } else {
        (t0 + (t1 - t0) * (level - v0) / (v1 - v0)).clamp(t0, t1)
    }
}

/// Recovery tracker for the disturbance response: the peak must be known
/// first, so the run is made twice (peak, then recovery); both runs are
/// exact and cheap next to building the loop.
#[derive(Debug, Clone)]
struct Recovery {
    yd_final: f64,
    threshold: f64,
    since: Option<f64>,
    prev: Option<(f64, f64)>,
}

impl Recovery {
    fn push(&mut self, t: f64, y: f64) {
        let dev = (y - self.yd_final).abs();
        if dev > self.threshold {
            self.since = None;
        } else if self.since.is_none() {
            self.since = Some(match self.prev {
                Some((tp, dp)) if dp > dev => tp + (t - tp) * (dp - self.threshold) / (dp - dev),
                _ => t,
            });
        }
        self.prev = Some((t, dev));
    }
}

/// Number of periods (or steps) for the slowest mode to decay to
/// `DECAY_TARGET`, from the largest pole magnitude `rho` of a discrete
/// loop; doubled and padded because repeated and non-normal modes decay
/// more slowly than `rho^k` at first.
pub fn horizon_steps(rho: f64, dim: usize) -> f64 {
    if rho < 1e-300 {
        return (dim + 2) as f64;
    }
    (DECAY_TARGET.ln() / rho.ln()) * 2.0 + (dim + 10) as f64
}

/// Receives the output points of a simulation and says when nothing later
/// can change what it measures.
pub trait ResponseSink {
    fn point(&mut self, p: TracePoint);
    /// True when no later point can change the result, given that every
    /// later output lies within `bound` of its final value and every later
    /// command within `u_bound` of its own.
    fn finished(&self, _bound: f64, _u_bound: f64) -> bool {
        false
    }
}

impl ResponseSink for Vec<TracePoint> {
    fn point(&mut self, p: TracePoint) {
        self.push(p);
    }
}

impl ResponseSink for StepMetrics {
    fn point(&mut self, p: TracePoint) {
        self.push(p.t, p.y, p.u);
    }
    fn finished(&self, bound: f64, u_bound: f64) -> bool {
        // Settled for good, no new overshoot peak that would show in the
        // figure (resolution 1e-4 percentage points), rise complete, and
        // no later command can exceed the command peak seen so far.
        self.settled_since.is_some()
            && bound < self.band_abs
            && bound <= self.peak_dev.max(1e-6 * self.y_final.abs())
            && self.t90.is_some()
            && self.u_final.abs() + u_bound <= self.u_peak.max(self.u_final.abs() * (1.0 + 1e-6))
    }
}

/// Largest |y| of a response.
#[derive(Debug, Clone)]
struct Peak {
    y_final: f64,
    peak: f64,
}

impl ResponseSink for Peak {
    fn point(&mut self, p: TracePoint) {
        self.peak = self.peak.max(p.y.abs());
    }
    fn finished(&self, bound: f64, _u_bound: f64) -> bool {
        self.y_final.abs() + bound <= self.peak
    }
}

impl ResponseSink for Recovery {
    fn point(&mut self, p: TracePoint) {
        self.push(p.t, p.y);
    }
    fn finished(&self, bound: f64, _u_bound: f64) -> bool {
        self.since.is_some() && bound <= self.threshold
    }
}

/// The output map of a period: every output point inside a period is
/// `y_j = g_j . z_k + h_j(r, w)`, and `y_j - y_final = g_j . (z_k - z_final)`.
#[derive(Debug, Clone)]
pub struct OutputMap {
    /// Rows `g_j` (points per period x loop states).
    g: DMatrix<f64>,
    /// Coefficients of `r` and `w` in `h_j`.
    hr: DVector<f64>,
    hw: DVector<f64>,
    /// Whether point j holds `u_{k-1}` (before the computation delay ends).
    holds_previous: Vec<bool>,
}

impl OutputMap {
    pub fn new(cl: &ClosedLoop, hold: &HoldEquivalent) -> OutputMap {
        let dim = cl.a.nrows();
        let n = cl.plant_states;
        let np = hold.intersample.len();
        let mut g = DMatrix::zeros(np, dim);
        let mut hr = DVector::zeros(np);
        let mut hw = DVector::zeros(np);
        for (j, row) in hold.intersample.iter().enumerate() {
            let mut gj = &cl.ku * row.cu0;
            for i in 0..n {
                gj[i] += row.ey[i];
            }
            gj[n] += row.cu1;
            g.row_mut(j).copy_from(&gj.transpose());
            hr[j] = row.cu0 * cl.dur;
            hw[j] = row.cu0 * cl.duw + row.cw;
        }
        OutputMap {
            g,
            hr,
            hw,
            holds_previous: (0..np).map(|j| j < hold.switch_index).collect(),
        }
    }
}

/// A proof that the response can no longer move: with the output-energy
/// Gramian `P = sum_m (A^m)' Q A^m`, `Q = sum_j g_j g_j'`, the quantity
/// `V = dz' P dz` is the energy of every later output point's deviation,
/// so each later `|y - y_final| <= sqrt(V)`. It lets a simulation stop as
/// soon as no figure can change, long before the pole-based horizon.
#[derive(Debug, Clone)]
pub struct Certificate {
    p: DMatrix<f64>,
}

impl Certificate {
    /// Build the certificate for a stable loop; None when the doubling
    /// iteration does not converge (then the pole-based horizon rules).
    pub fn new(cl: &ClosedLoop, map: &OutputMap) -> Option<Certificate> {
        // Q weights every output point and the two commands a period
        // holds (u_k = ku . z and u_{k-1} = z[n]), so sqrt(V) bounds later
        // command deviations too.
        let mut p = map.g.transpose() * &map.g + &cl.ku * cl.ku.transpose();
        let n = cl.plant_states;
        p[(n, n)] += 1.0;
        // P by doubling: P <- P + (A^m)' P A^m, A^m <- (A^m)^2.
        let mut am = cl.a.clone();
        for _ in 0..64 {
            let next = &p + am.transpose() * &p * &am;
            am = &am * &am;
            p = next;
            if !p.iter().all(|v| v.is_finite()) {
                return None;
            }
            if am.amax() < 1e-14 {
                return Some(Certificate { p });
            }
        }
        None
    }

    /// Bound on every later |y - y_final| and |u - u_final| from the state
    /// error `dz`.
    fn bound(&self, dz: &DVector<f64>) -> f64 {
        let n = dz.len();
        let mut v = 0.0;
        for j in 0..n {
            let mut pj = 0.0;
            for i in 0..n {
                pj += self.p[(i, j)] * dz[i];
            }
            v += pj * dz[j];
        }
        v.max(0.0).sqrt()
    }
}

/// The exact sampled-data simulation: feeds `sink` every output point
/// (sample instants and `points_per_period - 1` points between). Stops at
/// `periods`, or, given the fixed point (and a certificate), as soon as
/// the sink says no later point can change its result; a period that
/// provably cannot change it is reduced to its sample point. Returns the
/// number of periods run.
#[allow(clippy::too_many_arguments)]
pub fn simulate_sampled(
    cl: &ClosedLoop,
    map: &OutputMap,
    period_s: f64,
    r: f64,
    w: f64,
    periods: usize,
    end: Option<(&DVector<f64>, Option<&Certificate>)>,
    sink: &mut dyn ResponseSink,
) -> usize {
    // Plain row-major slices: this loop runs thousands of times per
    // evaluation on matrices of size ~8, where generic small-matrix code
    // spends more on bookkeeping than on arithmetic.
    let dim = cl.a.nrows();
    let n = cl.plant_states;
    let np = map.g.nrows();
    let a: Vec<f64> = (0..dim * dim).map(|i| cl.a[(i / dim, i % dim)]).collect();
    let g: Vec<f64> = (0..np * dim).map(|i| map.g[(i / dim, i % dim)]).collect();
    let drive: Vec<f64> = (0..dim).map(|i| cl.br[i] * r + cl.bw[i] * w).collect();
    let h: Vec<f64> = (0..np).map(|j| map.hr[j] * r + map.hw[j] * w).collect();
    let ku: &[f64] = cl.ku.as_slice();
    let u_off = cl.dur * r + cl.duw * w;
    let offsets: Vec<f64> = (0..np).map(|j| j as f64 * period_s / np as f64).collect();
    let mut z = vec![0.0; dim];
    let mut next = vec![0.0; dim];
    let mut dz = DVector::zeros(dim);
    let mut ys = vec![0.0; np];
    // max_j |g_ji - g_0i| per state: how far a point between samples can
    // move away from the sample, per unit of state error.
    let spread: Vec<f64> = (0..dim)
        .map(|i| {
            (1..np)
                .map(|j| (g[j * dim + i] - g[i]).abs())
                .fold(0.0, f64::max)
        })
        .collect();
    let dot = |row: &[f64], v: &[f64]| row.iter().zip(v).map(|(x, y)| x * y).sum::<f64>();
    let mut k = 0;
    while k < periods {
        let u_prev = z[n];
        let u_k = dot(ku, &z) + u_off;
        let t0 = k as f64 * period_s;
        let mut points = np;
        let mut known = 0;
        if let Some((z_end, cert)) = end {
            for i in 0..dim {
                dz[i] = z[i] - z_end[i];
            }
            if k % 4 == 0
                && let Some(c) = cert
            {
                let b = c.bound(&dz);
                if sink.finished(b, b) {
                    break;
                }
            }
            // This period's commands: u_k and the held u_{k-1}.
            let u_dev = dot(ku, dz.as_slice()).abs().max(dz[n].abs());
            // A cheap bound on the whole period: the sample's own
            // deviation plus how far the points between can move from it,
            // |(g_j - g_0) . dz| <= sum_i max_j |g_ji - g_0i| |dz_i|.
            ys[0] = dot(&g[..dim], &z) + h[0];
            known = 1;
            let dev0 = dot(&g[..dim], dz.as_slice()).abs();
            let spread: f64 = spread.iter().zip(dz.iter()).map(|(s, d)| s * d.abs()).sum();
            if sink.finished(dev0 + spread, u_dev) {
                points = 1;
            } else {
                for j in 1..np {
                    ys[j] = dot(&g[j * dim..(j + 1) * dim], &z) + h[j];
                }
                known = np;
                // The exact largest deviation in this period: when it
                // cannot change the result, only the sample is passed on.
                let y_end = ys[0] - dot(&g[..dim], dz.as_slice());
                let dev = ys.iter().fold(0.0f64, |m, y| m.max((y - y_end).abs()));
                if sink.finished(dev, u_dev) {
                    points = 1;
                }
            }
        }
        for j in known..points {
            ys[j] = dot(&g[j * dim..(j + 1) * dim], &z) + h[j];
        }
        for j in 0..points {
            sink.point(TracePoint {
                t: t0 + offsets[j],
                y: ys[j],
                u: if map.holds_previous[j] { u_prev } else { u_k },
                sample: j == 0,
            });
        }
        for i in 0..dim {
            next[i] = dot(&a[i * dim..(i + 1) * dim], &z) + drive[i];
        }
        std::mem::swap(&mut z, &mut next);
        k += 1;
    }
    k
}

/// Step and disturbance figures of a stable sampled loop.
///
/// The horizon comes from the slowest pole (decay to `DECAY_TARGET`,
/// padded); each run stops earlier when the Lyapunov certificate proves
/// that no later point can change its figures.
pub fn sampled_figures(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
) -> Result<(StepFigures, DisturbanceFigures), String> {
    let n = cl.plant_states;
    let rho = poles.iter().map(|p| p.norm()).fold(0.0, f64::max);
    let want = horizon_steps(rho, cl.a.nrows());
    let capped = want > opts.max_steps as f64;
    let periods = want.min(opts.max_steps as f64).ceil() as usize;
    let map = OutputMap::new(cl, hold);
    let cert = Certificate::new(cl, &map);
    let t = hold.period_s;

    let output_at = |z: &DVector<f64>, r: f64, w: f64| {
        let x = z.rows(0, n);
        let u = cl.ku.dot(z) + cl.dur * r + cl.duw * w;
        hold.cy.dot(&x) + hold.dy * (u + w)
    };
    let zr = cl
        .fixed_point(1.0, 0.0)
        .ok_or("the closed loop has no steady state (pole at z = 1)")?;
    let y_final = output_at(&zr, 1.0, 0.0);
    let u_final = cl.ku.dot(&zr) + cl.dur;
    let mut m = StepMetrics::new(y_final, opts.band).with_u_final(u_final);
    let run = simulate_sampled(
        cl,
        &map,
        t,
        1.0,
        0.0,
        periods,
        Some((&zr, cert.as_ref())),
        &mut m,
    );
    let horizon_s = run as f64 * hold.period_s;
    let mut step = m.finish(horizon_s, capped && run >= periods);

    let zw = cl
        .fixed_point(0.0, 1.0)
        .ok_or("the closed loop has no steady state (pole at z = 1)")?;
    let yd_final = output_at(&zw, 0.0, 1.0);
    let end = Some((&zw, cert.as_ref()));
    let mut peak = Peak {
        y_final: yd_final,
        peak: 0.0,
    };
    let run_peak = simulate_sampled(cl, &map, t, 0.0, 1.0, periods, end, &mut peak);
    let mut rec = Recovery {
        yd_final,
        threshold: opts.band * peak.peak,
        since: None,
        prev: None,
    };
    let run_rec = simulate_sampled(cl, &map, t, 0.0, 1.0, periods, end, &mut rec);
    // A disturbance run that hit the cap leaves its figures uncertified too.
    step.horizon_capped |= capped && (run_peak >= periods || run_rec >= periods);
    Ok((
        step,
        DisturbanceFigures {
            disturbance_peak: peak.peak,
            yd_final,
            recovery_time_s: rec.since,
        },
    ))
}

/// Exact step (`r = 1`) or disturbance (`w = 1`) trace of a sampled loop.
pub fn sampled_trace(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    r: f64,
    w: f64,
    periods: usize,
) -> Vec<TracePoint> {
    let mut out = Vec::new();
    let map = OutputMap::new(cl, hold);
    simulate_sampled(cl, &map, hold.period_s, r, w, periods, None, &mut out);
    out
}

/// Figures from a continuous-time closed loop simulated exactly on a
/// uniform grid: `step(t_index) -> (y, u)` for the reference step and
/// `dist(t_index) -> y` for the disturbance step.
#[allow(clippy::too_many_arguments)]
pub fn continuous_metrics(
    y_final: f64,
    yd_final: f64,
    h: f64,
    steps: usize,
    capped: bool,
    band: f64,
    mut step: impl FnMut(usize) -> (f64, f64),
    dist: &[f64],
) -> (StepFigures, DisturbanceFigures) {
    let mut m = StepMetrics::new(y_final, band);
    for i in 0..=steps {
        let (y, u) = step(i);
        m.push(i as f64 * h, y, u);
    }
    let peak = dist.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let mut rec = Recovery {
        yd_final,
        threshold: band * peak,
        since: None,
        prev: None,
    };
    for (i, &y) in dist.iter().enumerate() {
        rec.push(i as f64 * h, y);
    }
    (
        m.finish(steps as f64 * h, capped),
        DisturbanceFigures {
            disturbance_peak: peak,
            yd_final,
            recovery_time_s: rec.since,
        },
    )
}
