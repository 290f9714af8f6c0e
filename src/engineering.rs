//! Quantities as an engineer writes them in text, reports and charts:
//! four significant digits and an SI prefix chosen so that the number
//! reads at a glance (`369.4 kHz`, `716.3 µs`, `0.1242 s`). CSV and JSON
//! never use these: they keep plain SI numbers (see `docs/figures.md`).

/// Four significant digits without a prefix (`21.90`, `0.1242`,
/// `1.649e-4` outside 1e-3..1e5, where digits would run on).
pub fn sig4(v: f64) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            "undefined".into()
        } else if v > 0.0 {
            "infinite".into()
        } else {
            "-infinite".into()
        };
    }
    if v == 0.0 {
        return "0".into();
    }
    let a = v.abs();
    if (1e-3..1e5).contains(&a) {
        let exponent = a.log10().floor() as i32;
        let digits = (3 - exponent).max(0) as usize;
        let text = format!("{v:.digits$}");
        // Rounding can carry into the next power of ten (0.99996 ->
        // "1.0000"): one digit fewer then keeps four significant ones.
        let carried = text
            .trim_start_matches('-')
            .parse::<f64>()
            .is_ok_and(|r| r >= 10f64.powi(exponent + 1));
        if carried && digits > 0 {
            let digits = digits - 1;
            format!("{v:.digits$}")
        } else {
            text
        }
    } else {
        format!("{v:.3e}")
    }
}

/// The SI prefixes used, from pico to giga, with their powers of ten.
const PREFIXES: [(i32, &str); 7] = [
    (-12, "p"),
    (-9, "n"),
    (-6, "µ"),
    (-3, "m"),
    (0, ""),
    (3, "k"),
    (6, "M"),
];

/// `v` in `unit` with the prefix whose power of ten is the largest
/// multiple of three not above `v`'s own (clamped to pico..mega), four
/// significant digits: `with_prefix(3.694e5, "Hz")` = `369.4 kHz`.
pub fn with_prefix(v: f64, unit: &str) -> String {
    if !v.is_finite() || v == 0.0 {
        return format!("{} {unit}", sig4(v));
    }
    let mut e3 = (v.abs().log10() / 3.0).floor() as i32 * 3;
    e3 = e3.clamp(PREFIXES[0].0, PREFIXES[PREFIXES.len() - 1].0);
    let mut scaled = v / 10f64.powi(e3);
    // Four significant digits can round up into the next prefix
    // (999.96 kHz -> "1000 kHz"): move up one.
    if sig4(scaled.abs()).parse::<f64>().is_ok_and(|r| r >= 1000.0)
        && e3 < PREFIXES[PREFIXES.len() - 1].0
    {
        e3 += 3;
        scaled = v / 10f64.powi(e3);
    }
    let prefix = PREFIXES
        .iter()
        .find(|(p, _)| *p == e3)
        .map_or("", |(_, s)| s);
    format!("{} {prefix}{unit}", sig4(scaled))
}

/// A rate or frequency: `369.4 kHz`, `848.0 Hz`, `2.000 MHz`.
pub fn hz(v: f64) -> String {
    with_prefix(v, "Hz")
}

/// A lower threshold on a rate with an SI prefix, rounded up like
/// [`at_least`]: `hz_at_least(1244.01)` = `1.245 kHz`.
pub fn hz_at_least(v: f64) -> String {
    prefixed_toward(v, "Hz", 1.0)
}

/// An upper threshold on a rate with an SI prefix, rounded down like
/// [`at_most`]: `hz_at_most(1244.6)` = `1.244 kHz`.
pub fn hz_at_most(v: f64) -> String {
    prefixed_toward(v, "Hz", -1.0)
}

/// `v` in `unit` with an SI prefix as [`with_prefix`] chooses it, its
/// digits rounded toward `dir` as [`toward`] does (the scale is an exact
/// power of ten, so the scaled digits keep their side of `v`). The
/// prefix moves up only when the rounded digits reach 1000.
fn prefixed_toward(v: f64, unit: &str, dir: f64) -> String {
    if !v.is_finite() || v == 0.0 {
        return with_prefix(v, unit);
    }
    let (lo, hi) = (PREFIXES[0].0, PREFIXES[PREFIXES.len() - 1].0);
    let mut e3 = ((v.abs().log10() / 3.0).floor() as i32 * 3).clamp(lo, hi);
    let mut text = toward(v / 10f64.powi(e3), dir);
    if text.parse::<f64>().is_ok_and(|r| r.abs() >= 1000.0) && e3 < hi {
        e3 += 3;
        text = toward(v / 10f64.powi(e3), dir);
    }
    let prefix = PREFIXES
        .iter()
        .find(|(p, _)| *p == e3)
        .map_or("", |(_, s)| s);
    format!("{text} {prefix}{unit}")
}

/// A time: seconds from 0.1 s up (`0.1242 s`, `78.03 s`), with a prefix
/// below (`716.3 µs`, `2.707 µs`, `12.40 ms`).
pub fn seconds(v: f64) -> String {
    if v.is_finite() && v.abs() >= 0.1 {
        format!("{} s", sig4(v))
    } else {
        with_prefix(v, "s")
    }
}

/// A computation delay in periods as an engineer says it: `none`,
/// `0.5 of a period`, `1 period`, `2.5 periods`.
pub fn periods(d: f64) -> String {
    periods_of(d, "period")
}

