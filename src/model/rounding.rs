//! Coefficient precision: the discretized controller as it is stored on
//! the processor, in a number format (f64, f32, or a fixed-point word)
//! and a structure (one direct form II transposed section, or a cascade
//! of second-order sections), and what the rounding does to it.
//!
//! At fast rates the controller's poles crowd against z = 1, so a fixed
//! absolute rounding step is a growing fraction of each pole's distance to
//! 1: the pole moves, its continuous equivalent moves more, and at some
//! rate a pole rounds onto z = 1 (a lag becomes an integrator) or an
//! integrator rounds off it. This module quantizes the coefficients and
//! measures the damage; the loop with the quantized controller is then
//! evaluated like any other (`evaluate::PreparedLoop::evaluate` with
//! `Given::around`).
//!
//! Rounding rules (stated so tests can derive thresholds by hand):
//! - `f32`: round to nearest, ties to even (IEEE 754 binary32).
//! - `qN` (a signed word of N+1 bits: sign and N magnitude bits): the
//!   coefficient set gets `m >= 0` integer bits and `N - m` fraction bits,
//!   the fewest `m` for which every rounded coefficient fits the word; a
//!   coefficient rounds to the nearest multiple of `2^-(N-m)`, ties away
//!   from zero. The format is reported as `Qm.f` (`Q1.14` for a 16-bit
//!   word holding coefficients up to 2 in magnitude).
//! - In the `sos` structure the sections' numerators are normalised to a
//!   leading 1, and the overall gain is a separate scalar stored with its
//!   own binary exponent (a mantissa of N+1 bits, or f32), as fixed-point
//!   code does with a gain and a shift.
//! - `f64` is the reference: its rounding (about 1e-16 relative) is what
//!   the other formats are measured against, so its controller is the
//!   exact one.

use serde::Serialize;

use crate::model::poly::{C64, Poly};

/// Why a controller could not be arranged or rounded. Its text is the
/// reason a precision verdict carries (`pick.json`, `sweep.csv`).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RoundingError {
    #[error("the controller is identically zero")]
    Zero,
    #[error("the controller is not proper")]
    NotProper,
    /// The root finder gave up on the controller's poles.
    #[error("the controller's poles could not be found")]
    Poles,
    #[error("the rounded controller's poles could not be found")]
    RoundedPoles,
    #[error("the controller's zeros could not be found")]
    Zeros,
    /// No split of the word into integer and fraction bits holds every
    /// coefficient.
    #[error("a coefficient of magnitude {largest:.4e} does not fit a {word_bits}-bit word")]
    WordTooNarrow { largest: f64, word_bits: u32 },
}
use crate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use crate::spec::{Format, Structure};

/// What rounding can do to a controller that changes what it is,
/// whatever the loop's figures say.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum StructuralFailure {
    /// The design's integral action lost (a pole at z = 1 rounded off it).
    IntegralActionLost,
    /// A pole rounded onto z = 1 (a lag became an integrator).
    PoleOntoOne,
    /// A controller pole pushed out of the unit circle.
    PoleOutside,
}

impl StructuralFailure {
    /// Name in files (`limiting` columns and fields).
    pub fn key(self) -> &'static str {
        match self {
            StructuralFailure::IntegralActionLost => "integral_action",
            StructuralFailure::PoleOntoOne => "pole_on_z1",
            StructuralFailure::PoleOutside => "controller_pole_outside",
        }
    }

    /// Name in words.
    pub fn label(self) -> &'static str {
        match self {
            StructuralFailure::IntegralActionLost => "integral action lost",
            StructuralFailure::PoleOntoOne => "a pole rounded onto z = 1",
            StructuralFailure::PoleOutside => "a controller pole outside the unit circle",
        }
    }
}

/// One section in powers of `q = z^-1`: `(b0 + b1 q + ...) / (1 + a1 q + ...)`.
#[derive(Debug, Clone, PartialEq)]
pub struct Section {
    /// Numerator coefficients, ascending in q.
    pub b: Vec<f64>,
    /// Denominator coefficients after the leading 1, ascending in q (`a1, a2, ...`).
    pub a: Vec<f64>,
}

