//! The time figures of the sampled loop with work that does not grow with
//! the number of periods: the response is jumped through in stretches of
//! `2^p` periods (powers of the loop matrix by repeated squaring), and a
//! stretch is looked into only when a bound over all of its points cannot
//! rule out what a figure looks for there (a new peak, a band exit, a 10 %
//! or 90 % crossing). Points between samples are computed only in the
//! single periods a search ends up in. See `docs` in DEVELOPERS.md
//! ("Invariants") for the rule this follows: every shortcut is backed by a
//! bound.
//!
//! # The timeline as a tree
//!
//! With `dz_k = z_k - z_final` the loop's state error, `dz_{k+m} = A^m dz_k`
//! exactly, so the state at the start of any stretch follows from the
//! state at the start of its parent by one product with a stored power
//! `A^(2^p)`. The horizon's periods `[0, K)` are the leaves of a binary tree
//! whose node at level p covers `2^p` periods; one more node, the tail,
//! covers every period from K on.
//!
//! # Bounds over a stretch
//!
//! With the loop's checked modal form (`certificate::Mode`), the deviation
//! of output point j of period `k + q` from its final value is
//! `sum_l w_l Re(c_l gamma_lj lambda_l^q)`, `c_l` the mode's coordinate at
//! period k. Over `q in [0, m)` each term is bounded by itself:
//!
//! - a real mode `lambda >= 0` by `Re(c gamma_j)` times `[lambda^(m-1), 1]`
//!   (the term keeps its sign and shrinks, so a response creeping up to its
//!   final value is bounded on the right side of it);
//! - a real mode `lambda < 0` by `Re(c gamma_j)` times `[lambda, 1]`;
//! - a conjugate pair by `2 |c| |gamma_j| rho^q cos(arg c + arg gamma_j + q theta)`,
//!   the cosine bounded over the phase the stretch sweeps (`(m-1) theta`
//!   plus the spread of `arg gamma_j` over the period), so a lightly damped
//!   oscillation is ruled out of a stretch between its peaks.
//!
//! The command `u_q` (q in the stretch) is bounded the same way with
//! `kappa = ku . v` in place of `gamma_j`, and the command still held at
//! the stretch's start is computed exactly. Without a modal form (a
//! defective or ill-conditioned mode), the output-energy bound of
//! `certificate` bounds every later point around the final value instead.
//! Every bound is widened by margins for rounding (as the walk's stop
//! bounds are) and by the modal residual allowance.
//!
//! Those boxes, one a mode, cannot see that the modes' terms cancel where
//! the response is flat (near a peak the slope is nearly 0 while each
//! term moves): their sum over a stretch of `m` periods is too wide by
//! about the stretch's length, so a peak search opened every period within
//! `sqrt(T)` of the peak, a number growing as `sqrt(rate)`. A second bound,
//! the slope form (`Slope`), is taken with them (both hold, so their
//! intersection does): the exact deviations of the stretch's first two
//! periods make a straight line in q, the modes slow against the stretch
//! (`(m - 1) |lambda - 1| <= 1`) follow it up to a remainder
//! `|lambda - 1|^2 q (q - 1) / 2`, and the others enter with their boxes
//! less their part of the line. Near a peak it is tight to second order,
//! and the number of single periods a search opens no longer grows with
//! the rate (the compare loop's peak searches: 2 single periods at 1 kHz
//! and at 100 kHz; 38 and 389 with the boxes alone).
//!
//! The line's remainder still bounds the response's bend by the modes'
//! magnitudes, so near a peak a peak search kept a few stretches open at
//! every level of the tree, whose depth grows with the rate (8 bounds a
//! level on the evaluation bench's loop). A third form, the parabola
//! through the stretch's first three periods with the remainder
//! `|lambda - 1|^3 C(q, 3)`, follows the bend with its cancellations and is
//! intersected too: the bench loop's two peak searches compute 110 bounds
//! at 100 kHz where the line alone needed 244 (86 and 142 at 1 kHz).
//!
//! # Searches
//!
//! - Peaks (overshoot, command peak, disturbance peak): best-first over
//!   the tree, always opening the node with the highest bound; done when
//!   no node's bound exceeds the best point found by more than a
//!   resolution of order 1e-11 of the figure's scale (see `resolution`).
//! - The 10 % and 90 % crossings: depth-first from the left, skipping
//!   nodes that cannot reach the level; the first point at or past it.
//! - Settling and recovery: depth-first from the right, skipping nodes
//!   wholly inside the band; the last point outside it.
//!
//! A figure is decided when the tail's bound rules it out of every period
//! after the horizon; otherwise it is reported as undecided (its own
//! status), never as a time. Each search also stops as undecided after
//! `LEAF_BUDGET` single periods (only reachable without a modal form).
//!
//! The instants and values are those a walk through every point of every
//! period of the horizon finds (same point, same interpolation formulas;
//! the states differ from the walk's only by rounding: values within 1e-9
//! relative, see `docs/rounding.md`), which `tests/stretch_equivalence.rs`
//! checks.

use std::cell::RefCell;
use std::cmp::Ordering;
use std::collections::{BinaryHeap, HashMap};
use std::f64::consts::{PI, TAU};
use std::hash::{BuildHasherDefault, Hasher};
use std::rc::Rc;

use nalgebra::DVector;

use crate::sampled::certificate::{Certificate, Mode};
use crate::sampled::closed_loop::ClosedLoop;
use crate::sampled::output_map::{OutputMap, ROUNDING_MARGIN, crossing, mat_vec};

/// Most single periods one search opens before it gives up (the figure is
/// then undecided here, and `time_response::sampled_figures` walks that
/// response instead). With a modal form a search opens a few (the slope
/// form keeps that number from growing with the rate). Without a modal
/// form (the energy bound cannot tell the phase of an oscillation) the
/// budget can run out.
pub const LEAF_BUDGET: u64 = 1 << 12;

/// Most output points (over every period kept) a run's cache of opened
/// periods holds: 8 MB of values. A lifted cascade period has hundreds of
/// points, and a lightly damped pair opened 8192 periods of 800 points
/// (52 MB an evaluation, a thread) before this cap.
const LEAF_CACHE_POINTS: usize = 1 << 20;

/// Most nodes (of any level) one search looks at: with bounds that rule
/// little out, a search could otherwise open most of a tree of up to 2^52
/// periods without reaching a single period. Past it the figure is
/// undecided here, as past `LEAF_BUDGET`.
pub const NODE_BUDGET: u64 = 64 * LEAF_BUDGET;

/// Loops of up to this many states keep a bound's working vectors on the
/// stack.
const STACK_DIM: usize = 24;

/// When the bounds carry the parabola (`Slope`): only for the output's
/// peak searches (the step's and the load step's), on a tree at least
/// `BEND_MIN_LEVELS` deep (a horizon of 2^14 periods or more: a fast rate
/// against the loop's time scale), with at most `BEND_MAX_POINTS` output
/// points a period. The bend costs products a bound does not otherwise
/// need; it saves bounds only where a peak search keeps stretches open
/// level after level. Measured in instructions (callgrind;
/// `examples/evaluation_count.rs` for the compare loop, see
/// `benches/README.md`): with the parabola in every bound of every
/// search, the motor current loop's pick took 6 % more, the cascade
/// demo's pick 7 % more (lifted periods of hundreds of points), the
/// compare sweep 3 % fewer and the bench loop at 100 kHz 7 % fewer; as
/// gated here (and with the energy bound built only once the controller's
/// basis has failed too, `time_response`), the bench loop at 100 kHz
/// 14 % fewer, the compare sweep 3 % fewer, the motor current loop's and
/// the cascade demo's picks within 1.1 % of before.
const BEND_MIN_LEVELS: usize = 14;
const BEND_MAX_POINTS: usize = 32;

/// Relative size of the rounding of one output or command at the fixed
/// point (dot products of a few tens of terms: about 1e-15; kept wide).
const FLOOR_ROUNDING: f64 = 1e-12;

/// A value carried as an unevaluated sum `hi + lo` of two doubles (about
/// 32 digits), for the squarings of the loop matrix's powers.
#[derive(Debug, Clone, Copy)]
struct DoubleDouble {
    hi: f64,
    lo: f64,
}

impl DoubleDouble {
    /// `a + b` exactly (Knuth's two-sum).
    fn sum(a: f64, b: f64) -> DoubleDouble {
        let s = a + b;
        let bb = s - a;
        DoubleDouble {
            hi: s,
            lo: (a - (s - bb)) + (b - bb),
        }
    }

