//! The output map of one period of the sampled loop: every output point
//! inside a period (the sample and the points between samples) as a
//! linear function of the loop state, in the forms the simulation kernel
//! and the stretch bounds read; and the small exact helpers both use.

use crate::sampled::certificate::BoundedRows;
use crate::sampled::closed_loop::ClosedLoop;
use crate::sampled::hold::HoldEquivalent;

/// The output map of a period: every output point inside a period is
/// `y_j = g_j . z_k + h_j(r, w)`, and `y_j - y_final = g_j . (z_k - z_final)`.
/// Also holds the loop in the flat row-major form the simulation's inner
/// loop reads, and the per-state spreads of the points between samples.
#[derive(Debug, Clone)]
pub struct OutputMap {
    pub(crate) dim: usize,
    /// Number of plant + sensor states; `z[n]` is the held command.
    pub(crate) n: usize,
    /// Output points per period.
    pub(crate) np: usize,
    /// Rows `g_j`, row-major (points per period x loop states).
    pub(crate) g: Vec<f64>,
    /// Coefficients of `r` and `w` in `h_j`.
    pub(crate) hr: Vec<f64>,
    pub(crate) hw: Vec<f64>,
    /// The rows of one period's step, column-major (`dim + 3` rows: the
    /// loop matrix, then `ku`, `g_0` and `g_{np-1}`).
    pub(crate) step_cols: Vec<f64>,
    /// The rows `g_j` again, column-major (`g_cols[i*np + j] = g_ji`).
    pub(crate) g_cols: Vec<f64>,
    /// Whether point j holds `u_{k-1}` (before the computation delay ends).
    pub(crate) holds_previous: Vec<bool>,
    /// `max_j |g_ji - g_0i|` per state i: how far a point of the period
    /// can move away from the period's sample, per unit of state error.
    pub(crate) spread: Vec<f64>,
    /// `max_j |g_ji|` per state: the scale of the output's terms, for the
    /// rounding margins.
    pub(crate) g_abs: Vec<f64>,
}

impl OutputMap {
    pub fn new(cl: &ClosedLoop, hold: &HoldEquivalent) -> OutputMap {
        let dim = cl.a.nrows();
        let n = cl.plant_states;
        let np = hold.intersample.len();
        let mut g = vec![0.0; np * dim];
        let mut hr = vec![0.0; np];
        let mut hw = vec![0.0; np];
        for (j, row) in hold.intersample.iter().enumerate() {
            let mut gj = &cl.ku * row.cu0;
            for i in 0..n {
                gj[i] += row.ey[i];
            }
            gj[n] += row.cu1;
            g[j * dim..(j + 1) * dim].copy_from_slice(gj.as_slice());
            hr[j] = row.cu0 * cl.dur;
            hw[j] = row.cu0 * cl.duw + row.cw;
        }
        let spread = (0..dim)
            .map(|i| {
                (1..np)
                    .map(|j| (g[j * dim + i] - g[i]).abs())
                    .fold(0.0, f64::max)
            })
            .collect();
        let g_abs = (0..dim)
            .map(|i| (0..np).map(|j| g[j * dim + i].abs()).fold(0.0, f64::max))
            .collect();
        let g_cols = (0..np * dim).map(|k| g[(k % np) * dim + k / np]).collect();
        let rows = dim + 3;
        let last = np.saturating_sub(1);
        let step_cols = (0..rows * dim)
            .map(|k| {
                let (i, j) = (k % rows, k / rows);
                match i {
                    _ if i < dim => cl.a[(i, j)],
                    _ if i == dim => cl.ku[j],
                    _ if i == dim + 1 => g[j],
                    _ => g[last * dim + j],
                }
            })
            .collect();
        OutputMap {
            dim,
            n,
            np,
            g,
            hr,
            hw,
            step_cols,
            g_cols,
            holds_previous: (0..np).map(|j| j < hold.switch_index).collect(),
            spread,
            g_abs,
        }
    }

    /// The rows a stop certificate must bound: the output points and the
    /// two commands of a period.
    pub fn bounded_rows<'a>(&'a self, cl: &'a ClosedLoop) -> BoundedRows<'a> {
        BoundedRows {
            g: &self.g,
            points: self.np,
            ku: cl.ku.as_slice(),
            held: self.n,
        }
    }
}

/// Relative size of the rounding margins: how far a computed output or
/// command may sit from the exact-arithmetic value a bound speaks of, per
/// unit of the size of the terms summed to make it (thousands of machine
/// epsilons: generous for dot products of ~10 terms and for the rounding a
/// stable loop accumulates over its run).
pub(crate) const ROUNDING_MARGIN: f64 = 1e-10;

/// Time where a linear interpolation between `(t0, v0)` and `(t1, v1)`
/// reaches `level`.
pub(crate) fn crossing(t0: f64, v0: f64, t1: f64, v1: f64, level: f64) -> f64 {
    if v1 == v0 {
        t1
    } else {
        (t0 + (t1 - t0) * (level - v0) / (v1 - v0)).clamp(t0, t1)
    }
}

#[inline(always)]
/// `out = M v` for `M` stored column by column (`out.len()` rows), each
/// row summed from -0.0 in column order, exactly as `dot` sums a row.
pub(crate) fn mat_vec(cols: &[f64], v: &[f64], out: &mut [f64]) {
    let rows = out.len();
    out.fill(-0.0);
    for (j, &vj) in v.iter().enumerate() {
        let col = &cols[j * rows..(j + 1) * rows];
        for (o, c) in out.iter_mut().zip(col) {
            *o += c * vj;
        }
    }
}
