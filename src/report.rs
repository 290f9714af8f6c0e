//! The design-review report of a `pick` run: `report.md`, and beside it
//! a self-contained `report.html` (charts embedded as data URIs).
//!
//! Both are rendered from one list of blocks, so they say the same thing.
//! Every number in them comes from the [`PickReport`] (the models are
//! printed from the case's own polynomials) and is formatted by
//! [`fmt_num`], the rule used by every other output.

use std::path::{Path, PathBuf};

use crate::case::Case;
use crate::error::Error;
use crate::evaluate::Figures;
use crate::outputs::write_atomic;
use crate::pick::{PickReport, Recommended};
use crate::poly::Poly;
use crate::summary::fmt_num;
use crate::transfer::{Controller, Transfer};

/// File name of the Markdown report.
pub const REPORT_MD: &str = "report.md";
/// File name of the self-contained HTML report.
pub const REPORT_HTML: &str = "report.html";

/// One piece of the report. Inline text may use `**bold**` and `` `code` ``.
#[derive(Debug, Clone)]
enum Block {
    Heading(u8, String),
    Para(String),
    List(Vec<String>),
    /// Header row, then body rows.
    Table(Vec<String>, Vec<Vec<String>>),
    /// Relative path (Markdown) and file to embed (HTML), with a caption.
    Image {
        rel: String,
        file: PathBuf,
        caption: String,
    },
}

/// Write `report.md` and `report.html` into `out_dir` and return the path
/// of `report.md`. `charts` are the files from
/// [`crate::charts::write_charts`]; they are linked by their path relative
/// to `out_dir` and embedded in the HTML.
pub fn write_report(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[PathBuf],
) -> Result<PathBuf, Error> {
    let blocks = blocks(out_dir, case, report, charts)?;
    let md_path = out_dir.join(REPORT_MD);
    write_atomic(&md_path, markdown(&blocks).as_bytes())?;
    let html = html(&report.title, &blocks)?;
    write_atomic(&out_dir.join(REPORT_HTML), html.as_bytes())?;
    Ok(md_path)
}

// ------------------------------------------------------------- content

/// A polynomial in `var`, descending powers. Coefficients are the model's
/// own inputs, so they are printed exactly (shortest round-trip form), not
/// rounded like the results.
fn poly_text(p: &Poly, var: &str) -> String {
    let d = p.descending();
    let n = d.len().saturating_sub(1);
    let mut out = String::new();
    for (i, &c) in d.iter().enumerate() {
        if c == 0.0 {
            continue;
        }
        let power = n - i;
        let sign = if c < 0.0 { "-" } else { "+" };
        let mag = c.abs();
        let term = match power {
            0 => format!("{mag}"),
            _ => {
                let v = if power == 1 {
                    var.to_string()
                } else {
                    format!("{var}^{power}")
                };
                if mag == 1.0 { v } else { format!("{mag}*{v}") }
            }
        };
        if out.is_empty() {
            if sign == "-" {
                out.push('-');
            }
        } else {
            out.push_str(&format!(" {sign} "));
        }
        out.push_str(&term);
    }
    if out.is_empty() { "0".into() } else { out }
}

/// A transfer function as `num / (den)`, or just `numerator` over a unit
/// denominator.
fn tf_text(tf: &Transfer, var: &str) -> String {
    let num = poly_text(&tf.numerator, var);
    let d = tf.denominator.descending();
    if d.len() == 1 && d[0] == 1.0 {
        return num;
    }
    let num = if tf.numerator.descending().iter().filter(|c| **c != 0.0).count() > 1 {
        format!("({num})")
    } else {
        num
    };
    format!("{num} / ({})", poly_text(&tf.denominator, var))
}

