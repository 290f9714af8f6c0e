//! Axis ranges, data-to-pixel mapping, tick choice and tick labels.

/// Maps data values on one axis to pixel positions.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Scale {
    pub lo: f64,
    pub hi: f64,
    pub log: bool,
    /// Pixel position of `lo`.
    pub p0: f64,
    /// Pixel position of `hi`.
    pub p1: f64,
}

impl Scale {
    fn t(&self, v: f64) -> Option<f64> {
        if !v.is_finite() {
            return None;
        }
        if self.log {
            if v <= 0.0 {
                return None;
            }
            Some((v.log10() - self.lo.log10()) / (self.hi.log10() - self.lo.log10()))
        } else {
            Some((v - self.lo) / (self.hi - self.lo))
        }
    }

    /// Pixel position of `v`, or `None` when it has none (NaN, infinite,
    /// or not positive on a log axis). Far-outside values map far outside.
    pub fn map(&self, v: f64) -> Option<f64> {
        self.t(v).map(|t| self.p0 + t * (self.p1 - self.p0))
    }

    /// Pixel position of `v` pinned to the axis ends; infinities map to
    /// the matching end (useful for bands open on one side).
    pub fn map_clamped(&self, v: f64) -> Option<f64> {
        let (a, b) = (self.p0.min(self.p1), self.p0.max(self.p1));
        let up = self.p1 > self.p0;
        if v == f64::INFINITY {
            return Some(if up { b } else { a });
        }
        if v == f64::NEG_INFINITY || (self.log && v <= 0.0 && !v.is_nan()) {
            return Some(if up { a } else { b });
        }
        self.map(v).map(|p| p.clamp(a, b))
    }

    /// Whether `v` is inside the visible range.
    pub fn contains(&self, v: f64) -> bool {
        v.is_finite() && v >= self.lo && v <= self.hi && (!self.log || v > 0.0)
    }
}

/// Choose a usable range. `explicit` wins when valid; otherwise the span
/// of the finite (and, for log axes, positive) `values`, padded; with no
/// usable values, a default. Zero-width ranges are widened. Never fails:
/// the caller validates explicit ranges beforehand if it wants an error.
pub(crate) fn choose_range(explicit: Option<(f64, f64)>, values: &[f64], log: bool) -> (f64, f64) {
    if let Some((a, b)) = explicit {
        let (a, b) = (a.min(b), a.max(b));
        if a.is_finite() && b.is_finite() && (!log || a > 0.0) {
            return widen(a, b, log);
        }
    }
    let usable = values
        .iter()
        .filter(|v| v.is_finite() && (!log || **v > 0.0));
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in usable {
        lo = lo.min(*v);
        hi = hi.max(*v);
    }
    if !lo.is_finite() || !hi.is_finite() {
        return if log { (1.0, 10.0) } else { (0.0, 1.0) };
    }
    let (lo, hi) = widen(lo, hi, log);
    if log {
        // Snap outwards to 1-2-5 values so the axis starts and ends tidily.
        (snap125(lo, false), snap125(hi, true))
    } else {
        let pad = (hi - lo) * 0.05;
        let (plo, phi) = (lo - pad, hi + pad);
        // Do not pad across zero when the data starts at zero.
        let plo = if lo >= 0.0 && plo < 0.0 { 0.0 } else { plo };
        let phi = if hi <= 0.0 && phi > 0.0 { 0.0 } else { phi };
        (plo, phi)
    }
}

/// Widen a zero-width (or nearly so) range to something drawable.
fn widen(lo: f64, hi: f64, log: bool) -> (f64, f64) {
    if log {
        if hi / lo < 1.0 + 1e-9 {
            return (lo / 2.0, hi * 2.0);
        }
    } else {
        let mag = lo.abs().max(hi.abs());
        if hi - lo <= mag * 1e-12 || hi - lo < 1e-300 {
            let d = if mag > 0.0 { mag * 0.1 } else { 1.0 };
            return (lo - d, hi + d);
        }
    }
    (lo, hi)
}

/// The nearest value of the form {1,2,5}x10^k at or below (or above) `v > 0`.
fn snap125(v: f64, up: bool) -> f64 {
    let k = v.log10().floor();
    let base = 10f64.powf(k);
    let m = v / base;
    let steps = [1.0, 2.0, 5.0, 10.0];
    if up {
        let s = steps
            .iter()
            .find(|s| **s >= m * (1.0 - 1e-9))
            .unwrap_or(&10.0);
        s * base
    } else {
        let s = steps
            .iter()
            .rev()
            .find(|s| **s <= m * (1.0 + 1e-9))
            .unwrap_or(&1.0);
        s * base
    }
}

/// Ticks for one axis: labelled major ticks and unlabelled minor ones.
#[derive(Debug, Clone, Default)]
pub(crate) struct Ticks {
    pub major: Vec<(f64, String)>,
    pub minor: Vec<f64>,
}