    /// `2 B + B B` for the row-major `dim x dim` matrix `B`: each product
    /// `hi hi` exact (`two_product`), the cross terms `hi lo` in double,
    /// the sum's rounding errors gathered in `lo`. Each entry sums its
    /// terms in the order of k; the loops run over a row of the result at
    /// a time (k outer, j inner) so that they vectorise.
    fn twice_plus_square(b: &[DoubleDouble], dim: usize) -> Vec<DoubleDouble> {
        let y_hi: Vec<f64> = b.iter().map(|v| v.hi).collect();
        let y_lo: Vec<f64> = b.iter().map(|v| v.lo).collect();
        let y_split: Vec<(f64, f64)> = y_hi.iter().map(|&v| split(v)).collect();
        let mut out = Vec::with_capacity(dim * dim);
        let mut hi = vec![0.0; dim];
        let mut lo = vec![0.0; dim];
        for i in 0..dim {
            for j in 0..dim {
                let own = b[i * dim + j];
                (hi[j], lo[j]) = (2.0 * own.hi, 2.0 * own.lo);
            }
            for k in 0..dim {
                let x = b[i * dim + k];
                if x.hi == 0.0 && x.lo == 0.0 {
                    continue;
                }
                let xs = split(x.hi);
                let row = k * dim..(k + 1) * dim;
                let (yh, yl, ys) = (&y_hi[row.clone()], &y_lo[row.clone()], &y_split[row]);
                for j in 0..dim {
                    let p = x.hi * yh[j];
                    let p_err = two_product_error(xs, ys[j], p);
                    let s = DoubleDouble::sum(hi[j], p);
                    hi[j] = s.hi;
                    lo[j] += s.lo + p_err + (x.hi * yl[j] + x.lo * yh[j]);
                }
            }
            for j in 0..dim {
                out.push(DoubleDouble::sum(hi[j], lo[j]));
            }
        }
        out
    }
}

/// `a = hi + lo` with each half of 26 significant bits (Veltkamp's split),
/// so that products of halves are exact.
#[inline(always)]
fn split(a: f64) -> (f64, f64) {
    let c = 134_217_729.0 * a;
    let hi = c - (c - a);
    (hi, a - hi)
}

/// The rounding error `a b - p` of the product `p = a b`, from the splits
/// `as_`, `bs` of a and b, exactly (Dekker's product; the same number a fused
/// multiply-add `a.mul_add(b, -p)` gives, without a call per product where
/// the fused instruction is not compiled in). Exact unless `a b` overflows
/// or underflows, which the powers of a stable loop matrix do not reach.
#[inline(always)]
fn two_product_error(as_: (f64, f64), bs: (f64, f64), p: f64) -> f64 {
    ((as_.0 * bs.0 - p) + as_.0 * bs.1 + as_.1 * bs.0) + as_.1 * bs.1
}

/// A node's bounds: every output point and every command in it lies in
/// `[y_lo, y_hi]` and `[u_lo, u_hi]`.
#[derive(Debug, Clone, Copy)]
struct Bound {
    y_lo: f64,
    y_hi: f64,
    u_lo: f64,
    u_hi: f64,
}

/// How a row (the output points of a period, or the command) shares in a
/// mode, summarised for the stretch bounds.
#[derive(Debug, Clone)]
struct RowShare {
    /// Real mode: range of `Re(gamma_j)` and largest `|Im(gamma_j)|`.
    re_lo: f64,
    re_hi: f64,
    im_abs: f64,
    /// Conjugate pair: largest and smallest `|gamma_j|`, and the arc of
    /// `arg gamma_j` (radians, unwrapped around `arg gamma_0`).
    g_max: f64,
    g_min: f64,
    arc_lo: f64,
    arc_hi: f64,
}

impl RowShare {
    fn new(values: &[nalgebra::Complex<f64>]) -> RowShare {
        let anchor = values.first().map_or(0.0, |v| v.arg());
        let mut s = RowShare {
            re_lo: f64::INFINITY,
            re_hi: f64::NEG_INFINITY,
            im_abs: 0.0,
            g_max: 0.0,
            g_min: f64::INFINITY,
            arc_lo: f64::INFINITY,
            arc_hi: f64::NEG_INFINITY,
        };
        for v in values {
            s.re_lo = s.re_lo.min(v.re);
            s.re_hi = s.re_hi.max(v.re);
            s.im_abs = s.im_abs.max(v.im.abs());
            s.g_max = s.g_max.max(v.norm());
            s.g_min = s.g_min.min(v.norm());
            let mut d = v.arg() - anchor;
            if d > PI {
                d -= TAU;
            } else if d <= -PI {
                d += TAU;
            }
            s.arc_lo = s.arc_lo.min(anchor + d);
            s.arc_hi = s.arc_hi.max(anchor + d);
        }
        if values.is_empty() {
            s = RowShare {
                re_lo: 0.0,
                re_hi: 0.0,
                im_abs: 0.0,
                g_max: 0.0,
                g_min: 0.0,
                arc_lo: 0.0,
                arc_hi: 0.0,
            };
        }
        s
    }
}

/// A mode with its row shares and, per level p, `|lambda|^(2^p - 1)` and
/// `(2^p - 1) arg lambda` (the decay and the phase a stretch sweeps).
#[derive(Debug, Clone)]
struct StretchMode {
    mode: Mode,
    y: RowShare,
    u: RowShare,
    rho_pow: Vec<f64>,
    sweep: Vec<f64>,
    /// `lambda - 1` (exact in floating point for `lambda` near 1).
    lm1: nalgebra::Complex<f64>,
    /// `gamma_j (lambda - 1)` per output point, and `kappa (lambda - 1)`.
    gamma_d: Vec<nalgebra::Complex<f64>>,
    kappa_d: nalgebra::Complex<f64>,
    /// `gamma_j (lambda - 1)^2` per output point, and `kappa (lambda - 1)^2`.
    gamma_dd: Vec<nalgebra::Complex<f64>>,
    kappa_dd: nalgebra::Complex<f64>,
    /// Per level p: `Some(Rem)` when the mode takes part in the slope
    /// forms over a stretch of `m = 2^p` periods (`(m - 1) |lambda - 1| <= 1`).
    remainder: Vec<Option<Rem>>,
}

/// A slow mode's remainders over a stretch of `m` periods, q in `[0, m)`:
/// `second = |lambda - 1|^2 C(m - 1, 2)` bounds
/// `|lambda^q - 1 - q (lambda - 1)|` (the line's remainder), and
/// `third = |lambda - 1|^3 C(m - 1, 3)` bounds
/// `|lambda^q - 1 - q (lambda - 1) - C(q, 2) (lambda - 1)^2|` (the
/// parabola's), `C` the binomial coefficient (see `Slope`).
#[derive(Debug, Clone, Copy)]
struct Rem {
    second: f64,
    third: f64,
}

/// Range of `cos` over `[a, b]`.
fn cos_range(a: f64, b: f64) -> (f64, f64) {
    // Written so that a NaN gives the whole range.
    if (b - a).partial_cmp(&TAU) != Some(Ordering::Less) {
        return (-1.0, 1.0);
    }
    let (ca, cb) = (a.cos(), b.cos());
    let (mut lo, mut hi) = (ca.min(cb), ca.max(cb));
    if (a / TAU).ceil() * TAU <= b {
        hi = 1.0;
    }
    if ((a - PI) / TAU).ceil() * TAU + PI <= b {
        lo = -1.0;
    }
    (lo, hi)
}

/// Range of the product of two intervals.
fn mul_range(a: (f64, f64), b: (f64, f64)) -> (f64, f64) {
    let p = [a.0 * b.0, a.0 * b.1, a.1 * b.0, a.1 * b.1];
    let lo = p.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = p.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    (lo, hi)
}

impl StretchMode {
    /// Range of `w Re(c gamma_j lambda^q)` over the row's points and
    /// `q in [0, m)`, `m = 2^level` (None: every q >= 0). `c_arg` is
    /// `arg c`, computed here the first time a pair's phase matters (over a
    /// stretch that sweeps a whole turn it does not).
    fn term(
        &self,
        c: nalgebra::Complex<f64>,
        c_norm: f64,
        c_arg: &mut Option<f64>,
        row: &RowShare,
        level: Option<usize>,
    ) -> (f64, f64) {
        let lambda = self.mode.lambda;
        let w = self.mode.weight;
        if lambda.im == 0.0 {
            let rho = lambda.re;
            let factor = match level {
                Some(0) => (1.0, 1.0),
                _ if rho < 0.0 => (rho, 1.0),
                Some(p) => (self.rho_pow[p], 1.0),
                None => (0.0, 1.0),
            };
            let x = mul_range((c.re, c.re), (row.re_lo, row.re_hi));
            let slack = c.im.abs() * row.im_abs;
            let (lo, hi) = mul_range((x.0 - slack, x.1 + slack), factor);
            (w * lo, w * hi)
        } else {
            let amp = w * c_norm;
            let (end_decay, sweep) = match level {
                Some(p) => (self.rho_pow[p], self.sweep[p]),
                None => (0.0, f64::INFINITY),
            };
            // A whole turn (by more than any rounding of the phase's
            // addition) gives the whole range whatever the phase; a NaN
            // too, as `cos_range` does.
            let width = row.arc_hi - row.arc_lo + sweep.abs();
            let (cmin, cmax) = if width.partial_cmp(&(TAU + 1e-9)) != Some(Ordering::Less) {
                (-1.0, 1.0)
            } else {
                let phase = *c_arg.get_or_insert_with(|| c.arg());
                let (a, b) = if sweep >= 0.0 {
                    (phase + row.arc_lo, phase + row.arc_hi + sweep)
                } else {
                    (phase + row.arc_lo + sweep, phase + row.arc_hi)
                };
                cos_range(a, b)
            };
            let big = amp * row.g_max;
            let small = amp * row.g_min * end_decay;
            let hi = if cmax >= 0.0 {
                big * cmax
            } else {
                small * cmax
            };
            let lo = if cmin <= 0.0 {
                big * cmin
            } else {
                small * cmin
            };
            (lo, hi)
        }
    }
}