/// A controller arranged in a structure: `gain * q^delay * prod sections`.
#[derive(Debug, Clone, PartialEq)]
pub struct Realization {
    pub gain: f64,
    /// Whole samples of pure delay (the controller's relative degree).
    pub delay: usize,
    pub sections: Vec<Section>,
}

/// What rounding did to one controller.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Damage {
    /// The fixed-point format chosen, e.g. `Q1.14` (None for floats).
    pub q_format: Option<String>,
    /// Largest move of a controller pole in the z-plane.
    pub pole_shift: f64,
    /// Largest move of a controller zero in the z-plane.
    pub zero_shift: f64,
    /// Largest relative error of a pole's continuous equivalent
    /// `ln(z) / T`, percent (poles at z = 1 and z = 0 excluded).
    pub pole_error_pct: f64,
    /// Relative error of the DC gain (or, with integrators, of
    /// `lim (z-1)^k C(z)` at z = 1), percent; None when the number of
    /// poles at z = 1 changed.
    pub dc_gain_error_pct: Option<f64>,
    /// Relative error of |C| at the check frequency (the loop's
    /// crossover), percent.
    pub crossover_gain_error_pct: Option<f64>,
    /// Poles exactly at z = 1 in the exact controller.
    pub integrators: usize,
    /// Poles exactly at z = 1 after rounding.
    pub integrators_after: usize,
    /// Poles outside the unit circle after rounding, beyond those of the
    /// exact controller.
    pub new_unstable_poles: usize,
}

impl Damage {
    /// True when the exact controller's integral action survives rounding
    /// (as many poles exactly at z = 1 as before).
    pub fn integral_kept(&self) -> bool {
        self.integrators_after >= self.integrators
    }

    /// The structural failure, if any: integral action lost, a pole
    /// rounded onto z = 1, or a pole pushed out of the unit circle. These
    /// change what the controller is, whatever the loop figures say.
    pub fn structural_failure(&self) -> Option<StructuralFailure> {
        if self.integrators_after < self.integrators {
            Some(StructuralFailure::IntegralActionLost)
        } else if self.integrators_after > self.integrators {
            Some(StructuralFailure::PoleOntoOne)
        } else if self.new_unstable_poles > 0 {
            Some(StructuralFailure::PoleOutside)
        } else {
            None
        }
    }
}

/// A controller after rounding: the transfer function its rounded
/// coefficients realise, and the damage measured.
#[derive(Debug, Clone, PartialEq)]
pub struct Quantized {
    pub controller: DiscreteTransfer,
    pub realization: Realization,
    pub damage: Damage,
}

