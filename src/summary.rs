//! What the commands print: compact human tables and JSON views of the
//! results. Builds strings only; the binary prints them.

use std::fmt::Write;

use serde_json::{Map, Value, json};

use crate::case::Spec;
use crate::continuous::HoldApprox;
use crate::evaluate::{Evaluation, Figures};
use crate::feasibility::check_figures;
use crate::pick::PickReport;
use crate::poly::C64;
use crate::transfer::DiscreteTransfer;

/// Format a number for tables: 4 significant digits, engineering-friendly.
pub fn fmt_num(v: f64) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let a = v.abs();
    if (1e-3..1e5).contains(&a) {
        let digits = (3 - a.log10().floor() as i32).max(0) as usize;
        format!("{v:.digits$}")
    } else {
        format!("{v:.3e}")
    }
}

/// A lower threshold ("at least"), in [`fmt_num`]'s digits but rounded
/// up, so the printed number read back is never below `v`: quoting a
/// minimum rounded down would name a value that falls just short.
pub fn fmt_at_least(v: f64) -> String {
    fmt_toward(v, 1.0)
}

/// An upper threshold ("at most"), in [`fmt_num`]'s digits but rounded
/// down, so the printed number read back is never above `v`.
pub fn fmt_at_most(v: f64) -> String {
    fmt_toward(v, -1.0)
}

/// [`fmt_num`], then stepped by one unit of its last printed digit in
/// direction `dir` (+1 up, -1 down) until the printed value read back is
/// on that side of `v`. The text is what the reader sees, so the check is
/// made on the text itself.
fn fmt_toward(v: f64, dir: f64) -> String {
    let mut s = fmt_num(v);
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
        s = fmt_num(back + dir * last_digit_unit(&s));
    }
    s
}

/// The value of one unit in the last printed digit of a [`fmt_num`] text
/// (`12.35` -> 0.01, `3.214e6` -> 1e3).
fn last_digit_unit(s: &str) -> f64 {
    let (mantissa, exp) = match s.split_once('e') {
        Some((m, e)) => (m, e.parse::<i32>().unwrap_or(0)),
        None => (s, 0),
    };
    let decimals = mantissa.split_once('.').map_or(0, |(_, d)| d.len()) as i32;
    10f64.powi(exp - decimals)
}

fn fmt_opt(v: Option<f64>, missing: &str) -> String {
    v.map_or_else(|| missing.to_string(), fmt_num)
}

/// A time figure's text: its value, `undecided`, or `missing`.
fn shown(f: &Figures, key: &str, v: Option<f64>, missing: &'static str) -> String {
    fmt_opt(f.decided(key, v), f.missing_text(key, missing))
}

/// Complex numbers as `[re, im]` pairs for JSON.
pub fn complex_pairs(v: &[C64]) -> Vec<[f64; 2]> {
    v.iter().map(|c| [c.re, c.im]).collect()
}

/// `looprate discretize` output.
pub fn discretized_text(method: &str, rate_hz: f64, c: &DiscreteTransfer) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "method         {method}");
    let _ = writeln!(s, "rate           {rate_hz} Hz (T = {} s)", 1.0 / rate_hz);
    let _ = writeln!(s, "numerator(z)   {:?}", c.transfer.numerator.descending());
    let _ = writeln!(
        s,
        "denominator(z) {:?}",
        c.transfer.denominator.descending()
    );
    let _ = writeln!(s, "poles          {}", roots_text(c.transfer.poles()));
    let _ = writeln!(s, "zeros          {}", roots_text(c.transfer.zeros()));
    s
}

/// `looprate discretize --json` output.
pub fn discretized_json(method: &str, rate_hz: f64, c: &DiscreteTransfer) -> Value {
    json!({
        "method": method,
        "rate_hz": rate_hz,
        "numerator": c.transfer.numerator.descending(),
        "denominator": c.transfer.denominator.descending(),
        "poles": c.transfer.poles().map(|v| complex_pairs(&v)),
        "zeros": c.transfer.zeros().map(|v| complex_pairs(&v)),
    })
}