/// `m - 1` for a stretch of `m = 2^level` periods (0 for the tail, which
/// the slope form never covers).
fn m1_of(level: Option<usize>) -> f64 {
    level.map_or(0.0, |p| ((1u128 << p) - 1) as f64)
}

/// The slope forms of a stretch's bound (see the module doc). For a mode
/// slow against the stretch, `(m - 1) |lambda - 1| <= 1`, write
/// `lambda^q = 1 + q (lambda - 1) + f(q)` with
/// `f(q) = (lambda - 1)^2 sum_{i<q} sum_{k<i} lambda^k`: inside the unit
/// circle `|f(q)| <= |lambda - 1|^2 q (q - 1) / 2`, and `f(q) >= 0` for a
/// real `lambda` in `[0, 1]`. The deviation of output point j over the
/// stretch is then the straight line through its exact values at q = 0
/// and q = 1 (`g_j . dz` and `g_j . A dz`: no modal rounding), less the
/// line's share of the other modes, plus those modes' boxes
/// (`StretchMode::term`) and the slow modes' remainders. A line's extremes
/// are at the stretch's ends, so where the modes' terms cancel (a flat
/// peak) the bound is tight to second order in the stretch's length.
/// Without it a peak search opened about `sqrt(rate)` single periods
/// around a flat peak (measured: 38 at 1 kHz, 389 at 100 kHz on the
/// compare loop).
///
/// The parabola goes one order further: `f(q) = C(q, 2) (lambda - 1)^2 +
/// f3(q)`, `f3(q) = (lambda - 1)^3 sum_{i<q} sum_{k<i} sum_{l<k} lambda^l`,
/// so `|f3(q)| <= |lambda - 1|^3 C(q, 3)` inside the unit circle and
/// `f3(q) <= 0` for a real `lambda` in `[0, 1]` (`C` the binomial
/// coefficient). Its exact part is the parabola through the exact values
/// at q = 0, 1, 2 (`g_j . (A - I)^2 dz` its second difference), whose
/// bend follows the response's own curvature, the modes' terms summed
/// with their cancellations; the line's remainder bounds that bend by the
/// modes' magnitudes. Near a peak the parabola rules out a neighbouring
/// stretch the line cannot, so a peak search no longer opens a few
/// stretches at every level of the tree (the number of levels grows with
/// the rate). Both forms hold; the bound keeps their intersection.
struct Slope {
    /// Per output point: constant, slope and bend parts,
    /// `sum w Re(c gamma_j)`, `sum w Re(c gamma_j (lambda - 1))` and
    /// `sum w Re(c gamma_j (lambda - 1)^2)`; the command's the same.
    y0: Vec<f64>,
    y1: Vec<f64>,
    y2: Vec<f64>,
    u0: f64,
    u1: f64,
    u2: f64,
    /// The boxes of modes outside the forms and the remainders, summed:
    /// the line's (`.0`) and the parabola's (`.1`).
    y_box: [(f64, f64); 2],
    u_box: [(f64, f64); 2],
    /// Magnitudes of every part, for the modal widening (line, parabola).
    y_mag: [f64; 2],
    u_mag: [f64; 2],
}

/// Range over q in `[0, m1]` of `a + q b + q (q - 1) / 2 c` (the line
/// when `c` is 0): its ends and, inside, the parabola's vertex.
fn poly_range(a: f64, b: f64, c: f64, m1: f64) -> (f64, f64) {
    let at = |q: f64| {
        if c == 0.0 {
            a + q * b
        } else {
            a + q * b + q * (q - 1.0) / 2.0 * c
        }
    };
    let (e0, e1) = (a, at(m1));
    let (mut lo, mut hi) = (e0.min(e1), e0.max(e1));
    if c != 0.0 {
        let v = 0.5 - b / c;
        if v > 0.0 && v < m1 {
            let y = at(v);
            lo = lo.min(y);
            hi = hi.max(y);
        }
    }
    (lo, hi)
}

impl Slope {
    /// The exact polynomial of a stretch's first periods:
    /// `y0[j] = g_j . dz`, `y1[j] = g_j . (A - I) dz`,
    /// `y2[j] = g_j . (A - I)^2 dz`, the command's the same.
    fn new(y: [Vec<f64>; 3], u: [f64; 3]) -> Slope {
        let [y0, y1, y2] = y;
        Slope {
            y0,
            y1,
            y2,
            u0: u[0],
            u1: u[1],
            u2: u[2],
            y_box: [(0.0, 0.0); 2],
            u_box: [(0.0, 0.0); 2],
            y_mag: [0.0; 2],
            u_mag: [0.0; 2],
        }
    }

    /// Add a mode with coordinate `c`: in the forms when `rem` holds its
    /// remainders, else by its boxes `yb`, `ub`.
    #[allow(clippy::too_many_arguments)]
    fn add(
        &mut self,
        m: &StretchMode,
        c: nalgebra::Complex<f64>,
        c_norm: f64,
        rem: Option<Rem>,
        m1: f64,
        yb: (f64, f64),
        ub: (f64, f64),
    ) {
        let w = m.mode.weight;
        let re = |g: &nalgebra::Complex<f64>| w * (c.re * g.re - c.im * g.im);
        let Some(rem) = rem else {
            // Outside the forms: its own box, and its constant, slope and
            // bend parts taken out of the exact polynomial.
            let forms = self.forms();
            for b in &mut self.y_box[..forms] {
                (b.0, b.1) = (b.0 + yb.0, b.1 + yb.1);
            }
            for b in &mut self.u_box[..forms] {
                (b.0, b.1) = (b.0 + ub.0, b.1 + ub.1);
            }
            for (j, (g, gd)) in m.mode.gamma.iter().zip(&m.gamma_d).enumerate() {
                self.y0[j] -= re(g);
                self.y1[j] -= re(gd);
            }
            for (y2, gdd) in self.y2.iter_mut().zip(&m.gamma_dd) {
                *y2 -= re(gdd);
            }
            self.u0 -= re(&m.mode.kappa);
            self.u1 -= re(&m.kappa_d);
            if forms > 1 {
                self.u2 -= re(&m.kappa_dd);
            }
            let d = m1 * m.lm1.norm();
            let scales = [1.0 + d, 1.0 + d + d * d / 2.0];
            for (k, scale) in scales.into_iter().enumerate().take(forms) {
                self.y_mag[k] += yb.0.abs().max(yb.1.abs()) + w * c_norm * m.y.g_max * scale;
                self.u_mag[k] += ub.0.abs().max(ub.1.abs()) + w * c_norm * m.u.g_max * scale;
            }
            return;
        };
        let lam = m.mode.lambda;
        let real_pos = lam.im == 0.0 && lam.re >= 0.0;
        // `w Re(c gamma_j) f` over the row: for a real mode in [0, 1], f in
        // [0, F] (the line's remainder, `k` 0) or [-F, 0] (the parabola's);
        // else |f| <= F.
        let rem_box = |row: &RowShare, f: f64, k: usize| -> (f64, f64) {
            if real_pos {
                let x = mul_range((c.re, c.re), (row.re_lo, row.re_hi));
                let slack = c.im.abs() * row.im_abs;
                let (lo, hi) = ((x.0 - slack).min(0.0), (x.1 + slack).max(0.0));
                if k == 0 {
                    (w * f * lo, w * f * hi)
                } else {
                    (-(w * f * hi), -(w * f * lo))
                }
            } else {
                let r = w * c_norm * row.g_max * f;
                (-r, r)
            }
        };
        let forms = self.forms();
        for (k, f) in [rem.second, rem.third].into_iter().enumerate().take(forms) {
            let (a, b) = rem_box(&m.y, f, k);
            self.y_box[k] = (self.y_box[k].0 + a, self.y_box[k].1 + b);
            self.y_mag[k] += w * c_norm * m.y.g_max * f;
            let (a, b) = rem_box(&m.u, f, k);
            self.u_box[k] = (self.u_box[k].0 + a, self.u_box[k].1 + b);
            self.u_mag[k] += w * c_norm * m.u.g_max * f;
        }
    }

