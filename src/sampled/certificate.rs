//! Proofs that a running simulation of the closed sampled loop can stop:
//! bounds on every later output point's and command's distance from its
//! final value, from the current state error `dz = z_k - z_final` alone.
//!
//! Two bounds are kept and the smaller is used (both are valid, so their
//! minimum is too):
//!
//! - **Modal**: with `A = V diag(lambda) V^{-1}` (distinct, well-conditioned
//!   eigenvectors), the state error after `m` more periods is
//!   `sum_i v_i lambda_i^m (u_i . dz)`, `u_i` the rows of `V^{-1}`. Every
//!   later output point `g_j . A^m dz` is then at most
//!   `sum_i max_j |g_j . v_i| |u_i . dz|` in size, because `|lambda_i| < 1`.
//!   This is within a small factor (the number of modes) of the true
//!   largest later deviation, so a run stops soon after its figures are
//!   fixed.
//! - **Output energy** (always built when the loop is stable): with the
//!   Gramian `P = sum_m (A^m)' Q A^m`, `Q` the sum of the output rows'
//!   outer products, `sqrt(dz' P dz)` is the energy of all later output
//!   deviations, so it bounds each. Looser than the modal bound when a
//!   slow mode is lightly damped (the energy sums many periods), but it
//!   needs no eigenvectors; it is the fallback when the eigenvector matrix
//!   is ill-conditioned or a mode is defective.
//!
//! Both are computed in floating point, so each is widened by a margin that
//! covers the eigenvector residuals and the rounding of the simulation
//! itself (relative 1e-6 and absolute terms of order 1e-10 of the output's
//! scale); the figures are those of the full simulation whenever the bound
//! is honoured, which the tests check against full-horizon runs.

use nalgebra::{DMatrix, DVector};

use crate::model::matrix::balancing_scale;
use crate::model::poly::C64;
use crate::sampled::closed_loop::ClosedLoop;

/// Largest accepted eigenvalue condition number `|u_i| |v_i|` (with
/// `u_i . v_i = 1`) for the modal bound; above it the eigenvector matrix is
/// too ill-conditioned for the bound to be both valid and useful.
const MAX_MODE_CONDITION: f64 = 1e6;

/// Where the modal bound measures its modes' condition (`Certificate::modal`).
///
/// The bound itself does not depend on the coordinates: `g_j . v_i`,
/// `u_i . dz` and the biorthogonality residuals `u_i . v_j` are the same
/// numbers after any diagonal change of scale, and so are the
/// component-wise sizes (`sum |u_i| |dz_i|`) that rounding errors scale
/// with. Only the condition `|u_i| |v_i|` (largest entries) does, and with
/// it whether a mode passes `MAX_MODE_CONDITION`; the least it can be is
/// `max_k |u_ik v_ik|`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Conditioning {
    /// In the balanced coordinates the eigenvectors are computed in
    /// (`balancing_scale`).
    Balanced,
    /// In those coordinates rescaled state by state to even out the
    /// eigenvectors' own entries (`eigenvector_scale`). Balancing evens
    /// out the loop matrix, not its eigenvectors: on a plant of eight
    /// equal lags, whose modes stay far apart in s, the modes' condition
    /// grew with the rate (4e4 at 1 kHz, 4e6 at 100 kHz, past the limit)
    /// while rescaled it stays of order 10.
    Rescaled,
}

/// Powers of two `d_i` that even out the entries of the eigenvectors: with
/// each mode scaled so that `|v_k|` (largest entry) is 1 and `u_k . v_k`
/// is 1, `d_i = sqrt(max_k |v_ik| / max_k |u_ik|)`, rounded to a power of
/// two; in coordinates `x_i / d_i` the right vectors' entries become
/// `v_ik / d_i` and the left ones' `u_ik d_i`, both of order
/// `sqrt(|v_ik| |u_ik|)`.
fn eigenvector_scale(left: &[Vec<C64>], right: &[Vec<C64>]) -> Vec<f64> {
    let dim = right.first().map_or(0, Vec::len);
    let (mut vmax, mut umax) = (vec![0.0f64; dim], vec![0.0f64; dim]);
    for (u, v) in left.iter().zip(right) {
        let norm = v.iter().map(|x| x.norm()).fold(0.0, f64::max);
        if !(norm > 0.0 && norm.is_finite()) {
            continue;
        }
        for i in 0..dim {
            vmax[i] = vmax[i].max(v[i].norm() / norm);
            umax[i] = umax[i].max(u[i].norm() * norm);
        }
    }
    vmax.iter()
        .zip(&umax)
        .map(|(&v, &u)| {
            let e = 0.5 * (v.max(1e-300) / u.max(1e-300)).log2();
            // Finite and far from overflow (a state no mode reaches).
            if e.is_finite() {
                2f64.powi(e.round().clamp(-400.0, 400.0) as i32)
            } else {
                1.0
            }
        })
        .collect()
}

