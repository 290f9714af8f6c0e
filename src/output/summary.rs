//! What the commands print: compact human tables and JSON views of the
//! results. Builds strings only; the binary prints them.

use std::fmt::Write;

use serde_json::{Map, Value, json};

use crate::engineering::{hz, periods, seconds, sig4};
use crate::explore::pick::PickReport;
use crate::model::poly::C64;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::continuous::HoldApprox;
use crate::sampled::evaluate::{Evaluation, Figures};
use crate::sampled::feasibility::LimitCheck;
use crate::sampled::feasibility::check_figures;
use crate::sampled::figure::Figure;
use crate::spec::Spec;

fn fmt_opt(v: Option<f64>, missing: &str) -> String {
    v.map_or_else(|| missing.to_string(), sig4)
}

/// Complex numbers as `[re, im]` pairs for JSON.
pub fn complex_pairs(v: &[C64]) -> Vec<[f64; 2]> {
    v.iter().map(|c| [c.re, c.im]).collect()
}

/// `looprate discretize` output.
pub fn discretized_text(method: &str, rate_hz: f64, c: &DiscreteTransfer) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "method         {method}");
    let _ = writeln!(
        s,
        "rate           {} (period {})",
        hz(rate_hz),
        seconds(1.0 / rate_hz)
    );
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

/// A figure of `f` as a table cell, `-` when there are no figures
/// (an unstable loop).
fn figure_cell(fig: Figure, f: Option<&Figures>) -> String {
    f.map_or("-".to_string(), |f| fig.cell(f))
}