    /// How many forms the bound carries: the line, and the parabola when
    /// its bend was computed (`BEND_MAX_POINTS`).
    fn forms(&self) -> usize {
        if self.y2.len() == self.y0.len() { 2 } else { 1 }
    }

    /// Range of the output's deviation over the stretch by form `k` (0 the
    /// line, 1 the parabola), and its magnitude.
    fn y_range(&self, k: usize, m1: f64) -> (f64, f64, f64) {
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for (j, (a, b)) in self.y0.iter().zip(&self.y1).enumerate() {
            let c = if k == 0 { 0.0 } else { self.y2[j] };
            let (l, h) = poly_range(*a, *b, c, m1);
            lo = lo.min(l);
            hi = hi.max(h);
        }
        if self.y0.is_empty() {
            (lo, hi) = (0.0, 0.0);
        }
        (lo + self.y_box[k].0, hi + self.y_box[k].1, self.y_mag[k])
    }

    /// Range of the command's deviation over the stretch by form `k`, and
    /// its magnitude.
    fn u_range(&self, k: usize, m1: f64) -> (f64, f64, f64) {
        let c = if k == 0 { 0.0 } else { self.u2 };
        let (lo, hi) = poly_range(self.u0, self.u1, c, m1);
        (lo + self.u_box[k].0, hi + self.u_box[k].1, self.u_mag[k])
    }
}

/// Everything about a closed loop the searches need, built once and used
/// for the step and the disturbance.
pub struct Stretches<'a> {
    cl: &'a ClosedLoop,
    map: &'a OutputMap,
    cert: Option<&'a Certificate>,
    dim: usize,
    period_s: f64,
    /// Horizon in periods.
    horizon: u64,
    /// The root covers `2^levels >= horizon` periods.
    levels: usize,
    /// `A^(2^p) - I`, row-major, p = 0..=levels.
    powers: Vec<Vec<f64>>,
    modes: Option<Vec<StretchMode>>,
    /// `|ku_i|`, for the command's rounding margin.
    ku_abs: Vec<f64>,
}

/// One response (a reference step or a load step) on a loop.
struct Run<'s, 'a> {
    s: &'s Stretches<'a>,
    z_end: Vec<f64>,
    h: Vec<f64>,
    u_off: f64,
    /// Output and command at the fixed point (first point of a period).
    y_end: f64,
    u_end: f64,
    /// Rounding floors of the output and command bounds.
    y_floor: f64,
    u_floor: f64,
    dz0: Rc<[f64]>,
    /// State error at the horizon (start of the tail).
    dz_tail: Vec<f64>,
    /// The nodes already bounded, by (first period, level): every search
    /// of a response descends the same tree from the same root, so a node's
    /// state error is the same numbers whichever search reaches it first
    /// (computed once; the step's five searches share the top of the
    /// tree). Its bound carries the parabola when the output's peak search
    /// made it (`bend`), so the later searches read bounds that depend on
    /// the peak search having run first: `Wanted::limited_by` keeps it
    /// running whenever another step search does. The tail under
    /// `TAIL_KEY`.
    nodes: RefCell<HashMap<(u64, usize), Node, BuildHasherDefault<NodeHasher>>>,
    /// The periods already looked at point by point, by period: a leaf's
    /// state error is its tree node's (`nodes`, one path from the root), so
    /// its points are the same numbers whichever search opens it first
    /// (the peak, rise and settling searches of one response open many of
    /// the same periods; a period of a lifted cascade loop has hundreds of
    /// points). At most `LEAF_BUDGET` a search, and no more kept than
    /// `LEAF_CACHE_POINTS` points in all: a period opened again past that
    /// is made again from its node, the same numbers.
    leaves: RefCell<HashMap<u64, Rc<Leaf>, BuildHasherDefault<NodeHasher>>>,
    /// Whether new bounds carry the parabola (set for the output's peak
    /// searches only, see `Slope`).
    bend: std::cell::Cell<bool>,
}

/// A hasher for the node keys (two small integers) and the loop gain's
/// memo (a frequency's bits, `evaluate::PlantAt`): one multiply a word,
/// where the default hasher's rounds cost as much as a small bound.
#[derive(Default)]
pub(crate) struct NodeHasher(u64);

impl Hasher for NodeHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for b in bytes {
            self.write_u64(u64::from(*b));
        }
    }
    fn write_u64(&mut self, v: u64) {
        self.0 = (self.0.rotate_left(5) ^ v).wrapping_mul(0x517c_c1b7_2722_0a95);
    }
    fn write_usize(&mut self, v: usize) {
        self.write_u64(v as u64);
    }
}

/// A bounded node of the tree: its state error and its bound.
#[derive(Clone)]
struct Node {
    dz: Rc<[f64]>,
    bound: Bound,
}

/// The key of the tail in `Run::nodes`.
const TAIL_KEY: (u64, usize) = (u64::MAX, usize::MAX);

/// The exact points of one period, as a walk computes them.
struct Leaf {
    t0: f64,
    ys: Vec<f64>,
    u_prev: f64,
    u_k: f64,
}

/// Result of a search.
enum Found<T> {
    At(T),
    /// Nothing in the horizon, and the tail rules it out after it.
    Nowhere,
    /// The tail or the budget leaves it open.
    Undecided,
}

/// A node waiting in a best-first search.
struct Open {
    upper: f64,
    start: u64,
    level: usize,
    dz: Rc<[f64]>,
}

impl PartialEq for Open {
    fn eq(&self, o: &Self) -> bool {
        self.cmp(o) == Ordering::Equal
    }
}
impl Eq for Open {}
impl PartialOrd for Open {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Open {
    fn cmp(&self, o: &Self) -> Ordering {
        // Highest bound first; among equals the earliest (deterministic).
        self.upper
            .total_cmp(&o.upper)
            .then_with(|| o.start.cmp(&self.start))
    }
}

impl<'a> Stretches<'a> {
    /// Prepare the searches of a stable loop over `horizon` periods.
    pub fn new(
        cl: &'a ClosedLoop,
        map: &'a OutputMap,
        cert: Option<&'a Certificate>,
        period_s: f64,
        horizon: u64,
    ) -> Stretches<'a> {
        let dim = map.dim;
        let horizon = horizon.max(1);
        let levels = (64 - (horizon - 1).leading_zeros()) as usize;
        // Stored as `A^(2^p) - I`, squared as `2 B + B B`: when the rate is
        // fast the powers are close to I for many levels, and this form
        // keeps the digits a plain square `A A` rounds away (its error
        // doubles with every level; measured: 1e-9 relative on the compare
        // case at 4 kHz against 5e-11 for this form). The squarings are
        // carried in double-double (`DoubleDouble`) and each power rounded
        // once to double: in double alone, the error of a loop whose large
        // entries cancel grows about tenfold a level (measured on the
        // gimbal demo at 16.2 kHz: 8e-9 relative at level 11, and 1.1e-8 on
        // its load-step peak against a walk that is within 4e-14 of one in
        // double-double; with these powers, 2e-11).
        let mut powers = Vec::with_capacity(levels + 1);
        let mut b: Vec<DoubleDouble> = (0..dim * dim)
            .map(|i| {
                let a = cl.a[(i / dim, i % dim)];
                if i / dim == i % dim {
                    DoubleDouble::sum(a, -1.0)
                } else {
                    DoubleDouble { hi: a, lo: 0.0 }
                }
            })
            .collect();
        for p in 0..=levels {
            powers.push(b.iter().map(|v| v.hi + v.lo).collect());
            if p < levels {
                b = DoubleDouble::twice_plus_square(&b, dim);
            }
        }
        let modes = cert.and_then(|c| c.modes()).map(|ms| {
            ms.iter()
                .map(|m| {
                    let rho = m.lambda.norm();
                    let theta = m.lambda.arg();
                    let mut rho_pow = Vec::with_capacity(levels + 1);
                    let mut sweep = Vec::with_capacity(levels + 1);
                    let mut rp = 1.0f64;
                    for lv in 0..=levels {
                        rho_pow.push(rp);
                        sweep.push(((1u128 << lv) - 1) as f64 * theta);
                        rp = rp * rp * rho;
                    }
                    let lm1 = m.lambda - nalgebra::Complex::new(1.0, 0.0);
                    let d = lm1.norm();
                    let remainder = (0..=levels)
                        .map(|lv| {
                            let m1 = ((1u128 << lv) - 1) as f64;
                            // Only for a mode inside the unit circle
                            // (`|lambda^k| <= 1` in the remainders' sums).
                            (lv > 0 && rho <= 1.0 && m1 * d <= 1.0).then(|| Rem {
                                second: d * d * m1 * (m1 - 1.0).max(0.0) / 2.0,
                                third: d * d * d * m1 * (m1 - 1.0).max(0.0) * (m1 - 2.0).max(0.0)
                                    / 6.0,
                            })
                        })
                        .collect();
                    StretchMode {
                        y: RowShare::new(&m.gamma),
                        u: RowShare::new(&[m.kappa]),
                        gamma_d: m.gamma.iter().map(|g| g * lm1).collect(),
                        kappa_d: m.kappa * lm1,
                        gamma_dd: m.gamma.iter().map(|g| g * lm1 * lm1).collect(),
                        kappa_dd: m.kappa * lm1 * lm1,
                        lm1,
                        remainder,
                        mode: m.clone(),
                        rho_pow,
                        sweep,
                    }
                })
                .collect()
        });
        Stretches {
            cl,
            map,
            cert,
            dim,
            period_s,
            horizon,
            levels,
            powers,
            modes,
            ku_abs: cl.ku.iter().map(|v| v.abs()).collect(),
        }
    }