/// Arrange `c` in `structure` with exact (f64) coefficients.
/// `integrators` is the number of poles the controller has at z = 1 by
/// design (the continuous controller's poles at s = 0); those poles are
/// placed exactly at 1 in the `sos` factors.
pub fn realize(
    c: &DiscreteTransfer,
    structure: Structure,
    integrators: usize,
) -> Result<Realization, RoundingError> {
    let n = c.transfer.denominator.degree();
    let m = c.transfer.numerator.degree();
    if c.transfer.numerator.is_zero() {
        return Err(RoundingError::Zero);
    }
    if m > n {
        return Err(RoundingError::NotProper);
    }
    match structure {
        Structure::TransposedDirect => {
            let d = c.transfer.denominator.descending();
            let lead = d[0];
            let mut b = vec![0.0; n - m];
            b.extend(c.transfer.numerator.descending());
            Ok(Realization {
                gain: 1.0,
                delay: 0,
                sections: vec![Section {
                    b: b.iter().map(|v| v / lead).collect(),
                    a: d[1..].iter().map(|v| v / lead).collect(),
                }],
            })
        }
        Structure::Sos => {
            let mut poles = c.transfer.denominator.roots().ok_or(RoundingError::Poles)?;
            snap_to_one(&mut poles, integrators);
            let zeros = c.transfer.numerator.roots().ok_or(RoundingError::Zeros)?;
            let gain = c.transfer.numerator.leading() / c.transfer.denominator.leading();
            // Integrators get sections of their own (`1 - q` or
            // `1 - 2q + q^2`), whose coefficients every format holds
            // exactly, so rounding never moves them off z = 1.
            let one = C64::new(1.0, 0.0);
            let others: Vec<C64> = poles.iter().copied().filter(|p| *p != one).collect();
            let k = poles.len() - others.len();
            let mut pole_factors: Vec<(C64, Vec<f64>)> =
                (0..k / 2).map(|_| (one, vec![1.0, -2.0, 1.0])).collect();
            if k % 2 == 1 {
                pole_factors.push((one, vec![1.0, -1.0]));
            }
            pole_factors.extend(factors(&others));
            let mut zero_factors = factors(&zeros);
            // Pair each pole factor (those nearest the unit circle first)
            // with the remaining zero factor nearest to it.
            let mut order: Vec<usize> = (0..pole_factors.len()).collect();
            order.sort_by(|&i, &j| {
                let di = 1.0 - pole_factors[i].0.norm();
                let dj = 1.0 - pole_factors[j].0.norm();
                di.abs().total_cmp(&dj.abs())
            });
            let mut sections = vec![None; pole_factors.len()];
            for i in order {
                let p = pole_factors[i].0;
                let pick = (0..zero_factors.len()).min_by(|&a, &b| {
                    (zero_factors[a].0 - p)
                        .norm()
                        .total_cmp(&(zero_factors[b].0 - p).norm())
                });
                let b = match pick {
                    Some(k) => zero_factors.remove(k).1,
                    None => vec![1.0],
                };
                sections[i] = Some(Section {
                    b,
                    a: pole_factors[i].1[1..].to_vec(),
                });
            }
            let mut sections: Vec<Section> = sections.into_iter().flatten().collect();
            // More zero factors than pole factors cannot happen for a
            // proper controller, but a pure-gain section keeps it whole.
            for z in zero_factors {
                sections.push(Section { b: z.1, a: vec![] });
            }
            Ok(Realization {
                gain,
                delay: n - m,
                sections,
            })
        }
    }
}

/// Real factors of at most second order in q from a set of roots:
/// `(representative root, [1, c1, c2])` for `(1 - r q)` or a conjugate
/// pair `(1 - 2 Re r q + |r|^2 q^2)`; real roots are paired two by two in
/// order of magnitude so sections stay second order. Roots at z = 0 are
/// dropped (their factor is 1).
fn factors(roots: &[C64]) -> Vec<(C64, Vec<f64>)> {
    let mut out = Vec::new();
    let mut reals: Vec<f64> = Vec::new();
    for r in roots {
        if r.norm() == 0.0 {
            continue;
        }
        if r.im == 0.0 {
            reals.push(r.re);
        } else if r.im > 0.0 {
            out.push((*r, vec![1.0, -2.0 * r.re, r.norm_sqr()]));
        }
    }
    reals.sort_by(|a, b| b.abs().total_cmp(&a.abs()));
    for pair in reals.chunks(2) {
        match pair {
            [x, y] => out.push((C64::new(0.5 * (x + y), 0.0), vec![1.0, -(x + y), x * y])),
            [x] => out.push((C64::new(*x, 0.0), vec![1.0, -x])),
            _ => {}
        }
    }
    out
}

/// Place the `k` roots nearest z = 1 exactly at 1 (they are the design's
/// integrators; root finding splits repeated roots by ~1e-8).
fn snap_to_one(roots: &mut [C64], k: usize) {
    let one = C64::new(1.0, 0.0);
    let already = roots.iter().filter(|r| **r == one).count();
    for _ in already..k {
        let best = roots
            .iter()
            .enumerate()
            .filter(|(_, r)| **r != C64::new(1.0, 0.0))
            .min_by(|a, b| (a.1 - 1.0).norm().total_cmp(&(b.1 - 1.0).norm()))
            .map(|(i, _)| i);
        if let Some(i) = best {
            roots[i] = C64::new(1.0, 0.0);
        }
    }
}

