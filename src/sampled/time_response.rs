//! Step and load-disturbance responses of the sampled-data loop, with the
//! continuous plant output evaluated exactly between samples, and the
//! time figures of the loop model taken from that output.

use nalgebra::DVector;
use serde::Serialize;

use crate::model::poly::C64;
use crate::sampled::certificate::{Certificate, Conditioning};
use crate::sampled::closed_loop::ClosedLoop;
use crate::sampled::hold::HoldEquivalent;
use crate::sampled::output_map::{OutputMap, ROUNDING_MARGIN, crossing, mat_vec};
use crate::sampled::stretch::{Instant, Stretches};
pub use crate::sampled::stretch::{TimeFigure, Wanted};

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
    /// Cap on the continuous design's walked simulation grid (steps).
    /// Never a cap on a sampled trace (`sampled_trace_spanning` bounds its
    /// points instead) nor on the sampled loop's figures: their horizon is in
    /// seconds, from the loop's own slowest mode, and is jumped through.
    pub max_steps: usize,
    /// Most periods a fallback walk of the sampled-loop machinery goes
    /// through when the stretch bounds cannot decide a figure
    /// (`WALK_BUDGET`); 0 asks for the stretches' answer alone (a figure
    /// they leave open is undecided at once), as the continuous figures'
    /// first, finer grid does.
    pub walk_budget: u64,
    /// The time figures to compute: all of them, except where only a
    /// verdict is read (a cascade pick's outer pairs, `docs/figures.md`,
    /// "Cascaded loops").
    pub wanted: Wanted,
}