/// The figure rows of the evaluation table: (key, label with unit, value).
fn figure_rows(f: Option<&Figures>) -> Vec<(&'static str, &'static str, String)> {
    let g = |h: &dyn Fn(&Figures) -> String| f.map_or("-".to_string(), h);
    vec![
        ("y_final", "final value", g(&|f| fmt_num(f.y_final))),
        (
            "overshoot_pct",
            "overshoot (%)",
            g(&|f| shown(f, "overshoot_pct", f.overshoot_pct, "n/a")),
        ),
        (
            "settling_time_s",
            "settling time (s)",
            g(&|f| shown(f, "settling_time_s", f.settling_time_s, "not settled")),
        ),
        (
            "rise_time_s",
            "rise time 10-90 % (s)",
            g(&|f| shown(f, "rise_time_s", f.rise_time_s, "not reached")),
        ),
        (
            "disturbance_peak",
            "disturbance peak",
            g(&|f| shown(f, "disturbance_peak", Some(f.disturbance_peak), "-")),
        ),
        (
            "recovery_time_s",
            "recovery time (s)",
            g(&|f| shown(f, "recovery_time_s", f.recovery_time_s, "not recovered")),
        ),
        (
            "u_peak",
            "peak command",
            g(&|f| shown(f, "u_peak", Some(f.u_peak), "-")),
        ),
        (
            "gain_margin_db",
            "gain margin (dB)",
            g(&|f| fmt_opt(f.gain_margin_db, "inf")),
        ),
        (
            "phase_margin_deg",
            "phase margin (deg)",
            g(&|f| fmt_opt(f.phase_margin_deg, "inf")),
        ),
        (
            "crossover_hz",
            "crossover (Hz)",
            g(&|f| fmt_opt(f.crossover_hz, "none")),
        ),
        (
            "delay_margin_s",
            "delay margin (s)",
            g(&|f| fmt_opt(f.delay_margin_s, f.delay_margin_missing())),
        ),
        (
            "delay_margin_estimate_s",
            "delay margin estimate (s)",
            g(&|f| fmt_opt(f.delay_margin_estimate_s, "inf")),
        ),
        (
            "sensitivity_peak",
            "sensitivity peak Ms",
            g(&|f| fmt_num(f.sensitivity_peak)),
        ),
    ]
}

/// `looprate eval` table: exact sampled loop beside the continuous design
/// and each hold approximation, with the limits and pass/fail.
pub fn evaluation_text(
    title: &str,
    header: &str,
    exact: &Evaluation,
    design: Option<&Evaluation>,
    approx: &[(HoldApprox, Evaluation)],
    spec: &Spec,
) -> String {
    let mut cols: Vec<(&str, &Evaluation)> = vec![("exact sampled", exact)];
    if let Some(d) = design {
        cols.push(("continuous", d));
    }
    for (k, e) in approx {
        cols.push((k.name(), e));
    }
    let checks = exact
        .figures
        .as_ref()
        .map(|f| check_figures(f, spec))
        .unwrap_or_default();
    let mut s = String::new();
    let _ = writeln!(s, "{title}\n{header}\n");
    let _ = write!(s, "{:<24}", "figure");
    for (name, _) in &cols {
        let _ = write!(s, "{name:>15}");
    }
    let _ = writeln!(s, "{:>12}{:>7}", "limit", "pass");
    let _ = write!(s, "{:<24}", "status");
    for (_, e) in &cols {
        let _ = write!(
            s,
            "{:>15}",
            e.status.label().chars().take(14).collect::<String>()
        );
    }
    let _ = writeln!(s);
    let rows: Vec<Vec<(&str, &str, String)>> = cols
        .iter()
        .map(|(_, e)| figure_rows(e.figures.as_ref()))
        .collect();
    for i in 0..rows[0].len() {
        let (key, label, _) = rows[0][i];
        let _ = write!(s, "{label:<24}");
        for r in &rows {
            let _ = write!(s, "{:>15}", r[i].2);
        }
        match checks.iter().find(|c| c.figure == key) {
            Some(c) => {
                let _ = writeln!(
                    s,
                    "{:>12}{:>7}",
                    fmt_num(c.limit),
                    if c.pass { "yes" } else { "NO" }
                );
            }
            None => {
                let _ = writeln!(s);
            }
        }
    }
    if exact.figures.is_none() && !exact.closed_loop_poles.is_empty() {
        let _ = writeln!(s, "\nclosed-loop poles (z):");
        for p in &exact.closed_loop_poles {
            let _ = writeln!(
                s,
                "  {} {}{}j   |z| = {}",
                fmt_num(p[0]),
                if p[1] < 0.0 { '-' } else { '+' },
                fmt_num(p[1].abs()),
                fmt_num(p[0].hypot(p[1]))
            );
        }
    }
    s
}