/// [`periods`] of a named period (`outer period`: `0.5 of an outer
/// period`, `2 outer periods`).
pub fn periods_of(d: f64, period: &str) -> String {
    let n = sig4(d);
    let n = if n.contains('.') && !n.contains('e') {
        n.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        n
    };
    let article = article(period);
    if d == 0.0 {
        "none".into()
    } else if d < 1.0 {
        format!("{n} of {article} {period}")
    } else if d == 1.0 {
        format!("1 {period}")
    } else {
        format!("{n} {period}s")
    }
}

/// The indefinite article of `word` by its first letter (`an outer
/// period`, `an integer`, `a string`).
pub fn article(word: &str) -> &'static str {
    if word.starts_with(['a', 'e', 'i', 'o', 'u']) {
        "an"
    } else {
        "a"
    }
}

/// A lower threshold ("at least"), in [`sig4`]'s digits but rounded
/// up, so the printed number read back is never below `v`: quoting a
/// minimum rounded down would name a value that falls just short.
pub fn at_least(v: f64) -> String {
    toward(v, 1.0)
}

/// An upper threshold ("at most"), in [`sig4`]'s digits but rounded
/// down, so the printed number read back is never above `v`.
pub fn at_most(v: f64) -> String {
    toward(v, -1.0)
}

/// [`sig4`], then stepped by one unit of its last printed digit in
/// direction `dir` (+1 up, -1 down) until the printed value read back is
/// on that side of `v`. The text is what the reader sees, so the check is
/// made on the text itself.
fn toward(v: f64, dir: f64) -> String {
    let mut s = sig4(v);
    if !v.is_finite() || v == 0.0 {
        return s;
    }
    // One step is enough unless a step carries into a new digit count
    // (9.9995 -> 10.00); three is a safe cap.
    for _ in 0..3 {
        let back: f64 = match s.parse() {
            Ok(b) => b,
            Err(_) => return s,
        };
        if (back - v) * dir >= 0.0 {
            return s;
        }
        // One unit of the last digit toward `dir`, then `v` itself cut to
        // that form's last digit (stepping down across a power of ten
        // gains a digit: 10.00 -> 9.999, not 9.990).
        let unit = last_digit_unit(&sig4(back + dir * last_digit_unit(&s)));
        let q = v / unit;
        s = sig4(if dir > 0.0 { q.ceil() } else { q.floor() } * unit);
    }
    s
}

/// The value of one unit in the last printed digit of a [`sig4`] text
/// (`12.35` -> 0.01, `3.214e6` -> 1e3).
fn last_digit_unit(s: &str) -> f64 {
    let (mantissa, exp) = match s.split_once('e') {
        Some((m, e)) => (m, e.parse::<i32>().unwrap_or(0)),
        None => (s, 0),
    };
    let decimals = mantissa.split_once('.').map_or(0, |(_, d)| d.len()) as i32;
    10f64.powi(exp - decimals)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rates_and_times_read_at_a_glance() {
        assert_eq!(hz(3.694e5), "369.4 kHz");
        assert_eq!(hz(848.0), "848.0 Hz");
        assert_eq!(hz(1396.0), "1.396 kHz");
        assert_eq!(hz(2e6), "2.000 MHz");
        assert_eq!(hz(999_960.0), "1.000 MHz");
        assert_eq!(seconds(2.707e-6), "2.707 µs");
        assert_eq!(seconds(7.163e-4), "716.3 µs");
        assert_eq!(seconds(0.1242), "0.1242 s");
        assert_eq!(seconds(0.0124), "12.40 ms");
        assert_eq!(seconds(78.03), "78.03 s");
        assert_eq!(sig4(21.9), "21.90");
        assert_eq!(sig4(0.99996), "1.000");
        assert_eq!(sig4(-9999.7), "-10000");
        assert_eq!(sig4(f64::INFINITY), "infinite");
        assert_eq!(hz(0.0), "0 Hz");
    }

    #[test]
    fn thresholds_round_toward_the_side_that_works() {
        // By hand: 32.1401 needs at least 32.15 (not 32.14); 1244.6 allows
        // at most 1244 (sig4 says 1245); exact values stay as they are.
        assert_eq!(sig4(32.1401), "32.14");
        assert_eq!(at_least(32.1401), "32.15");
        assert_eq!(sig4(1244.6), "1245");
        assert_eq!(at_most(1244.6), "1244");
        assert_eq!(at_least(10.0), "10.00");
        assert_eq!(at_most(10.0), "10.00");
        // Rounding up across a power of ten keeps four significant
        // digits (sig4 prints 9.9996 as 10.00), and is never below.
        assert_eq!(at_least(9.9996), "10.00");
        assert_eq!(at_most(9.9996), "9.999");
        // Exponent form: one unit of the last digit is 1e3 here.
        assert_eq!(at_least(3.21401e6), "3.215e6");
        assert_eq!(at_most(3.21499e6), "3.214e6");
        // With a prefix: the same rounding on the scaled digits.
        assert_eq!(hz_at_least(1244.01), "1.245 kHz");
        assert_eq!(hz_at_most(1244.6), "1.244 kHz");
        assert_eq!(hz_at_least(999.96), "1.000 kHz");
        assert_eq!(hz_at_most(999.96), "999.9 Hz");
        assert_eq!(hz_at_most(47_229.4), "47.22 kHz");
    }
}