impl Default for TimeOptions {
    fn default() -> Self {
        TimeOptions {
            points_per_period: 16,
            band: 0.02,
            max_steps: 200_000,
            walk_budget: WALK_BUDGET,
            wanted: Wanted::ALL,
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
    /// The horizon, s: the time the slowest closed-loop mode takes to
    /// decay to `DECAY_TARGET` (padded), for a sampled loop and for the
    /// continuous design's grid (the simulated span when it is walked).
    pub horizon_s: f64,
    /// The figures (`overshoot_pct`, `settling_time_s`,
    /// `rise_time_s`, `u_peak`) that could not be decided: a bound at the
    /// end of the horizon cannot rule out a later peak, exit or crossing, or
    /// the search work ran out (`WALK_BUDGET`)
    /// (for the continuous design's walk fallback: its grid hit the step
    /// cap). Such a figure's value is absent (or, for `u_peak`, only a
    /// lower bound).
    pub undecided: Vec<TimeFigure>,
    /// The figures not computed (`Wanted`): their fields are
    /// placeholders, read through the figure catalogue as `not computed`.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub not_computed: Vec<TimeFigure>,
}

/// Figures of the unit load-disturbance step at the plant input.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DisturbanceFigures {
    pub disturbance_peak: f64,
    pub yd_final: f64,
    /// None: not recovered within the horizon.
    pub recovery_time_s: Option<f64>,
    /// The figures (`disturbance_peak`, `recovery_time_s`) that
    /// could not be decided (see `StepFigures::undecided`).
    pub undecided: Vec<TimeFigure>,
    /// False when the load step was not simulated (`Wanted::load_step`):
    /// the peak and recovery are then not computed, neither values nor
    /// "not recovered".
    pub computed: bool,
}

impl DisturbanceFigures {
    /// The load step left out (`Wanted::load_step` false).
    pub fn not_computed(yd_final: f64) -> Self {
        DisturbanceFigures {
            disturbance_peak: 0.0,
            yd_final,
            recovery_time_s: None,
            undecided: Vec::new(),
            computed: false,
        }
    }
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
        // Once 90 % is reached, 10 % was too: the rise is fixed and the
        // fractions (two divisions a point) are not needed any more.
        if yf != 0.0 {
            let dev = (y - yf) * yf.signum();
            self.peak_dev = self.peak_dev.max(dev);
        }
        if yf != 0.0 && self.t90.is_none() {
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

    /// True when the last point passed in was inside the band.
    pub fn settled_for_good(&self) -> bool {
        self.settled_since.is_some()
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
            not_computed: Vec::new(),
            undecided: if capped {
                TimeFigure::STEP.to_vec()
            } else {
                Vec::new()
            },
        }
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
    /// Asked right after a period's sample point was passed in: what the
    /// points between that sample and the period's last point can change,
    /// given that every point of the period lies in `[y_lo, y_hi]`. Unless
    /// `Needed`, the last point is then passed in exactly and the points
    /// between are not: the commands between are the two the sample and
    /// the last point carry, so only the outputs need the bound.
    fn interior(&self, _y_lo: f64, _y_hi: f64) -> Interior {
        Interior::Needed
    }
    /// True when an output in `[y_lo, y_hi]` could raise the peak this
    /// sink keeps (see `Interior::PeakOnly`).
    fn could_raise_peak(&self, _y_lo: f64, _y_hi: f64) -> bool {
        false
    }
    /// An output point passed in late, for the peak only (a maximum does
    /// not depend on the order of its terms).
    fn late_peak(&mut self, _y: f64) {}
}

/// What the points between a period's sample and its last point can change.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Interior {
    /// Nothing: they need not be computed.
    Irrelevant,
    /// Only the peak (a running maximum): they may be computed later and
    /// passed to `late_peak`, and need not be at all once the peak seen so
    /// far is above them. Every other figure is unaffected by them.
    PeakOnly,
    /// Every point must be passed in, in order.
    Needed,
}

impl ResponseSink for Vec<TracePoint> {
    fn point(&mut self, p: TracePoint) {
        self.push(p);
    }
}

/// True when `[lo, hi]` lies wholly on one side of the closed band
/// `[c - half, c + half]`: every point in it is inside, or every one is
/// outside (so a run of such points enters or leaves the band nowhere).
fn one_side_of_band(lo: f64, hi: f64, c: f64, half: f64) -> bool {
    (lo >= c - half && hi <= c + half) || hi < c - half || lo > c + half
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
    fn interior(&self, y_lo: f64, y_hi: f64) -> Interior {
        let yf = self.y_final;
        if yf == 0.0 {
            // Only the command peak is measured (no overshoot, rise or
            // settling figure exists), and it sees every command.
            return Interior::Irrelevant;
        }
        // Fraction of y_final, as `push` measures it (only while the rise
        // is still open: a NaN or infinite bound is refused either way).
        let rise_fixed = if self.t90.is_some() {
            y_lo.is_finite() && y_hi.is_finite()
        } else {
            let (f_lo, f_hi) = if yf > 0.0 {
                (y_lo / yf, y_hi / yf)
            } else {
                (y_hi / yf, y_lo / yf)
            };
            (self.t10.is_some() || f_hi < 0.1) && f_hi < 0.9 && f_lo.is_finite()
        };
        let others_fixed = rise_fixed && one_side_of_band(y_lo, y_hi, yf, self.band_abs);
        if !others_fixed {
            Interior::Needed
        } else if self.could_raise_peak(y_lo, y_hi) {
            Interior::PeakOnly
        } else {
            Interior::Irrelevant
        }
    }
    fn could_raise_peak(&self, y_lo: f64, y_hi: f64) -> bool {
        let yf = self.y_final;
        let dev_hi = if yf > 0.0 { y_hi - yf } else { yf - y_lo };
        // A NaN bound counts as able to raise the peak (never skipped).
        let below = dev_hi <= self.peak_dev;
        yf != 0.0 && !below
    }
    fn late_peak(&mut self, y: f64) {
        let yf = self.y_final;
        if yf != 0.0 {
            self.peak_dev = self.peak_dev.max((y - yf) * yf.signum());
        }
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
    fn interior(&self, y_lo: f64, y_hi: f64) -> Interior {
        if self.could_raise_peak(y_lo, y_hi) {
            Interior::PeakOnly
        } else {
            Interior::Irrelevant
        }
    }
    fn could_raise_peak(&self, y_lo: f64, y_hi: f64) -> bool {
        // A NaN bound counts as able to raise the peak (never skipped).
        let below = y_lo.abs().max(y_hi.abs()) <= self.peak;
        !below
    }
    fn late_peak(&mut self, y: f64) {
        self.peak = self.peak.max(y.abs());
    }
}

impl ResponseSink for Recovery {
    fn point(&mut self, p: TracePoint) {
        self.push(p.t, p.y);
    }
    fn finished(&self, bound: f64, _u_bound: f64) -> bool {
        self.since.is_some() && bound <= self.threshold
    }
    fn interior(&self, y_lo: f64, y_hi: f64) -> Interior {
        if one_side_of_band(y_lo, y_hi, self.yd_final, self.threshold) {
            Interior::Irrelevant
        } else {
            Interior::Needed
        }
    }
}

#[inline(always)]
fn dot(row: &[f64], v: &[f64]) -> f64 {
    row.iter().zip(v).map(|(x, y)| x * y).sum::<f64>()
}

/// The exact sampled-data simulation: feeds `sink` every output point
/// (sample instants and `points_per_period - 1` points between). Stops at
/// `periods`, or, given the fixed point (and a certificate), as soon as
/// the sink says no later point can change its result. In a period where
/// a cheap bound proves the points between the sample and the period's
/// last point cannot change the result, only those two are computed and
/// passed on. Returns the number of periods run.
#[allow(clippy::too_many_arguments)]
pub fn simulate_sampled<S: ResponseSink + ?Sized>(
    cl: &ClosedLoop,
    map: &OutputMap,
    period_s: f64,
    r: f64,
    w: f64,
    periods: usize,
    end: Option<(&DVector<f64>, Option<&Certificate>)>,
    sink: &mut S,
) -> usize {
    // The loop size is made a compile-time constant for the usual sizes,
    // so the short dot products below are unrolled and unchecked; the
    // arithmetic (and so every output bit) is the same in every copy.
    macro_rules! sized {
        ($($d:literal)*) => {
            match map.dim {
                $($d => kernel::<$d, { $d + 3 }, S>(cl, map, period_s, r, w, periods, end, sink),)*
                _ => kernel::<0, 0, S>(cl, map, period_s, r, w, periods, end, sink),
            }
        };
    }
    sized!(1 2 3 4 5 6 7 8 9 10 11 12)
}

/// `simulate_sampled` for a loop of `D` states, `R = D + 3` rows in a
/// period's product (`D = R = 0`: any size, read from the map).
#[allow(clippy::too_many_arguments)]
fn kernel<const D: usize, const R: usize, S: ResponseSink + ?Sized>(
    cl: &ClosedLoop,
    map: &OutputMap,
    period_s: f64,
    r: f64,
    w: f64,
    periods: usize,
    end: Option<(&DVector<f64>, Option<&Certificate>)>,
    sink: &mut S,
) -> usize {
    // Plain arrays whose lengths are constants in the sized copies: this
    // loop runs thousands of times per evaluation on matrices of size ~8,
    // where generic small-matrix code spends more on bookkeeping than on
    // arithmetic, and where a working vector left in memory costs a
    // store-to-load round trip per term. Matrix-vector products run column
    // by column so the rows advance together (vectorizable), each row still
    // summed from -0.0 in column order: bit for bit the dot product `dot`
    // computes.
    let dim = if D == 0 { map.dim } else { D };
    let n = map.n;
    let np = map.np;
    let g = &map.g[..np * dim];
    let g_cols = &map.g_cols[..np * dim];
    let mut drive = Buf::<D>::new(dim);
    for (i, d) in drive.as_mut().iter_mut().enumerate() {
        *d = cl.br[i] * r + cl.bw[i] * w;
    }
    let drive = drive.as_ref();
    let h: Vec<f64> = (0..np).map(|j| map.hr[j] * r + map.hw[j] * w).collect();
    let h = &h[..np];
    let ku: &[f64] = &cl.ku.as_slice()[..dim];
    let u_off = cl.dur * r + cl.duw * w;
    let last = np.saturating_sub(1);
    // Time of the last point from the period's start, and which command
    // the sample and the last point carry (before or after the delay).
    let last_offset = last as f64 * period_s / np as f64;
    let (sample_prev, last_prev) = (map.holds_previous[0], map.holds_previous[last]);
    let offsets: Vec<f64> = (0..np).map(|j| j as f64 * period_s / np as f64).collect();
    let u_at = |j: usize, u_prev: f64, u_k: f64| {
        if map.holds_previous[j] { u_prev } else { u_k }
    };
    let h_abs = h.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let spread_w = &map.spread[..dim];
    let g_abs = &map.g_abs[..dim];
    // Fixed-point residuals: the computed outputs and commands at the
    // computed fixed point are not exactly equal from point to point; the
    // bounds below add these differences so they speak of computed values.
    let ends = end.map(|(z_end, cert)| {
        let z_end = &z_end.as_slice()[..dim];
        let y_ends: Vec<f64> = (0..np)
            .map(|j| dot(&g[j * dim..(j + 1) * dim], z_end) + h[j])
            .collect();
        let y_end = y_ends[0];
        let y_res = y_ends.iter().fold(0.0f64, |m, v| m.max((v - y_end).abs()));
        let u_end = dot(ku, z_end) + u_off;
        let u_res = (z_end[n] - u_end).abs();
        // Output and command scale at the fixed point (rounding margins).
        let y_scale = h_abs + dot_abs(g_abs, z_end);
        let u_scale = u_off.abs() + dot_abs(ku, z_end) + z_end[n].abs();
        (z_end, cert, y_res, u_res, y_scale, u_scale)
    });
    // One product per period gives the next state (before its drive),
    // the command u_k, the sample and the period's last point.
    let rows = dim + 3;
    let step_cols = &map.step_cols[..rows * dim];
    let mut z = Buf::<D>::new(dim);
    let mut out = Buf::<R>::new(rows);
    let mut dz = Buf::<D>::new(dim);
    let mut ys = Scratch::new(np);
    let mut pending = Pending {
        states: Vec::new(),
        ranges: Vec::new(),
        dim,
    };
    let mut k = 0;
    while k < periods {
        let z = z.as_mut();
        let out = out.as_mut();
        mat_vec(step_cols, z, out);
        let u_prev = z[n];
        let u_k = out[dim] + u_off;
        let y0 = out[dim + 1] + h[0];
        let t0 = k as f64 * period_s;
        let mut interior = Interior::Needed;
        let sample = TracePoint {
            t: t0,
            y: y0,
            u: if sample_prev { u_prev } else { u_k },
            sample: true,
        };
        if let Some((z_end, cert, y_res, u_res, y_scale, u_scale)) = ends {
            let dz = dz.as_mut();
            for ((d, a), b) in dz.iter_mut().zip(z.iter()).zip(z_end) {
                *d = a - b;
            }
            // Sizes for bounds only (no figure is made of them), so summed
            // in whatever order is fastest; the margins cover the rounding.
            let dz_scale = weighted_abs_sum(g_abs, dz);
            let spread = weighted_abs_sum(spread_w, dz);
            // |z| <= |z_end| + |dz|, so the terms of any output now or later
            // (later ones decay) sum to at most y_scale + dz_scale.
            let margin = y_res + ROUNDING_MARGIN * (y_scale + dz_scale);
            if k % 4 == 0
                && let Some(c) = cert
            {
                let u_margin = u_res + ROUNDING_MARGIN * (u_scale + dot_abs(ku, dz) + dz[n].abs());
                // `finished` only gets harder with a larger bound: when the
                // margins alone do not finish the run, no bound can.
                if sink.finished(margin, u_margin) {
                    // Deferred points first: the peak they may raise is
                    // part of what `finished` compares against.
                    pending.resolve(sink, g_cols, h, np);
                    let (by, bu) = c.bound(dz);
                    if sink.finished(by + margin, bu + u_margin) {
                        break;
                    }
                }
            }
            sink.point(sample);
            // Every point of the period: y_j - y_0 = (g_j - g_0) . dz (plus
            // the fixed-point residual), so it lies within `spread`.
            let reach = spread + margin;
            if np > 1 {
                interior = sink.interior(y0 - reach, y0 + reach);
                if interior == Interior::PeakOnly {
                    pending.push(z, y0 - reach, y0 + reach);
                    if pending.len() >= PENDING_CAP {
                        pending.resolve(sink, g_cols, h, np);
                    }
                }
            }
        } else {
            sink.point(sample);
        }
        if interior != Interior::Needed {
            sink.point(TracePoint {
                t: t0 + last_offset,
                y: out[dim + 2] + h[last],
                u: if last_prev { u_prev } else { u_k },
                sample: false,
            });
        } else if np > 1 {
            mat_vec(g_cols, z, &mut ys[..np]);
            for j in 1..np {
                sink.point(TracePoint {
                    t: t0 + offsets[j],
                    y: ys[j] + h[j],
                    u: u_at(j, u_prev, u_k),
                    sample: false,
                });
            }
        }
        for ((zi, o), d) in z.iter_mut().zip(out.iter()).zip(drive) {
            *zi = o + d;
        }
        k += 1;
    }
    pending.resolve(sink, g_cols, h, np);
    k
}

/// A working vector of the kernel: an array of the compile-time length
/// `N` in the sized copies (so it stays in registers), a `Vec` of the
/// given length in the any-size copy (`N = 0`).
struct Buf<const N: usize> {
    arr: [f64; N],
    vec: Vec<f64>,
}

impl<const N: usize> Buf<N> {
    fn new(len: usize) -> Buf<N> {
        Buf {
            arr: [0.0; N],
            vec: if N == 0 { vec![0.0; len] } else { Vec::new() },
        }
    }

    #[inline(always)]
    fn as_mut(&mut self) -> &mut [f64] {
        if N > 0 { &mut self.arr } else { &mut self.vec }
    }

    #[inline(always)]
    fn as_ref(&self) -> &[f64] {
        if N > 0 { &self.arr } else { &self.vec }
    }
}

/// `sum_i w_i |v_i|` in four interleaved partial sums (a bound's size, not
/// a figure: the order of the sum does not matter to any result).
#[inline(always)]
fn weighted_abs_sum(w: &[f64], v: &[f64]) -> f64 {
    let (mut a0, mut a1, mut a2, mut a3) = (0.0f64, 0.0f64, 0.0f64, 0.0f64);
    let (wc, vc) = (w.chunks_exact(4), v.chunks_exact(4));
    for (a, b) in wc.remainder().iter().zip(vc.remainder()) {
        a0 += a * b.abs();
    }
    for (a, b) in wc.zip(vc) {
        a0 += a[0] * b[0].abs();
        a1 += a[1] * b[1].abs();
        a2 += a[2] * b[2].abs();
        a3 += a[3] * b[3].abs();
    }
    (a0 + a1) + (a2 + a3)
}

/// Most periods whose interior is deferred (`Interior::PeakOnly`) before
/// they are resolved; bounds the memory a run holds.
const PENDING_CAP: usize = 64;

/// Periods whose points between the sample and the last point matter only
/// to the peak: their states, to compute those points later if the peak
/// has not passed them by then.
struct Pending {
    states: Vec<f64>,
    ranges: Vec<(f64, f64)>,
    dim: usize,
}

impl Pending {
    fn len(&self) -> usize {
        self.ranges.len()
    }

    fn push(&mut self, z: &[f64], lo: f64, hi: f64) {
        self.states.extend_from_slice(z);
        self.ranges.push((lo, hi));
    }

    /// Pass the points between sample and last point of every deferred
    /// period that could still raise the peak to `late_peak`; forget all.
    fn resolve<S: ResponseSink + ?Sized>(
        &mut self,
        sink: &mut S,
        g_cols: &[f64],
        h: &[f64],
        np: usize,
    ) {
        let mut ys = Scratch::new(np);
        for (i, &(lo, hi)) in self.ranges.iter().enumerate() {
            if sink.could_raise_peak(lo, hi) {
                let z = &self.states[i * self.dim..(i + 1) * self.dim];
                mat_vec(g_cols, z, &mut ys);
                for j in 1..np.saturating_sub(1) {
                    sink.late_peak(ys[j] + h[j]);
                }
            }
        }
        self.states.clear();
        self.ranges.clear();
    }
}

/// Working storage of the simulation: on the stack when small (so the
/// sized copies keep it in registers), on the heap otherwise.
enum Scratch {
    Stack([f64; SCRATCH], usize),
    Heap(Vec<f64>),
}

/// Largest vector kept on the stack by `Scratch`.
const SCRATCH: usize = 16;

impl Scratch {
    fn new(len: usize) -> Scratch {
        if len <= SCRATCH {
            Scratch::Stack([0.0; SCRATCH], len)
        } else {
            Scratch::Heap(vec![0.0; len])
        }
    }
}

impl std::ops::Deref for Scratch {
    type Target = [f64];
    fn deref(&self) -> &[f64] {
        match self {
            Scratch::Stack(a, len) => &a[..*len],
            Scratch::Heap(v) => v,
        }
    }
}

impl std::ops::DerefMut for Scratch {
    fn deref_mut(&mut self) -> &mut [f64] {
        match self {
            Scratch::Stack(a, len) => &mut a[..*len],
            Scratch::Heap(v) => v,
        }
    }
}

/// `sum_i |a_i| |b_i|`: the size of the terms of a dot product.
#[inline(always)]
fn dot_abs(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x.abs() * y.abs()).sum()
}

/// The horizon of a stable sampled loop in periods: `horizon_steps` of
/// its slowest pole, without a cap (a long horizon is jumped through, not
/// walked), and at most 2^52 periods so that it stays an exact integer.
pub fn horizon_periods(poles: &[C64], dim: usize) -> u64 {
    let rho = poles.iter().map(|p| p.norm()).fold(0.0, f64::max);
    let want = horizon_steps(rho, dim).ceil();
    if want.is_finite() && want >= 1.0 {
        want.min(2f64.powi(52)) as u64
    } else {
        (dim + 2) as u64
    }
}

/// Step and disturbance figures of a stable sampled loop.
///
/// The horizon comes from the slowest pole (decay to `DECAY_TARGET`,
/// padded; no cap in periods). The figures are those of a walk through
/// every point of every period of the horizon, found with work that does
/// not grow with its length (`stretch`); a figure the bound at the horizon
/// cannot settle is listed in `undecided`.
pub fn sampled_figures(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
) -> Result<(StepFigures, DisturbanceFigures), ResponseError> {
    let ends = Ends::new(cl, hold)?;
    Ok(figures_from_ends(cl, hold, poles, opts, ends))
}

/// `sampled_figures` around fixed points `zr` (step) and `zw` (load step)
/// found elsewhere: the continuous design's grid has a loop matrix close
/// to I, whose own fixed-point solve would lose digits that the solve on
/// the continuous matrix keeps.
pub fn sampled_figures_around(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
    zr: DVector<f64>,
    zw: DVector<f64>,
) -> (StepFigures, DisturbanceFigures) {
    let ends = Ends::around(cl, hold, zr, zw);
    figures_from_ends(cl, hold, poles, opts, ends)
}

fn figures_from_ends(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
    ends: Ends,
) -> (StepFigures, DisturbanceFigures) {
    let map = OutputMap::new(cl, hold);
    let rows = map.bounded_rows(cl);
    let modal = Certificate::modal(cl, &rows, poles, Conditioning::Balanced);
    // Without a modal form here, the controller's basis is tried before the
    // energy bound is built (that bound is only the last resort, and the
    // dearest: a doubling of dense products).
    if modal.is_none()
        && let Some((moved, moved_poles, moved_ends)) = in_controller_basis(cl, &ends)
    {
        let map = OutputMap::new(&moved, hold);
        let rows = map.bounded_rows(&moved);
        let cert = Certificate::modal(&moved, &rows, &moved_poles, Conditioning::Balanced);
        if cert.is_some() {
            return figures_on(&moved, hold, poles, opts, moved_ends, &map, cert.as_ref());
        }
    }
    // Then the modes' condition measured with the states rescaled to their
    // eigenvectors (`Conditioning::Rescaled`), last before the energy bound.
    let cert = modal
        .or_else(|| Certificate::modal(cl, &rows, poles, Conditioning::Rescaled))
        .or_else(|| Certificate::energy(cl, &rows));
    figures_on(cl, hold, poles, opts, ends, &map, cert.as_ref())
}

/// The loop in the controller's modal coordinates
/// (`certificate::controller_basis`, `z = S z'`), its eigenvalues and its
/// fixed points: the same loop (same outputs, commands and figures), in
/// coordinates where a controller far faster than its poles neither makes
/// the modes look ill-conditioned nor carries states of a size whose
/// differences the outputs read (which jumps by matrix powers would round
/// away). None when that basis does not exist.
fn in_controller_basis(cl: &ClosedLoop, ends: &Ends) -> Option<(ClosedLoop, Vec<C64>, Ends)> {
    let (s, sinv) = crate::sampled::certificate::controller_basis(cl)?;
    let moved = ClosedLoop {
        a: &sinv * &cl.a * &s,
        br: &sinv * &cl.br,
        bw: &sinv * &cl.bw,
        ku: (cl.ku.transpose() * &s).transpose(),
        dur: cl.dur,
        duw: cl.duw,
        plant_states: cl.plant_states,
    };
    let poles = moved.poles().ok()?;
    if crate::sampled::closed_loop::ClosedLoop::stability(&poles)
        != crate::sampled::closed_loop::Stability::Stable
    {
        return None;
    }
    // Fixed points solved in the new coordinates (mapping the old ones
    // would carry their rounding, of the size of the large controller
    // states, into every later state); the final values the figures are
    // measured against stay those of the loop as given.
    let ends = Ends {
        zr: moved.fixed_point(1.0, 0.0)?,
        zw: moved.fixed_point(0.0, 1.0)?,
        ..*ends
    };
    Some((moved, poles, ends))
}

#[allow(clippy::too_many_arguments)]
fn figures_on(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
    ends: Ends,
    map: &OutputMap,
    cert: Option<&Certificate>,
) -> (StepFigures, DisturbanceFigures) {
    let periods = horizon_periods(poles, cl.a.nrows());
    let jumps = Stretches::new(cl, map, cert, hold.period_s, periods);
    let t = hold.period_s;
    let horizon_s = periods as f64 * t;
    let yf = ends.y_final;
    let at = |i: Instant| match i {
        Instant::At(t) => Some(t),
        _ => None,
    };
    let s = jumps.step(
        &ends.zr,
        ends.y_final,
        ends.u_final,
        opts.band,
        &opts.wanted,
    );
    let step_open = !s.peak_decided
        || !s.u_decided
        || [s.t10, s.t90, s.settled_since].contains(&Instant::Undecided);
    let step = if step_open {
        // The stretch bounds could not decide it within their budget:
        // walk this response (bound-backed early stop, no cap in periods).
        walk_step(cl, map, t, periods, &ends, cert, opts)
    } else {
        StepFigures {
            y_final: yf,
            overshoot_pct: (yf != 0.0).then(|| (s.peak_dev / yf.abs() * 100.0).max(0.0)),
            settling_time_s: if yf == 0.0 { None } else { at(s.settled_since) },
            rise_time_s: match (at(s.t10), at(s.t90)) {
                (Some(a), Some(b)) => Some(b - a),
                _ => None,
            },
            u_peak: s.u_peak,
            horizon_s,
            undecided: Vec::new(),
            not_computed: opts.wanted.step_left_out(),
        }
    };
    if !opts.wanted.load_step {
        return (step, DisturbanceFigures::not_computed(ends.yd_final));
    }
    let d = jumps.disturbance(&ends.zw, ends.yd_final, opts.band);
    let dist = if !d.peak_decided || d.since == Instant::Undecided {
        walk_disturbance(cl, map, t, periods, &ends, cert, opts)
    } else {
        DisturbanceFigures {
            computed: true,
            disturbance_peak: d.peak,
            yd_final: ends.yd_final,
            recovery_time_s: at(d.since),
            undecided: Vec::new(),
        }
    };
    (step, dist)
}

/// Most periods a fallback walk goes through (`walk_step`,
/// `walk_disturbance`): the walk is the route only when the stretch
/// searches ran out of their budget, and its work grows with the periods
/// walked, so it is bounded too. A figure the walk has not fixed within
/// this many periods is undecided (its own status), never a time.
pub const WALK_BUDGET: u64 = 1 << 20;

/// The states whose walk `WALK_BUDGET` periods long is the most work a
/// walk may do: a period of the walk costs about the square of the loop's
/// states, so a larger loop (a transport delay of many periods is one
/// state a period) walks proportionally fewer periods. A loop with 141
/// such states walked its million periods for 7.6 s at 141 kHz.
const WALK_BUDGET_STATES: u64 = 32;

/// The periods a fallback walk of a loop of `cl`'s size may go through:
/// at most `periods`, `opts.walk_budget`, and the work of `WALK_BUDGET`
/// periods of a `WALK_BUDGET_STATES`-state loop.
fn walk_periods(cl: &ClosedLoop, periods: u64, opts: &TimeOptions) -> usize {
    let dim = (cl.a.nrows() as u64).max(WALK_BUDGET_STATES);
    let work = WALK_BUDGET * WALK_BUDGET_STATES * WALK_BUDGET_STATES / (dim * dim);
    periods.min(opts.walk_budget).min(work) as usize
}

/// The step by walking every period (points between samples skipped or
/// deferred where a bound allows, stopped early on the certificate), over
/// the horizon or `opts.walk_budget` periods, whichever is shorter. A figure
/// the walk has not fixed when it ends is undecided.
fn walk_step(
    cl: &ClosedLoop,
    map: &OutputMap,
    t: f64,
    periods: u64,
    ends: &Ends,
    cert: Option<&Certificate>,
    opts: &TimeOptions,
) -> StepFigures {
    let band = opts.band;
    let n = walk_periods(cl, periods, opts);
    let cut = (n as u64) < periods;
    let mut m = StepMetrics::new(ends.y_final, band).with_u_final(ends.u_final);
    let end = Some((&ends.zr, cert));
    let run = simulate_sampled(cl, map, t, 1.0, 0.0, n, end, &mut m);
    let mut f = m.finish(periods as f64 * t, false);
    if run >= n {
        // Not stopped by the certificate: what it has not fixed is open.
        if ends.y_final != 0.0 {
            if !m.settled_for_good() || cut {
                f.settling_time_s = None;
                f.undecided.push(TimeFigure::SettlingTime);
            }
            if f.rise_time_s.is_none() {
                f.undecided.push(TimeFigure::RiseTime);
            }
        }
        if cut {
            // Stopped by the work bound before the horizon: a later point
            // may still raise a peak.
            if ends.y_final != 0.0 {
                f.overshoot_pct = None;
                f.undecided.push(TimeFigure::Overshoot);
            }
            f.undecided.push(TimeFigure::CommandPeak);
        }
    }
    f
}

/// The load step by walking (see `walk_step`).
fn walk_disturbance(
    cl: &ClosedLoop,
    map: &OutputMap,
    t: f64,
    periods: u64,
    ends: &Ends,
    cert: Option<&Certificate>,
    opts: &TimeOptions,
) -> DisturbanceFigures {
    let band = opts.band;
    let end = Some((&ends.zw, cert));
    // From |yd_final|: the peak is the supremum over t >= 0, the limit
    // included (`Stretches::disturbance`).
    let mut peak = Peak {
        y_final: ends.yd_final,
        peak: ends.yd_final.abs(),
    };
    let n = walk_periods(cl, periods, opts);
    let cut = (n as u64) < periods;
    let run_peak = simulate_sampled(cl, map, t, 0.0, 1.0, n, end, &mut peak);
    let mut rec = Recovery {
        yd_final: ends.yd_final,
        threshold: band * peak.peak,
        since: None,
        prev: None,
    };
    let run_rec = simulate_sampled(cl, map, t, 0.0, 1.0, n, end, &mut rec);
    let mut undecided = Vec::new();
    let peak_open = run_peak >= n;
    if peak_open {
        undecided.push(TimeFigure::DisturbancePeak);
    }
    if run_rec >= n && (rec.since.is_none() || peak_open || cut) {
        undecided.push(TimeFigure::RecoveryTime);
    }
    DisturbanceFigures {
        computed: true,
        disturbance_peak: peak.peak,
        yd_final: ends.yd_final,
        recovery_time_s: if undecided.contains(&TimeFigure::RecoveryTime) {
            None
        } else {
            rec.since
        },
        undecided,
    }
}

/// Why the time figures of a loop cannot be computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum ResponseError {
    /// A pole at z = 1: the step and the load step have no final value to
    /// measure against (the loop is marginal, not settling).
    #[error("the closed loop has no steady state (pole at z = 1)")]
    NoSteadyState,
}

