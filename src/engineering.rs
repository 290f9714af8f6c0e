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

/// A time: seconds from 0.1 s up (`0.1242 s`, `78.03 s`), with a prefix
/// below (`716.3 µs`, `2.707 µs`, `12.40 ms`).
pub fn seconds(v: f64) -> String {
    if v.is_finite() && v.abs() >= 0.1 {
        format!("{} s", sig4(v))
    } else {
        with_prefix(v, "s")
    }
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
}
