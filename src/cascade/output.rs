//! Outputs of a cascade: the `outer` object of `eval --json` and its text,
//! the cascade's `sweep.csv` (`cascade.csv` beside the loop's own rows),
//! and the report section. The figure keys are the loop's own
//! (`summary::evaluation_json`, `outputs::SWEEP_COLUMNS` names), so the
//! outer object reads like the inner one.

use std::fmt::Write as _;

use serde_json::{Value, json};

use crate::cascade::evaluate::CascadePoint;
use crate::cascade::search::{CascadePick, CascadeRow, method_name};
use crate::case::Case;
use crate::evaluate::{Evaluation, Figures};
use crate::feasibility::assess;
use crate::summary::{evaluation_json, evaluation_text, fmt_num};

/// The `outer` object of `eval --json`: the outer loop's figures under the
/// loop's own keys, plus where it runs and its verdict on `[outer.spec]`.
pub fn outer_json(case: &Case, p: &CascadePoint, e: &Evaluation) -> Value {
    let mut v = evaluation_json(e);
    if let Value::Object(m) = &mut v {
        m.insert("ratio".into(), json!(p.ratio));
        m.insert("rate_hz".into(), json!(p.outer_rate_hz()));
        m.insert("period_s".into(), json!(1.0 / p.outer_rate_hz()));
        m.insert("method".into(), json!(method_name(p.outer_method)));
        m.insert("compute_delay".into(), json!(p.outer_delay));
        if let Some(outer) = &case.outer {
            let a = assess(e, &outer.spec);
            m.insert("feasible".into(), json!(a.feasible));
            m.insert("limiting".into(), json!(a.limiting));
            m.insert(
                "checks".into(),
                serde_json::to_value(&a.checks).unwrap_or(Value::Null),
            );
        }
    }
    v
}

/// The outer loop's table for `eval` (text).
pub fn outer_text(case: &Case, p: &CascadePoint, e: &Evaluation) -> String {
    let header = format!(
        "outer loop: ratio {}, rate {} Hz, method {}, computation delay {} of the outer period; lifted over one outer period, broken at the outer controller's output; time figures on the outer plant output (points between inner samples included), load step at the outer plant's input",
        p.ratio,
        fmt_num(p.outer_rate_hz()),
        method_name(p.outer_method),
        p.outer_delay
    );
    let spec = case
        .outer
        .as_ref()
        .map(|o| o.spec.clone())
        .unwrap_or_else(|| case.spec.clone());
    format!(
        "\n{}",
        evaluation_text("Outer loop", &header, e, None, &[], &spec)
    )
}

/// Columns of the cascade rows: the point, then each loop's figures under
/// the loop's own names (prefixed `inner_` and `outer_`), verdicts and the
/// CPU cost.
pub const CASCADE_FIGURES: [&str; 14] = [
    "y_final",
    "overshoot_pct",
    "settling_time_s",
    "rise_time_s",
    "disturbance_peak",
    "recovery_time_s",
    "u_peak",
    "gain_margin_db",
    "phase_margin_deg",
    "crossover_hz",
    "delay_margin_s",
    "delay_margin_estimate_s",
    "sensitivity_peak",
    "horizon_capped",
];

fn figure_cell(f: &Figures, key: &str) -> String {
    let opt =
        |v: Option<f64>, missing: &str| v.map_or_else(|| missing.to_string(), |v| format!("{v}"));
    match key {
        "y_final" => format!("{}", f.y_final),
        "overshoot_pct" => opt(f.overshoot_pct, ""),
        "settling_time_s" => opt(f.settling_time_s, "not settled"),
        "rise_time_s" => opt(f.rise_time_s, "not reached"),
        "disturbance_peak" => format!("{}", f.disturbance_peak),
        "recovery_time_s" => opt(f.recovery_time_s, "not recovered"),
        "u_peak" => format!("{}", f.u_peak),
        "gain_margin_db" => opt(f.gain_margin_db, "inf"),
        "phase_margin_deg" => opt(f.phase_margin_deg, "inf"),
        "crossover_hz" => opt(f.crossover_hz, ""),
        "delay_margin_s" => opt(f.delay_margin_s, f.delay_margin_missing()),
        "delay_margin_estimate_s" => opt(f.delay_margin_estimate_s, "inf"),
        "sensitivity_peak" => format!("{}", f.sensitivity_peak),
        "horizon_capped" => format!("{}", f.horizon_capped),
        _ => String::new(),
    }
}