    /// True when the stretch bounds come from the modal form.
    pub fn is_modal(&self) -> bool {
        self.modes.is_some()
    }

    /// `A^(2^p) v`, as `v + (A^(2^p) - I) v` (into a `Vec` or an `Rc`, one
    /// allocation).
    fn jump<C: FromIterator<f64>>(&self, p: usize, v: &[f64]) -> C {
        let m = &self.powers[p];
        let d = self.dim;
        (0..d)
            .map(|i| {
                let row = &m[i * d..(i + 1) * d];
                v[i] + row.iter().zip(v).map(|(a, b)| a * b).sum::<f64>()
            })
            .collect()
    }

    /// `A^k v` by the binary digits of k.
    fn advance(&self, mut k: u64, v: &[f64]) -> Vec<f64> {
        let mut out = v.to_vec();
        let mut p = 0;
        while k > 0 && p < self.powers.len() {
            if k & 1 == 1 {
                out = self.jump(p, &out);
            }
            k >>= 1;
            p += 1;
        }
        // Beyond the stored powers (not reached: every k asked for is at
        // most the horizon + 1 <= 2^(levels + 1)): k units of the last.
        let top = self.powers.len() - 1;
        for _ in 0..k.saturating_mul(2) {
            out = self.jump(top, &out);
        }
        out
    }
}