/// The transfer function in z that a realization computes, at `period_s`.
pub fn transfer(r: &Realization, period_s: f64) -> DiscreteTransfer {
    // Each section: (sum b_i q^i) / (1 + sum a_i q^i); with q = 1/z and the
    // section order k = max(len b - 1, len a), multiply through by z^k.
    let mut num = Poly::constant(r.gain);
    let mut den = Poly::one();
    for s in &r.sections {
        let k = (s.b.len().saturating_sub(1)).max(s.a.len());
        let mut bz = vec![0.0; k + 1];
        for (i, v) in s.b.iter().enumerate() {
            bz[k - i] = *v;
        }
        let mut az = vec![0.0; k + 1];
        az[k] = 1.0;
        for (i, v) in s.a.iter().enumerate() {
            az[k - 1 - i] = *v;
        }
        num = num.mul(&Poly::new(bz));
        den = den.mul(&Poly::new(az));
    }
    // q^delay = z^-delay: multiply the denominator by z^delay.
    let mut shifted = vec![0.0; r.delay];
    shifted.extend_from_slice(den.coeffs());
    DiscreteTransfer {
        transfer: Transfer::new(num, Poly::new(shifted)),
        period_s,
    }
}

/// Round one coefficient to f32.
fn round_f32(v: f64) -> f64 {
    v as f32 as f64
}

/// The fewest integer bits `m` (0..=N) for which every value of `set`,
/// rounded to `N - m` fraction bits, fits a signed word of N magnitude
/// bits; None when even N integer bits do not hold them.
pub fn integer_bits(set: &[f64], magnitude_bits: u32) -> Option<u32> {
    (0..=magnitude_bits).find(|&m| {
        let scale = (2.0f64).powi((magnitude_bits - m) as i32);
        let top = (2.0f64).powi(magnitude_bits as i32);
        set.iter().all(|v| {
            let q = (v * scale).round();
            q >= -top && q < top
        })
    })
}

/// Round `v` to a multiple of `2^-frac_bits`, ties away from zero.
fn round_fixed(v: f64, frac_bits: u32) -> f64 {
    let scale = (2.0f64).powi(frac_bits as i32);
    (v * scale).round() / scale
}

/// Round a scalar gain to a word of `magnitude_bits + 1` bits with its
/// own binary exponent (mantissa in [2^(N-1), 2^N)).
fn round_scaled(v: f64, magnitude_bits: u32) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let e = v.abs().log2().floor() as i32 + 1; // |v| < 2^e
    let frac = magnitude_bits as i32 - e;
    let scale = (2.0f64).powi(frac);
    (v * scale).round() / scale
}

/// `r` with every section coefficient passed through `round` and the
/// given (already rounded) gain.
fn rounded(r: &Realization, gain: f64, round: impl Fn(f64) -> f64) -> Realization {
    let map = |v: &[f64]| v.iter().map(|x| round(*x)).collect::<Vec<f64>>();
    Realization {
        gain,
        delay: r.delay,
        sections: r
            .sections
            .iter()
            .map(|s| Section {
                b: map(&s.b),
                a: map(&s.a),
            })
            .collect(),
    }
}

/// Round every coefficient of `r` in `format`; also returns the Q format
/// chosen for fixed point.
pub fn round_realization(
    r: &Realization,
    format: Format,
) -> Result<(Realization, Option<String>), RoundingError> {
    match format {
        Format::F64 => Ok((r.clone(), None)),
        Format::F32 => Ok((rounded(r, round_f32(r.gain), round_f32), None)),
        Format::Fixed { magnitude_bits } => {
            let set: Vec<f64> = r
                .sections
                .iter()
                .flat_map(|s| s.b.iter().chain(s.a.iter()).copied())
                .collect();
            let m =
                integer_bits(&set, magnitude_bits).ok_or_else(|| RoundingError::WordTooNarrow {
                    largest: set.iter().map(|v| v.abs()).fold(0.0, f64::max),
                    word_bits: magnitude_bits + 1,
                })?;
            let f = magnitude_bits - m;
            let gain = if r.gain == 1.0 {
                1.0
            } else {
                round_scaled(r.gain, magnitude_bits)
            };
            Ok((
                rounded(r, gain, |x| round_fixed(x, f)),
                Some(format!("Q{m}.{f}")),
            ))
        }
    }
}