/// The figures of one evaluation as a JSON object with the loop model's
/// keys; infinite margins are null with a note.
pub fn evaluation_json(e: &Evaluation) -> Value {
    let mut m = Map::new();
    m.insert("status".into(), json!(e.status.label()));
    m.insert("stable".into(), json!(e.stable));
    let mut notes: Vec<String> = Vec::new();
    if let Some(f) = &e.figures {
        if let Value::Object(fm) = serde_json::to_value(f).unwrap_or(Value::Null) {
            m.extend(fm);
        }
        if f.gain_margin_db.is_none() {
            notes.push(
                "gain_margin_db is null: no -180 deg crossing, the margin is infinite".into(),
            );
        }
        if f.phase_margin_deg.is_none() {
            notes.push(
                "phase_margin_deg is null: |L| never crosses 1, the margin is infinite".into(),
            );
        }
        if f.settling_time_s.is_none() && !f.is_undecided("settling_time_s") {
            notes.push("settling_time_s is null: not settled within the horizon".into());
        }
        if f.overshoot_pct.is_none() && !f.is_undecided("overshoot_pct") {
            notes.push("overshoot_pct is null: the final value is zero".into());
        }
        if !f.undecided.is_empty() {
            notes.push(format!(
                "undecided (listed in `undecided`, their values null or only a lower bound): {}; neither the bound at the end of the horizon ({} s) nor the bounded search work could rule out a later peak, band exit or crossing",
                f.undecided.join(", "),
                fmt_num(f.horizon_s)
            ));
        }
    }
    m.insert("closed_loop_poles".into(), json!(e.closed_loop_poles));
    m.insert("notes".into(), json!(notes));
    Value::Object(m)
}