/// Largest accepted residual of the modal decomposition, relative
/// (`|A v - lambda v| / (|A| |v|)` and `|u_i . v_j - delta_ij|`).
const MAX_MODAL_RESIDUAL: f64 = 1e-9;

/// Relative widening of the modal bound (covers residuals up to
/// `MAX_MODAL_RESIDUAL` times the condition, propagated over any horizon).
const MODAL_WIDENING: f64 = 1e-6;

/// Output rows of the loop a certificate bounds: every output point inside
/// a period `g_j . z`, and the two commands a period holds (`ku . z` and
/// `z[n]`), in loop coordinates.
pub struct BoundedRows<'a> {
    /// Output rows, row-major, `points x dim`.
    pub g: &'a [f64],
    pub points: usize,
    /// Command row `u_k = ku . z + ...`.
    pub ku: &'a [f64],
    /// Index of the held command `u_{k-1}` in the state.
    pub held: usize,
}

/// A stop certificate for one closed loop (see the module doc).
#[derive(Debug, Clone)]
pub struct Certificate {
    /// Output-energy Gramian, row-major `dim x dim` (None when the doubling
    /// iteration did not converge).
    gramian: Option<Vec<f64>>,
    modal: Option<ModalBound>,
    dim: usize,
}

/// The modal bound's data: one entry per real mode or conjugate pair.
#[derive(Debug, Clone)]
struct ModalBound {
    /// Left eigenvector of each kept mode (row of `V^{-1}`), row-major
    /// `modes x dim`.
    left: Vec<C64>,
    /// Per kept mode: `max_j |g_j . v_i|` (times 2 for a conjugate pair,
    /// whose partner contributes the same amount).
    cy: Vec<f64>,
    /// Per kept mode: `max(|ku . v_i|, |v_i[held]|)` (times 2 for a pair).
    cu: Vec<f64>,
    /// Per kept mode, what a bound over a stretch of periods needs.
    modes: Vec<Mode>,
}

/// One kept mode of the loop (a real eigenvalue, or one of a conjugate
/// pair standing for both): the output's and the command's share of it.
/// With `c = left . dz` (the mode's coordinate in the state error `dz` at
/// period k), the mode adds `weight * Re(c * gamma[j] * lambda^q)` to the
/// deviation of output point j of period k + q from its final value, and
/// `weight * Re(c * kappa * lambda^q)` to that of the command `u_{k+q}`.
/// The sum over the kept modes is the whole deviation (the imaginary parts
/// cancel), so bounding each term over a stretch bounds the sum.
#[derive(Debug, Clone)]
pub struct Mode {
    pub lambda: C64,
    /// 1 for a real mode, 2 for a conjugate pair.
    pub weight: f64,
    /// Left eigenvector (row of `V^{-1}`), loop coordinates.
    pub left: Vec<C64>,
    /// `g_j . v` for every output point j of a period.
    pub gamma: Vec<C64>,
    /// `ku . v`: the command's share.
    pub kappa: C64,
}

impl Certificate {
    /// The certificate by the modal bound alone (of a stable loop with
    /// poles `poles`, the eigenvalues of `cl.a`); None when the loop has
    /// no checked modal form. A caller with another basis to try does so
    /// before it pays for the energy bound (`Certificate::energy`, the
    /// fallback; `time_response::figures_from_ends`). With neither, the
    /// pole-based horizon rules.
    pub fn modal(
        cl: &ClosedLoop,
        rows: &BoundedRows,
        poles: &[C64],
        conditioning: Conditioning,
    ) -> Option<Certificate> {
        let modal = ModalBound::new(&cl.a, rows, poles, conditioning)?;
        Some(Certificate {
            gramian: None,
            modal: Some(modal),
            dim: cl.a.nrows(),
        })
    }