impl<'s, 'a> Run<'s, 'a> {
    fn new(s: &'s Stretches<'a>, z_end: &DVector<f64>, r: f64, w: f64) -> Run<'s, 'a> {
        let map = s.map;
        let dim = s.dim;
        let z_end: Vec<f64> = z_end.as_slice()[..dim].to_vec();
        let h: Vec<f64> = (0..map.np).map(|j| map.hr[j] * r + map.hw[j] * w).collect();
        let u_off = s.cl.dur * r + s.cl.duw * w;
        let dotp = |row: &[f64], v: &[f64]| row.iter().zip(v).map(|(a, b)| a * b).sum::<f64>();
        let y_ends: Vec<f64> = (0..map.np)
            .map(|j| dotp(&map.g[j * dim..(j + 1) * dim], &z_end) + h[j])
            .collect();
        let y_end = y_ends.first().copied().unwrap_or(0.0);
        let y_res = y_ends.iter().fold(0.0f64, |m, v| m.max((v - y_end).abs()));
        let u_end = dotp(s.cl.ku.as_slice(), &z_end) + u_off;
        let u_res = (z_end[map.n] - u_end).abs();
        let abs_dot =
            |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| (x * y).abs()).sum::<f64>();
        let h_abs = h.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let y_scale = h_abs + abs_dot(&map.g_abs, &z_end);
        let u_scale = u_off.abs() + abs_dot(&s.ku_abs, &z_end) + z_end[map.n].abs();
        let dz0: Rc<[f64]> = z_end.iter().map(|v| -v).collect();
        let dz_tail = s.advance(s.horizon, &dz0);
        Run {
            s,
            z_end,
            h,
            u_off,
            y_end,
            u_end,
            y_floor: y_res + FLOOR_ROUNDING * y_scale,
            u_floor: u_res + FLOOR_ROUNDING * u_scale,
            dz0,
            dz_tail,
            nodes: RefCell::new(HashMap::default()),
            bend: std::cell::Cell::new(false),
            leaves: RefCell::new(HashMap::default()),
        }
    }

    /// The node of `2^level` periods from period `start` (`TAIL_KEY`: the
    /// tail), its state error made by `dz` when it is new.
    fn node(&self, key: (u64, usize), dz: impl FnOnce() -> Rc<[f64]>) -> Node {
        if let Some(n) = self.nodes.borrow().get(&key) {
            return n.clone();
        }
        let dz = dz();
        let level = (key != TAIL_KEY).then_some(key.1);
        let bound = if key == TAIL_KEY {
            self.bound(&self.dz_tail, None)
        } else {
            self.bound(&dz, level)
        };
        let n = Node { dz, bound };
        self.nodes.borrow_mut().insert(key, n.clone());
        n
    }

    /// The left and right children of node (`start`, `level` > 0) with
    /// state error `dz` (the right one None past the horizon).
    fn children(&self, start: u64, level: usize, dz: &Rc<[f64]>) -> (Node, Option<Node>) {
        let s = self.s;
        let lv = level - 1;
        let left = self.node((start, lv), || dz.clone());
        let right_start = start + (1u64 << lv);
        let right =
            (right_start < s.horizon).then(|| self.node((right_start, lv), || s.jump(lv, dz)));
        (left, right)
    }

    /// The tail's bound.
    fn tail(&self) -> Bound {
        self.node(TAIL_KEY, || Rc::from(Vec::new())).bound
    }

    /// Bounds over the `2^level` periods from a state error `dz` (None:
    /// every later period).
    fn bound(&self, dz: &[f64], level: Option<usize>) -> Bound {
        let s = self.s;
        let map = s.map;
        let held = self.z_end[map.n] + dz[map.n];
        let dz_y: f64 = map.g_abs.iter().zip(dz).map(|(a, b)| a * b.abs()).sum();
        let dz_u: f64 = s
            .ku_abs
            .iter()
            .zip(dz)
            .map(|(a, b)| a * b.abs())
            .sum::<f64>()
            + dz[map.n].abs();
        let (mut ylo, mut yhi, mut ulo, mut uhi, mut ymag, mut umag) =
            (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let widening;
        // The slope form (see `Slope`), when some mode takes part in it.
        let mut slope: Option<(Slope, [f64; 2], [f64; 2])> = None;
        if let Some(modes) = &s.modes {
            let p = level.unwrap_or(0);
            let m1 = m1_of(level);
            if level.is_some() && modes.iter().any(|m| m.remainder[p].is_some()) {
                slope = Some(self.exact_line(dz));
            }
            for m in modes {
                let mut c = nalgebra::Complex::new(0.0, 0.0);
                for (l, d) in m.mode.left.iter().zip(dz) {
                    c.re += l.re * d;
                    c.im += l.im * d;
                }
                // The phase only matters for a pair (`StretchMode::term`).
                let mut arg = None;
                // sqrt of the sum of squares, not hypot (the same number
                // but for the last bit, and far cheaper; the bound is
                // widened by much more).
                let c_norm = (c.re * c.re + c.im * c.im).sqrt();
                let (a, b) = m.term(c, c_norm, &mut arg, &m.y, level);
                ylo += a;
                yhi += b;
                ymag += a.abs().max(b.abs());
                let (ya, yb) = (a, b);
                let (a, b) = m.term(c, c_norm, &mut arg, &m.u, level);
                ulo += a;
                uhi += b;
                umag += a.abs().max(b.abs());
                let (ua, ub) = (a, b);
                if let Some((sl, _, _)) = slope.as_mut() {
                    let rem = level.and_then(|_| m.remainder[p]);
                    sl.add(m, c, c_norm, rem, m1, (ya, yb), (ua, ub));
                }
            }
            widening = s.cert.map_or(1e-6, |c| c.modal_widening());
        } else {
            let (by, bu) = match s.cert {
                Some(c) => c.bound(dz),
                None => (f64::INFINITY, f64::INFINITY),
            };
            // The energy bound's own widening is in `by`, `bu`.
            (ylo, yhi, ulo, uhi) = (-by, by, -bu, bu);
            (ymag, umag) = (0.0, 0.0);
            widening = 0.0;
        }
        let my = self.y_floor + ROUNDING_MARGIN * dz_y + widening * ymag;
        let mu = self.u_floor + ROUNDING_MARGIN * dz_u + widening * umag;
        let mut b = Bound {
            y_lo: self.y_end + ylo - my,
            y_hi: self.y_end + yhi + my,
            u_lo: self.u_end + ulo - mu,
            u_hi: self.u_end + uhi + mu,
        };
        // Both forms hold: keep what both allow.
        if let Some((sl, e_y, e_u)) = slope {
            let m1 = m1_of(level);
            for k in 0..sl.forms() {
                let (ylo, yhi, ymag) = sl.y_range(k, m1);
                let (ulo, uhi, umag) = sl.u_range(k, m1);
                // The slope's rounding counts m - 1 times; the bend's (its
                // own and the slope's carried into it) at most (m - 1)^2.
                let (ey, eu) = match k {
                    0 => (m1 * e_y[0], m1 * e_u[0]),
                    _ => (
                        m1 * e_y[0] + m1 * m1 * e_y[1],
                        m1 * e_u[0] + m1 * m1 * e_u[1],
                    ),
                };
                let my = self.y_floor + ROUNDING_MARGIN * (dz_y + ey) + widening * ymag;
                let mu = self.u_floor + ROUNDING_MARGIN * (dz_u + eu) + widening * umag;
                b.y_lo = b.y_lo.max(self.y_end + ylo - my);
                b.y_hi = b.y_hi.min(self.y_end + yhi + my);
                b.u_lo = b.u_lo.max(self.u_end + ulo - mu);
                b.u_hi = b.u_hi.min(self.u_end + uhi + mu);
            }
        }
        // The command held at the stretch's start is known exactly.
        b.u_lo = b.u_lo.min(held);
        b.u_hi = b.u_hi.max(held);
        // A NaN bound rules nothing out.
        if b.y_lo.is_nan() || b.y_hi.is_nan() {
            (b.y_lo, b.y_hi) = (f64::NEG_INFINITY, f64::INFINITY);
        }
        if b.u_lo.is_nan() || b.u_hi.is_nan() {
            (b.u_lo, b.u_hi) = (f64::NEG_INFINITY, f64::INFINITY);
        }
        b
    }

    /// The exact polynomial of a stretch from `dz` (see `Slope::new`), with
    /// the size of the terms its slope and its bend sum (output, command),
    /// for the rounding margin.
    fn exact_line(&self, dz: &[f64]) -> (Slope, [f64; 2], [f64; 2]) {
        let s = self.s;
        let map = s.map;
        let d = s.dim;
        let b = &s.powers[0];
        // On the stack for the loops of the demo cases and benches (a
        // bound is computed hundreds of times an evaluation).
        let mut stack = [0.0; 4 * STACK_DIM];
        let mut heap = Vec::new();
        let work: &mut [f64] = if d <= STACK_DIM {
            &mut stack
        } else {
            heap.resize(4 * d, 0.0);
            &mut heap
        };
        let (e, rest) = work.split_at_mut(d);
        let (e_abs, rest) = rest.split_at_mut(d);
        let (e2, e2_abs) = rest.split_at_mut(d);
        for i in 0..d {
            let row = &b[i * d..(i + 1) * d];
            e[i] = row.iter().zip(dz).map(|(a, x)| a * x).sum::<f64>();
            e_abs[i] = row.iter().zip(dz).map(|(a, x)| (a * x).abs()).sum::<f64>();
        }
        // Without the parabola its bend is left empty (`Slope::forms`).
        let bend = self.bend.get() && map.np <= BEND_MAX_POINTS && s.levels >= BEND_MIN_LEVELS;
        for i in (0..d).filter(|_| bend) {
            let row = &b[i * d..(i + 1) * d];
            e2[i] = row.iter().zip(&*e).map(|(a, x)| a * x).sum::<f64>();
            e2_abs[i] = row
                .iter()
                .zip(&*e_abs)
                .map(|(a, x)| (a * x).abs())
                .sum::<f64>();
        }
        let dot = |row: &[f64], v: &[f64]| row.iter().zip(v).map(|(a, x)| a * x).sum::<f64>();
        let ys = |v: &[f64]| -> Vec<f64> {
            (0..map.np)
                .map(|j| dot(&map.g[j * d..(j + 1) * d], v))
                .collect()
        };
        let ku = s.cl.ku.as_slice();
        let sizes = |v: &[f64]| {
            let y: f64 = map.g_abs.iter().zip(v).map(|(a, x)| a * x).sum();
            let u = s.ku_abs.iter().zip(v).map(|(a, x)| a * x).sum::<f64>() + v[map.n];
            (y, u)
        };
        let (e_y, e_u) = sizes(&e_abs[..d]);
        let (e2_y, e2_u) = sizes(&e2_abs[..d]);
        let slope = Slope::new(
            [
                ys(dz),
                ys(&e[..d]),
                if bend { ys(&e2[..d]) } else { Vec::new() },
            ],
            [dot(ku, dz), dot(ku, &e[..d]), dot(ku, &e2[..d])],
        );
        (slope, [e_y, e2_y], [e_u, e2_u])
    }

    /// The exact points of period k from its state error, summed as the
    /// walk sums them.
    fn leaf(&self, k: u64, dz: &[f64]) -> Leaf {
        let s = self.s;
        let map = s.map;
        let dim = s.dim;
        let z: Vec<f64> = self.z_end.iter().zip(dz).map(|(a, b)| a + b).collect();
        let mut ys = vec![0.0; map.np];
        mat_vec(&map.g_cols[..map.np * dim], &z, &mut ys);
        for (y, h) in ys.iter_mut().zip(&self.h) {
            *y += h;
        }
        let mut u = -0.0;
        for (a, b) in s.cl.ku.iter().zip(&z) {
            u += a * b;
        }
        Leaf {
            t0: k as f64 * s.period_s,
            ys,
            u_prev: z[map.n],
            u_k: u + self.u_off,
        }
    }

    /// `leaf` of period k reached down the tree (`dz` makes its node's
    /// state error), computed once a run while the cache has room
    /// (`LEAF_CACHE_POINTS`).
    fn tree_leaf(&self, k: u64, dz: impl FnOnce() -> Rc<[f64]>) -> Rc<Leaf> {
        if let Some(l) = self.leaves.borrow().get(&k) {
            return l.clone();
        }
        let l = Rc::new(self.leaf(k, &dz()));
        let mut cache = self.leaves.borrow_mut();
        if (cache.len() + 1) * self.s.map.np.max(1) <= LEAF_CACHE_POINTS {
            cache.insert(k, l.clone());
        }
        l
    }

    /// The commands of period k only (`commands` reads nothing else), the
    /// same numbers as `leaf` makes them: a search on the command skips the
    /// period's points.
    fn command_leaf(&self, k: u64, dz: &[f64]) -> Leaf {
        if let Some(l) = self.leaves.borrow().get(&k) {
            return Leaf {
                ys: Vec::new(),
                ..**l
            };
        }
        let s = self.s;
        let z: Vec<f64> = self.z_end.iter().zip(dz).map(|(a, b)| a + b).collect();
        let mut u = -0.0;
        for (a, b) in s.cl.ku.iter().zip(&z) {
            u += a * b;
        }
        Leaf {
            t0: k as f64 * s.period_s,
            ys: Vec::new(),
            u_prev: z[s.map.n],
            u_k: u + self.u_off,
        }
    }

    /// Time of point j of a period starting at `t0`, as the walk makes it.
    fn time(&self, t0: f64, j: usize) -> f64 {
        if j == 0 {
            t0
        } else {
            t0 + j as f64 * self.s.period_s / self.s.map.np as f64
        }
    }

    /// Largest `value` over every point of the horizon, from `init`;
    /// `upper` bounds it over a node. Undecided when the tail's bound
    /// exceeds the result by more than `tol`, or the budget runs out.
    /// Without `points` the leaves carry only their commands.
    fn max_search(
        &self,
        init: f64,
        tol: f64,
        upper: impl Fn(&Bound) -> f64,
        points: bool,
        value: impl Fn(&Leaf, &mut f64),
    ) -> (f64, bool) {
        let s = self.s;
        let key = |b: &Bound| {
            let u = upper(b);
            if u.is_nan() { f64::INFINITY } else { u }
        };
        let mut best = init;
        let mut heap = BinaryHeap::new();
        let root = self.node((0, s.levels), || self.dz0.clone());
        heap.push(Open {
            upper: key(&root.bound),
            start: 0,
            level: s.levels,
            dz: root.dz,
        });
        let (mut leaves, mut nodes) = (0u64, 0u64);
        while let Some(node) = heap.pop() {
            // Written so that an infinite bound keeps the node open.
            if node.upper <= best + tol {
                break;
            }
            nodes += 1;
            if nodes > NODE_BUDGET {
                return (best, false);
            }
            if node.level == 0 {
                leaves += 1;
                if leaves > LEAF_BUDGET {
                    return (best, false);
                }
                if points {
                    value(&self.tree_leaf(node.start, || node.dz.clone()), &mut best);
                } else {
                    value(&self.command_leaf(node.start, &node.dz), &mut best);
                }
                continue;
            }
            let lv = node.level - 1;
            let (left, right) = self.children(node.start, node.level, &node.dz);
            if let Some(r) = right {
                heap.push(Open {
                    upper: key(&r.bound),
                    start: node.start + (1u64 << lv),
                    level: lv,
                    dz: r.dz,
                });
            }
            heap.push(Open {
                upper: key(&left.bound),
                start: node.start,
                level: lv,
                dz: left.dz,
            });
        }
        let tail = key(&self.tail());
        (best, tail <= best + tol)
    }

    /// Depth-first search for a point that `hit` accepts, from the left
    /// (`forward`) or from the right; `maybe` says whether a node can hold
    /// one. Returns the period and its leaf.
    fn ordered_search(
        &self,
        forward: bool,
        maybe: &dyn Fn(&Bound) -> bool,
        hit: &dyn Fn(&Leaf) -> Option<usize>,
    ) -> Found<(u64, usize, Rc<Leaf>)> {
        let s = self.s;
        let tail_maybe = maybe(&self.tail());
        if !forward && tail_maybe {
            return Found::Undecided;
        }
        let (mut leaves, mut nodes) = (0u64, 0u64);
        // Each entry: first period, level, and the state error of the node
        // (`false`) or of its parent, of which it is the right child
        // (`true`: jumped to when the node is looked at).
        let mut stack: Vec<(u64, usize, Rc<[f64]>, bool)> =
            vec![(0, s.levels, self.dz0.clone(), false)];
        while let Some((start, level, from, right_of)) = stack.pop() {
            if start >= s.horizon {
                continue;
            }
            nodes += 1;
            if nodes > NODE_BUDGET {
                return Found::Undecided;
            }
            let make_dz = || {
                if right_of {
                    s.jump(level, &from)
                } else {
                    from.clone()
                }
            };
            if level == 0 {
                leaves += 1;
                if leaves > LEAF_BUDGET {
                    return Found::Undecided;
                }
                // A single period is looked at point by point (no bound).
                let leaf = self.tree_leaf(start, || {
                    let known = self.nodes.borrow().get(&(start, 0)).map(|n| n.dz.clone());
                    known.unwrap_or_else(make_dz)
                });
                if let Some(j) = hit(&leaf) {
                    return Found::At((start, j, leaf));
                }
                continue;
            }
            let node = self.node((start, level), make_dz);
            if !maybe(&node.bound) {
                continue;
            }
            let lv = level - 1;
            let right_start = start + (1u64 << lv);
            let right = (right_start < s.horizon).then(|| (right_start, lv, node.dz.clone(), true));
            let left = (start, lv, node.dz, false);
            // The stack pops the last pushed first.
            if forward {
                if let Some(r) = right {
                    stack.push(r);
                }
                stack.push(left);
            } else {
                stack.push(left);
                if let Some(r) = right {
                    stack.push(r);
                }
            }
        }
        if forward && tail_maybe {
            Found::Undecided
        } else {
            Found::Nowhere
        }
    }

    /// Output at point j of period k (any k), for the neighbour of a point
    /// a search found.
    fn point(&self, k: u64, j: usize) -> (f64, f64) {
        let dz = self.s.advance(k, &self.dz0);
        let leaf = self.leaf(k, &dz);
        (self.time(leaf.t0, j), leaf.ys[j])
    }

    /// The point after point j of the leaf of period k.
    fn next_point(&self, k: u64, j: usize, leaf: &Leaf) -> (f64, f64) {
        if j + 1 < leaf.ys.len() {
            (self.time(leaf.t0, j + 1), leaf.ys[j + 1])
        } else {
            self.point(k + 1, 0)
        }
    }

    /// The point before point j of the leaf of period k (None at t = 0).
    fn prev_point(&self, k: u64, j: usize, leaf: &Leaf) -> Option<(f64, f64)> {
        if j > 0 {
            Some((self.time(leaf.t0, j - 1), leaf.ys[j - 1]))
        } else if k > 0 {
            Some(self.point(k - 1, self.s.map.np - 1))
        } else {
            None
        }
    }

    /// The commands the points of a leaf carry, as the walk attaches them.
    fn commands<'l>(&self, leaf: &'l Leaf) -> impl Iterator<Item = f64> + 'l {
        let hp = &self.s.map.holds_previous;
        let any_prev = hp.iter().any(|&b| b);
        let any_new = hp.iter().any(|&b| !b);
        any_prev
            .then_some(leaf.u_prev)
            .into_iter()
            .chain(any_new.then_some(leaf.u_k))
    }
}