/// `looprate pick` human summary.
pub fn pick_text(r: &PickReport) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "{}\n", r.title);
    if !r.design_failures.is_empty() {
        let _ = writeln!(s, "The continuous design already fails the spec:");
        for c in &r.design_failures {
            let _ = writeln!(
                s,
                "  {} = {} against a limit of {}",
                c.figure,
                fmt_opt(c.value, "none"),
                fmt_num(c.limit)
            );
        }
    }
    if !r.methods.is_empty() {
        let _ = writeln!(
            s,
            "{:<16}{:<15}{:>8}{:>16}{:>22}{:>8}  islands",
            "method", "hold", "delay", "slowest (Hz)", "limiting", "evals"
        );
    }
    for m in &r.methods {
        let slow = match (m.slowest_rate_hz, m.at_range_floor) {
            (Some(f), true) => format!("<= {}", fmt_num(f)),
            (Some(f), false) => fmt_num(f),
            (None, _) => "none".into(),
        };
        let isl = m
            .islands
            .iter()
            .map(|i| format!("{}-{}", fmt_num(i[0]), fmt_num(i[1])))
            .collect::<Vec<_>>()
            .join(", ");
        let _ = writeln!(
            s,
            "{:<16}{:<15}{:>8}{:>16}{:>22}{:>8}  {}",
            m.method,
            m.hold.name(),
            m.compute_delay,
            slow,
            m.limiting.clone().unwrap_or_default(),
            m.evaluations,
            if isl.is_empty() { "-".into() } else { isl }
        );
    }
    if let Some(rb) = &r.robust {
        let ranges = rb
            .params
            .iter()
            .map(|p| format!("{} in [{}, {}]", p.name, fmt_num(p.min), fmt_num(p.max)))
            .collect::<Vec<_>>()
            .join(", ");
        let how = match rb.seed {
            Some(seed) => format!("a Latin hypercube sample (seed {seed})"),
            None => "every corner".into(),
        };
        let _ = if ranges.is_empty() {
            writeln!(
                s,
                "\nOver {} plant variants (every range has zero width: each is the nominal plant):",
                rb.variants
            )
        } else {
            writeln!(
                s,
                "\nOver {} plant variants (the nominal one and {how} of {ranges}):",
                rb.variants
            )
        };
        let _ = writeln!(
            s,
            "{:<16}{:<15}{:>8}{:>16}{:>14}{:>22}  worst variant",
            "method", "hold", "delay", "robust (Hz)", "nominal (Hz)", "limiting"
        );
        for m in &rb.methods {
            let slow = match (m.rate.slowest_rate_hz, m.rate.at_range_floor) {
                (Some(f), true) => format!("<= {}", fmt_num(f)),
                (Some(f), false) => fmt_num(f),
                (None, _) => "none".into(),
            };
            let worst = m
                .worst_variant
                .as_ref()
                .map(|v| {
                    v.iter()
                        .map(|n| format!("{} = {}", n.name, fmt_num(n.value)))
                        .collect::<Vec<_>>()
                        .join(", ")
                })
                .unwrap_or_default();
            let _ = writeln!(
                s,
                "{:<16}{:<15}{:>8}{:>16}{:>14}{:>22}  {}",
                m.rate.method,
                m.rate.hold.name(),
                m.rate.compute_delay,
                slow,
                fmt_opt(m.nominal_slowest_rate_hz, "none"),
                m.worst_limiting.clone().unwrap_or_default(),
                worst
            );
        }
    }
    let _ = writeln!(s);
    if let Some(rec) = &r.recommended {
        let basis = if r.robust.is_some() {
            "slowest rate passing on every variant"
        } else {
            "slowest passing rate"
        };
        if rec.method == "given-in-z" {
            let _ = writeln!(
                s,
                "Recommended: the controller given in z at its own rate, {} Hz (T = {} s), {} hold, computation delay {} periods.",
                fmt_num(rec.rate_hz),
                fmt_num(rec.period_s),
                rec.hold,
                rec.compute_delay
            );
        } else {
            let _ = writeln!(
                s,
                "Recommended: {} with a {} hold at {} Hz (T = {} s), computation delay {} periods; {basis} {} Hz times headroom {} (the headroom covers model error).",
                rec.method,
                rec.hold,
                fmt_num(rec.rate_hz),
                fmt_num(rec.period_s),
                rec.compute_delay,
                fmt_num(rec.slowest_rate_hz),
                r.headroom
            );
        }
        let _ = writeln!(s, "Hold: {}.", rec.hold_basis);
        if let Some(n) = rec.timer_divider {
            let _ = writeln!(s, "Timer divider {n}.");
        }
        if let Some(l) = rec.cpu_load_pct {
            let _ = writeln!(
                s,
                "CPU load {:.2} % ({} cycles per update).",
                l,
                fmt_opt(rec.cycles_per_update, "?")
            );
        }
        let robust = r.robust.is_some();
        if robust {
            let _ = writeln!(
                s,
                "\n{:<22}{:>14}{:>14}{:>12}{:>14}",
                "figure", "value", "worst variant", "limit", "worst slack"
            );
        } else {
            let _ = writeln!(
                s,
                "\n{:<22}{:>14}{:>12}{:>10}",
                "figure", "value", "limit", "slack"
            );
        }
        for c in &rec.checks {
            if !robust {
                let _ = writeln!(
                    s,
                    "{:<22}{:>14}{:>12}{:>9.1}%",
                    c.figure,
                    fmt_opt(c.value, "none"),
                    fmt_num(c.limit),
                    c.slack * 100.0
                );
                continue;
            }
            let (worst, slack) = rec
                .worst_checks
                .iter()
                .find(|w| w.figure == c.figure)
                .map_or(("unstable".to_string(), "-".to_string()), |w| {
                    (fmt_opt(w.value, "none"), format!("{:.1}%", w.slack * 100.0))
                });
            let _ = writeln!(
                s,
                "{:<22}{:>14}{:>14}{:>12}{:>14}",
                c.figure,
                fmt_opt(c.value, "none"),
                worst,
                fmt_num(c.limit),
                slack
            );
        }
    }
    if let Some(pr) = &r.precision {
        let _ = writeln!(
            s,
            "\nCoefficients in {} (at the recommended rate; ceiling for the recommended method):",
            pr.structure
        );
        let _ = writeln!(
            s,
            "{:<8}{:>9}{:>14}{:>14}{:>10}{:>10}{:>16}  above it",
            "format", "Q", "pole err %", "DC gain err %", "integral", "passes", "ceiling (Hz)"
        );
        let method = r.recommended.as_ref().map(|x| x.method.clone());
        for a in &pr.at_recommended {
            let d = a.damage.as_ref();
            let ceil = pr
                .ceilings
                .iter()
                .find(|c| Some(&c.method) == method.as_ref() && c.format == a.format);
            let (ceil_text, above) = match ceil.map(|c| &c.ceiling) {
                Some(c) if c.above_range => (
                    format!(">= {}", fmt_num(c.rate_hz.unwrap_or(f64::NAN))),
                    String::new(),
                ),
                Some(c) => (
                    fmt_opt(c.rate_hz, "none"),
                    c.limiting.clone().unwrap_or_default(),
                ),
                None => ("-".into(), String::new()),
            };
            let _ = writeln!(
                s,
                "{:<8}{:>9}{:>14}{:>14}{:>10}{:>10}{:>16}  {}",
                a.format,
                d.and_then(|d| d.q_format.clone())
                    .unwrap_or_else(|| "-".into()),
                d.map_or("-".into(), |d| fmt_num(d.pole_error_pct)),
                d.map_or("-".into(), |d| fmt_opt(d.dc_gain_error_pct, "changed")),
                a.integral_kept
                    .map_or("-".into(), |k| if k { "kept" } else { "LOST" }.to_string()),
                if a.feasible { "yes" } else { "NO" },
                ceil_text,
                above
            );
        }
        for a in &pr.at_recommended {
            if let Some(reason) = &a.reason {
                let _ = writeln!(s, "  {}: {reason}", a.format);
            }
        }
    }
    if let Some(w) = &r.window {
        if w.empty {
            if w.high_hz < w.low_hz {
                let _ = writeln!(
                    s,
                    "\nNO RATE WINDOW: the spec needs at least {} Hz but the {} allows at most {} Hz.",
                    fmt_num(w.low_hz),
                    w.high_bound,
                    fmt_num(w.high_hz)
                );
            } else {
                let _ = writeln!(
                    s,
                    "\nNO RATE WINDOW: the spec needs at least {} Hz, but the {}.",
                    fmt_num(w.low_hz),
                    w.high_bound
                );
            }
            let _ = writeln!(s, "What would open it:");
            for a in &r.advice {
                let _ = writeln!(s, "  - {a}");
            }
        } else {
            let _ = writeln!(
                s,
                "\nRate window: {} Hz to {} Hz ({} .. {}).",
                fmt_num(w.low_hz),
                fmt_num(w.high_hz),
                if r.recommended
                    .as_ref()
                    .is_some_and(|x| x.method == "given-in-z")
                {
                    "the controller's own rate"
                } else {
                    "spec with headroom"
                },
                w.high_bound
            );
            if let Some(c) = w.cpu_ceiling_hz
                && !matches!(w.high_bound, crate::budget::WindowBound::CpuBudget)
            {
                let _ = writeln!(s, "CPU budget ceiling: {} Hz.", fmt_num(c));
            }
        }
    }
    for n in &r.notes {
        let _ = writeln!(s, "Note: {n}");
    }
    s
}