/// The fixed points of the step and the load step and the final values
/// the figures are measured against.
struct Ends {
    zr: DVector<f64>,
    zw: DVector<f64>,
    y_final: f64,
    yd_final: f64,
    u_final: f64,
}

impl Ends {
    fn new(cl: &ClosedLoop, hold: &HoldEquivalent) -> Result<Ends, ResponseError> {
        let zr = cl
            .fixed_point(1.0, 0.0)
            .ok_or(ResponseError::NoSteadyState)?;
        let zw = cl
            .fixed_point(0.0, 1.0)
            .ok_or(ResponseError::NoSteadyState)?;
        Ok(Ends::around(cl, hold, zr, zw))
    }

    fn around(cl: &ClosedLoop, hold: &HoldEquivalent, zr: DVector<f64>, zw: DVector<f64>) -> Ends {
        let n = cl.plant_states;
        let output_at = |z: &DVector<f64>, r: f64, w: f64| {
            let x = z.rows(0, n);
            let u = cl.ku.dot(z) + cl.dur * r + cl.duw * w;
            hold.cy.dot(&x) + hold.dy * u + hold.dy_w * w
        };
        Ends {
            y_final: output_at(&zr, 1.0, 0.0),
            yd_final: output_at(&zw, 0.0, 1.0),
            u_final: cl.ku.dot(&zr) + cl.dur,
            zr,
            zw,
        }
    }
}