/// The figures of the loop model, in report order: key, label with unit,
/// value (None: the figure does not exist), text for a missing one.
fn figure_rows(f: &Figures) -> Vec<(&'static str, &'static str, Option<f64>, &'static str)> {
    vec![
        ("y_final", "final value", Some(f.y_final), "-"),
        (
            "overshoot_pct",
            "overshoot (%)",
            f.overshoot_pct,
            "no final value",
        ),
        (
            "settling_time_s",
            "settling time (s)",
            f.settling_time_s,
            "not settled",
        ),
        (
            "rise_time_s",
            "rise time 10-90 % (s)",
            f.rise_time_s,
            "not reached",
        ),
        (
            "disturbance_peak",
            "load-step peak (output units)",
            Some(f.disturbance_peak),
            "-",
        ),
        (
            "recovery_time_s",
            "load-step recovery (s)",
            f.recovery_time_s,
            "not recovered",
        ),
        (
            "u_peak",
            "peak command (actuator units)",
            Some(f.u_peak),
            "-",
        ),
        (
            "gain_margin_db",
            "gain margin (dB)",
            f.gain_margin_db,
            "infinite",
        ),
        (
            "phase_margin_deg",
            "phase margin (deg)",
            f.phase_margin_deg,
            "infinite",
        ),
        ("crossover_hz", "crossover (Hz)", f.crossover_hz, "none"),
        (
            "delay_margin_s",
            "delay margin (s)",
            f.delay_margin_s,
            "infinite",
        ),
        (
            "sensitivity_peak",
            "sensitivity peak Ms",
            Some(f.sensitivity_peak),
            "-",
        ),
    ]
    .into_iter()
    // An undecided figure reads `undecided`, never a value or "not settled".
    .map(|(key, label, v, missing)| (key, label, f.decided(key, v), f.missing_text(key, missing)))
    .collect()
}

fn slack_text(s: f64) -> String {
    if s.is_infinite() {
        if s > 0.0 { "unbounded" } else { "fails" }.to_string()
    } else {
        format!("{} %", fmt_num(s * 100.0))
    }
}

/// The answer in one sentence.
fn answer(report: &PickReport, rec: &Recommended) -> String {
    let load = match rec.cpu_load_pct {
        Some(l) => format!("CPU load **{} %**", fmt_num(l)),
        None => "no CPU budget given, so no load".into(),
    };
    let timer = rec
        .timer_divider
        .map(|n| format!(", timer divider {n}"))
        .unwrap_or_default();
    if rec.method == "given-in-z" {
        return format!(
            "**Answer:** run the controller given in z at its own rate, **{} Hz** (period **{} s**{timer}), with the output applied {} of a period after sampling; {load}. A controller given in z runs only at its own rate, so no headroom is applied.",
            fmt_num(rec.rate_hz),
            fmt_num(rec.period_s),
            fmt_num(rec.compute_delay),
        );
    }
    format!(
        "**Answer:** run the controller discretized by `{}` at **{} Hz** (period **{} s**{timer}) with the output applied {} of a period after sampling; {load}. This is the slowest {}, {} Hz, times the headroom {}.",
        rec.method,
        fmt_num(rec.rate_hz),
        fmt_num(rec.period_s),
        fmt_num(rec.compute_delay),
        if report.robust.is_some() {
            "rate passing on every plant variant"
        } else {
            "passing rate"
        },
        fmt_num(rec.slowest_rate_hz),
        fmt_num(report.headroom),
    )
}