/// A limit check's value in the figure's form, or its absence in words.
fn check_value(c: &LimitCheck) -> String {
    c.value.map_or("none".to_string(), |v| c.figure.text(v))
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
    let _ = write!(s, "{:<32}", "figure");
    for (name, _) in &cols {
        let _ = write!(s, "{name:>15}");
    }
    let _ = writeln!(s, "{:>12}{:>7}", "limit", "pass");
    let _ = write!(s, "{:<32}", "status");
    for (_, e) in &cols {
        let _ = write!(
            s,
            "{:>15}",
            e.status.label().chars().take(14).collect::<String>()
        );
    }
    let _ = writeln!(s);
    for fig in Figure::ALL {
        let _ = write!(s, "{:<32}", fig.heading());
        for (_, e) in &cols {
            let _ = write!(s, "{:>15}", figure_cell(fig, e.figures.as_ref()));
        }
        match checks.iter().find(|c| c.figure == fig) {
            Some(c) => {
                let _ = writeln!(
                    s,
                    "{:>12}{:>7}",
                    fig.text(c.limit),
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
                sig4(p[0]),
                if p[1] < 0.0 { '-' } else { '+' },
                sig4(p[1].abs()),
                sig4(p[0].hypot(p[1]))
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
                seconds(f.horizon_s)
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
                c.figure.label(),
                check_value(c),
                c.figure.text(c.limit)
            );
        }
    }
    // Islands (passing bands below the slowest passing rate, where a
    // faster rate fails again) get a column only when there are any.
    let any_islands = r.methods.iter().any(|m| !m.islands.is_empty());
    if !r.methods.is_empty() {
        let _ = writeln!(
            s,
            "{:<18}{:<15}{:>8}{:>16}  {:<22}{}",
            "method",
            "hold",
            "delay",
            "slowest rate",
            "limiting figure",
            if any_islands {
                "also passing (islands)"
            } else {
                ""
            }
        );
    }
    for m in &r.methods {
        let slow = match (m.slowest_rate_hz, m.at_range_floor) {
            (Some(f), true) => format!("<= {}", hz(f)),
            (Some(f), false) => hz(f),
            (None, _) => "none".into(),
        };
        let isl = m
            .islands
            .iter()
            .map(|i| format!("{} to {}", hz(i[0]), hz(i[1])))
            .collect::<Vec<_>>()
            .join(", ");
        let line = format!(
            "{:<18}{:<15}{:>8}{:>16}  {:<22}{}",
            m.method,
            m.hold.name(),
            m.compute_delay,
            slow,
            m.limiting.map_or("-", |l| l.label()),
            isl
        );
        let _ = writeln!(s, "{}", line.trim_end());
    }
    if let Some(rb) = &r.robust {
        let ranges = rb
            .params
            .iter()
            .map(|p| format!("{} in [{}, {}]", p.name, sig4(p.min), sig4(p.max)))
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
            "{:<18}{:<15}{:>8}{:>16}{:>16}  {:<22}worst variant",
            "method", "hold", "delay", "robust rate", "nominal rate", "limiting figure"
        );
        for m in &rb.methods {
            let slow = match (m.rate.slowest_rate_hz, m.rate.at_range_floor) {
                (Some(f), true) => format!("<= {}", hz(f)),
                (Some(f), false) => hz(f),
                (None, _) => "none".into(),
            };
            let worst = m
                .worst_variant
                .as_ref()
                .map(|v| {
                    v.iter()
                        .map(|n| format!("{} = {}", n.name, sig4(n.value)))
                        .collect::<Vec<_>>()
                        .join(", ")
                })
                .unwrap_or_default();
            let _ = writeln!(
                s,
                "{:<18}{:<15}{:>8}{:>16}{:>16}  {:<22}{}",
                m.rate.method,
                m.rate.hold.name(),
                m.rate.compute_delay,
                slow,
                m.nominal_slowest_rate_hz.map_or("none".to_string(), hz),
                m.worst_limiting.map_or("-", |l| l.label()),
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
                "Recommended: the controller given in z at its own rate, {} (period {}), {} hold, computation delay {}.",
                hz(rec.rate_hz),
                seconds(rec.period_s),
                rec.hold,
                periods(rec.compute_delay)
            );
        } else {
            let _ = writeln!(
                s,
                "Recommended: {} with a {} hold at {} (period {}), computation delay {}; {basis} {} times headroom {} (the headroom covers model error).",
                rec.method,
                rec.hold,
                hz(rec.rate_hz),
                seconds(rec.period_s),
                periods(rec.compute_delay),
                hz(rec.slowest_rate_hz),
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
                "CPU load {} % ({} cycles per update).",
                sig4(l),
                fmt_opt(rec.cycles_per_update, "?")
            );
        }
        let robust = r.robust.is_some();
        if robust {
            let _ = writeln!(
                s,
                "\n{:<30}{:>14}{:>14}{:>12}{:>14}",
                "figure", "value", "worst variant", "limit", "worst slack"
            );
        } else {
            let _ = writeln!(
                s,
                "\n{:<30}{:>14}{:>12}{:>10}",
                "figure", "value", "limit", "slack"
            );
        }
        for c in &rec.checks {
            if !robust {
                let _ = writeln!(
                    s,
                    "{:<30}{:>14}{:>12}{:>9.1}%",
                    c.figure.heading(),
                    check_value(c),
                    c.figure.text(c.limit),
                    c.slack * 100.0
                );
                continue;
            }
            let (worst, slack) = rec
                .worst_checks
                .iter()
                .find(|w| w.figure == c.figure)
                .map_or(("unstable".to_string(), "-".to_string()), |w| {
                    (check_value(w), format!("{:.1}%", w.slack * 100.0))
                });
            let _ = writeln!(
                s,
                "{:<30}{:>14}{:>14}{:>12}{:>14}",
                c.figure.heading(),
                check_value(c),
                worst,
                c.figure.text(c.limit),
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
        let method = r.recommended.as_ref().map(|x| x.method.clone());
        // The figure a format fails on just above its ceiling; the column
        // is left out when every ceiling is the top of the sweep.
        let rows: Vec<_> = pr
            .at_recommended
            .iter()
            .map(|a| {
                let ceil = pr
                    .ceilings
                    .iter()
                    .find(|c| Some(&c.method) == method.as_ref() && c.format == a.format);
                let (ceil_text, then) = match ceil.map(|c| &c.ceiling) {
                    Some(c) if c.above_range => (
                        format!(
                            ">= {} (top of the sweep)",
                            hz(c.rate_hz.unwrap_or(f64::NAN))
                        ),
                        String::new(),
                    ),
                    Some(c) => (
                        c.rate_hz.map_or("none".to_string(), hz),
                        c.limiting.map_or(String::new(), |l| l.label().to_string()),
                    ),
                    None => ("-".into(), String::new()),
                };
                (a, ceil_text, then)
            })
            .collect();
        let any_then = rows.iter().any(|(_, _, t)| !t.is_empty());
        let header = format!(
            "{:<8}{:>9}{:>14}{:>14}{:>10}{:>10}  {:<32}{}",
            "format",
            "Q",
            "pole err %",
            "DC gain err %",
            "integral",
            "passes",
            "ceiling",
            if any_then { "then fails on" } else { "" }
        );
        let _ = writeln!(s, "{}", header.trim_end());
        for (a, ceil_text, then) in rows {
            let d = a.damage.as_ref();
            let line = format!(
                "{:<8}{:>9}{:>14}{:>14}{:>10}{:>10}  {:<32}{}",
                a.format,
                d.and_then(|d| d.q_format.clone())
                    .unwrap_or_else(|| "-".into()),
                d.map_or("-".into(), |d| sig4(d.pole_error_pct)),
                d.map_or("-".into(), |d| fmt_opt(d.dc_gain_error_pct, "changed")),
                a.integral_kept
                    .map_or("-".into(), |k| if k { "kept" } else { "LOST" }.to_string()),
                if a.feasible { "yes" } else { "NO" },
                ceil_text,
                then
            );
            let _ = writeln!(s, "{}", line.trim_end());
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
                    "\nNO RATE WINDOW: the spec needs at least {} but the {} allows at most {}.",
                    hz(w.low_hz),
                    w.high_bound,
                    hz(w.high_hz)
                );
            } else {
                let _ = writeln!(
                    s,
                    "\nNO RATE WINDOW: the spec needs at least {}, but the {}.",
                    hz(w.low_hz),
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
                "\nRate window: {} to {} ({} .. {}).",
                hz(w.low_hz),
                hz(w.high_hz),
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
                && !matches!(w.high_bound, crate::explore::budget::WindowBound::CpuBudget)
            {
                let _ = writeln!(s, "CPU budget ceiling: {}.", hz(c));
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
                    sig4(c.re)
                } else {
                    let sign = if c.im < 0.0 { '-' } else { '+' };
                    format!("{}{sign}{}j", sig4(c.re), sig4(c.im.abs()))
                }
            })
            .collect::<Vec<_>>()
            .join(", "),
    }
}

/// `looprate check`: each block with its poles and zeros, and the
/// continuous loop's figures.
pub fn check_text(case: &crate::case::Case, lp: &crate::sampled::evaluate::PreparedLoop) -> String {
    use crate::model::transfer::{Controller, Transfer};
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
            &format!("controller C(z) at {}", hz(1.0 / d.period_s)),
            &d.transfer,
            "z",
        ),
    }
    match &lp.controller {
        Controller::Continuous(_) => {
            let _ = writeln!(
                s,
                "\nrates {} .. {}, {} points; methods {}; computation delays {}",
                hz(case.rates.min_hz),
                hz(case.rates.max_hz),
                case.rates.points,
                case.methods
                    .iter()
                    .map(|m| m.name())
                    .collect::<Vec<_>>()
                    .join(", "),
                delay_list(&case.compute_delays)
            );
        }
        Controller::Discrete(d) => {
            let _ = writeln!(
                s,
                "\nthe controller is given in z at {}: that one rate is checked, nothing is discretized; computation delays {}",
                hz(1.0 / d.period_s),
                delay_list(&case.compute_delays)
            );
        }
    }
    let _ = writeln!(
        s,
        "hold kinds {}; transport delay {} at the plant, {} on the measurement",
        case.holds
            .iter()
            .map(|h| h.name())
            .collect::<Vec<_>>()
            .join(", "),
        seconds(case.plant_delay_s),
        seconds(case.sensor_delay_s)
    );
    if let Some(u) = &case.uncertainty {
        let n = crate::explore::variants::parameter_sets(case).len();
        let how = match u {
            crate::spec::UncertaintyMode::Corners => "every corner".to_string(),
            crate::spec::UncertaintyMode::Samples { samples, seed } => {
                format!("{samples} Latin hypercube points (seed {seed})")
            }
        };
        let ranges = case
            .params
            .iter()
            .filter(|p| p.min < p.max)
            .map(|p| format!("{} in [{}, {}]", p.name, sig4(p.min), sig4(p.max)))
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
                "  {}",
                [
                    Figure::Crossover,
                    Figure::PhaseMargin,
                    Figure::GainMargin,
                    Figure::SensitivityPeak,
                    Figure::Overshoot,
                    Figure::SettlingTime,
                ]
                .map(|fig| format!("{} {}", fig.heading(), fig.cell(f)))
                .join(", ")
            );
            let fails: Vec<String> = check_figures(f, &case.spec)
                .into_iter()
                .filter(|c| !c.pass)
                .map(|c| {
                    format!(
                        "{} ({} vs limit {})",
                        c.figure.label(),
                        check_value(&c),
                        c.figure.text(c.limit)
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

/// Computation delays as a list an engineer reads: `none, 0.5 of a
/// period, 1 period`.
fn delay_list(delays: &[f64]) -> String {
    delays
        .iter()
        .map(|&d| periods(d))
        .collect::<Vec<_>>()
        .join(", ")
}
