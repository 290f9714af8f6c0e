//! Loop figures in the frequency domain: gain and phase margins, crossover,
//! the delay-margin estimate and sensitivity peak, from the exact loop gain.
//! What each figure means (which crossing is reported, signs, the ends of
//! the range, when a margin is not located) is fixed in `docs/figures.md`.
//!
//! The grid is built from the loop's own natural frequencies (dense around
//! each, and near Nyquist for a sampled loop), refined where the phase or
//! magnitude moves fast, and every crossing and the sensitivity peak are
//! then refined on the exact expression (Brent, 1e-10 in ln w), so nothing
//! is read off the grid.

use serde::Serialize;

use crate::model::poly::C64;
use crate::model::scalar_solve;

/// Where to look: `(w_lo, w_hi]` in rad/s, and the loop's modes.
#[derive(Debug, Clone)]
pub struct FrequencyRange {
    pub w_lo: f64,
    pub w_hi: f64,
    /// True for a sampled loop: `w_hi` is the Nyquist frequency pi/T, where
    /// the loop gain is real and a -180 deg crossing can sit exactly.
    pub nyquist: bool,
    /// Natural frequency (rad/s) and damping of each pole and zero.
    pub modes: Vec<(f64, f64)>,
}

impl FrequencyRange {
    /// Range and modes for a loop with the given continuous poles and zeros
    /// (rad/s); `w_hi` None means continuous (three decades above the
    /// fastest mode).
    pub fn from_roots(roots: &[C64], w_hi: Option<f64>) -> FrequencyRange {
        let modes: Vec<(f64, f64)> = roots
            .iter()
            .filter(|r| r.norm() > 0.0)
            .map(|r| (r.norm(), (-r.re / r.norm()).abs()))
            .collect();
        let fastest = modes.iter().map(|m| m.0).fold(0.0, f64::max);
        let slowest = modes.iter().map(|m| m.0).fold(f64::INFINITY, f64::min);
        let hi = w_hi.unwrap_or(if fastest > 0.0 { fastest * 1e3 } else { 1e4 });
        let lo = if slowest.is_finite() {
            (slowest / 1e3).min(hi * 1e-6)
        } else {
            hi * 1e-7
        };
        FrequencyRange {
            w_lo: lo,
            w_hi: hi,
            nyquist: w_hi.is_some(),
            modes,
        }
    }
}

/// The frequency-domain figures of one loop.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoopFigures {
    /// The -180 deg crossing nearest to 0 dB, both ends of the range
    /// included, sign kept (negative: the loop only tolerates a gain
    /// *reduction* of that much). None: no crossing, infinite margin (or
    /// not located: see `notes`). See `docs/figures.md`.
    pub gain_margin_db: Option<f64>,
    /// Frequency of that crossing (0 for the low end), Hz.
    pub gain_margin_hz: Option<f64>,
    /// The phase margin of the gain crossing nearest -1 (smallest |PM|),
    /// sign kept, wrapped to (-180, 180]. None: no gain crossing (or not
    /// located: see `notes`).
    pub phase_margin_deg: Option<f64>,
    /// Frequency of that crossing, Hz.
    pub crossover_hz: Option<f64>,
    /// Estimate of the delay margin: `min_i phi_i / w_i` over the gain
    /// crossings, `phi_i` the phase still to go down to the next -180 deg
    /// (mod 360) at crossing i, s. Exact only for a continuous loop; the
    /// exact figure of a sampled loop is `evaluate::Figures::delay_margin_s`.
    pub delay_margin_estimate_s: Option<f64>,
    /// max |1/(1+L)|.
    pub sensitivity_peak: f64,
    pub sensitivity_peak_hz: f64,
    /// Every gain crossing (Hz) and every phase crossing (Hz).
    pub gain_crossings_hz: Vec<f64>,
    pub phase_crossings_hz: Vec<f64>,
    /// The phase still to go down to the next -180 deg (mod 360) at each
    /// gain crossing, deg, in [0, 360), in the order of `gain_crossings_hz`.
    pub phase_to_go_deg: Vec<f64>,
    /// Why a margin was not located, when it was not (|L| = 1 over an
    /// interval, a crossing exactly at an end of the range).
    pub notes: Vec<String>,
}