fn blocks(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[PathBuf],
) -> Result<Vec<Block>, Error> {
    let models = case.nominal()?;
    let mut b = vec![Block::Heading(1, report.title.clone())];

    b.push(Block::Heading(2, "The loop".into()));
    let mut lines = vec![
        format!("plant P(s) = `{}`", tf_text(&models.plant, "s")),
        format!("sensor H(s) = `{}`", tf_text(&models.sensor, "s")),
    ];
    lines.push(match &models.controller {
        Controller::Continuous(c) => format!(
            "controller C(s) = `{}`, discretized by each method the case lists",
            tf_text(c, "s")
        ),
        Controller::Discrete(d) => format!(
            "controller C(z) = `{}`, given in z at {} Hz",
            tf_text(&d.transfer, "z"),
            fmt_num(1.0 / d.period_s)
        ),
    });
    b.push(Block::List(lines));

    b.push(Block::Heading(2, "The answer".into()));
    if !report.design_failures.is_empty() {
        b.push(Block::Para(
            "**The continuous design already fails the spec**, so no sampling rate can meet it: revise the controller or the spec first.".into(),
        ));
        b.push(Block::Table(
            vec!["figure".into(), "continuous design".into(), "limit".into()],
            report
                .design_failures
                .iter()
                .map(|c| {
                    vec![
                        c.figure.to_string(),
                        c.value.map_or("none".into(), fmt_num),
                        fmt_num(c.limit),
                    ]
                })
                .collect(),
        ));
    }
    match (&report.recommended, &report.window) {
        (Some(rec), Some(w)) if w.empty => b.push(Block::Para(format!(
            "**No rate meets both the spec and the upper bound:** the spec needs at least {} Hz (`{}`, with headroom) but the {} allows at most {} Hz. The spec alone would be met by: {}",
            fmt_num(w.low_hz),
            rec.method,
            w.high_bound,
            fmt_num(w.high_hz),
            answer(report, rec).trim_start_matches("**Answer:** ")
        ))),
        (Some(rec), _) => b.push(Block::Para(answer(report, rec))),
        (None, _) if report.design_failures.is_empty() => b.push(Block::Para(
            "**No method meets the spec** at the fastest swept rate; the table of methods below names the limiting figure of each.".into(),
        )),
        (None, _) => {}
    }

    if let Some(rec) = &report.recommended {
        b.push(Block::Heading(
            2,
            format!(
                "Figures at the recommended rate ({} Hz)",
                fmt_num(rec.rate_hz)
            ),
        ));
        match &rec.figures {
            Some(f) => {
                let robust = report.robust.is_some();
                let worst: Vec<String> = rec.worst_figures.as_ref().map_or_else(
                    || vec!["unstable variant".to_string(); figure_rows(f).len()],
                    |w| {
                        figure_rows(w)
                            .into_iter()
                            .map(|(_, _, v, missing)| v.map_or(missing.to_string(), fmt_num))
                            .collect()
                    },
                );
                let rows = figure_rows(f)
                    .into_iter()
                    .enumerate()
                    .map(|(i, (key, label, value, missing))| {
                        // With variants the verdict is the worst variant's.
                        let checks = if robust && rec.worst_figures.is_some() {
                            &rec.worst_checks
                        } else {
                            &rec.checks
                        };
                        let check = checks.iter().find(|c| c.figure == key);
                        let mut row = vec![
                            label.to_string(),
                            value.map_or(missing.to_string(), fmt_num),
                        ];
                        if robust {
                            row.push(worst[i].clone());
                        }
                        row.extend([
                            check.map_or("-".into(), |c| fmt_num(c.limit)),
                            check.map_or("-".into(), |c| slack_text(c.slack)),
                            check.map_or("-".into(), |c| {
                                if c.pass { "pass" } else { "FAIL" }.into()
                            }),
                        ]);
                        row
                    })
                    .collect();
                let mut header = vec!["figure".to_string(), "value".to_string()];
                if robust {
                    header.push("worst variant".into());
                }
                if robust {
                    header.extend([
                        "limit".into(),
                        "slack (worst)".into(),
                        "verdict (worst)".into(),
                    ]);
                } else {
                    header.extend(["limit".into(), "slack".into(), "verdict".into()]);
                }
                b.push(Block::Table(header, rows));
                b.push(Block::Para(
                    "Slack is the distance to the limit as a share of the limit; a gain-margin limit bounds the margin's size.".into(),
                ));
            }
            None => b.push(Block::Para(
                "The loop at the recommended rate has no figures (it is not stable).".into(),
            )),
        }
    }

    b.push(Block::Heading(2, "Slowest passing rate per method".into()));
    b.push(Block::Table(
        vec![
            "method".into(),
            "computation delay (of T)".into(),
            "f* (Hz)".into(),
            "limiting figure".into(),
            "islands (Hz, never recommended)".into(),
        ],
        report
            .methods
            .iter()
            .map(|m| {
                let f = match (m.slowest_rate_hz, m.at_range_floor) {
                    (Some(f), true) => format!("<= {}", fmt_num(f)),
                    (Some(f), false) => fmt_num(f),
                    (None, _) => "none".into(),
                };
                let islands = m
                    .islands
                    .iter()
                    .map(|i| format!("{} to {}", fmt_num(i[0]), fmt_num(i[1])))
                    .collect::<Vec<_>>()
                    .join(", ");
                vec![
                    m.method.clone(),
                    fmt_num(m.compute_delay),
                    f,
                    m.limiting.clone().unwrap_or_else(|| "-".into()),
                    if islands.is_empty() {
                        "-".into()
                    } else {
                        islands
                    },
                ]
            })
            .collect(),
    ));
    b.push(Block::Para(
        "f* is the lowest rate from which every faster rate up to the top of the sweep meets the spec; `<=` marks a method that passes over the whole sweep.".into(),
    ));

    if let Some(rb) = &report.robust {
        b.push(Block::Heading(
            2,
            "Slowest rate over the plant variants".into(),
        ));
        let ranges = rb
            .params
            .iter()
            .map(|p| {
                format!(
                    "`{}` from {} to {} (nominal {})",
                    p.name,
                    fmt_num(p.min),
                    fmt_num(p.max),
                    fmt_num(p.nominal)
                )
            })
            .collect::<Vec<_>>()
            .join(", ");
        let how = match rb.seed {
            Some(seed) => format!("a Latin hypercube sample with seed {seed}"),
            None => "every corner of the ranges".into(),
        };
        b.push(Block::Para(if ranges.is_empty() {
            format!(
                "{} variants, all the nominal plant: every parameter range has zero width. A rate passes only when every variant meets the spec.",
                rb.variants
            )
        } else {
            format!(
                "{} variants: the nominal plant and {how}, for {ranges}. The controller is the nominal design in every variant. A rate passes only when every variant meets the spec.",
                rb.variants
            )
        }));
        b.push(Block::Table(
            vec![
                "method".into(),
                "computation delay (of T)".into(),
                "robust f* (Hz)".into(),
                "nominal f* (Hz)".into(),
                "limiting figure".into(),
                "worst variant".into(),
            ],
            rb.methods
                .iter()
                .map(|m| {
                    vec![
                        m.rate.method.clone(),
                        fmt_num(m.rate.compute_delay),
                        m.rate.slowest_rate_hz.map_or("none".into(), fmt_num),
                        m.nominal_slowest_rate_hz.map_or("none".into(), fmt_num),
                        m.worst_limiting.clone().unwrap_or_else(|| "-".into()),
                        m.worst_variant.as_ref().map_or("-".into(), |v| {
                            v.iter()
                                .map(|n| format!("{} = {}", n.name, fmt_num(n.value)))
                                .collect::<Vec<_>>()
                                .join(", ")
                        }),
                    ]
                })
                .collect(),
        ));
    }

    if let Some(pr) = &report.precision {
        b.push(Block::Heading(2, "Coefficient precision".into()));
        b.push(Block::Para(format!(
            "The controller's coefficients rounded as stored on the target, in the `{}` structure; fixed-point formats take the fewest integer bits that hold every coefficient. A format passes at a rate when no integrator is lost, no pole rounds onto z = 1 or out of the unit circle, and the loop with the rounded controller meets the spec. Its ceiling is the fastest rate up to which it passes from the recommended rate (each method: from its own f* times the headroom).",
            pr.structure
        )));
        let method = report.recommended.as_ref().map(|r| r.method.clone());
        b.push(Block::Table(
            vec![
                "format".into(),
                "Q format".into(),
                "pole error (%)".into(),
                "DC gain error (%)".into(),
                "integral action".into(),
                "passes at the recommended rate".into(),
                "ceiling (Hz)".into(),
            ],
            pr.at_recommended
                .iter()
                .map(|a| {
                    let d = a.damage.as_ref();
                    let ceiling = pr
                        .ceilings
                        .iter()
                        .find(|c| Some(&c.method) == method.as_ref() && c.format == a.format)
                        .map_or("-".into(), |c| {
                            match (c.ceiling.rate_hz, c.ceiling.above_range) {
                                (Some(h), true) => format!(">= {} (top of the sweep)", fmt_num(h)),
                                (Some(h), false) => format!(
                                    "{} (then `{}`)",
                                    fmt_num(h),
                                    c.ceiling.limiting.clone().unwrap_or_default()
                                ),
                                (None, _) => format!(
                                    "none (`{}`)",
                                    c.ceiling.limiting.clone().unwrap_or_default()
                                ),
                            }
                        });
                    vec![
                        a.format.clone(),
                        d.and_then(|d| d.q_format.clone())
                            .unwrap_or_else(|| "-".into()),
                        d.map_or("-".into(), |d| fmt_num(d.pole_error_pct)),
                        d.map_or("-".into(), |d| {
                            d.dc_gain_error_pct
                                .map_or("integrators changed".into(), fmt_num)
                        }),
                        a.integral_kept
                            .map_or("-".into(), |k| if k { "kept" } else { "LOST" }.into()),
                        if a.feasible { "yes" } else { "NO" }.into(),
                        ceiling,
                    ]
                })
                .collect(),
        ));
    }

    b.push(Block::Heading(2, "Rate window".into()));
    match &report.window {
        Some(w) if w.empty => {
            let low = if report
                .recommended
                .as_ref()
                .is_some_and(|r| r.method == "given-in-z")
            {
                "the controller given in z runs at"
            } else {
                "the spec with headroom needs at least"
            };
            b.push(Block::Para(if w.high_hz < w.low_hz {
                format!(
                    "**The window is empty:** {low} {} Hz and the {} allows at most {} Hz. What would open it:",
                    fmt_num(w.low_hz),
                    w.high_bound,
                    fmt_num(w.high_hz)
                )
            } else {
                format!(
                    "**The window is empty:** {low} {} Hz, but the {}. What would open it:",
                    fmt_num(w.low_hz),
                    w.high_bound
                )
            }));
            b.push(Block::List(report.advice.clone()));
        }
        Some(w) => b.push(Block::Para(format!(
            "From {} Hz (the spec with headroom) to {} Hz (the {}): any rate in it meets both.",
            fmt_num(w.low_hz),
            fmt_num(w.high_hz),
            w.high_bound
        ))),
        None if case.budget.is_none() && case.arithmetic.is_none() => b.push(Block::Para(
            "The case gives no CPU budget, so there is no upper end to the window.".into(),
        )),
        None if case.budget.is_none() => b.push(Block::Para(
            "The case gives no CPU budget and every format holds to the top of the sweep, so there is no upper end to the window.".into(),
        )),
        None => b.push(Block::Para(
            "No window: there is no recommended rate to start it from.".into(),
        )),
    }

    if !charts.is_empty() {
        b.push(Block::Heading(2, "Charts".into()));
        for c in charts {
            let rel = c
                .strip_prefix(out_dir)
                .unwrap_or(c)
                .to_string_lossy()
                .replace('\\', "/");
            let name = c
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default();
            b.push(Block::Image {
                rel,
                file: c.clone(),
                caption: chart_caption(&name).to_string(),
            });
        }
    }

    b.push(Block::Heading(2, "Assumptions".into()));
    let mut assumptions = vec![
        if report.robust.is_some() {
            "Every figure is computed from the models above: the exact sampled-data loop, with the plant output evaluated between samples; the recommendation rests on the worst plant variant, the figures table on the nominal one beside the worst.".to_string()
        } else {
            "Every figure is computed from the models above (nominal parameter values): the exact sampled-data loop, with the plant output evaluated between samples.".to_string()
        },
        format!(
            "The controller's output is applied {} of a period after each sample (the computation delay the recommendation is made at: the largest the case lists).",
            fmt_num(report.design_delay)
        ),
        format!(
            "The headroom factor {} on the slowest passing rate is what covers model error, parameter drift and unmodelled dynamics; it is not a guarantee.",
            fmt_num(report.headroom)
        ),
        format!(
            "Settling and recovery are measured against a band of {} % of the final value (of the load-step peak for recovery).",
            fmt_num(case.spec.settling_band_pct)
        ),
    ];
    assumptions.extend(report.notes.iter().map(|n| format!("Note: {n}.")));
    b.push(Block::List(assumptions));

    b.push(Block::Heading(2, "Caution".into()));
    b.push(Block::Para(
        "These results are model-based. Confirm them on the hardware, with protective limits in place (current, voltage and position limits, watchdogs), before relying on them, and follow the codes, standards and licensed engineering practice that apply to the application.".into(),
    ));
    Ok(b)
}