    /// The certificate by the output-energy bound alone (the fallback
    /// without a modal form); None when the doubling does not converge.
    pub fn energy(cl: &ClosedLoop, rows: &BoundedRows) -> Option<Certificate> {
        let gramian = gramian(cl, rows)?;
        Some(Certificate {
            gramian: Some(gramian),
            modal: None,
            dim: cl.a.nrows(),
        })
    }

    /// True when the modal bound is in use (tests and diagnostics).
    pub fn is_modal(&self) -> bool {
        self.modal.is_some()
    }

    /// The checked modal decomposition (one entry per real mode or
    /// conjugate pair), when the modal bound is in use.
    pub fn modes(&self) -> Option<&[Mode]> {
        self.modal.as_ref().map(|m| m.modes.as_slice())
    }

    /// Relative widening the modal terms need (residuals of the computed
    /// eigenvectors); see `MODAL_WIDENING`.
    pub fn modal_widening(&self) -> f64 {
        MODAL_WIDENING
    }

    /// Bounds `(y, u)` on every later `|g_j . dz_later|` and every later
    /// command deviation `|ku . dz_later|`, `|dz_later[held]|`, from the
    /// state error `dz` now (before the margins for rounding that the
    /// caller adds).
    pub fn bound(&self, dz: &[f64]) -> (f64, f64) {
        if let Some(m) = &self.modal {
            return m.bound(dz);
        }
        let mut by = f64::INFINITY;
        let mut bu = f64::INFINITY;
        if let Some(p) = &self.gramian {
            let n = self.dim;
            let mut v = 0.0;
            for i in 0..n {
                let row = &p[i * n..(i + 1) * n];
                let pi: f64 = row.iter().zip(dz).map(|(a, b)| a * b).sum();
                v += pi * dz[i];
            }
            let e = v.max(0.0).sqrt();
            by = by.min(e);
            bu = bu.min(e);
        }
        (by, bu)
    }
}

/// The output-energy Gramian by doubling: `P <- P + (A^m)' P A^m`,
/// `A^m <- (A^m)^2`, until `A^m` has vanished; `Q` weights every output
/// point and the two commands, so `sqrt(dz' P dz)` bounds each later one.
fn gramian(cl: &ClosedLoop, rows: &BoundedRows) -> Option<Vec<f64>> {
    let dim = cl.a.nrows();
    let g = DMatrix::from_row_slice(rows.points, dim, rows.g);
    let ku = DVector::from_column_slice(rows.ku);
    let mut p = g.transpose() * &g + &ku * ku.transpose();
    p[(rows.held, rows.held)] += 1.0;
    let mut am = cl.a.clone();
    for _ in 0..64 {
        let next = &p + am.transpose() * &p * &am;
        am = &am * &am;
        p = next;
        if !p.iter().all(|v| v.is_finite()) {
            return None;
        }
        if am.amax() < 1e-14 {
            return Some((0..dim * dim).map(|i| p[(i / dim, i % dim)]).collect());
        }
    }
    None
}

/// Largest accepted `|S|_max |S^-1|_max dim` of the controller basis
/// (`controller_basis`): the similarity `S^-1 A S` is formed in floating
/// point, with errors of that size times the rounding unit, which the
/// modal checks and widening must still cover.
const MAX_BASIS_CONDITION: f64 = 1e6;

