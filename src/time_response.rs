//! Step and load-disturbance responses of the sampled-data loop, with the
//! continuous plant output evaluated exactly between samples, and the
//! time figures of the loop model taken from that output.

use nalgebra::DVector;
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
        }
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
            u_peak: self.u_peak,
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

/// The exact sampled-data simulation: calls `on_point` at every output
/// point (sample instants and `points_per_period - 1` points between).
/// Stops at `periods`, or earlier once the state has converged to the
/// fixed point `z_end` (when given) to 1e-12 (every later point equals
/// the final value). Returns the number of periods run.
pub fn simulate_sampled(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    r: f64,
    w: f64,
    periods: usize,
    z_end: Option<&DVector<f64>>,
    mut on_point: impl FnMut(TracePoint),
) -> usize {
    let dim = cl.a.nrows();
    let n = cl.plant_states;
    let t_per = hold.period_s;
    let tau = hold.delay_fraction * t_per;
    let mut z = DVector::zeros(dim);
    let mut next = DVector::zeros(dim);
    let scale = 1.0 + z_end.map_or(0.0, |v| v.amax());
    let mut k = 0;
    while k < periods {
        let u_prev = z[n];
        let u_k = cl.ku.dot(&z) + cl.dur * r + cl.duw * w;
        let x = z.rows(0, n);
        let t0 = k as f64 * t_per;
        for (j, row) in hold.intersample.iter().enumerate() {
            let y = row.ey.dot(&x) + row.cu1 * u_prev + row.cu0 * u_k + row.cw * w;
            let u = if row.offset_s < tau { u_prev } else { u_k };
            on_point(TracePoint {
                t: t0 + row.offset_s,
                y,
                u,
                sample: j == 0,
            });
        }
        next.gemv(1.0, &cl.a, &z, 0.0);
        next.axpy(r, &cl.br, 1.0);
        next.axpy(w, &cl.bw, 1.0);
        std::mem::swap(&mut z, &mut next);
        k += 1;
        if let Some(end) = z_end
            && k % 8 == 0
            && z.iter()
                .zip(end.iter())
                .all(|(a, b)| (a - b).abs() <= 1e-12 * scale)
        {
            break;
        }
    }
    k
}

/// Step and disturbance figures of a stable sampled loop.
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

    let output_at = |z: &DVector<f64>, r: f64, w: f64| {
        let x = z.rows(0, n);
        let u = cl.ku.dot(z) + cl.dur * r + cl.duw * w;
        hold.cy.dot(&x) + hold.dy * (u + w)
    };
    let zr = cl
        .fixed_point(1.0, 0.0)
        .ok_or("the closed loop has no steady state (pole at z = 1)")?;
    let y_final = output_at(&zr, 1.0, 0.0);
    let mut m = StepMetrics::new(y_final, opts.band);
    let run = simulate_sampled(cl, hold, 1.0, 0.0, periods, Some(&zr), |p| {
        m.push(p.t, p.y, p.u)
    });
    let horizon_s = run as f64 * hold.period_s;
    let step = m.finish(horizon_s, capped && run >= periods);

    let zw = cl
        .fixed_point(0.0, 1.0)
        .ok_or("the closed loop has no steady state (pole at z = 1)")?;
    let yd_final = output_at(&zw, 0.0, 1.0);
    let mut peak = 0.0f64;
    simulate_sampled(cl, hold, 0.0, 1.0, periods, Some(&zw), |p| {
        peak = peak.max(p.y.abs())
    });
    let mut rec = Recovery {
        yd_final,
        threshold: opts.band * peak,
        since: None,
        prev: None,
    };
    simulate_sampled(cl, hold, 0.0, 1.0, periods, Some(&zw), |p| {
        rec.push(p.t, p.y)
    });
    Ok((
        step,
        DisturbanceFigures {
            disturbance_peak: peak,
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
    simulate_sampled(cl, hold, r, w, periods, None, |p| out.push(p));
    out
}

/// Figures from a continuous-time closed loop simulated exactly on a
/// uniform grid: `step(t_index) -> (y, u)` for the reference step and
/// `dist(t_index) -> y` for the disturbance step.
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