fn chart_caption(name: &str) -> &'static str {
    match name {
        crate::charts::FIGURES_VS_RATE => {
            "Loop figures against the rate for each method, with the limits, each method's f* and the recommended rate."
        }
        crate::charts::STEP_RESPONSE => {
            "Step response between samples (lines) and at the samples (markers): continuous design, recommended rate, f* and a failing slower rate."
        }
        crate::charts::LOOP_RESPONSE => {
            "Loop gain at the recommended rate, with crossover, margins and the Nyquist frequency."
        }
        crate::charts::CPU_BUDGET => {
            "CPU load against the rate, the budget line and the rate window."
        }
        crate::charts::HOLD_APPROXIMATION => {
            "Where the usual continuous approximations of hold and delay stop agreeing with the exact sampled loop."
        }
        crate::charts::DISTURBANCE => {
            "Response to a unit load step at the plant input, at the recommended rate and at f*."
        }
        crate::charts::PRECISION => {
            "Controller pole and DC gain error from rounding the coefficients, per number format, against the rate; each format's precision ceiling marked."
        }
        _ => "Chart.",
    }
}

// ------------------------------------------------------------ Markdown

fn md_cell(s: &str) -> String {
    s.replace('|', "\\|")
}

fn markdown(blocks: &[Block]) -> String {
    let mut out = String::new();
    for b in blocks {
        match b {
            Block::Heading(level, text) => {
                out.push_str(&format!("{} {text}\n\n", "#".repeat(usize::from(*level))))
            }
            Block::Para(text) => out.push_str(&format!("{text}\n\n")),
            Block::List(items) => {
                for i in items {
                    out.push_str(&format!("- {i}\n"));
                }
                out.push('\n');
            }
            Block::Table(head, rows) => {
                let row = |cells: &[String]| {
                    format!(
                        "| {} |\n",
                        cells
                            .iter()
                            .map(|c| md_cell(c))
                            .collect::<Vec<_>>()
                            .join(" | ")
                    )
                };
                out.push_str(&row(head));
                out.push_str(&format!("|{}\n", "---|".repeat(head.len())));
                for r in rows {
                    out.push_str(&row(r));
                }
                out.push('\n');
            }
            Block::Image { rel, caption, .. } => {
                let alt = rel
                    .rsplit('/')
                    .next()
                    .unwrap_or(rel)
                    .trim_end_matches(".png");
                out.push_str(&format!("![{alt}]({rel})\n\n{caption}\n\n"))
            }
        }
    }
    out
}