/// A basis change `S` (with its inverse) that leaves the plant states and
/// the held command alone and puts the controller's states in the
/// controller's own (real) modal coordinates. A controller in z realised
/// in controllable form has states that are successive values of one
/// signal; at rates far above its poles these nearly coincide (its
/// eigenvectors are nearly parallel, Vandermonde vectors of poles near
/// z = 1), so the loop's modes, well separated in the continuous sense,
/// read as ill-conditioned in those coordinates. None when the controller
/// has fewer than two states, a defective or unresolved mode, or the basis
/// itself is too ill-conditioned.
pub(crate) fn controller_basis(cl: &ClosedLoop) -> Option<(DMatrix<f64>, DMatrix<f64>)> {
    let dim = cl.a.nrows();
    let first = cl.plant_states + 1;
    if first + 2 > dim {
        return None;
    }
    let m = dim - first;
    let ac = cl.a.view((first, first), (m, m)).clone_owned();
    let ev = crate::model::matrix::eigenvalues(&ac).ok()?;
    if ev.len() != m {
        return None;
    }
    let norm = ac.amax().max(1e-300);
    let acc: Vec<C64> = ac.iter().map(|&v| C64::new(v, 0.0)).collect();
    // nalgebra stores column-major; `eigenvector` wants row-major.
    let rm: Vec<C64> = (0..m * m).map(|i| acc[(i % m) * m + i / m]).collect();
    let mut s = DMatrix::identity(dim, dim);
    let mut col = first;
    let mut used = vec![false; m];
    for i in 0..m {
        if used[i] {
            continue;
        }
        used[i] = true;
        let lambda = ev[i];
        if lambda.im != 0.0 {
            let partner = (0..m).find(|&j| {
                !used[j] && (ev[j] - lambda.conj()).norm() <= 1e-12 * (1.0 + lambda.norm())
            })?;
            used[partner] = true;
        }
        let v = eigenvector(&rm, m, lambda, norm)?;
        for (r, x) in v.iter().enumerate() {
            s[(first + r, col)] = x.re;
            if lambda.im != 0.0 {
                s[(first + r, col + 1)] = x.im;
            }
        }
        col += if lambda.im != 0.0 { 2 } else { 1 };
    }
    if col != dim {
        return None;
    }
    let sinv = s.clone().try_inverse()?;
    // Written so that a NaN fails the check too.
    let ok = s.amax() * sinv.amax() * dim as f64 <= MAX_BASIS_CONDITION;
    ok.then_some((s, sinv))
}