/// `looprate eval --json`: the exact loop's figures at the top level, plus
/// `continuous` and `hold_approx` objects with the same keys.
pub fn eval_json(
    exact: &Evaluation,
    design: Option<&Evaluation>,
    approx: &[(HoldApprox, Evaluation)],
) -> Value {
    let mut v = evaluation_json(exact);
    if let Value::Object(m) = &mut v {
        m.insert(
            "continuous".into(),
            design.map_or(Value::Null, evaluation_json),
        );
        let mut h = Map::new();
        for (k, e) in approx {
            h.insert(k.name().into(), evaluation_json(e));
        }
        m.insert("hold_approx".into(), Value::Object(h));
    }
    v
}

fn roots_text(v: Option<Vec<C64>>) -> String {
    match v {
        None => "(root finder failed)".into(),
        Some(v) if v.is_empty() => "none".into(),
        Some(v) => v
            .iter()
            .map(|c| {
                if c.im == 0.0 {
                    fmt_num(c.re)
                } else {
                    let sign = if c.im < 0.0 { '-' } else { '+' };
                    format!("{}{sign}{}j", fmt_num(c.re), fmt_num(c.im.abs()))
                }
            })
            .collect::<Vec<_>>()
            .join(", "),
    }
}

/// `looprate check`: each block with its poles and zeros, and the
/// continuous loop's figures.
pub fn check_text(case: &crate::case::Case, lp: &crate::evaluate::PreparedLoop) -> String {
    use crate::transfer::{Controller, Transfer};
    let mut s = String::new();
    let _ = writeln!(s, "{} ({})", case.title, case.source.display());
    let block = |s: &mut String, name: &str, tf: &Transfer, var: &str| {
        let _ = writeln!(s, "\n{name}");
        let _ = writeln!(s, "  numerator({var})   {:?}", tf.numerator.descending());
        let _ = writeln!(s, "  denominator({var}) {:?}", tf.denominator.descending());
        let _ = writeln!(s, "  poles            {}", roots_text(tf.poles()));
        let _ = writeln!(s, "  zeros            {}", roots_text(tf.zeros()));
    };
    block(&mut s, "plant P(s)", &lp.plant, "s");
    block(&mut s, "sensor H(s)", &lp.sensor, "s");
    match &lp.controller {
        Controller::Continuous(c) => block(&mut s, "controller C(s)", c, "s"),
        Controller::Discrete(d) => block(
            &mut s,
            &format!("controller C(z) at {} Hz", 1.0 / d.period_s),
            &d.transfer,
            "z",
        ),
    }
    match &lp.controller {
        Controller::Continuous(_) => {
            let _ = writeln!(
                s,
                "\nrates {} .. {} Hz, {} points; methods {}; computation delays {:?}",
                case.rates.min_hz,
                case.rates.max_hz,
                case.rates.points,
                case.methods
                    .iter()
                    .map(|m| m.name())
                    .collect::<Vec<_>>()
                    .join(", "),
                case.compute_delays
            );
        }
        Controller::Discrete(d) => {
            let _ = writeln!(
                s,
                "\nthe controller is given in z at {} Hz: that one rate is checked, nothing is discretized; computation delays {:?}",
                1.0 / d.period_s,
                case.compute_delays
            );
        }
    }
    let _ = writeln!(
        s,
        "hold kinds {}; transport delay {} s at the plant, {} s on the measurement",
        case.holds
            .iter()
            .map(|h| h.name())
            .collect::<Vec<_>>()
            .join(", "),
        case.plant_delay_s,
        case.sensor_delay_s
    );
    if let Some(u) = &case.uncertainty {
        let n = crate::variants::parameter_sets(case).len();
        let how = match u {
            crate::case::UncertaintyMode::Corners => "every corner".to_string(),
            crate::case::UncertaintyMode::Samples { samples, seed } => {
                format!("{samples} Latin hypercube points (seed {seed})")
            }
        };
        let ranges = case
            .params
            .iter()
            .filter(|p| p.min < p.max)
            .map(|p| format!("{} in [{}, {}]", p.name, fmt_num(p.min), fmt_num(p.max)))
            .collect::<Vec<_>>()
            .join(", ");
        let _ = writeln!(
            s,
            "plant variants: {n} (nominal and {how}; {})",
            if ranges.is_empty() {
                "no range has width".to_string()
            } else {
                ranges
            }
        );
    }
    if let Some(a) = &case.arithmetic {
        let _ = writeln!(
            s,
            "coefficients: {} in {}",
            a.formats
                .iter()
                .map(|f| f.name())
                .collect::<Vec<_>>()
                .join(", "),
            a.structure.name()
        );
    }
    for n in &case.notes {
        let _ = writeln!(s, "note: {n}");
    }
    if let Some(d) = &lp.design {
        let _ = writeln!(s, "\ncontinuous loop C(s) P(s) H(s): {}", d.status.label());
        if let Some(f) = &d.figures {
            let _ = writeln!(
                s,
                "  crossover {} Hz, phase margin {} deg, gain margin {} dB, Ms {}, overshoot {} %, settling {} s",
                fmt_opt(f.crossover_hz, "none"),
                fmt_opt(f.phase_margin_deg, "inf"),
                fmt_opt(f.gain_margin_db, "inf"),
                fmt_num(f.sensitivity_peak),
                fmt_opt(f.overshoot_pct, "n/a"),
                shown(f, "settling_time_s", f.settling_time_s, "not settled"),
            );
            let fails: Vec<String> = check_figures(f, &case.spec)
                .into_iter()
                .filter(|c| !c.pass)
                .map(|c| {
                    format!(
                        "{} ({} vs limit {})",
                        c.figure,
                        fmt_opt(c.value, "none"),
                        fmt_num(c.limit)
                    )
                })
                .collect();
            if !fails.is_empty() {
                let _ = writeln!(
                    s,
                    "  the continuous design already fails: {}",
                    fails.join(", ")
                );
            }
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thresholds_round_toward_the_side_that_works() {
        // By hand: 32.1401 needs at least 32.15 (not 32.14); 1244.6 allows
        // at most 1244 (fmt_num says 1245); exact values stay as they are.
        assert_eq!(fmt_num(32.1401), "32.14");
        assert_eq!(fmt_at_least(32.1401), "32.15");
        assert_eq!(fmt_num(1244.6), "1245");
        assert_eq!(fmt_at_most(1244.6), "1244");
        assert_eq!(fmt_at_least(10.0), "10.00");
        assert_eq!(fmt_at_most(10.0), "10.00");
        // Rounding up across a power of ten keeps fmt_num's digits
        // (fmt_num prints 9.9996 as 10.000 too), and is never below.
        assert_eq!(fmt_at_least(9.9996), "10.000");
        assert_eq!(fmt_at_most(9.9996), "9.999");
        // Exponent form: one unit of the last digit is 1e3 here.
        assert_eq!(fmt_at_least(3.21401e6), "3.215e6");
        assert_eq!(fmt_at_most(3.21499e6), "3.214e6");
    }
}