// ---------------------------------------------------------------- HTML

fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            c => out.push(c),
        }
    }
    out
}

/// Escape, then turn `**bold**` and `` `code` `` pairs into tags.
fn inline(s: &str) -> String {
    let e = escape(s);
    let mut out = String::new();
    let mut bold = false;
    let mut code = false;
    let mut rest = e.as_str();
    while let Some(i) = rest.find(['*', '`']) {
        out.push_str(&rest[..i]);
        if rest[i..].starts_with("**") && !code {
            out.push_str(if bold { "</strong>" } else { "<strong>" });
            bold = !bold;
            rest = &rest[i + 2..];
        } else if rest[i..].starts_with('`') {
            out.push_str(if code { "</code>" } else { "<code>" });
            code = !code;
            rest = &rest[i + 1..];
        } else {
            out.push('*');
            rest = &rest[i + 1..];
        }
    }
    out.push_str(rest);
    if code {
        out.push_str("</code>");
    }
    if bold {
        out.push_str("</strong>");
    }
    out
}

/// Standard base64 with padding (RFC 4648), for the data URIs.
pub fn base64(bytes: &[u8]) -> String {
    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for k in 0..4 {
            if k <= chunk.len() {
                out.push(ALPHABET[((n >> (18 - 6 * k)) & 63) as usize] as char);
            } else {
                out.push('=');
            }
        }
    }
    out
}