/// What the step run decides.
pub struct StepResult {
    /// Largest `(y - y_final) sign(y_final)`, at least 0.
    pub peak_dev: f64,
    pub peak_decided: bool,
    /// Largest |u| over the points' commands and |u_final|.
    pub u_peak: f64,
    pub u_decided: bool,
    pub t10: Instant,
    pub t90: Instant,
    /// Entry into the band after the last point outside it.
    pub settled_since: Instant,
}

/// A time figure, as the time responses name one they could not decide or
/// did not compute (`undecided`, `not_computed` of `StepFigures`,
/// `DisturbanceFigures` and `Figures`). The figure catalogue reads it as
/// its `Figure` (`Figure::time`); the key is the catalogue's.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeFigure {
    Overshoot,
    SettlingTime,
    RiseTime,
    CommandPeak,
    DisturbancePeak,
    RecoveryTime,
}

impl TimeFigure {
    /// The four of the reference step.
    pub const STEP: [TimeFigure; 4] = [
        TimeFigure::Overshoot,
        TimeFigure::SettlingTime,
        TimeFigure::RiseTime,
        TimeFigure::CommandPeak,
    ];
    /// The two of the load step.
    pub const LOAD_STEP: [TimeFigure; 2] = [TimeFigure::DisturbancePeak, TimeFigure::RecoveryTime];

    /// The figure's key in every output (`overshoot_pct`, ...).
    pub fn key(self) -> &'static str {
        match self {
            TimeFigure::Overshoot => "overshoot_pct",
            TimeFigure::SettlingTime => "settling_time_s",
            TimeFigure::RiseTime => "rise_time_s",
            TimeFigure::CommandPeak => "u_peak",
            TimeFigure::DisturbancePeak => "disturbance_peak",
            TimeFigure::RecoveryTime => "recovery_time_s",
        }
    }

    /// The keys of `list`, joined by `sep` (for text and CSV cells).
    pub fn joined(list: &[TimeFigure], sep: &str) -> String {
        list.iter().map(|t| t.key()).collect::<Vec<_>>().join(sep)
    }
}

impl serde::Serialize for TimeFigure {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.key())
    }
}

/// The time figures an evaluation computes. A verdict reads only those its
/// spec limits (`Wanted::limited_by`, from the figure catalogue); a figure left out is `not
/// computed` (neither a value nor a missing figure's meaning), and its
/// search or simulation is not run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Wanted {
    /// The step's peak (overshoot).
    pub overshoot: bool,
    /// The 10 and 90 % crossings (rise time).
    pub rise: bool,
    /// The last exit from the settling band (settling time).
    pub settling: bool,
    /// The command's peak.
    pub u_peak: bool,
    /// The load step (its peak and recovery).
    pub load_step: bool,
}

impl Wanted {
    /// Every time figure.
    pub const ALL: Wanted = Wanted {
        overshoot: true,
        rise: true,
        settling: true,
        u_peak: true,
        load_step: true,
    };

    /// The step figures left out.
    pub(crate) fn step_left_out(&self) -> Vec<TimeFigure> {
        [
            (self.overshoot, TimeFigure::Overshoot),
            (self.settling, TimeFigure::SettlingTime),
            (self.rise, TimeFigure::RiseTime),
            (self.u_peak, TimeFigure::CommandPeak),
        ]
        .into_iter()
        .filter(|(wanted, _)| !wanted)
        .map(|(_, figure)| figure)
        .collect()
    }
}

/// An instant a search found, or why there is none.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Instant {
    /// At this time, s.
    At(f64),
    /// Never: not in the horizon, and the tail's bound rules it out after.
    Nowhere,
    /// The tail's bound (or the search budget) leaves it open.
    Undecided,
}

/// What the disturbance run decides.
pub struct DisturbanceResult {
    pub peak: f64,
    pub peak_decided: bool,
    pub since: Instant,
}