/// The same figures by walking every point of every period of the horizon
/// (no early stop, no skipped point): the reference `sampled_figures` is
/// checked against. Its cost grows with the horizon in periods.
pub fn walked_figures(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    poles: &[C64],
    opts: &TimeOptions,
) -> Result<(StepFigures, DisturbanceFigures), ResponseError> {
    let periods = horizon_periods(poles, cl.a.nrows()) as usize;
    let map = OutputMap::new(cl, hold);
    let ends = Ends::new(cl, hold)?;
    let t = hold.period_s;
    let mut m = StepMetrics::new(ends.y_final, opts.band).with_u_final(ends.u_final);
    simulate_sampled(cl, &map, t, 1.0, 0.0, periods, None, &mut m);
    let step = m.finish(periods as f64 * t, false);
    // From |yd_final|: the peak is the supremum over t >= 0, the limit
    // included (`Stretches::disturbance`).
    let mut peak = Peak {
        y_final: ends.yd_final,
        peak: ends.yd_final.abs(),
    };
    simulate_sampled(cl, &map, t, 0.0, 1.0, periods, None, &mut peak);
    let mut rec = Recovery {
        yd_final: ends.yd_final,
        threshold: opts.band * peak.peak,
        since: None,
        prev: None,
    };
    simulate_sampled(cl, &map, t, 0.0, 1.0, periods, None, &mut rec);
    Ok((
        step,
        DisturbanceFigures {
            computed: true,
            disturbance_peak: peak.peak,
            yd_final: ends.yd_final,
            recovery_time_s: rec.since,
            undecided: Vec::new(),
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
    let peak = (dist.iter()).fold(yd_final.abs(), |a, v| a.max(v.abs()));
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
            computed: true,
            disturbance_peak: peak,
            yd_final,
            recovery_time_s: rec.since,
            undecided: if capped {
                TimeFigure::LOAD_STEP.to_vec()
            } else {
                Vec::new()
            },
        },
    )
}

/// Most periods a trace for a chart or a file holds point by point
/// (`sampled_trace_spanning`): past it one period in every `stride` is
/// kept, reached by a power of the loop's one-period map, so a trace of
/// any length costs a bounded amount of work and memory.
pub const TRACE_PERIODS: u64 = 4096;

/// Most points a trace holds point by point, whatever a period holds (a
/// lifted cascade period of N inner ticks has 16 N): a cascade's outer
/// trace at ratio 300 once held 200 000 periods of 4 800 points, 24 GB.
pub const TRACE_POINTS: u64 = 1 << 20;

/// Exact step (`r = 1`) or disturbance (`w = 1`) trace of a sampled loop
/// over `periods` periods with at most `TRACE_PERIODS` periods in it: every
/// period when they fit (`sampled_trace`), otherwise every point of one
/// period in every `ceil(periods / TRACE_PERIODS)`, the state jumped
/// from one kept period to the next by the affine map of that many periods
/// (`z -> A^m z + d_m`, by repeated squaring). No cap in periods.
pub fn sampled_trace_spanning(
    cl: &ClosedLoop,
    hold: &HoldEquivalent,
    r: f64,
    w: f64,
    periods: u64,
) -> Vec<TracePoint> {
    let per_period = hold.intersample.len().max(1) as u64;
    let kept = TRACE_PERIODS.min((TRACE_POINTS / per_period).max(1));
    if periods <= kept {
        return sampled_trace(cl, hold, r, w, periods as usize);
    }
    let stride = periods.div_ceil(kept);
    let map = OutputMap::new(cl, hold);
    let dim = map.dim;
    let drive = &cl.br * r + &cl.bw * w;
    // The map of `stride` periods by the binary digits of `stride`: each
    // step composes `(M, d)` with the map of 2^p periods `(P, e)`.
    let (mut m, mut d) = (
        nalgebra::DMatrix::<f64>::identity(dim, dim),
        DVector::zeros(dim),
    );
    let (mut p, mut e) = (cl.a.clone(), drive.clone());
    let mut left = stride;
    while left > 0 {
        if left & 1 == 1 {
            d = &p * &d + &e;
            m = &p * &m;
        }
        left >>= 1;
        if left > 0 {
            e = &p * &e + &e;
            p = &p * &p;
        }
    }
    let t = hold.period_s;
    let np = map.np;
    let u_off = cl.dur * r + cl.duw * w;
    let h: Vec<f64> = (0..np).map(|j| map.hr[j] * r + map.hw[j] * w).collect();
    let mut out = Vec::with_capacity((kept as usize + 1) * np);
    let mut z = DVector::zeros(dim);
    let mut k = 0u64;
    while k < periods {
        let u_k = cl.ku.dot(&z) + u_off;
        for (j, hj) in h.iter().enumerate() {
            out.push(TracePoint {
                t: k as f64 * t + j as f64 * t / np as f64,
                y: dot(&map.g[j * dim..(j + 1) * dim], z.as_slice()) + hj,
                u: if map.holds_previous[j] { z[map.n] } else { u_k },
                sample: j == 0,
            });
        }
        z = &m * &z + &d;
        k += stride;
    }
    out
}
