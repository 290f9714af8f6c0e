//! What the commands print: compact human tables and JSON views of the
//! results. Builds strings only; the binary prints them.

use std::fmt::Write;

use serde_json::{Map, Value, json};

use crate::engineering::{hz, periods, seconds, sig4};
use crate::model::poly::C64;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::continuous::HoldApprox;
use crate::sampled::evaluate::{Evaluation, Figures, Status};
use crate::sampled::feasibility::LimitCheck;
use crate::sampled::feasibility::check_figures;
use crate::sampled::figure::Figure;
use crate::sampled::time_response::TimeFigure;
use crate::spec::Spec;

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
    // The status row keeps 14 characters; an error's reason in full.
    for (name, e) in &cols {
        if let Status::Error(reason) = &e.status {
            let _ = writeln!(s, "\n{name}: error: {reason}");
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
        if f.settling_time_s.is_none() && !f.is_undecided(TimeFigure::SettlingTime) {
            notes.push("settling_time_s is null: not settled within the horizon".into());
        }
        if f.overshoot_pct.is_none() && !f.is_undecided(TimeFigure::Overshoot) {
            notes.push("overshoot_pct is null: the final value is zero".into());
        }
        if !f.undecided.is_empty() {
            notes.push(format!(
                "undecided (listed in `undecided`, their values null or only a lower bound): {}; neither the bound at the end of the horizon ({} s) nor the bounded search work could rule out a later peak, band exit or crossing",
                TimeFigure::joined(&f.undecided, ", "),
                seconds(f.horizon_s)
            ));
        }
    }
    m.insert("closed_loop_poles".into(), json!(e.closed_loop_poles));
    m.insert("notes".into(), json!(notes));
    Value::Object(m)
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