impl<'a> Stretches<'a> {
    /// The step figures' raw results (`y_final` and the band as the walk's
    /// `StepMetrics` uses them).
    /// Searches only for what `wanted` asks (a figure left out reads as
    /// decided: 0 for a peak, `Nowhere` for an instant).
    pub fn step(
        &self,
        z_end: &DVector<f64>,
        y_final: f64,
        u_final: f64,
        band: f64,
        wanted: &Wanted,
    ) -> StepResult {
        let run = Run::new(self, z_end, 1.0, 0.0);
        let yf = y_final;
        let band_abs = band * yf.abs();
        let sign = yf.signum();
        let scale_y = yf.abs().max(run.y_end.abs());
        // The output's peak search is where the parabola pays (`Slope`).
        run.bend.set(true);
        let (peak_dev, peak_decided) = if yf != 0.0 && wanted.overshoot {
            let tol = 16.0 * run.y_floor + 1e-12 * scale_y;
            run.max_search(
                0.0,
                tol,
                |b| if yf > 0.0 { b.y_hi - yf } else { yf - b.y_lo },
                true,
                |leaf, best| {
                    for &y in &leaf.ys {
                        *best = best.max((y - yf) * sign);
                    }
                },
            )
        } else {
            (0.0, true)
        };
        run.bend.set(false);
        // The command peak includes |u_final| (see `StepMetrics::finish`):
        // nodes are compared with the larger of the two.
        let uf = u_final.abs();
        let tol_u = 16.0 * run.u_floor + 1e-12 * uf.max(run.u_end.abs());
        let (u_peak, u_decided) = match wanted.u_peak {
            true => run.max_search(
                uf,
                tol_u,
                |b| b.u_lo.abs().max(b.u_hi.abs()),
                false,
                |leaf, best| {
                    for u in run.commands(leaf) {
                        *best = best.max(u.abs());
                    }
                },
            ),
            false => (uf, true),
        };
        let (t10, t90) = if yf != 0.0 && wanted.rise {
            (run.rise_crossing(yf, 0.1), run.rise_crossing(yf, 0.9))
        } else {
            (Instant::Nowhere, Instant::Nowhere)
        };
        let settled_since = if yf != 0.0 && wanted.settling {
            let maybe = |b: &Bound| !(b.y_lo >= yf - band_abs && b.y_hi <= yf + band_abs);
            let hit = |leaf: &Leaf| leaf.ys.iter().rposition(|&y| (y - yf).abs() > band_abs);
            match run.ordered_search(false, &maybe, &hit) {
                Found::At((k, j, leaf)) => {
                    let (tp, yp) = (run.time(leaf.t0, j), leaf.ys[j]);
                    let (t, y) = run.next_point(k, j, &leaf);
                    let dp = (yp - yf).abs() - band_abs;
                    let dn = (y - yf).abs() - band_abs;
                    Instant::At(if dp > dn {
                        tp + (t - tp) * dp / (dp - dn)
                    } else {
                        t
                    })
                }
                Found::Nowhere => Instant::At(0.0),
                Found::Undecided => Instant::Undecided,
            }
        } else {
            Instant::Nowhere
        };
        StepResult {
            peak_dev,
            peak_decided,
            u_peak,
            u_decided,
            t10,
            t90,
            settled_since,
        }
    }

    /// The disturbance figures' raw results.
    pub fn disturbance(&self, z_end: &DVector<f64>, yd_final: f64, band: f64) -> DisturbanceResult {
        let run = Run::new(self, z_end, 0.0, 1.0);
        let scale = run.y_end.abs().max(
            run.dz0
                .iter()
                .zip(&self.map.g_abs)
                .map(|(a, b)| a.abs() * b)
                .sum::<f64>(),
        );
        let tol = 16.0 * run.y_floor + 1e-12 * scale;
        run.bend.set(true);
        // The peak is the supremum of |y| over every t >= 0, the limit
        // |yd_final| included (as the command peak starts from |u_final|):
        // a response that creeps up to its own final value without passing
        // it has that as its peak, which the sign-aware tail bound proves,
        // instead of an undecided search for a larger value.
        let (peak, peak_decided) = run.max_search(
            yd_final.abs(),
            tol,
            |b| b.y_lo.abs().max(b.y_hi.abs()),
            true,
            |leaf, best| {
                for &y in &leaf.ys {
                    *best = best.max(y.abs());
                }
            },
        );
        run.bend.set(false);
        let threshold = band * peak;
        let maybe = |b: &Bound| !(b.y_lo >= yd_final - threshold && b.y_hi <= yd_final + threshold);
        let hit = |leaf: &Leaf| {
            leaf.ys
                .iter()
                .rposition(|&y| (y - yd_final).abs() > threshold)
        };
        let since = if !peak_decided {
            Instant::Undecided
        } else {
            match run.ordered_search(false, &maybe, &hit) {
                Found::At((k, j, leaf)) => {
                    let (tp, dp) = (run.time(leaf.t0, j), (leaf.ys[j] - yd_final).abs());
                    let (t, y) = run.next_point(k, j, &leaf);
                    let dev = (y - yd_final).abs();
                    Instant::At(if dp > dev {
                        tp + (t - tp) * (dp - threshold) / (dp - dev)
                    } else {
                        t
                    })
                }
                Found::Nowhere => Instant::At(0.0),
                Found::Undecided => Instant::Undecided,
            }
        };
        DisturbanceResult {
            peak,
            peak_decided,
            since,
        }
    }
}

impl Run<'_, '_> {
    /// First instant the output reaches `level` of `yf` (interpolated as
    /// the walk's `StepMetrics` does).
    fn rise_crossing(&self, yf: f64, level: f64) -> Instant {
        let maybe = |b: &Bound| {
            let f_hi = if yf > 0.0 { b.y_hi / yf } else { b.y_lo / yf };
            // A NaN keeps the node open.
            f_hi.partial_cmp(&level) != Some(Ordering::Less)
        };
        let hit = |leaf: &Leaf| leaf.ys.iter().position(|&y| y / yf >= level);
        match self.ordered_search(true, &maybe, &hit) {
            Found::At((k, j, leaf)) => {
                let (t, y) = (self.time(leaf.t0, j), leaf.ys[j]);
                Instant::At(match self.prev_point(k, j, &leaf) {
                    Some((tp, yp)) => crossing(tp, yp / yf, t, y / yf, level),
                    None => t,
                })
            }
            Found::Nowhere => Instant::Nowhere,
            Found::Undecided => Instant::Undecided,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Complex;

    /// The expansions the slope forms rest on (see `Slope`), checked
    /// against `lambda^q` by repeated multiplication for modes inside the
    /// unit circle near 1 (a slow mode against its stretch), q up to 4096:
    /// `|lambda^q - 1 - q (lambda - 1)| <= |lambda - 1|^2 C(q, 2)` and
    /// `|lambda^q - 1 - q (lambda - 1) - C(q, 2) (lambda - 1)^2| <= |lambda - 1|^3 C(q, 3)`,
    /// the first remainder >= 0 and the second <= 0 for a real lambda in
    /// [0, 1]. Source: the binomial expansion of `(1 + (lambda - 1))^q`
    /// with its remainder as a nested sum of powers (a closed form, from
    /// memory; derived in `Slope`'s doc), checked against the powers
    /// themselves.
    #[test]
    fn the_remainders_bound_the_powers() {
        let mut modes = Vec::new();
        for k in 0..40 {
            let r = 1.0 - 10f64.powf(-1.0 - 0.1 * f64::from(k));
            for t in [0.0, 1e-4, 3e-3, 0.05] {
                modes.push(Complex::from_polar(r, t));
            }
        }
        modes.push(Complex::new(0.0, 0.0));
        modes.push(Complex::new(1.0, 0.0));
        for lam in modes {
            let d = lam - Complex::new(1.0, 0.0);
            let mut p = Complex::new(1.0, 0.0);
            for q in 0..4096u32 {
                let qf = f64::from(q);
                let c2 = qf * (qf - 1.0) / 2.0;
                let c3 = c2 * (qf - 2.0) / 3.0;
                let r2 = p - Complex::new(1.0, 0.0) - d * qf;
                let r3 = r2 - d * d * c2;
                // Rounding of the power by repeated products: q units of
                // 1e-16, and of the differences.
                let tol = 1e-15 * (1.0 + qf) * (1.0 + qf * d.norm()).powi(2);
                assert!(r2.norm() <= d.norm().powi(2) * c2 + tol, "{lam} q={q}");
                assert!(
                    r3.norm() <= d.norm().powi(3) * c3.max(0.0) + tol,
                    "{lam} q={q}"
                );
                if lam.im == 0.0 {
                    assert!(r2.re >= -tol && r3.re <= tol, "{lam} q={q} signs");
                }
                p *= lam;
            }
        }
    }

    /// `poly_range` holds every value of its polynomial at the integers of
    /// its range (checked by evaluating the polynomial at each: a closed
    /// form, no outside source needed).
    #[test]
    fn poly_range_holds_the_polynomial() {
        for (a, b, c, m1) in [
            (0.3, -0.2, 0.05, 15.0),
            (0.0, 1.0, -0.3, 7.0),
            (1.0, 0.0, 0.0, 3.0),
            (-2.0, 0.5, 1e-3, 1023.0),
        ] {
            let (lo, hi) = poly_range(a, b, c, m1);
            for q in 0..=m1 as u32 {
                let q = f64::from(q);
                let v = a + q * b + q * (q - 1.0) / 2.0 * c;
                assert!(v >= lo - 1e-12 && v <= hi + 1e-12, "{a} {b} {c} q={q}");
            }
        }
    }
}