/// Poles exactly at z = 1 of a realization: each section's denominator
/// `1 + a1 q + ...` is divided by `(1 - q)` while its value at q = 1 is
/// exactly zero. With rounded coefficients (multiples of a power of two,
/// or f32 values) these sums are exact in f64.
pub fn poles_at_one(r: &Realization) -> usize {
    r.sections
        .iter()
        .map(|s| {
            let mut c: Vec<f64> = std::iter::once(1.0).chain(s.a.iter().copied()).collect();
            let mut count = 0;
            while c.len() > 1 && c.iter().sum::<f64>() == 0.0 {
                // Synthetic division by (1 - q): quotient coefficients are
                // the running sums.
                let mut acc = 0.0;
                let mut quotient = Vec::with_capacity(c.len() - 1);
                for v in &c[..c.len() - 1] {
                    acc += v;
                    quotient.push(acc);
                }
                c = quotient;
                count += 1;
            }
            count
        })
        .sum()
}

/// Quantize controller `c` (with `integrators` poles at z = 1 by design)
/// in `structure` and `format`, and measure the damage; `check_w_rad_s`
/// is where the gain error is measured (the loop's crossover).
pub fn quantize(
    c: &DiscreteTransfer,
    integrators: usize,
    structure: Structure,
    format: Format,
    check_w_rad_s: Option<f64>,
) -> Result<Quantized, RoundingError> {
    let exact = realize(c, structure, integrators)?;
    let (rounded, q_format) = round_realization(&exact, format)?;
    let f64_only = format == Format::F64;
    let q = if f64_only {
        c.clone()
    } else {
        transfer(&rounded, c.period_s)
    };
    let integrators_after = if f64_only {
        integrators
    } else {
        poles_at_one(&rounded)
    };
    // Poles and zeros before and after rounding. In sos each section's
    // roots come from the quadratic formula on its own coefficients, and
    // the gain errors are measured against the unrounded sections, so the
    // figures measure the rounding alone (not the root finder's ~1e-8
    // splitting of repeated roots when the sections were formed). In transposed-direct
    // the design's integrators, which root finding returns split around
    // z = 1, are placed exactly at 1, and so are the rounded controller's
    // (counted exactly by `poles_at_one`).
    let (p0, p1, z0, z1, reference) = match structure {
        Structure::Sos if !f64_only => (
            section_roots(&exact, |s| &s.a, true),
            section_roots(&rounded, |s| &s.a, true),
            section_roots(&exact, |s| &s.b, false),
            section_roots(&rounded, |s| &s.b, false),
            transfer(&exact, c.period_s),
        ),
        _ => {
            let mut p0 = c.transfer.denominator.roots().ok_or(RoundingError::Poles)?;
            let mut p1 = q
                .transfer
                .denominator
                .roots()
                .ok_or(RoundingError::RoundedPoles)?;
            snap_to_one(&mut p0, integrators);
            snap_to_one(&mut p1, integrators_after);
            (
                p0,
                p1,
                c.transfer.numerator.roots().unwrap_or_default(),
                q.transfer.numerator.roots().unwrap_or_default(),
                c.clone(),
            )
        }
    };
    let t = c.period_s;
    let one = C64::new(1.0, 0.0);
    let pole_error_pct = matched(&p0, &p1)
        .iter()
        .filter(|(a, b)| a.norm() > 0.0 && *a != one && *b != one)
        .map(|(a, b)| {
            if b.norm() == 0.0 {
                return 100.0;
            }
            let sa = a.ln() / t;
            let sb = b.ln() / t;
            (sb - sa).norm() / sa.norm() * 100.0
        })
        .fold(0.0, f64::max);
    let outside = |v: &[C64]| v.iter().filter(|p| p.norm() > 1.0 + 1e-12).count();
    let damage = Damage {
        q_format,
        pole_shift: max_shift(&p0, &p1),
        zero_shift: max_shift(&z0, &z1),
        pole_error_pct,
        dc_gain_error_pct: (integrators_after == integrators)
            .then(|| {
                let g0 = integral_gain(&reference, integrators);
                let g1 = integral_gain(&q, integrators);
                rel_pct(g1, g0)
            })
            .flatten(),
        crossover_gain_error_pct: check_w_rad_s
            .and_then(|w| rel_pct(q.freq(w).norm(), reference.freq(w).norm())),
        integrators,
        integrators_after,
        new_unstable_poles: outside(&p1).saturating_sub(outside(&p0)),
    };
    Ok(Quantized {
        controller: q,
        realization: rounded,
        damage,
    })
}