const CSS: &str = "body{font-family:sans-serif;max-width:1000px;margin:2em auto;padding:0 1em;line-height:1.45;color:#222}\
table{border-collapse:collapse;margin:1em 0}th,td{border:1px solid #bbb;padding:.3em .6em;text-align:left}\
th{background:#eee}img{max-width:100%;border:1px solid #ddd}figure{margin:1.5em 0}\
figcaption{font-size:.9em;color:#555}code{background:#f3f3f3;padding:0 .2em}";

fn html(title: &str, blocks: &[Block]) -> Result<String, Error> {
    let mut out = format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{}</title>\n<style>{CSS}</style>\n</head>\n<body>\n",
        escape(title)
    );
    for b in blocks {
        match b {
            Block::Heading(level, text) => {
                out.push_str(&format!("<h{level}>{}</h{level}>\n", inline(text)))
            }
            Block::Para(text) => out.push_str(&format!("<p>{}</p>\n", inline(text))),
            Block::List(items) => {
                out.push_str("<ul>\n");
                for i in items {
                    out.push_str(&format!("<li>{}</li>\n", inline(i)));
                }
                out.push_str("</ul>\n");
            }
            Block::Table(head, rows) => {
                out.push_str("<table>\n<tr>");
                for h in head {
                    out.push_str(&format!("<th>{}</th>", inline(h)));
                }
                out.push_str("</tr>\n");
                for r in rows {
                    out.push_str("<tr>");
                    for c in r {
                        out.push_str(&format!("<td>{}</td>", inline(c)));
                    }
                    out.push_str("</tr>\n");
                }
                out.push_str("</table>\n");
            }
            Block::Image { file, caption, .. } => {
                let bytes = std::fs::read(file).map_err(|e| Error::Output {
                    path: file.display().to_string(),
                    message: format!("cannot read the chart to embed it: {e}"),
                })?;
                out.push_str(&format!(
                    "<figure><img alt=\"{}\" src=\"data:image/png;base64,{}\"><figcaption>{}</figcaption></figure>\n",
                    escape(caption),
                    base64(&bytes),
                    inline(caption)
                ));
            }
        }
    }
    out.push_str("</body>\n</html>\n");
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64_matches_the_rfc_vectors() {
        // RFC 4648 section 10 test vectors.
        for (plain, coded) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64(plain.as_bytes()), coded);
        }
    }

    #[test]
    fn polynomials_read_as_written() {
        // 0.05 s^2 + s (by hand), and a negative middle coefficient.
        let p = Poly::from_descending(&[0.05, 1.0, 0.0]);
        assert_eq!(poly_text(&p, "s"), "0.05*s^2 + s");
        let q = Poly::from_descending(&[1.0, -1.5, 0.5]);
        assert_eq!(poly_text(&q, "z"), "z^2 - 1.5*z + 0.5");
        let tf = Transfer::new(Poly::from_descending(&[20.0]), p);
        assert_eq!(tf_text(&tf, "s"), "20 / (0.05*s^2 + s)");
    }

    #[test]
    fn inline_marks_become_tags() {
        assert_eq!(
            inline("run `a<b` at **5 Hz**"),
            "run <code>a&lt;b</code> at <strong>5 Hz</strong>"
        );
    }
}