fn wrap_deg(x: f64) -> f64 {
    let mut v = x % 360.0;
    if v <= -180.0 {
        v += 360.0;
    }
    if v > 180.0 {
        v -= 360.0;
    }
    v
}

fn arg_deg(c: C64) -> f64 {
    c.arg().to_degrees()
}

/// Grid of `(w, L(w))`, adaptively refined where the phase moves more than
/// 30 deg or the magnitude more than a factor e between neighbours.
pub fn loop_grid(l: &dyn Fn(f64) -> C64, range: &FrequencyRange) -> Vec<(f64, C64)> {
    loop_grid_points(l, range)
        .into_iter()
        .map(|p| (p.w, p.l))
        .collect()
}

/// One grid point: `w` (rad/s), `L(w)`, and `ln |L|` and `angle L` (deg),
/// computed once per point (each is read by both of its neighbours' tests
/// in every refinement pass and again by the crossing search).
#[derive(Debug, Clone, Copy)]
struct GridPoint {
    w: f64,
    l: C64,
    ln_mag: f64,
    arg_deg: f64,
}

impl GridPoint {
    fn new(w: f64, l: C64) -> GridPoint {
        GridPoint {
            w,
            l,
            ln_mag: l.norm().ln(),
            arg_deg: arg_deg(l),
        }
    }
}

/// `loop_grid` with each point's magnitude and phase kept.
fn loop_grid_points(l: &dyn Fn(f64) -> C64, range: &FrequencyRange) -> Vec<GridPoint> {
    let (lo, hi) = (range.w_lo, range.w_hi);
    let decades = (hi / lo).log10().max(0.1);
    let n_base = (decades * 30.0).ceil() as usize + 2;
    let mut ws: Vec<f64> = (0..=n_base)
        .map(|i| lo * (hi / lo).powf(i as f64 / n_base as f64))
        .collect();
    for &(wn, zeta) in &range.modes {
        let z = zeta.clamp(1e-4, 1.0);
        for k in [
            -8.0, -4.0, -2.0, -1.0, -0.5, -0.25, 0.0, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0,
        ] {
            let w = wn * (k * z).exp();
            if w > lo && w < hi {
                ws.push(w);
            }
        }
    }
    if range.nyquist {
        for k in 1..=5 {
            ws.push(hi * (1.0 - 10f64.powi(-k)));
        }
    }
    ws.push(hi);
    ws.sort_by(|a, b| a.total_cmp(b));
    ws.dedup_by(|a, b| (*a - *b).abs() <= 1e-12 * *b);
    let mut pts: Vec<GridPoint> = ws.into_iter().map(|w| GridPoint::new(w, l(w))).collect();
    // Adaptive refinement, a bounded number of passes.
    for _ in 0..6 {
        let mut out = Vec::with_capacity(pts.len() * 2);
        let mut added = false;
        for i in 0..pts.len() {
            out.push(pts[i]);
            if i + 1 < pts.len() {
                let (p0, p1) = (pts[i], pts[i + 1]);
                let dphi = wrap_deg(p1.arg_deg - p0.arg_deg).abs();
                let dmag = (p1.ln_mag - p0.ln_mag).abs();
                if (dphi > 30.0 || dmag > 1.0) && p1.w / p0.w > 1.0 + 1e-9 {
                    let wm = (p0.w * p1.w).sqrt();
                    out.push(GridPoint::new(wm, l(wm)));
                    added = true;
                }
            }
        }
        pts = out;
        if !added {
            break;
        }
    }
    pts
}

/// Unwrapped phase (deg) along a grid, continuous from its low end.
pub fn unwrapped_phase(grid: &[(f64, C64)]) -> Vec<f64> {
    let mut out = Vec::with_capacity(grid.len());
    let mut prev: Option<(f64, C64)> = None;
    for &(_, v) in grid {
        let phi = match prev {
            None => arg_deg(v),
            Some((p, pv)) => p + arg_deg(v / pv),
        };
        out.push(phi);
        prev = Some((phi, v));
    }
    out
}