/// Pick ticks whose labels fit: `fits(&ticks)` says whether a candidate
/// set's labels are far enough apart on this axis. Candidates go from
/// dense to sparse; the sparsest is used if none fits.
pub(crate) fn choose_ticks(scale: &Scale, fits: &dyn Fn(&Ticks) -> bool) -> Ticks {
    let candidates = if scale.log {
        log_candidates(scale)
    } else {
        linear_candidates(scale.lo, scale.hi)
    };
    let mut last = Ticks::default();
    for c in candidates {
        if c.major.len() >= 2 && fits(&c) {
            return c;
        }
        last = c;
    }
    last
}

/// Linear tick sets with steps 1, 2, 5 x 10^k, from about 15 ticks down
/// to 2.
fn linear_candidates(lo: f64, hi: f64) -> Vec<Ticks> {
    let span = hi - lo;
    if !(span.is_finite() && span > 0.0) {
        return vec![];
    }
    let mut k = (span / 15.0).log10().floor() as i32;
    let mut out = Vec::new();
    while out.len() < 16 {
        for m in [1.0, 2.0, 5.0] {
            let step = m * 10f64.powi(k);
            if step < span / 15.0 {
                continue;
            }
            let first = (lo / step - 1e-9).ceil() as i64;
            let last = (hi / step + 1e-9).floor() as i64;
            if last - first > 40 {
                continue;
            }
            let vals: Vec<f64> = (first..=last).map(|i| i as f64 * step).collect();
            let scale_mag = lo.abs().max(hi.abs());
            let major = vals
                .iter()
                .map(|v| (*v, format_linear(*v, step, scale_mag)))
                .collect::<Vec<_>>();
            let n = major.len();
            out.push(Ticks {
                major,
                minor: vec![],
            });
            if n < 2 {
                return out;
            }
        }
        k += 1;
    }
    out
}

/// Log tick sets: 1-2-5 per decade, then every decade, then every 2nd,
/// 3rd, ... decade. Spans under a decade use linear steps instead.
fn log_candidates(scale: &Scale) -> Vec<Ticks> {
    let (lo, hi) = (scale.lo, scale.hi);
    let (llo, lhi) = (lo.log10(), hi.log10());
    let decades = lhi - llo;
    let mut out = Vec::new();
    if decades < 1.0 {
        // Within a decade the 1-2-5 values are too sparse: use linear steps.
        out.extend(linear_candidates(lo, hi));
    }
    let d0 = llo.floor() as i32 - 1;
    let d1 = lhi.ceil() as i32 + 1;
    if d1 - d0 >= 400 {
        return out;
    }
    let inside = |v: f64| v >= lo * (1.0 - 1e-9) && v <= hi * (1.0 + 1e-9);
    let all_minor = |skip: &dyn Fn(f64) -> bool| -> Vec<f64> {
        let mut m = Vec::new();
        if decades <= 8.0 {
            for d in d0..=d1 {
                for k in 1..10 {
                    let v = f64::from(k) * 10f64.powi(d);
                    if inside(v) && !skip(v) {
                        m.push(v);
                    }
                }
            }
        }
        m
    };
    for mults in [&[1.0, 2.0, 5.0][..], &[1.0][..]] {
        let mut major = Vec::new();
        for d in d0..=d1 {
            for m in mults {
                let v = m * 10f64.powi(d);
                if inside(v) {
                    major.push((v, format_log(*m, d)));
                }
            }
        }
        let majors: Vec<f64> = major.iter().map(|t| t.0).collect();
        let minor = all_minor(&|v| majors.iter().any(|m| (m / v - 1.0).abs() < 1e-9));
        out.push(Ticks { major, minor });
    }
    for stride in 2..=((decades.ceil() as i32).max(2)) {
        let mut major = Vec::new();
        let mut minor = Vec::new();
        for d in d0..=d1 {
            let v = 10f64.powi(d);
            if inside(v) {
                if d.rem_euclid(stride) == 0 {
                    major.push((v, format_log(1.0, d)));
                } else {
                    minor.push(v);
                }
            }
        }
        if decades <= 8.0 {
            let extra = all_minor(&|v| {
                let l = v.log10();
                (l - l.round()).abs() < 1e-9
            });
            minor.extend(extra);
        }
        out.push(Ticks { major, minor });
    }
    out
}

/// Engineering suffixes for powers of a thousand from 10^-12 to 10^12.
fn suffix(e3: i32) -> Option<&'static str> {
    Some(match e3 {
        -12 => "p",
        -9 => "n",
        -6 => "\u{00b5}",
        -3 => "m",
        0 => "",
        3 => "k",
        6 => "M",
        9 => "G",
        12 => "T",
        _ => return None,
    })
}

/// Use a typographic minus sign for negative numbers.
fn minus(s: String) -> String {
    match s.strip_prefix('-') {
        Some(rest) => format!("\u{2212}{rest}"),
        None => s,
    }
}