/// The header of the cascade rows.
pub fn cascade_header() -> Vec<String> {
    let mut h: Vec<String> = [
        "inner_rate_hz",
        "ratio",
        "outer_rate_hz",
        "inner_method",
        "inner_hold",
        "inner_compute_delay",
        "outer_method",
        "outer_compute_delay",
        "inner_status",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    h.extend(CASCADE_FIGURES.iter().map(|k| format!("inner_{k}")));
    h.extend(
        ["inner_feasible", "inner_limiting", "outer_status"]
            .iter()
            .map(|s| s.to_string()),
    );
    h.extend(CASCADE_FIGURES.iter().map(|k| format!("outer_{k}")));
    h.extend(
        [
            "outer_feasible",
            "outer_limiting",
            "both_feasible",
            "inner_load_pct",
            "outer_load_pct",
            "total_load_pct",
        ]
        .iter()
        .map(|s| s.to_string()),
    );
    h
}

fn quote(cell: &str) -> String {
    if cell.contains([',', '"', '\n']) {
        format!("\"{}\"", cell.replace('"', "\"\""))
    } else {
        cell.to_string()
    }
}

fn opt_num(v: Option<f64>) -> String {
    v.map_or_else(String::new, |v| format!("{v}"))
}

/// One CSV line of a cascade row.
pub fn cascade_line(r: &CascadeRow) -> String {
    let p = &r.point;
    let mut cells: Vec<String> = vec![
        format!("{}", p.inner.rate_hz),
        p.ratio.to_string(),
        format!("{}", p.outer_rate_hz()),
        method_name(p.inner.method),
        p.inner.hold.name().to_string(),
        format!("{}", p.inner.delay),
        method_name(p.outer_method),
        format!("{}", p.outer_delay),
        r.inner.status.label(),
    ];
    let figures = |e: Option<&Evaluation>, cells: &mut Vec<String>| {
        for k in CASCADE_FIGURES {
            cells.push(
                e.and_then(|e| e.figures.as_ref())
                    .map_or_else(String::new, |f| figure_cell(f, k)),
            );
        }
    };
    figures(Some(&r.inner), &mut cells);
    cells.push(r.inner_verdict.feasible.to_string());
    cells.push(r.inner_verdict.limiting.unwrap_or("").to_string());
    cells.push(match (&r.outer, &r.skipped) {
        (Some(e), _) => e.status.label(),
        (None, Some(why)) => why.clone(),
        (None, None) => String::new(),
    });
    figures(r.outer.as_ref(), &mut cells);
    match &r.outer_verdict {
        Some(v) => {
            cells.push(v.feasible.to_string());
            cells.push(v.limiting.unwrap_or("").to_string());
        }
        None => {
            cells.push(String::new());
            cells.push(String::new());
        }
    }
    cells.push(match &r.outer_verdict {
        Some(_) => r.passes().to_string(),
        None => String::new(),
    });
    cells.push(opt_num(r.cost.inner_load_pct));
    cells.push(opt_num(r.cost.outer_load_pct));
    cells.push(opt_num(r.cost.total_load_pct));
    cells.iter().map(|c| quote(c)).collect::<Vec<_>>().join(",")
}

/// The whole cascade CSV (header and one line per row, grid order).
pub fn cascade_csv(rows: &[CascadeRow]) -> String {
    let mut s = cascade_header().join(",");
    s.push('\n');
    for r in rows {
        s.push_str(&cascade_line(r));
        s.push('\n');
    }
    s
}

/// The cascade's answer in text (terminal and report).
pub fn cascade_text(pick: &CascadePick) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "Cascade (outer loop every N-th inner tick, ratios {:?})",
        pick.ratios
    );
    match &pick.chosen {
        Some(c) => {
            let _ = writeln!(
                s,
                "  chosen pair: inner {} Hz ({}, delay {}), ratio {}, outer {} Hz ({}, delay {} of its period)",
                fmt_num(c.inner_rate_hz),
                c.series.inner_method,
                c.series.inner_compute_delay,
                c.ratio,
                fmt_num(c.outer_rate_hz),
                c.series.outer_method,
                c.series.outer_compute_delay
            );
            match c.cost.total_load_pct {
                Some(l) => {
                    let _ = writeln!(
                        s,
                        "  CPU load: {} % (inner {} %, outer {} %)",
                        fmt_num(l),
                        fmt_num(c.cost.inner_load_pct.unwrap_or(f64::NAN)),
                        fmt_num(c.cost.outer_load_pct.unwrap_or(f64::NAN))
                    );
                }
                None => {
                    let _ = writeln!(s, "  updates a second: {}", fmt_num(c.cost.updates_per_s));
                }
            }
            for (name, e) in [("inner", &c.inner), ("outer", &c.outer)] {
                if let Some(f) = &e.figures {
                    let _ = writeln!(
                        s,
                        "  {name}: overshoot {} %, settling {} s, phase margin {} deg, gain margin {} dB, Ms {}",
                        f.overshoot_pct.map_or("-".into(), fmt_num),
                        f.settling_time_s.map_or("not settled".into(), fmt_num),
                        f.phase_margin_deg.map_or("inf".into(), fmt_num),
                        f.gain_margin_db.map_or("inf".into(), fmt_num),
                        fmt_num(f.sensitivity_peak)
                    );
                }
            }
        }
        None => {
            let _ = writeln!(s, "  no pair meets both specs within the budget");
        }
    }
    match pick.window_hz {
        Some([lo, hi]) => {
            let _ = writeln!(
                s,
                "  inner-rate window: {} to {} Hz (top: {})",
                fmt_num(lo),
                fmt_num(hi),
                pick.window.as_ref().map_or("", |w| w.high_bound)
            );
        }
        None => {
            let _ = writeln!(s, "  inner-rate window: empty");
        }
    }
    for a in &pick.advice {
        let _ = writeln!(s, "  advice: {a}");
    }
    for n in &pick.notes {
        let _ = writeln!(s, "  note: {n}");
    }
    s
}