/// `range` extended down for a loop with integrators: |L| grows without
/// bound at low frequency, so if it is still below 1 at the grid's low end
/// and rising towards it, the gain crossing lies lower; the range goes
/// down a decade at a time until |L| exceeds 1 (at most 15 decades).
fn extended_below(l: &dyn Fn(f64) -> C64, range: &FrequencyRange) -> FrequencyRange {
    let mut range = range.clone();
    for _ in 0..15 {
        let (a, b) = (l(range.w_lo).norm(), l(range.w_lo / 10.0).norm());
        if !(a < 1.0 && b > a && a.is_finite() && b.is_finite()) {
            break;
        }
        range.w_lo /= 10.0;
    }
    range
}

/// Every gain crossing of `l` (rad/s) on the grid `points`, ascending,
/// each with the index of the grid point its phase is unwrapped from:
/// sign changes of ln|L| refined in ln w (Brent, 1e-10), and a local
/// extremum of |L| between grid points that pokes across 1 and back with
/// no sign change of ln|L| at any grid point (a broad, shallow bump just
/// touching 1, or a resonance peak): every grid point whose ln|L| is a
/// local maximum below 0 (or minimum above 0) within a factor e of 1 is
/// refined to the exact extremum (Brent, in ln w between its neighbours);
/// if that crosses 1, its two crossings are added (`docs/figures.md`, how
/// crossings are found).
fn gain_crossings(l: &dyn Fn(f64) -> C64, points: &[GridPoint]) -> Vec<(f64, usize)> {
    let tol = 1e-10;
    let mut out: Vec<(f64, usize)> = Vec::new();
    for (i, pair) in points.windows(2).enumerate() {
        let (w0, w1) = (pair[0].w, pair[1].w);
        let (g0, g1) = (pair[0].ln_mag, pair[1].ln_mag);
        if g0.is_finite() && g1.is_finite() && (g0 > 0.0) != (g1 > 0.0) {
            let f = |x: f64| l(x.exp()).norm().ln();
            if let Some(x) = scalar_solve::root(&f, w0.ln(), w1.ln(), tol) {
                out.push((x.exp(), i));
            }
        }
    }
    for i in 1..points.len().saturating_sub(1) {
        let (gl, g, gr) = (points[i - 1].ln_mag, points[i].ln_mag, points[i + 1].ln_mag);
        if !(gl.is_finite() && g.is_finite() && gr.is_finite()) || g.abs() > 1.0 {
            continue;
        }
        // +1 for a maximum below 1, -1 for a minimum above 1.
        // Strict on the left: of two equal neighbours (a grid symmetric
        // about the extremum) only the first is refined.
        let sign = if g < 0.0 && gl < 0.0 && gr < 0.0 && g > gl && g >= gr {
            1.0
        } else if g > 0.0 && gl > 0.0 && gr > 0.0 && g < gl && g <= gr {
            -1.0
        } else {
            continue;
        };
        let (a, b) = (points[i - 1].w.ln(), points[i + 1].w.ln());
        let g = |x: f64| l(x.exp()).norm().ln();
        for w in crossings_of_extremum(&|x| -sign * g(x), &g, (a, b), tol) {
            out.push((w, i));
        }
    }
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

/// The gain crossings of a loop with their phases, unwrapped along the
/// frequency grid: what the exact delay margin counts encirclements of -1
/// from (`delay_margin`, `docs/figures.md`).
#[derive(Debug, Clone, PartialEq)]
pub struct UnwrappedCrossings {
    /// `(w rad/s, phase deg)` at each gain crossing, ascending in `w`; the
    /// phases continuous along the grid from its low end.
    pub at: Vec<(f64, f64)>,
    /// The unwrapped phase at the grid's low end, deg (the branch every
    /// phase is on).
    pub low_phase_deg: f64,
    /// |L| > 1 at the grid's low end.
    pub above_low: bool,
    /// |L| > 1 at the grid's high end.
    pub above_high: bool,
    /// The unwrapped phase at the grid's high end, deg.
    pub high_phase_deg: f64,
}

/// The gain crossings of `l` over `range` (extended down as for
/// `loop_figures`) with unwrapped phases; `branch_deg` puts the low end's
/// phase on the branch nearest to it (so that loops which differ a little
/// unwrap alike), None on the principal one. None when a grid value is not
/// finite or |L| = 1 over an interval or at an end (no crossing set to
/// count from).
pub fn unwrapped_crossings(
    l: &dyn Fn(f64) -> C64,
    range: &FrequencyRange,
    branch_deg: Option<f64>,
) -> Option<UnwrappedCrossings> {
    let range = extended_below(l, range);
    let points = loop_grid_points(l, &range);
    // |L| = 0 (a zero on the circle, e.g. Tustin's at Nyquist) is no
    // crossing; an unbounded or undefined one, or |L| = 1 at a grid point,
    // leaves nothing to count from.
    let unit = |p: &GridPoint| p.ln_mag.abs() <= 1e-9;
    let bad = |p: &GridPoint| p.ln_mag.is_nan() || p.ln_mag == f64::INFINITY || unit(p);
    if points.is_empty() || points.iter().any(bad) {
        return None;
    }
    let grid: Vec<(f64, C64)> = points.iter().map(|p| (p.w, p.l)).collect();
    let mut phase = unwrapped_phase(&grid);
    let shift = branch_deg.map_or(0.0, |b| 360.0 * ((b - phase[0]) / 360.0).round());
    phase.iter_mut().for_each(|v| *v += shift);
    let at: Vec<(f64, f64)> = gain_crossings(l, &points)
        .into_iter()
        .map(|(w, i)| (w, phase[i] + arg_deg(l(w) / grid[i].1)))
        .collect();
    let (first, last) = (points[0], points[points.len() - 1]);
    // A phase unwrapped across a zero of L on the circle is undefined.
    let high_phase = phase[phase.len() - 1];
    if at.iter().any(|c| !c.1.is_finite()) || (last.ln_mag > 0.0 && !high_phase.is_finite()) {
        return None;
    }
    Some(UnwrappedCrossings {
        at,
        low_phase_deg: phase[0],
        above_low: first.ln_mag > 0.0,
        above_high: last.ln_mag > 0.0,
        high_phase_deg: high_phase,
    })
}

/// All loop figures from the exact loop gain `l(w)` (w in rad/s).
pub fn loop_figures(l: &dyn Fn(f64) -> C64, range: &FrequencyRange) -> LoopFigures {
    let range = &extended_below(l, range);
    let points = loop_grid_points(l, range);
    let grid: Vec<(f64, C64)> = points.iter().map(|p| (p.w, p.l)).collect();
    let phase = unwrapped_phase(&grid);
    let two_pi = 2.0 * std::f64::consts::PI;
    let tol = 1e-10;
    let mut gain_x: Vec<(f64, f64)> = gain_crossings(l, &points)
        .into_iter()
        .map(|(w, _)| (w, wrap_deg(180.0 + arg_deg(l(w)))))
        .collect(); // (w, PM deg)
    // Phase crossings at -180 + 360 k, refined on the locally unwrapped phase.
    let mut phase_x: Vec<(f64, f64)> = Vec::new(); // (w, GM dB)
    for i in 0..grid.len().saturating_sub(1) {
        let (q0, q1) = ((phase[i] + 180.0) / 360.0, (phase[i + 1] + 180.0) / 360.0);
        if q0.floor() != q1.floor() {
            let level = -180.0 + 360.0 * q0.floor().max(q1.floor());
            let (w0, l0) = grid[i];
            let base = phase[i];
            let f = |x: f64| base + arg_deg(l(x.exp()) / l0) - level;
            if let Some(x) = scalar_solve::root(&f, w0.ln(), grid[i + 1].0.ln(), tol) {
                let w = x.exp();
                phase_x.push((w, -20.0 * l(w).norm().log10()));
            }
        }
    }
    // The same for the phase: a dip to a -180 deg level (or a bump up to
    // one) between grid points, with no crossing at any grid point: every
    // grid local minimum of the unwrapped phase within `PHASE_TOUCH_DEG`
    // above a level (maximum below one) is refined to the exact extremum,
    // and when that passes the level its two crossings are added
    // (`docs/figures.md`, how crossings are found).
    for i in 1..grid.len().saturating_sub(1) {
        let (pl, p, pr) = (phase[i - 1], phase[i], phase[i + 1]);
        let band = |v: f64| ((v + 180.0) / 360.0).floor();
        if band(pl) != band(p) || band(pr) != band(p) {
            continue; // a crossing at a grid interval, found above
        }
        let (sign, level) = if p < pl && p <= pr {
            (1.0, -180.0 + 360.0 * band(p))
        } else if p > pl && p >= pr {
            (-1.0, 180.0 + 360.0 * band(p))
        } else {
            continue;
        };
        if (p - level).abs() > PHASE_TOUCH_DEG {
            continue;
        }
        let (a, b) = (grid[i - 1].0.ln(), grid[i + 1].0.ln());
        let l0 = grid[i].1;
        // Unwrapped through the grid point: the phase moves less than a
        // half turn between neighbours.
        let to_level = |x: f64| p + arg_deg(l(x.exp()) / l0) - level;
        for w in crossings_of_extremum(&|x| sign * to_level(x), &to_level, (a, b), tol) {
            phase_x.push((w, -20.0 * l(w).norm().log10()));
        }
    }
    phase_x.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut notes = Vec::new();
    // The ends of the range. Where the loop gain of a real loop is real and
    // negative at w -> 0 or at w = pi/T, that end is a -180 deg crossing.
    // With integrators |L| grows without bound at w -> 0: no finite gain
    // change reaches such an end, so it is no crossing (the limit of the
    // phase is -90 deg per integrator; an infinite or zero |L| bounds no
    // gain). A finite low end is recognised by |L| no longer changing a
    // decade below the grid's low end.
    let low_end = {
        let v0 = l(0.0);
        let (a, b) = (l(range.w_lo), l(range.w_lo / 10.0));
        let settled = (b - a).norm() <= 1e-3 * b.norm() && (b - v0).norm() <= 1e-3 * v0.norm();
        (v0.re.is_finite() && v0.im.is_finite() && v0.norm() > 0.0 && settled).then_some(v0)
    };
    if let Some(v0) = low_end {
        end_crossing(v0, 0.0, "w -> 0", &mut phase_x, &mut notes);
    }
    if range.nyquist {
        let (w, v) = grid[grid.len() - 1];
        let near_end = phase_x
            .last()
            .is_some_and(|&(wc, _)| wc >= w * (1.0 - 1e-6));
        if v.im.abs() <= 1e-9 * v.norm() && !near_end {
            end_crossing(v, w, "Nyquist", &mut phase_x, &mut notes);
        }
    }
    // |L| = 1 exactly at an end, or over an interval: no crossing to
    // refine; say so rather than report a number.
    let unit = |p: &GridPoint| p.ln_mag.abs() <= 1e-9;
    if points.first().is_some_and(unit) || points.last().is_some_and(unit) {
        notes.push(
            "|L| = 1 at an end of the frequency range: a gain crossing sits there and its phase margin is not located".into(),
        );
    }
    let mut run = 0usize;
    let mut flat: Option<(f64, f64)> = None;
    for (i, p) in points.iter().enumerate() {
        run = if unit(p) { run + 1 } else { 0 };
        if run >= 3 {
            let start = points[i + 1 - run].w;
            flat = Some((flat.map_or(start, |f| f.0), p.w));
        }
    }
    let flat_gain = flat.is_some();
    if let Some((a, b)) = flat {
        notes.push(format!(
            "|L| = 1 over {:.6e} .. {:.6e} Hz: no single gain crossing, the phase margin and the delay-margin estimate are not located",
            a / two_pi,
            b / two_pi
        ));
    }
    // Sensitivity peak: every local maximum of the grid within 20 % of the
    // largest is refined between its neighbours (two peaks of about the
    // same height can swap places between the grid and the exact curve).
    let s = |w: f64| 1.0 / (C64::new(1.0, 0.0) + l(w)).norm();
    let sv: Vec<f64> = grid
        .iter()
        .map(|&(_, v)| 1.0 / (C64::new(1.0, 0.0) + v).norm())
        .collect();
    let grid_best = sv.iter().copied().fold(0.0, f64::max);
    let mut best = (grid[0].0, sv[0]);
    for (i, (g, &v)) in grid.iter().zip(&sv).enumerate() {
        if v > best.1 {
            best = (g.0, v);
        }
        let left = if i > 0 { sv[i - 1] } else { f64::NEG_INFINITY };
        let right = sv.get(i + 1).copied().unwrap_or(f64::NEG_INFINITY);
        if !(v >= left && v >= right && v >= 0.8 * grid_best) {
            continue;
        }
        let (il, ir) = (i.saturating_sub(1), (i + 1).min(grid.len() - 1));
        if flat_s_ruled_out(&points[il..=ir], grid_best) {
            continue;
        }
        let a = grid[il].0.ln();
        let b = grid[ir].0.ln();
        if b > a {
            let f = |x: f64| -s(x.exp());
            if let Some((x, fx)) = scalar_solve::minimum(&f, a, b, 1e-10, 1e-12)
                && -fx > best.1
            {
                best = (x.exp(), -fx);
            }
        }
    }

    if flat_gain {
        gain_x.clear();
    }
    // The crossing nearest -1: smallest |PM| (a crossing next to +1 reads
    // about -180 after wrapping and is the safest, not the worst).
    let pm = gain_x
        .iter()
        .copied()
        .min_by(|a, b| a.1.abs().total_cmp(&b.1.abs()));
    let gm = phase_x
        .iter()
        .copied()
        .filter(|g| g.1.is_finite())
        .min_by(|a, b| a.1.abs().total_cmp(&b.1.abs()));
    // Phase still to go down to the next -180 deg at each crossing.
    let to_go: Vec<f64> = gain_x
        .iter()
        .map(|&(_, pm)| if pm < 0.0 { pm + 360.0 } else { pm })
        .collect();
    let delay_estimate = gain_x
        .iter()
        .zip(&to_go)
        .map(|(&(w, _), phi)| phi.to_radians() / w)
        .min_by(|a, b| a.total_cmp(b));
    LoopFigures {
        gain_margin_db: gm.map(|g| g.1),
        gain_margin_hz: gm.map(|g| g.0 / two_pi),
        phase_margin_deg: pm.map(|p| p.1),
        crossover_hz: pm.map(|p| p.0 / two_pi),
        delay_margin_estimate_s: delay_estimate,
        sensitivity_peak: best.1,
        sensitivity_peak_hz: best.0 / two_pi,
        gain_crossings_hz: gain_x.iter().map(|g| g.0 / two_pi).collect(),
        phase_crossings_hz: phase_x.iter().map(|g| g.0 / two_pi).collect(),
        phase_to_go_deg: to_go,
        notes,
    }
}

/// True when the sensitivity between the outer two of `pts` (a local
/// maximum of the grid and its neighbours) cannot exceed `grid_best`, so
/// refining it cannot change the peak: where `|L| <= l` at the three
/// points, and the grid keeps `ln |L|` within 1 of its neighbours' (its
/// refinement rule; checked here on both intervals), `|L|` between them is
/// taken at most `e^2 l` and `|S| <= 1 / (1 - e^2 l)`. Without it a fast
/// loop refined every rounding-level ripple of `|S| = 1` between its
/// crossover and Nyquist (about 15 refinements of 30 to 40 loop gains each
/// at 100 kHz on the compare loop, none of which could raise the peak).
fn flat_s_ruled_out(pts: &[GridPoint], grid_best: f64) -> bool {
    let l_max = pts
        .iter()
        .map(|p| p.ln_mag)
        .fold(f64::NEG_INFINITY, f64::max);
    let steps_ok = pts
        .windows(2)
        .all(|w| (w[1].ln_mag - w[0].ln_mag).abs() <= 1.0);
    // Written so that a NaN or an infinite |L| rules nothing out.
    if !(steps_ok && l_max < -3.0) {
        return false;
    }
    let l_in = (l_max + 2.0).exp();
    1.0 / (1.0 - l_in) < grid_best
}

/// How far (deg) a grid extremum of the unwrapped phase may sit from a
/// -180 deg level (on the side it turns back from) to be refined for a
/// crossing pair between grid points: the grid's own refinement keeps
/// neighbours within 30 deg, so a dip deeper than that between them would
/// have split the interval (common practice, no source: the same rule the
/// gain's factor e follows).
const PHASE_TOUCH_DEG: f64 = 30.0;

/// The points (`w` rad/s) where `g` crosses zero next to an extremum
/// between grid neighbours: `f` (`g` signed so that the extremum is its
/// minimum, in `x = ln w` over `(a, b)`) is minimised (Brent); when its
/// minimum lies inside the interval and below zero, `g` has a root on
/// each side of it. None otherwise: no crossing, or a touch exactly at
/// zero.
fn crossings_of_extremum(
    f: &dyn Fn(f64) -> f64,
    g: &dyn Fn(f64) -> f64,
    (a, b): (f64, f64),
    tol: f64,
) -> Vec<f64> {
    let Some((xm, fm)) = scalar_solve::minimum(f, a, b, 1e-10, 1e-12) else {
        return Vec::new();
    };
    if fm >= 0.0 || xm <= a || xm >= b {
        return Vec::new();
    }
    [(a, xm), (xm, b)]
        .into_iter()
        .filter_map(|(lo, hi)| scalar_solve::root(g, lo, hi, tol))
        .map(f64::exp)
        .collect()
}

/// A -180 deg crossing at an end of the range (`w` rad/s, `v` the real
/// loop gain there), when `v` is negative, finite and non-zero; a loop gain
/// of exactly -1 there is noted instead (the loop is on the boundary).
fn end_crossing(v: C64, w: f64, end: &str, phase_x: &mut Vec<(f64, f64)>, notes: &mut Vec<String>) {
    if !(v.re < 0.0 && v.norm().is_finite() && v.norm() > 0.0) {
        return;
    }
    let gm = -20.0 * v.norm().log10();
    if gm.abs() <= 1e-9 {
        notes.push(format!(
            "the loop gain is -1 at the {end} end of the frequency range: the gain margin there is not located"
        ));
        return;
    }
    phase_x.push((w, gm));
    phase_x.sort_by(|a, b| a.0.total_cmp(&b.0));
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A Tustin integrator `K (T/2) (z + 1) / (z - 1)`, with |L| exactly 0
    /// at Nyquist (a zero on the circle is no crossing): |L| =
    /// K T / (2 tan(wT/2)) crosses 1 once, at w = (2/T) atan(K T / 2), with
    /// a phase of exactly -90 deg (closed form).
    #[test]
    fn unwrapped_crossings_of_a_tustin_integrator() {
        let (k, t) = (30.0, 0.01);
        let w_hi = std::f64::consts::PI / t;
        let l = move |w: f64| {
            if w >= w_hi {
                return C64::new(0.0, 0.0);
            }
            let z = C64::from_polar(1.0, w * t);
            (z + 1.0) / (z - 1.0) * (k * t / 2.0)
        };
        let range = FrequencyRange {
            w_lo: 1e-3,
            w_hi,
            nyquist: true,
            modes: Vec::new(),
        };
        let x = unwrapped_crossings(&l, &range, None).expect("countable");
        assert!(x.above_low && !x.above_high);
        assert_eq!(x.at.len(), 1);
        let w = 2.0 / t * (k * t / 2.0).atan();
        assert!((x.at[0].0 / w - 1.0).abs() < 1e-9, "{:?} vs {w}", x.at);
        assert!((x.at[0].1 + 90.0).abs() < 1e-6, "{:?}", x.at);
        // Another branch: every phase moves by whole turns together.
        let y = unwrapped_crossings(&l, &range, Some(-700.0)).expect("countable");
        assert!((y.at[0].1 - x.at[0].1 + 720.0).abs() < 1e-9, "{:?}", y.at);
    }

    #[test]
    fn first_order_with_integrator() {
        // L = k/(s(s+1)), k = 1: |L| = 1 at w^2 (w^2+1) = 1 ->
        // w = sqrt((sqrt(5)-1)/2) = 0.78615 rad/s, PM = 180 - 90 - atan(w)
        // = 51.827 deg (closed form); no -180 crossing (GM infinite).
        let l = |w: f64| {
            let s = C64::new(0.0, w);
            C64::new(1.0, 0.0) / (s * (s + 1.0))
        };
        let range = FrequencyRange::from_roots(&[C64::new(-1.0, 0.0)], None);
        let f = loop_figures(&l, &range);
        let wc = ((5f64.sqrt() - 1.0) / 2.0).sqrt();
        let pm = 90.0 - wc.atan().to_degrees();
        assert!((f.crossover_hz.unwrap() * 2.0 * std::f64::consts::PI - wc).abs() < 1e-9 * wc);
        assert!((f.phase_margin_deg.unwrap() - pm).abs() < 1e-7);
        assert!(f.gain_margin_db.is_none());
        assert!((f.delay_margin_estimate_s.unwrap() - pm.to_radians() / wc).abs() < 1e-8);
    }

    #[test]
    fn third_order_gain_margin() {
        // L = k/(s+1)^3: phase -180 at w = sqrt(3), |L| = k/8 there, so
        // GM = 20 log10(8/k) (closed form).
        let k = 2.0;
        let l = |w: f64| {
            let s = C64::new(0.0, w);
            C64::new(k, 0.0) / ((s + 1.0) * (s + 1.0) * (s + 1.0))
        };
        let range = FrequencyRange::from_roots(&[C64::new(-1.0, 0.0); 3], None);
        let f = loop_figures(&l, &range);
        assert!((f.gain_margin_db.unwrap() - 20.0 * (8.0 / k).log10()).abs() < 1e-8);
        let w180 = f.gain_margin_hz.unwrap() * 2.0 * std::f64::consts::PI;
        assert!((w180 - 3f64.sqrt()).abs() < 1e-9);
    }

    #[test]
    fn phase_dip_to_minus_180_between_grid_points_gives_the_gain_margin() {
        // L = k (1 + s/z)^2 / (s (1 + s/p)^2), z > p: the phase
        // -90 + 2 atan(w/z) - 2 atan(w/p) dips to 90 - 4 atan(r) at
        // w = sqrt(p z), r = sqrt(z/p), and returns to -90; it passes -180
        // when r > 1 + sqrt(2), at the roots of w^2 - (z - p) w + p z = 0
        // (tan(atan(w/p) - atan(w/z)) = 1; closed form). Just past that,
        // the dip lies between grid points: no grid phase below -180.
        let (p, k) = (1.0, 0.8);
        let r = (1.0 + 2f64.sqrt()) * (1.0 + 1e-4);
        let z = r * r * p;
        let l = move |w: f64| {
            let s = C64::new(0.0, w);
            let lead = (s / z + 1.0) * (s / z + 1.0);
            C64::new(k, 0.0) * lead / (s * (s / p + 1.0) * (s / p + 1.0))
        };
        let roots = [
            C64::new(-z, 0.0),
            C64::new(-z, 0.0),
            C64::new(-p, 0.0),
            C64::new(-p, 0.0),
        ];
        let range = FrequencyRange::from_roots(&roots, None);
        let grid: Vec<(f64, C64)> = (loop_grid_points(&l, &range).iter())
            .map(|g| (g.w, g.l))
            .collect();
        let lowest = unwrapped_phase(&grid).into_iter().fold(0.0, f64::min);
        assert!(lowest > -180.0, "the grid itself shows the dip: {lowest}");
        let disc = ((z - p) * (z - p) - 4.0 * p * z).sqrt();
        let gm = [(z - p - disc) / 2.0, (z - p + disc) / 2.0]
            .map(|w| -20.0 * l(w).norm().log10())
            .into_iter()
            .min_by(|a, b| a.abs().total_cmp(&b.abs()))
            .unwrap();
        let f = loop_figures(&l, &range);
        let found = f.gain_margin_db.expect("the dip's crossings are found");
        assert!(
            (found - gm).abs() < 1e-6,
            "GM {found} dB, closed form {gm} dB"
        );
        assert_eq!(f.phase_crossings_hz.len(), 2, "{:?}", f.phase_crossings_hz);
        // By its meaning: the closed loop, s (1 + s/p)^2 + g (1 + s/z)^2 = 0,
        // is stable at the gain k and loses stability once k is raised by
        // the gain margin (the dip then reaches past -1).
        use crate::model::poly::Poly;
        let lag = Poly::new(vec![1.0, 1.0 / p]);
        let lead = Poly::new(vec![1.0, 1.0 / z]);
        let most_right = |g: f64| {
            let den = Poly::new(vec![0.0, 1.0]).mul(&lag).mul(&lag);
            let num = lead.mul(&lead).mul(&Poly::new(vec![g]));
            let roots = den.add(&num).roots().unwrap();
            roots.iter().map(|r| r.re).fold(f64::NEG_INFINITY, f64::max)
        };
        let at_margin = k * 10f64.powf(found / 20.0);
        assert!(most_right(k) < 0.0);
        assert!(most_right(at_margin * 0.999) < 0.0);
        assert!(most_right(at_margin * 1.001) > 0.0);
    }
}
