//! The design-review report of a `pick` run: `report.md`, and beside it
//! a self-contained `report.html` (charts embedded as data URIs).
//!
//! Both are rendered from one list of blocks, so they say the same thing.
//! Every number in them comes from the [`PickReport`] (the models are
//! printed from the case's own polynomials) and is formatted by
//! [`sig4`], the rule used by every other output.

use std::path::{Path, PathBuf};

use crate::case::{Case, Written};
use crate::engineering::{hz, periods, seconds, sig4};
use crate::error::Error;
use crate::explore::pick::{PickReport, Recommended};
use crate::model::poly::{C64, Poly};
use crate::model::transfer::{Controller, Transfer};
use crate::output::charts::Chart;
use crate::output::writer::write_atomic;
use crate::sampled::figure::Figure;

/// File name of the Markdown report.
pub const REPORT_MD: &str = "report.md";
/// File name of the self-contained HTML report.
pub const REPORT_HTML: &str = "report.html";

mod terminal;

/// One piece of the report. Inline text may use `**bold**` and `` `code` ``.
#[derive(Debug, Clone)]
pub enum Block {
    Heading(u8, String),
    Para(String),
    List(Vec<String>),
    /// Header row, then body rows.
    Table(Vec<String>, Vec<Vec<String>>),
    /// Relative path (Markdown) and the PNG bytes to embed (HTML), with a
    /// caption.
    Image {
        rel: String,
        png: Vec<u8>,
        caption: String,
    },
    /// The box under the title: (label, text) rows.
    Summary(Vec<(String, String)>),
}

/// How much of the report a renderer shows: all of it in `report.md`
/// and `report.html`; the terminal leaves out the loop's description, the
/// paragraphs that explain a table, the assumptions (notes stay) and the
/// caution's full text (its first line stays in the summary box).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Detail {
    Full,
    Brief,
}

/// The caution's first line: it opens the caution at the end of the
/// report and stands alone in the summary box under the title.
pub const CAUTION_LINE: &str = "These results are model-based: confirm them on the hardware, with protective limits in place, before relying on them.";

/// The rest of the caution, after [`CAUTION_LINE`].
const CAUTION_REST: &str = "The limits that protect the machine (current, voltage and position limits, watchdogs) must be in place for the first runs, and the codes, standards and licensed engineering practice that apply to the application must be followed.";

/// Write `report.md` and `report.html` into `out_dir` and return the path
/// of `report.md`. `charts` are the files from
/// [`crate::output::charts::write_charts`]; they are linked by their path relative
/// to `out_dir` and embedded in the HTML.
pub fn write_report(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[Chart],
) -> Result<PathBuf, Error> {
    let blocks = blocks(out_dir, case, report, charts, Detail::Full)?;
    let md_path = out_dir.join(REPORT_MD);
    write_atomic(&md_path, markdown(&blocks).as_bytes())?;
    let html = html(&report.title, &blocks)?;
    write_atomic(&out_dir.join(REPORT_HTML), html.as_bytes())?;
    Ok(md_path)
}

/// `write_report` with `extra` blocks (a cascade's section,
/// `cascade::output`) placed before the assumptions.
pub(crate) fn write_report_extra(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[Chart],
    extra: Vec<Block>,
) -> Result<PathBuf, Error> {
    let mut blocks = blocks(out_dir, case, report, charts, Detail::Full)?;
    insert_before_assumptions(&mut blocks, extra);
    let md_path = out_dir.join(REPORT_MD);
    write_atomic(&md_path, markdown(&blocks).as_bytes())?;
    let html = html(&report.title, &blocks)?;
    write_atomic(&out_dir.join(REPORT_HTML), html.as_bytes())?;
    Ok(md_path)
}

/// The pick's answer as terminal text: the report's blocks in brief
/// (`Detail::Brief`), with `extra` blocks (a cascade's section) where the
/// report has them.
pub fn pick_text(case: &Case, report: &PickReport, extra: &[Block]) -> Result<String, Error> {
    let mut blocks = blocks(Path::new(""), case, report, &[], Detail::Brief)?;
    insert_before_assumptions(&mut blocks, extra.to_vec());
    Ok(terminal::text(&blocks))
}

/// `extra` spliced in before the assumptions (the notes in brief), or at
/// the end.
fn insert_before_assumptions(blocks: &mut Vec<Block>, extra: Vec<Block>) {
    let at = blocks
        .iter()
        .position(|b| matches!(b, Block::Heading(2, t) if t == ASSUMPTIONS || t == NOTES))
        .unwrap_or(blocks.len());
    blocks.splice(at..at, extra);
}

/// The heading of the assumptions (the report) and of the notes alone
/// (the terminal).
const ASSUMPTIONS: &str = "Assumptions";
const NOTES: &str = "Notes";

// ------------------------------------------------------------- content