impl ModalBound {
    /// Right and left eigenvectors by inverse iteration at each pole;
    /// None when a mode is defective or ill-conditioned, or any residual
    /// check fails.
    fn new(
        a: &DMatrix<f64>,
        rows: &BoundedRows,
        poles: &[C64],
        conditioning: Conditioning,
    ) -> Option<ModalBound> {
        let dim = a.nrows();
        if poles.len() != dim || dim == 0 {
            return None;
        }
        // Work on the balanced matrix D^{-1} A D (exact power-of-two
        // scaling), where residuals and conditioning mean something; map
        // the vectors back at the end (v = D v_b, u = D^{-1} u_b).
        let t = balancing_scale(a);
        let ab = |i: usize, j: usize| a[(i, j)] * t[j] / t[i];
        let mut anorm = 0.0f64;
        for i in 0..dim {
            for j in 0..dim {
                anorm = anorm.max(ab(i, j).abs());
            }
        }
        let anorm = anorm.max(1e-300);
        let ac: Vec<C64> = (0..dim * dim)
            .map(|i| C64::new(ab(i / dim, i % dim), 0.0))
            .collect();
        let at: Vec<C64> = (0..dim * dim)
            .map(|i| C64::new(ab(i % dim, i / dim), 0.0))
            .collect();
        // The partner of a conjugate pair already seen takes the conjugate
        // vectors; every other mode has its own.
        let partner: Vec<Option<usize>> = (0..dim)
            .map(|i| {
                let lambda = poles[i];
                (lambda.im != 0.0)
                    .then(|| (0..i).find(|&j| (poles[j] - lambda.conj()).norm_sqr() == 0.0))
                    .flatten()
            })
            .collect();
        // Own modes in the order of their distance to the nearest other
        // eigenvalue (a conjugate partner aside), closest first: a mode
        // crowded by another is the one that fails the condition check, and
        // a failing loop should find out before the other eigenvectors are
        // computed. Each mode's vectors are the same numbers in any order.
        let gap = |i: usize| {
            (0..dim)
                .filter(|&j| j != i && partner[j] != Some(i) && partner[i] != Some(j))
                .map(|j| (poles[j] - poles[i]).norm_sqr())
                .fold(f64::INFINITY, f64::min)
        };
        let mut own: Vec<(f64, usize)> = (0..dim)
            .filter(|&i| partner[i].is_none())
            .map(|i| (gap(i), i))
            .collect();
        own.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        let mut found: Vec<Option<(Vec<C64>, Vec<C64>)>> = vec![None; dim];
        for &(_, i) in &own {
            let lambda = poles[i];
            let v = eigenvector(&ac, dim, lambda, anorm)?;
            let u = eigenvector(&at, dim, lambda, anorm)?;
            // A mode far past the condition check below fails it there
            // whatever the other modes give: stop before their
            // eigenvectors are computed (a fast controller in
            // controllable form fails here and is retried in its own
            // basis, `time_response`). The slack keeps the check's
            // outcome that of the full one below.
            let s: C64 = u.iter().zip(&v).map(|(a, b)| a * b).sum();
            let max_norm = |w: &[C64]| w.iter().map(|x| x.norm()).fold(0.0, f64::max);
            let past = match conditioning {
                Conditioning::Balanced => {
                    max_norm(&u) * max_norm(&v) * dim as f64 > 2.0 * MAX_MODE_CONDITION * s.norm()
                }
                // No diagonal scaling brings the condition below
                // `max_i |u_i v_i|` (see `Conditioning::Rescaled`).
                Conditioning::Rescaled => {
                    let least = u.iter().zip(&v).map(|(a, b)| a.norm() * b.norm());
                    least.fold(0.0, f64::max) * dim as f64 > MAX_MODE_CONDITION * s.norm()
                }
            };
            if past {
                return None;
            }
            found[i] = Some((v, u));
        }
        let mut right: Vec<Vec<C64>> = Vec::with_capacity(dim);
        let mut left: Vec<Vec<C64>> = Vec::with_capacity(dim);
        for i in 0..dim {
            let (v, u) = match partner[i] {
                Some(j) => (
                    right[j].iter().map(|x: &C64| x.conj()).collect(),
                    left[j].iter().map(|x: &C64| x.conj()).collect(),
                ),
                None => found[i].take()?,
            };
            right.push(v);
            left.push(u);
        }
        // Normalise u_i . v_i = 1 (plain transpose: u_i' A = lambda_i u_i').
        for (u, v) in left.iter_mut().zip(&right) {
            let s: C64 = u.iter().zip(v).map(|(a, b)| a * b).sum();
            if s.norm() < 1e-300 || !s.is_finite() {
                return None;
            }
            for x in u.iter_mut() {
                *x /= s;
            }
        }
        // Biorthogonality (distinct, non-defective modes) and conditioning,
        // measured in the balanced coordinates or, rescaled, in those with
        // the state scales `d` on top (`Conditioning`).
        let d = match conditioning {
            Conditioning::Balanced => vec![1.0; dim],
            Conditioning::Rescaled => eigenvector_scale(&left, &right),
        };
        for (i, u) in left.iter().enumerate() {
            let unorm = u
                .iter()
                .zip(&d)
                .map(|(x, d)| x.norm() * d)
                .fold(0.0, f64::max);
            let v = right[i].iter().zip(&d).map(|(x, d)| x.norm() / d);
            let vnorm = v.fold(0.0, f64::max);
            // Written so that a NaN fails the check too.
            let condition_ok = unorm * vnorm * dim as f64 <= MAX_MODE_CONDITION;
            if !condition_ok {
                return None;
            }
            for (j, v) in right.iter().enumerate() {
                let s: C64 = u.iter().zip(v).map(|(a, b)| a * b).sum();
                let want = if i == j { 1.0 } else { 0.0 };
                let residual_ok = (s - want).norm() <= MAX_MODAL_RESIDUAL;
                if !residual_ok {
                    return None;
                }
            }
        }
        // Back to loop coordinates.
        for v in right.iter_mut() {
            for (x, s) in v.iter_mut().zip(&t) {
                *x *= *s;
            }
        }
        for u in left.iter_mut() {
            for (x, s) in u.iter_mut().zip(&t) {
                *x /= *s;
            }
        }
        // Keep one mode of each conjugate pair, with weight 2.
        let mut kept_left = Vec::new();
        let mut cy = Vec::new();
        let mut cu = Vec::new();
        let mut modes = Vec::new();
        let mut used = vec![false; dim];
        for i in 0..dim {
            if used[i] {
                continue;
            }
            used[i] = true;
            let lambda = poles[i];
            let mut weight = 1.0;
            if lambda.im != 0.0 {
                let partner = (0..dim).find(|&j| {
                    !used[j] && (poles[j] - lambda.conj()).norm() <= 1e-12 * (1.0 + lambda.norm())
                })?;
                used[partner] = true;
                weight = 2.0;
            }
            let v = &right[i];
            let dotc = |row: &[f64]| -> C64 { row.iter().zip(v).map(|(a, b)| b * *a).sum::<C64>() };
            let gamma: Vec<C64> = (0..rows.points)
                .map(|j| dotc(&rows.g[j * dim..(j + 1) * dim]))
                .collect();
            let kappa = dotc(rows.ku);
            let y = gamma.iter().map(|g| g.norm()).fold(0.0, f64::max);
            let u = kappa.norm().max(v[rows.held].norm());
            cy.push(weight * y);
            cu.push(weight * u);
            kept_left.extend_from_slice(&left[i]);
            modes.push(Mode {
                lambda,
                weight,
                left: left[i].clone(),
                gamma,
                kappa,
            });
        }
        Some(ModalBound {
            left: kept_left,
            cy,
            cu,
            modes,
        })
    }