/// Roots in z of every section's denominator (`leading_one`: the stored
/// `a1, a2` after an implicit 1) or numerator (`b0, b1, b2`), each by the
/// quadratic formula; a root at z = 1 of `1 - q` or `1 - 2q + q^2` comes
/// out exactly 1.
fn section_roots(
    r: &Realization,
    coeffs: impl Fn(&Section) -> &Vec<f64>,
    leading_one: bool,
) -> Vec<C64> {
    let mut out = Vec::new();
    for s in &r.sections {
        let mut c: Vec<f64> = if leading_one {
            std::iter::once(1.0)
                .chain(coeffs(s).iter().copied())
                .collect()
        } else {
            coeffs(s).clone()
        };
        while c.last() == Some(&0.0) {
            // A trailing zero coefficient in q is a root at z = 0.
            c.pop();
            out.push(C64::new(0.0, 0.0));
        }
        match c.as_slice() {
            [a, b] => out.push(C64::new(-b / a, 0.0)),
            [a, b, cc] => {
                let disc = b * b - 4.0 * a * cc;
                if disc >= 0.0 {
                    // The root away from cancellation first, then Vieta.
                    let sign = if *b < 0.0 { -1.0 } else { 1.0 };
                    let big = -(b + sign * disc.sqrt()) / (2.0 * a);
                    let small = if big != 0.0 { cc / (a * big) } else { 0.0 };
                    out.push(C64::new(big, 0.0));
                    out.push(C64::new(small, 0.0));
                } else {
                    let re = -b / (2.0 * a);
                    let im = (-disc).sqrt() / (2.0 * a);
                    out.push(C64::new(re, im));
                    out.push(C64::new(re, -im));
                }
            }
            _ => {}
        }
    }
    out
}

/// `|a / b - 1|` in percent; None when b is zero or either is not finite.
fn rel_pct(a: f64, b: f64) -> Option<f64> {
    (b != 0.0 && a.is_finite() && b.is_finite()).then(|| ((a - b) / b).abs() * 100.0)
}

/// `lim_{z->1} (z-1)^k C(z)`: `N(1) k! / D^(k)(1)` (the k-th derivative of
/// the denominator at 1), which needs no division by a vanishing `D(1)`.
fn integral_gain(c: &DiscreteTransfer, k: usize) -> f64 {
    let mut d = c.transfer.denominator.coeffs().to_vec();
    let mut fact = 1.0;
    for i in 0..k {
        d = d
            .iter()
            .enumerate()
            .skip(1)
            .map(|(j, v)| v * j as f64)
            .collect();
        fact *= (i + 1) as f64;
    }
    let dk: f64 = d.iter().sum();
    c.transfer.numerator.eval(1.0) * fact / dk
}

/// Pairs of roots (exact, rounded) matched greedily by distance.
fn matched(a: &[C64], b: &[C64]) -> Vec<(C64, C64)> {
    let mut pairs: Vec<(f64, usize, usize)> = Vec::new();
    for (i, x) in a.iter().enumerate() {
        for (j, y) in b.iter().enumerate() {
            pairs.push(((x - y).norm(), i, j));
        }
    }
    pairs.sort_by(|p, q| p.0.total_cmp(&q.0));
    let mut used_a = vec![false; a.len()];
    let mut used_b = vec![false; b.len()];
    let mut out = Vec::new();
    for (_, i, j) in pairs {
        if !used_a[i] && !used_b[j] {
            used_a[i] = true;
            used_b[j] = true;
            out.push((a[i], b[j]));
        }
    }
    out
}