/// A number in engineering notation, 4 significant digits with trailing
/// zeros dropped: the exponent is a multiple of 3 (`400e-6`, `48.5e-3`,
/// `1.013e24`), none for 1 <= |v| < 1000. For coefficients the report
/// computed (expanded products), whose full digits mean nothing.
fn eng(v: f64) -> String {
    if !v.is_finite() || v == 0.0 {
        return format!("{v}");
    }
    let mut exp3 = (v.abs().log10() / 3.0).floor() as i32 * 3;
    let mut m = v / 10f64.powi(exp3);
    // 4 significant digits; rounding can carry the mantissa to 1000.
    let decimals = |m: f64| (3 - m.abs().log10().floor() as i32).clamp(0, 3) as usize;
    let mut text = format!("{m:.*}", decimals(m));
    if text.trim_start_matches('-').starts_with("1000") {
        exp3 += 3;
        m /= 1000.0;
        text = format!("{m:.*}", decimals(m));
    }
    if text.contains('.') {
        text = text.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    if exp3 == 0 {
        text
    } else {
        format!("{text}e{exp3}")
    }
}

/// A polynomial in `var`, descending powers, coefficients by `numerator`.
fn poly_text_with(p: &Poly, var: &str, num: &dyn Fn(f64) -> String) -> String {
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
            0 => num(mag),
            _ => {
                let v = if power == 1 {
                    var.to_string()
                } else {
                    format!("{var}^{power}")
                };
                if mag == 1.0 {
                    v
                } else {
                    format!("{}*{v}", num(mag))
                }
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

/// A polynomial with its coefficients exactly as stored (shortest
/// round-trip form).
#[cfg(test)]
fn poly_text(p: &Poly, var: &str) -> String {
    poly_text_with(p, var, &|v| format!("{v}"))
}

/// A transfer function as `num / (den)`, or just `numerator` over a unit
/// denominator, coefficients by `num_fmt`.
fn tf_text_with(tf: &Transfer, var: &str, num_fmt: &dyn Fn(f64) -> String) -> String {
    let num = poly_text_with(&tf.numerator, var, num_fmt);
    let d = tf.denominator.descending();
    if d.len() == 1 && d[0] == 1.0 {
        return num;
    }
    let num = if tf
        .numerator
        .descending()
        .iter()
        .filter(|c| **c != 0.0)
        .count()
        > 1
    {
        format!("({num})")
    } else {
        num
    };
    format!(
        "{num} / ({})",
        poly_text_with(&tf.denominator, var, num_fmt)
    )
}

#[cfg(test)]
fn tf_text(tf: &Transfer, var: &str) -> String {
    tf_text_with(tf, var, &|v| format!("{v}"))
}

/// Roots as written in a case file (`-3+4j`), shortest round-trip form.
fn roots_as_written(v: &[C64]) -> String {
    if v.is_empty() {
        return "none".into();
    }
    v.iter()
        .map(|c| {
            if c.im == 0.0 {
                format!("{}", c.re)
            } else {
                let sign = if c.im < 0.0 { '-' } else { '+' };
                format!("{}{sign}{}j", c.re, c.im.abs())
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// One block of the loop as the case wrote it, then (for anything but a
/// single expression that needs no expanding) the expanded transfer
/// function in engineering notation.
fn block_lines(name: &str, written: Option<&Written>, tf: &Transfer, var: &str) -> String {
    let expanded = tf_text_with(tf, var, &eng);
    let as_written = match written {
        None => return format!("{name} = `1` (no sensor given: a unit sensor)"),
        Some(Written::Expression(text)) => format!("{name} = `{}`", text.trim()),
        Some(Written::ZerosPolesGain { zeros, poles, gain }) => format!(
            "{name}: zeros `{}`, poles `{}`, gain `{gain}` (rad/s)",
            roots_as_written(zeros),
            roots_as_written(poles)
        ),
        Some(Written::Pid {
            kp,
            ki,
            kd,
            derivative_filter_hz,
        }) => format!(
            "{name}: PID with kp = `{kp}`, ki = `{ki}`, kd = `{kd}`{}",
            derivative_filter_hz.map_or(String::new(), |f| format!(
                ", derivative filter at `{f}` Hz"
            ))
        ),
        Some(Written::InZ {
            numerator: num,
            denominator: den,
            rate_hz,
        }) => format!(
            "{name}: numerator `{}`, denominator `{}` (descending powers of z) at {}",
            num.iter()
                .map(|v| format!("{v}"))
                .collect::<Vec<_>>()
                .join(", "),
            den.iter()
                .map(|v| format!("{v}"))
                .collect::<Vec<_>>()
                .join(", "),
            hz(*rate_hz)
        ),
    };
    // An expression that is already the expanded form needs no repeat.
    if let Some(Written::Expression(text)) = written
        && text.trim() == tf_text_with(tf, var, &|v| format!("{v}"))
    {
        return as_written;
    }
    if matches!(written, Some(Written::InZ { .. })) {
        return as_written;
    }
    format!("{as_written}; expanded: `{expanded}`")
}

/// How the report names the rate it gives figures at: the recommended
/// rate, or (when the window is empty) only the rate the spec alone needs.
fn rate_name(report: &PickReport) -> &'static str {
    if report.window.as_ref().is_some_and(|w| w.empty) {
        "the rate the spec alone needs"
    } else {
        "the recommended rate"
    }
}

/// A rate and its period in engineering form (`**1.396 kHz**, period
/// **716.3 µs**`).
fn rate_and_period(rate_hz: f64, period_s: f64) -> String {
    format!("**{}**, period **{}**", hz(rate_hz), seconds(period_s))
}

/// When the output is applied: `1 period`, `0.5 of a period`, or `at
/// once` for no computation delay.
fn delay_after(d: f64) -> String {
    if d == 0.0 {
        "at once".into()
    } else {
        periods(d)
    }
}

/// The CPU load beside its limit.
fn load_text(case: &Case, load: Option<f64>) -> String {
    match (load, case.budget.as_ref()) {
        (Some(l), Some(b)) => format!(
            "{} % against a limit of {} %{}",
            sig4(l),
            b.max_load_pct,
            if l > b.max_load_pct {
                ": over the limit"
            } else {
                ""
            }
        ),
        (None, Some(_)) => "unknown (no cycle count for this controller)".into(),
        (_, None) => "no CPU budget given".into(),
    }
}

/// The box under the title: the answer, its method, delay and load, the
/// main warning and the caution's first line.
fn summary_box(case: &Case, report: &PickReport, full: bool) -> Block {
    let mut rows: Vec<(String, String)> = Vec::new();
    let empty = report.window.as_ref().is_some_and(|w| w.empty);
    match &report.recommended {
        Some(rec) if !empty => {
            rows.push(("Answer".into(), rate_and_period(rec.rate_hz, rec.period_s)))
        }
        Some(rec) => {
            rows.push((
                "Answer".into(),
                "**none**: no rate meets both the spec and the upper bound".into(),
            ));
            rows.push((
                "The spec alone needs".into(),
                rate_and_period(rec.rate_hz, rec.period_s),
            ));
        }
        None if !report.design_failures.is_empty() => rows.push((
            "Answer".into(),
            "**none**: the continuous design already fails the spec".into(),
        )),
        None => rows.push((
            "Answer".into(),
            "**none**: no method meets the spec at the fastest swept rate".into(),
        )),
    }
    if let Some(rec) = &report.recommended {
        rows.push((
            "Method".into(),
            if rec.method.is_given_in_z() {
                "the controller given in z, at its own rate".into()
            } else {
                format!("`{}`", rec.method)
            },
        ));
        // The hold kind goes here once a case can choose one.
        rows.push((
            "Computation delay".into(),
            format!(
                "{} ({}) from sample to output",
                periods(rec.compute_delay),
                seconds(rec.compute_delay * rec.period_s)
            ),
        ));
        rows.push(("CPU load".into(), load_text(case, rec.cpu_load_pct)));
    }
    rows.push(("Warning".into(), main_warning(case, report)));
    rows.push((
        "Caution".into(),
        format!(
            "{CAUTION_LINE} (Full caution {}.)",
            if full { "at the end" } else { "in report.md" }
        ),
    ));
    Block::Summary(rows)
}

/// The one warning the reader must see first.
fn main_warning(case: &Case, report: &PickReport) -> String {
    if !report.design_failures.is_empty() {
        return "**the continuous design already fails the spec**: no sampling rate can meet it."
            .into();
    }
    if report.recommended.is_none() {
        return "**no method meets the spec** at the fastest swept rate.".into();
    }
    if let Some(w) = report.window.as_ref().filter(|w| w.empty) {
        return if w.high_hz < w.low_hz {
            format!(
                "**no rate window**: the spec needs at least {} but the {} allows at most {} (see Rate window for what would open it).",
                hz(w.low_hz),
                w.high_bound,
                hz(w.high_hz)
            )
        } else {
            format!(
                "**no rate window**: the spec needs at least {}, but the {} (see Rate window).",
                hz(w.low_hz),
                w.high_bound
            )
        };
    }
    let ranged: Vec<&str> = case
        .params
        .iter()
        .filter(|p| p.min < p.max)
        .map(|p| p.name.as_str())
        .collect();
    if report.robust.is_none() && !ranged.is_empty() {
        return format!(
            "**nominal figures only**: the case gives ranges for {} but no `[uncertainty]`, so no variant was checked.",
            ranged
                .iter()
                .map(|n| format!("`{n}`"))
                .collect::<Vec<_>>()
                .join(", ")
        );
    }
    "none beyond the caution.".into()
}

fn slack_text(s: f64) -> String {
    if s.is_infinite() {
        if s > 0.0 { "unbounded" } else { "fails" }.to_string()
    } else {
        format!("{} %", sig4(s * 100.0))
    }
}

/// The answer in one sentence; `lead` opens it (`**Answer:** run` or,
/// for an empty window, `The spec alone would need`).
fn answer(case: &Case, report: &PickReport, rec: &Recommended, lead: &str) -> String {
    let load = match rec.cpu_load_pct {
        Some(_) => format!("CPU load {}", load_text(case, rec.cpu_load_pct)),
        None if case.budget.is_some() => "CPU load unknown".into(),
        None => "no CPU budget given, so no load".into(),
    };
    let timer = rec
        .timer_divider
        .map(|n| format!(", timer divider {n}"))
        .unwrap_or_default();
    if rec.method.is_given_in_z() {
        return format!(
            "{lead} the controller given in z at its own rate, **{}** (period **{}**{timer}), with the output applied {} after sampling through a {} hold; {load}. A controller given in z runs only at its own rate, so no headroom is applied.",
            hz(rec.rate_hz),
            seconds(rec.period_s),
            delay_after(rec.compute_delay),
            rec.hold,
        );
    }
    format!(
        "{lead} the controller discretized by `{}` at **{}** (period **{}**{timer}) with the output applied {} after sampling through a **{}** hold ({}); {load}. This is the slowest {}, {}, times the headroom {} (the headroom covers model error).",
        rec.method,
        hz(rec.rate_hz),
        seconds(rec.period_s),
        delay_after(rec.compute_delay),
        rec.hold,
        rec.hold_basis,
        if report.robust.is_some() {
            "rate passing on every plant variant (robust f*)"
        } else {
            "passing rate (f*)"
        },
        hz(rec.slowest_rate_hz),
        sig4(report.headroom),
    )
}

fn blocks(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[Chart],
    detail: Detail,
) -> Result<Vec<Block>, Error> {
    let full = detail == Detail::Full;
    let models = case.nominal()?;
    let written = case.written();
    let mut b = vec![
        Block::Heading(1, report.title.clone()),
        summary_box(case, report, full),
    ];
    let at_rate = rate_name(report);
    let empty = report.window.as_ref().is_some_and(|w| w.empty);

    let mut lines = vec![
        block_lines("plant P(s)", Some(&written.plant), &models.plant, "s"),
        block_lines("sensor H(s)", written.sensor.as_ref(), &models.sensor, "s"),
    ];
    lines.push(match &models.controller {
        Controller::Continuous(c) => format!(
            "{}; discretized by each method the case lists",
            block_lines("controller C(s)", Some(&written.controller), c, "s")
        ),
        Controller::Discrete(d) => block_lines(
            "controller C(z)",
            Some(&written.controller),
            &d.transfer,
            "z",
        ),
    });
    if !case.params.is_empty() {
        lines.push(format!(
            "parameters: {}",
            case.params
                .iter()
                .map(|p| if p.min < p.max {
                    // The case's own numbers, as written.
                    format!("`{}` = {} (from {} to {})", p.name, p.nominal, p.min, p.max)
                } else {
                    format!("`{}` = {}", p.name, p.nominal)
                })
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    if full {
        b.push(Block::Heading(2, "The loop".into()));
        b.push(Block::List(lines));
    }

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
                        c.figure.heading(),
                        c.value.map_or("none".into(), |v| c.figure.text(v)),
                        c.figure.text(c.limit),
                    ]
                })
                .collect(),
        ));
    }
    match (&report.recommended, &report.window) {
        (Some(rec), Some(w)) if w.empty => {
            b.push(Block::Para(format!(
                "**No rate meets both the spec and the upper bound:** the spec needs at least {} (`{}`, with headroom) but the {} allows at most {}.",
                hz(w.low_hz),
                rec.method,
                w.high_bound,
                hz(w.high_hz),
            )));
            b.push(Block::Para(answer(
                case,
                report,
                rec,
                "The spec alone would need",
            )));
        }
        (Some(rec), _) => b.push(Block::Para(answer(case, report, rec, "**Answer:** run"))),
        (None, _) if report.design_failures.is_empty() => b.push(Block::Para(
            "**No method meets the spec** at the fastest swept rate; the table of methods below names the limiting figure of each.".into(),
        )),
        (None, _) => {}
    }

    if let Some(rec) = &report.recommended {
        let heading = if empty {
            "Figures at the rate the spec alone needs"
        } else {
            "Figures at the recommended rate"
        };
        b.push(Block::Heading(
            2,
            format!("{heading} ({})", hz(rec.rate_hz)),
        ));
        match &rec.figures {
            Some(f) => {
                let robust = report.robust.is_some();
                let rows = Figure::ALL
                    .into_iter()
                    .map(|fig| {
                        // With variants the verdict is the worst variant's.
                        let checks = if robust && rec.worst_figures.is_some() {
                            &rec.worst_checks
                        } else {
                            &rec.checks
                        };
                        let check = checks.iter().find(|c| c.figure == fig);
                        let mut row = vec![fig.heading(), fig.cell(f)];
                        if robust {
                            row.push(
                                rec.worst_figures
                                    .as_ref()
                                    .map_or("unstable variant".to_string(), |w| fig.cell(w)),
                            );
                        }
                        row.extend([
                            check.map_or("-".into(), |c| fig.text(c.limit)),
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
                push_if(&mut b, full, Block::Para(
                    "Slack is the distance to the limit as a share of the limit; a gain-margin limit bounds the margin's size.".into(),
                ));
            }
            None => b.push(Block::Para(format!(
                "The loop at {at_rate} has no figures (it is not stable)."
            ))),
        }
    }

    let robust = report.robust.is_some();
    b.push(Block::Heading(
        2,
        if robust {
            "Slowest passing rate per method, nominal plant"
        } else {
            "Slowest passing rate per method"
        }
        .into(),
    ));
    b.push(Block::Table(
        vec![
            "method".into(),
            "hold".into(),
            "computation delay".into(),
            if robust {
                "nominal f*".into()
            } else {
                "f*".into()
            },
            "limiting figure".into(),
            "islands (never the answer)".into(),
        ],
        report
            .methods
            .iter()
            .map(|m| {
                let f = match (m.slowest_rate_hz, m.at_range_floor) {
                    (Some(f), true) => format!("<= {}", hz(f)),
                    (Some(f), false) => hz(f),
                    (None, _) => "none".into(),
                };
                let islands = m
                    .islands
                    .iter()
                    .map(|i| format!("{} to {}", hz(i[0]), hz(i[1])))
                    .collect::<Vec<_>>()
                    .join(", ");
                vec![
                    m.method.to_string(),
                    m.hold.name().into(),
                    periods(m.compute_delay),
                    f,
                    m.limiting
                        .map_or("-".to_string(), |l| l.label().to_string()),
                    if islands.is_empty() {
                        "-".into()
                    } else {
                        islands
                    },
                ]
            })
            .collect(),
    ));
    push_if(
        &mut b,
        full,
        Block::Para(if robust {
            "f* is the lowest rate from which every faster rate up to the top of the sweep meets the spec: nominal f* on the nominal plant, robust f* on every plant variant (the next table; the answer rests on it). `<=` marks a method that passes over the whole sweep.".into()
        } else {
            "f* is the lowest rate from which every faster rate up to the top of the sweep meets the spec; `<=` marks a method that passes over the whole sweep.".into()
        }),
    );

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
                    sig4(p.min),
                    sig4(p.max),
                    sig4(p.nominal)
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
                "hold".into(),
                "computation delay".into(),
                "robust f*".into(),
                "nominal f*".into(),
                "limiting figure".into(),
                "worst variant".into(),
            ],
            rb.methods
                .iter()
                .map(|m| {
                    vec![
                        m.rate.method.to_string(),
                        m.rate.hold.name().into(),
                        periods(m.rate.compute_delay),
                        m.rate.slowest_rate_hz.map_or("none".into(), hz),
                        m.nominal_slowest_rate_hz.map_or("none".into(), hz),
                        m.worst_limiting
                            .map_or("-".to_string(), |l| l.label().to_string()),
                        m.worst_variant.as_ref().map_or("-".into(), |v| {
                            v.iter()
                                .map(|n| format!("{} = {}", n.name, sig4(n.value)))
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
        push_if(
            &mut b,
            full,
            Block::Para(format!(
                "The controller's coefficients rounded as stored on the target, in the `{}` structure; fixed-point formats take the fewest integer bits that hold every coefficient. A format passes at a rate when no integrator is lost, no pole rounds onto z = 1 or out of the unit circle, and the loop with the rounded controller meets the spec. Its ceiling is the fastest rate up to which it passes from {at_rate} (each method: from its own f* times the headroom).",
                pr.structure
            )),
        );
        let method = report.recommended.as_ref().map(|r| r.method);
        b.push(Block::Table(
            vec![
                "format".into(),
                "Q format".into(),
                "pole error (%)".into(),
                "DC gain error (%)".into(),
                "integral action".into(),
                format!("passes at {at_rate}"),
                "ceiling".into(),
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
                                (Some(h), true) => format!(">= {} (top of the sweep)", hz(h)),
                                (Some(h), false) => format!(
                                    "{} (then {})",
                                    hz(h),
                                    c.ceiling.limiting.map_or("?".into(), |l| l.label())
                                ),
                                (None, _) => format!(
                                    "none ({})",
                                    c.ceiling.limiting.map_or("?".into(), |l| l.label())
                                ),
                            }
                        });
                    vec![
                        a.format.name(),
                        d.and_then(|d| d.q_format.clone())
                            .unwrap_or_else(|| "-".into()),
                        d.map_or("-".into(), |d| sig4(d.pole_error_pct)),
                        d.map_or("-".into(), |d| {
                            d.dc_gain_error_pct
                                .map_or("integrators changed".into(), sig4)
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
                .is_some_and(|r| r.method.is_given_in_z())
            {
                "the controller given in z runs at"
            } else {
                "the spec with headroom needs at least"
            };
            b.push(Block::Para(if w.high_hz < w.low_hz {
                format!(
                    "**The window is empty:** {low} {} and the {} allows at most {}. What would open it:",
                    hz(w.low_hz),
                    w.high_bound,
                    hz(w.high_hz)
                )
            } else {
                format!(
                    "**The window is empty:** {low} {}, but the {}. What would open it:",
                    hz(w.low_hz),
                    w.high_bound
                )
            }));
            b.push(Block::List(report.advice.clone()));
        }
        Some(w) => b.push(Block::Para(format!(
            "From {} (the spec with headroom) to {} (the {}): any rate in it meets both.",
            hz(w.low_hz),
            hz(w.high_hz),
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
        for Chart { path: c, png } in charts {
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
                png: png.clone(),
                caption: chart_caption(&name, at_rate, robust),
            });
        }
    }

    if !full {
        if !report.notes.is_empty() {
            b.push(Block::Heading(2, NOTES.into()));
            b.push(Block::List(
                report.notes.iter().map(|n| format!("{n}.")).collect(),
            ));
        }
        return Ok(b);
    }
    b.push(Block::Heading(2, ASSUMPTIONS.into()));
    let mut assumptions = vec![
        if report.robust.is_some() {
            "Every figure is computed from the models above: the exact sampled-data loop, with the plant output evaluated between samples; the rate rests on the worst plant variant, the figures table gives the nominal one beside the worst.".to_string()
        } else {
            "Every figure is computed from the models above (nominal parameter values): the exact sampled-data loop, with the plant output evaluated between samples.".to_string()
        },
        format!(
            "The controller's output is applied {} after each sample (the computation delay the answer is given at: the largest the case lists).",
            delay_after(report.design_delay)
        ),
        match &report.recommended {
            Some(r) => format!(
                "The actuator holds each command as a {} hold. {}.",
                r.hold, r.hold_basis
            ),
            None => format!(
                "Hold kinds evaluated: {}.",
                case.holds
                    .iter()
                    .map(|h| h.name())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        },
        format!(
            "The headroom factor {} on the slowest passing rate is what covers model error, parameter drift and unmodelled dynamics; it is not a guarantee.",
            sig4(report.headroom)
        ),
        format!(
            "Settling and recovery are measured against a band of {} % of the final value (of the load-step peak for recovery).",
            sig4(case.spec.settling_band_pct)
        ),
    ];
    if case.plant_delay_s > 0.0 || case.sensor_delay_s > 0.0 {
        assumptions.push(format!(
            "Transport delays: {} at the plant, {} on the measurement. They are exact in the sampled loop (whole periods as unit delays, the fraction exact) and in the continuous design's loop gain; the continuous design's step and load responses and poles use their Pade [{n}/{n}] approximant.",
            seconds(case.plant_delay_s),
            seconds(case.sensor_delay_s),
            n = crate::sampled::evaluate::TRANSPORT_PADE_ORDER
        ));
    }
    assumptions.extend(report.notes.iter().map(|n| format!("Note: {n}.")));
    b.push(Block::List(assumptions));

    b.push(Block::Heading(2, "Caution".into()));
    b.push(Block::Para(format!("{CAUTION_LINE} {CAUTION_REST}")));
    Ok(b)
}

/// The caption of a chart; `at_rate` names the rate the report gives
/// figures at, and with plant variants f* is said to be the robust one.
fn chart_caption(name: &str, at_rate: &str, robust: bool) -> String {
    let star = if robust { "robust f*" } else { "f*" };
    match name {
        crate::output::charts::FIGURES_VS_RATE => format!(
            "Loop figures against the rate for each method (nominal plant), with the limits, each method's {} and {at_rate}.",
            if robust { "nominal and robust f*" } else { "f*" }
        ),
        crate::output::charts::STEP_RESPONSE => format!(
            "Step response between samples (lines) and at the samples (markers): continuous design, {at_rate}, {star} and a failing slower rate."
        ),
        crate::output::charts::LOOP_RESPONSE => format!(
            "Loop gain at {at_rate}, with crossover, margins and the Nyquist frequency."
        ),
        crate::output::charts::CPU_BUDGET => {
            "CPU load against the rate, the budget line and the rate window.".into()
        }
        crate::output::charts::HOLD_APPROXIMATION => {
            "Where the usual continuous approximations of hold and delay (a lag and Pade approximants of the hold's low-frequency delay, and the hold's own transfer function by [2/2] Pade) stop agreeing with the exact sampled loop.".into()
        }
        crate::output::charts::HOLD_KINDS => {
            "Phase margin and overshoot against the rate with each hold kind the case lists, at the recommended method and delay, with each hold's f*.".into()
        }
        crate::output::charts::DISTURBANCE => format!(
            "Response to a unit load step at the plant input, at {at_rate} and at {star}."
        ),
        crate::output::charts::PRECISION => {
            "Controller pole and DC gain error from rounding the coefficients, per number format, against the rate; each format's precision ceiling marked.".into()
        }
        _ => "Chart.".into(),
    }
}

// ------------------------------------------------------------ tables

/// Placeholders a numeric column may hold besides numbers.
const NOT_A_NUMBER: [&str; 13] = [
    "-",
    "none",
    "infinite",
    "inf",
    "unbounded",
    "fails",
    "not settled",
    "not reached",
    "not recovered",
    "not searched",
    "not located",
    "no final value",
    "undecided",
];

/// True when a cell reads as a number (`<= 12.5`, `6.908 %`, `716.3 µs`,
/// `1.396 kHz` included).
fn is_number(cell: &str) -> bool {
    let t = cell.trim();
    let t = t
        .strip_prefix("<= ")
        .or_else(|| t.strip_prefix(">= "))
        .unwrap_or(t);
    let t = match t.rsplit_once(' ') {
        Some((n, unit)) if is_unit(unit) => n,
        _ => t,
    };
    !t.is_empty() && t.parse::<f64>().is_ok()
}

/// `%`, or seconds or hertz with an SI prefix (`ms`, `µs`, `kHz`).
pub(crate) fn is_unit(u: &str) -> bool {
    u == "%"
        || ["s", "Hz"].iter().any(|base| {
            u.strip_suffix(base)
                .is_some_and(|p| ["", "p", "n", "µ", "m", "k", "M", "G"].contains(&p))
        })
}

/// `block` pushed only when `keep` (the report's explanations, left out
/// of the terminal).
pub(crate) fn push_if(b: &mut Vec<Block>, keep: bool, block: Block) {
    if keep {
        b.push(block);
    }
}

/// Per column: right-aligned when every cell is a number or a
/// placeholder and at least one is a number.
pub(crate) fn numeric_columns(head: &[String], rows: &[Vec<String>]) -> Vec<bool> {
    (0..head.len())
        .map(|j| {
            let cells: Vec<&str> = rows
                .iter()
                .filter_map(|r| r.get(j).map(String::as_str))
                .collect();
            cells.iter().any(|c| is_number(c))
                && cells
                    .iter()
                    .all(|c| is_number(c) || NOT_A_NUMBER.contains(&c.trim()))
        })
        .collect()
}

// ------------------------------------------------------------ Markdown

fn md_cell(s: &str) -> String {
    s.replace('|', "\\|")
}

/// A Markdown table padded to column width, numbers right-aligned, so it
/// reads as plain text too.
fn md_table(head: &[String], rows: &[Vec<String>]) -> String {
    let numeric = numeric_columns(head, rows);
    let cells = |r: &[String]| -> Vec<String> {
        (0..head.len())
            .map(|j| md_cell(r.get(j).map_or("", String::as_str)))
            .collect()
    };
    let head_cells = cells(head);
    let body: Vec<Vec<String>> = rows.iter().map(|r| cells(r)).collect();
    let width: Vec<usize> = (0..head.len())
        .map(|j| {
            body.iter()
                .map(|r| r[j].chars().count())
                .chain([head_cells[j].chars().count(), 3])
                .max()
                .unwrap_or(3)
        })
        .collect();
    let line = |r: &[String]| -> String {
        let padded: Vec<String> = r
            .iter()
            .enumerate()
            .map(|(j, c)| padded_cell(c, width[j], numeric[j]))
            .collect();
        format!("| {} |\n", padded.join(" | "))
    };
    let mut out = line(&head_cells);
    let rule: Vec<String> = (0..head.len())
        .map(|j| {
            if numeric[j] {
                format!("{}:", "-".repeat(width[j] - 1))
            } else {
                "-".repeat(width[j])
            }
        })
        .collect();
    out.push_str(&format!("| {} |\n", rule.join(" | ")));
    for r in &body {
        out.push_str(&line(r));
    }
    out
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
                out.push_str(&md_table(head, rows));
                out.push('\n');
            }
            Block::Image { rel, caption, .. } => {
                let alt = rel
                    .rsplit('/')
                    .next()
                    .unwrap_or(rel)
                    .trim_end_matches(".png");
                // The image links to its own file, for the full size.
                out.push_str(&format!("[![{alt}]({rel})]({rel})\n\n{caption}\n\n"))
            }
            Block::Summary(rows) => {
                for (label, text) in rows {
                    out.push_str(&format!("> **{label}:** {text}  \n"));
                }
                out.push('\n');
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

/// Wrap every number written with an exponent (`1.234e-5`) in a span
/// that does not break: browsers otherwise break lines at its hyphen.
fn keep_numbers_whole(s: &str) -> String {
    let chars: Vec<char> = s.chars().collect();
    let mut out = String::with_capacity(s.len());
    let mut i = 0;
    while i < chars.len() {
        let starts = chars[i].is_ascii_digit()
            && (i == 0 || !(chars[i - 1].is_alphanumeric() || chars[i - 1] == '_'));
        if !starts {
            out.push(chars[i]);
            i += 1;
            continue;
        }
        let mut j = i;
        while j < chars.len() && (chars[j].is_ascii_digit() || chars[j] == '.') {
            j += 1;
        }
        // An exponent: e, an optional sign, digits.
        let mut k = j;
        if k < chars.len() && (chars[k] == 'e' || chars[k] == 'E') {
            k += 1;
            if k < chars.len() && (chars[k] == '-' || chars[k] == '+') {
                k += 1;
            }
            let d = k;
            while k < chars.len() && chars[k].is_ascii_digit() {
                k += 1;
            }
            if k == d {
                k = j;
            }
        } else {
            k = j;
        }
        let token: String = chars[i..k].iter().collect();
        if k > j {
            out.push_str(&format!("<span class=\"n\">{token}</span>"));
        } else {
            out.push_str(&token);
        }
        i = k;
    }
    out
}

/// Escape, then turn `**bold**` and `` `code` `` pairs into tags.
fn inline(s: &str) -> String {
    let e = keep_numbers_whole(&escape(s));
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

/// The page's style: readable at phone width (tables scroll inside their
/// own box, numbers never break), and in print a heading stays with what
/// follows, a figure with its caption, and a split table repeats its head.
const CSS: &str = "body{font-family:sans-serif;max-width:1000px;margin:1.5em auto;padding:0 1em;line-height:1.45;color:#222}\
h1{font-size:1.6em;line-height:1.25}h2{margin-top:1.6em}\
.summary{border:2px solid #456;border-radius:6px;background:#f4f7fa;padding:.6em 1em;margin:1em 0 1.5em}\
.summary dl{display:grid;grid-template-columns:max-content 1fr;gap:.25em 1em;margin:0}\
.summary dt{font-weight:bold}.summary dd{margin:0}\
.wide{overflow-x:auto;margin:1em 0}\
table{border-collapse:collapse}th,td{border:1px solid #bbb;padding:.3em .6em;text-align:left;vertical-align:top}\
th{background:#eee}th.numerator{text-align:right}td.numerator{text-align:right;white-space:nowrap;font-variant-numeric:tabular-nums}\
.n{white-space:nowrap}\
img{max-width:100%;height:auto;border:1px solid #ddd}figure{margin:1.5em 0}\
figcaption{font-size:.9em;color:#555}code{background:#f3f3f3;padding:0 .2em;overflow-wrap:anywhere}\
@media (max-width:600px){body{margin:.5em auto;padding:0 .6em}.summary dl{grid-template-columns:1fr}.summary dd{margin-bottom:.3em}}\
@media print{body{max-width:none;margin:0;font-size:10pt}\
h1,h2,h3{break-after:avoid;page-break-after:avoid}\
figure,.summary,tr{break-inside:avoid;page-break-inside:avoid}\
img{max-height:20cm;width:auto}thead{display:table-header-group}\
.wide{overflow:visible}a{color:inherit;text-decoration:none}}";

/// The `<img>` of one chart, its bytes embedded as a data URI.
fn embedded_chart(png: &[u8], alt: &str) -> String {
    format!(
        "<img alt=\"{}\" src=\"data:image/png;base64,{}\">",
        escape(alt),
        base64(png)
    )
}

fn html_table(head: &[String], rows: &[Vec<String>]) -> String {
    let numeric = numeric_columns(head, rows);
    let class = |j: usize| if numeric[j] { " class=\"num\"" } else { "" };
    let mut out = String::from("<div class=\"wide\"><table>\n<thead><tr>");
    for (j, h) in head.iter().enumerate() {
        out.push_str(&format!("<th{}>{}</th>", class(j), inline(h)));
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    for r in rows {
        out.push_str("<tr>");
        for (j, c) in r.iter().enumerate() {
            out.push_str(&format!(
                "<td{}>{}</td>",
                class(j.min(head.len() - 1)),
                inline(c)
            ));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody>\n</table></div>\n");
    out
}

fn html(title: &str, blocks: &[Block]) -> Result<String, Error> {
    let mut out = format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>{}</title>\n<style>{CSS}</style>\n</head>\n<body>\n",
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
            Block::Table(head, rows) => out.push_str(&html_table(head, rows)),
            Block::Image { rel, png, caption } => {
                out.push_str(&format!(
                    "<figure><a href=\"{}\" title=\"full size\">{}</a><figcaption>{}</figcaption></figure>\n",
                    escape(rel),
                    embedded_chart(png, caption),
                    inline(caption)
                ));
            }
            Block::Summary(rows) => {
                out.push_str("<section class=\"summary\" aria-label=\"Summary\"><dl>\n");
                for (label, text) in rows {
                    out.push_str(&format!(
                        "<dt>{}</dt><dd>{}</dd>\n",
                        inline(label),
                        inline(text)
                    ));
                }
                out.push_str("</dl></section>\n");
            }
        }
    }
    out.push_str("</body>\n</html>\n");
    Ok(out)
}

/// A table cell padded to `width` characters: numbers to the right, text
/// to the left (the Markdown table and the terminal's plain table).
fn padded_cell(c: &str, width: usize, numeric: bool) -> String {
    let pad = " ".repeat(width.saturating_sub(c.chars().count()));
    if numeric {
        format!("{pad}{c}")
    } else {
        format!("{c}{pad}")
    }
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
    fn expanded_coefficients_read_in_engineering_notation() {
        // By hand: exponents in steps of 3, 4 significant digits, trailing
        // zeros dropped; float noise in the input is gone.
        assert_eq!(eng(0.0004000000000000001), "400e-6");
        assert_eq!(eng(0.04850000000000001), "48.5e-3");
        assert_eq!(eng(12.119366207318922), "12.12");
        assert_eq!(eng(1.0137e24), "1.014e24");
        assert_eq!(eng(-999.96), "-1e3");
        assert_eq!(eng(1.0), "1");
    }

    #[test]
    fn numbers_with_exponents_do_not_break() {
        assert_eq!(
            keep_numbers_whole("at 2.707e-6 s, x1e-3 stays"),
            "at <span class=\"n\">2.707e-6</span> s, x1e-3 stays"
        );
    }

    #[test]
    fn inline_marks_become_tags() {
        assert_eq!(
            inline("run `a<b` at **5 Hz**"),
            "run <code>a&lt;b</code> at <strong>5 Hz</strong>"
        );
    }
}