/// A tick label on a log axis for the value `m x 10^d` (`m` in 1..10):
/// engineering suffixes for large and very small values (10k, 2M, 5µ),
/// plain decimals from 0.001 to 9999.
pub(crate) fn format_log(m: f64, d: i32) -> String {
    let v = m * 10f64.powi(d);
    if (-3..4).contains(&d) {
        let decimals = (-d).max(0) as usize;
        return format!("{v:.decimals$}");
    }
    let e3 = d.div_euclid(3) * 3;
    match suffix(e3) {
        Some(s) => {
            let mant = m * 10f64.powi(d - e3);
            format!("{}{s}", mant.round() as i64)
        }
        None => format!("{m}e{d}"),
    }
}

/// A tick label on a linear axis, with as many decimals as the step
/// needs; engineering suffixes when the axis reaches 10^4 or stays below
/// 10^-3.
pub(crate) fn format_linear(v: f64, step: f64, axis_mag: f64) -> String {
    let v = if v.abs() < step * 1e-6 { 0.0 } else { v };
    let e3 = if axis_mag >= 1e4 || (axis_mag > 0.0 && axis_mag < 1e-3) {
        (axis_mag.log10().floor() as i32).div_euclid(3) * 3
    } else {
        0
    };
    let (e3, sfx) = match suffix(e3) {
        Some(s) => (e3, s),
        None => (0, ""),
    };
    let scaled_step = step / 10f64.powi(e3);
    let decimals = (-(scaled_step.log10() + 1e-9).floor()).max(0.0) as usize;
    let scaled = v / 10f64.powi(e3);
    if e3 == 0 && (axis_mag >= 1e4 || (axis_mag > 0.0 && axis_mag < 1e-3)) {
        // Beyond the suffix table: scientific notation.
        return minus(format!("{v:e}"));
    }
    let body = format!("{scaled:.decimals$}");
    let body = if scaled == 0.0 { "0".to_string() } else { body };
    minus(format!("{body}{sfx}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_labels_use_decades_and_suffixes() {
        assert_eq!(format_log(1.0, 1), "10");
        assert_eq!(format_log(1.0, 2), "100");
        assert_eq!(format_log(1.0, 3), "1000");
        assert_eq!(format_log(1.0, 4), "10k");
        assert_eq!(format_log(2.0, 4), "20k");
        assert_eq!(format_log(5.0, 5), "500k");
        assert_eq!(format_log(1.0, 6), "1M");
        assert_eq!(format_log(1.0, -1), "0.1");
        assert_eq!(format_log(5.0, -3), "0.005");
        assert_eq!(format_log(2.0, -6), "2\u{00b5}");
    }

    #[test]
    fn linear_labels() {
        assert_eq!(format_linear(0.5, 0.1, 1.0), "0.5");
        assert_eq!(format_linear(-2.0, 1.0, 10.0), "\u{2212}2");
        assert_eq!(format_linear(1e-17, 0.2, 1.0), "0");
        assert_eq!(format_linear(25_000.0, 5_000.0, 40_000.0), "25k");
        assert_eq!(format_linear(2500.0, 500.0, 4_000.0), "2500");
    }

    #[test]
    fn ranges_fall_back_and_widen() {
        assert_eq!(choose_range(None, &[], false), (0.0, 1.0));
        assert_eq!(choose_range(None, &[f64::NAN], true), (1.0, 10.0));
        let (a, b) = choose_range(None, &[3.0, 3.0], false);
        assert!(a < 3.0 && b > 3.0);
        let (a, b) = choose_range(None, &[7.0], true);
        assert!(a < 7.0 && b > 7.0 && a > 0.0);
        assert_eq!(choose_range(Some((5.0, 1.0)), &[], false), (1.0, 5.0));
        let (a, b) = choose_range(None, &[12.0, 3400.0, -1.0], true);
        assert_eq!((a, b), (10.0, 5000.0));
    }

    #[test]
    fn ticks_cover_the_range() {
        let s = Scale {
            lo: 10.0,
            hi: 1e5,
            log: true,
            p0: 0.0,
            p1: 1000.0,
        };
        let t = choose_ticks(&s, &|t: &Ticks| t.major.len() <= 6);
        let labels: Vec<&str> = t.major.iter().map(|m| m.1.as_str()).collect();
        assert_eq!(labels, ["10", "100", "1000", "10k", "100k"]);
        assert!(!t.minor.is_empty());
        let s = Scale {
            lo: -0.3,
            hi: 1.3,
            log: false,
            p0: 0.0,
            p1: 400.0,
        };
        let t = choose_ticks(&s, &|t: &Ticks| t.major.len() <= 9);
        assert!(t.major.iter().any(|m| m.1 == "0"));
        assert!(t.major.iter().all(|m| m.0 >= -0.3 && m.0 <= 1.3));
    }
}