/// Largest distance between matched roots; a root left unmatched (the
/// rounding changed the count) counts as its distance to the origin.
fn max_shift(a: &[C64], b: &[C64]) -> f64 {
    let pairs = matched(a, b);
    let mut worst = pairs
        .iter()
        .map(|(x, y)| (x - y).norm())
        .fold(0.0, f64::max);
    if a.len() != b.len() {
        let used: Vec<C64> = pairs
            .iter()
            .map(|p| p.0)
            .chain(pairs.iter().map(|p| p.1))
            .collect();
        for r in a.iter().chain(b.iter()) {
            if !used.contains(r) {
                worst = worst.max(r.norm());
            }
        }
    }
    worst
}

/// Poles the design puts at z = 1: the continuous controller's poles at
/// s = 0 (every method maps s = 0 to z = 1), or for a controller given in
/// z the poles within 1e-6 of 1 (root finding splits a double root at 1 by
/// about 1e-8, so a tighter test would miss a double integrator).
pub fn design_integrators(controller: &Controller) -> usize {
    match controller {
        Controller::Continuous(c) => c.denominator.zero_root_count(),
        Controller::Discrete(d) => d
            .transfer
            .denominator
            .roots()
            .map_or(0, |r| r.iter().filter(|p| (*p - 1.0).norm() < 1e-6).count()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::str::FromStr;

    #[test]
    fn formats_parse_and_name() {
        for s in ["f64", "f32", "q15", "q31", "q7"] {
            assert_eq!(Format::from_str(s).unwrap().name(), s);
        }
        assert!(Format::from_str("q2").is_err());
        assert!(Format::from_str("q32").is_err());
        assert!(Format::from_str("q015").is_err());
        assert!(Format::from_str("q+15").is_err());
        assert!(
            Format::from_str("int16")
                .unwrap_err()
                .to_string()
                .contains("int16")
        );
    }

    #[test]
    fn sos_realization_reproduces_the_controller() {
        // (z - 0.5)(z + 0.2)(z - 0.9) / ((z - 1)(z^2 - 1.6 z + 0.7)(z - 0.3))
        let num = Poly::from_roots(&[C64::new(0.5, 0.0), C64::new(-0.2, 0.0), C64::new(0.9, 0.0)])
            .scale(0.4);
        let den = Poly::from_roots(&[
            C64::new(1.0, 0.0),
            C64::new(0.8, 0.244_948_974_278_317_8),
            C64::new(0.8, -0.244_948_974_278_317_8),
            C64::new(0.3, 0.0),
        ]);
        let c = DiscreteTransfer {
            transfer: Transfer::new(num, den),
            period_s: 1e-3,
        };
        let r = realize(&c, Structure::Sos, 1).unwrap();
        assert_eq!(r.sections.len(), 3);
        assert_eq!(r.delay, 1);
        let back = transfer(&r, 1e-3);
        for w in [1.0, 100.0, 1000.0, 3000.0] {
            let e = (back.freq(w) - c.freq(w)).norm() / c.freq(w).norm();
            // Near DC the integrator amplifies root-level rounding by 1/|z - 1|.
            assert!(e < 1e-10, "w {w}: {e}");
        }
        assert_eq!(poles_at_one(&r), 1);
    }

    #[test]
    fn an_integrator_found_exactly_at_one_is_not_snapped_twice() {
        let mut roots = vec![C64::new(1.0, 0.0), C64::new(0.9, 0.0), C64::new(0.2, 0.0)];
        snap_to_one(&mut roots, 1);
        assert_eq!(roots[1], C64::new(0.9, 0.0));
        let mut roots = vec![C64::new(1.0 - 1e-9, 0.0), C64::new(0.9, 0.0)];
        snap_to_one(&mut roots, 1);
        assert_eq!(roots[0], C64::new(1.0, 0.0));
        assert_eq!(roots[1], C64::new(0.9, 0.0));
    }
}