    fn bound(&self, dz: &[f64]) -> (f64, f64) {
        let dim = dz.len();
        let (mut by, mut bu) = (0.0, 0.0);
        for (i, (cy, cu)) in self.cy.iter().zip(&self.cu).enumerate() {
            let row = &self.left[i * dim..(i + 1) * dim];
            let (mut re, mut im) = (0.0, 0.0);
            for (l, d) in row.iter().zip(dz) {
                re += l.re * d;
                im += l.im * d;
            }
            // sqrt of the sum of squares, not hypot: glibc's hypot costs
            // more than the rest of the bound (an overflow gives an
            // infinite bound, which only delays the stop).
            let w = (re * re + im * im).sqrt();
            by += cy * w;
            bu += cu * w;
        }
        (by * (1.0 + MODAL_WIDENING), bu * (1.0 + MODAL_WIDENING))
    }
}

/// Unit eigenvector of the row-major complex matrix `m` (`dim x dim`) for
/// the eigenvalue `lambda`, by two steps of inverse iteration with a tiny
/// shift; checked by its residual.
fn eigenvector(m: &[C64], dim: usize, lambda: C64, anorm: f64) -> Option<Vec<C64>> {
    let shift = lambda + C64::new(anorm * 1e-13, anorm * 1e-13);
    let mut x: Vec<C64> = (0..dim)
        .map(|i| C64::new(1.0 + 0.1 * i as f64, 0.03 * i as f64))
        .collect();
    let mut shifted = m.to_vec();
    for i in 0..dim {
        shifted[i * dim + i] -= shift;
    }
    for _ in 0..2 {
        x = solve(&shifted, dim, &x)?;
        // Scale so the largest entry is real and 1 (keeps pairs conjugate).
        let big = *x
            .iter()
            .max_by(|a, b| a.norm_sqr().total_cmp(&b.norm_sqr()))?;
        if !(big.norm_sqr().is_finite() && big.norm_sqr() > 0.0) {
            return None;
        }
        for v in x.iter_mut() {
            *v /= big;
        }
    }
    // Residual |M x - lambda x| relative to |M| |x| (|x| = 1 in max norm).
    let mut worst = 0.0f64;
    for i in 0..dim {
        let mx: C64 = (0..dim).map(|j| m[i * dim + j] * x[j]).sum();
        worst = worst.max((mx - lambda * x[i]).norm());
    }
    (worst <= MAX_MODAL_RESIDUAL * anorm).then_some(x)
}

/// Solve the row-major complex system `m x = b` by Gaussian elimination
/// with partial pivoting; None when singular or not finite.
fn solve(m: &[C64], dim: usize, b: &[C64]) -> Option<Vec<C64>> {
    let w = dim + 1;
    let mut t: Vec<C64> = Vec::with_capacity(dim * w);
    for i in 0..dim {
        t.extend_from_slice(&m[i * dim..(i + 1) * dim]);
        t.push(b[i]);
    }
    for col in 0..dim {
        let piv = (col..dim).max_by(|&a, &b| {
            t[a * w + col]
                .norm_sqr()
                .total_cmp(&t[b * w + col].norm_sqr())
        })?;
        if piv != col {
            for j in 0..w {
                t.swap(col * w + j, piv * w + j);
            }
        }
        let p = t[col * w + col];
        if p.norm_sqr() == 0.0 {
            return None;
        }
        for r in col + 1..dim {
            let f = t[r * w + col] / p;
            for j in col..w {
                let v = t[col * w + j];
                t[r * w + j] -= f * v;
            }
        }
    }
    let mut x = vec![C64::new(0.0, 0.0); dim];
    for i in (0..dim).rev() {
        let mut acc = t[i * w + dim];
        for j in i + 1..dim {
            acc -= t[i * w + j] * x[j];
        }
        x[i] = acc / t[i * w + i];
    }
    x.iter().all(|v| v.is_finite()).then_some(x)
}
