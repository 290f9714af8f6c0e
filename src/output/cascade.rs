//! Outputs of a cascade: the `outer` object of `eval --json` and its text,
//! the cascade's `sweep.csv` (`cascade.csv` beside the loop's own rows),
//! and the report section. The figure keys are the loop's own
//! (`summary::evaluation_json`, `outputs::SWEEP_COLUMNS` names), so the
//! outer object reads like the inner one.

use std::path::Path;

use serde_json::{Value, json};

use crate::case::Case;
use crate::engineering::{hz, periods, periods_of, sig4 as fmt_num};
use crate::error::Error;
use crate::explore::cascade::{
    CascadePick, CascadeRow, CascadeSearch, each_cascade_row, prepare_cascade,
};
use crate::explore::pick::PickReport;
use crate::model::discretize::MethodChoice;
use crate::output::cascade_charts::{CPU_MAP, write_cascade_charts};
use crate::output::charts::Chart;
use crate::output::report::{Block, Detail, push_if, write_report_extra};
use crate::output::summary::{evaluation_json, evaluation_text};
use crate::output::tables::{SweepCsvStream, figure_cells};
use crate::output::writer::write_atomic;
use crate::sampled::cascade::evaluate::{CascadePoint, PreparedCascade};
use crate::sampled::evaluate::Evaluation;
use crate::sampled::feasibility::assess;
use crate::sampled::figure::Figure;
use crate::sampled::time_response::TimeFigure;
use crate::spec::HoldKind;

/// The `outer` object of `eval --json`: the outer loop's figures under the
/// loop's own keys, plus where it runs and its verdict on `[outer.spec]`.
pub fn outer_json(case: &Case, p: &CascadePoint, e: &Evaluation) -> Value {
    let mut v = evaluation_json(e);
    if let Value::Object(m) = &mut v {
        m.insert("ratio".into(), json!(p.ratio));
        m.insert("rate_hz".into(), json!(p.outer_rate_hz()));
        m.insert("period_s".into(), json!(1.0 / p.outer_rate_hz()));
        m.insert("method".into(), json!(MethodChoice(p.outer_method)));
        m.insert("hold".into(), json!(p.outer_hold.name()));
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
        "outer loop: ratio {}, rate {}, method {}, hold {}, computation delay {}; lifted over one outer period, broken at the outer controller's output; time figures on the outer plant output (points between inner samples included), load step at the outer plant's input",
        p.ratio,
        hz(p.outer_rate_hz()),
        MethodChoice(p.outer_method),
        p.outer_hold.name(),
        periods_of(p.outer_delay, "outer period")
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

/// The figure columns of one loop in the cascade rows: the catalogue's
/// figures ([`Figure::ALL`]) and the figures left undecided, each prefixed
/// with the loop's name (`inner_`, `outer_`).
fn loop_columns(prefix: &str) -> impl Iterator<Item = String> + '_ {
    Figure::ALL
        .into_iter()
        .map(move |f| format!("{prefix}_{}", f.key()))
        .chain(std::iter::once(format!("{prefix}_undecided")))
}

/// The header of the cascade rows; `outer_hold` adds that column (when
/// the case names the outer hold, `OuterLoop::hold_named`).
pub fn cascade_header(outer_hold: bool) -> Vec<String> {
    let mut h: Vec<String> = [
        "inner_rate_hz",
        "ratio",
        "outer_rate_hz",
        "inner_method",
        "inner_hold",
        "inner_compute_delay",
        "outer_method",
        "outer_hold",
        "outer_compute_delay",
        "inner_status",
    ]
    .iter()
    .filter(|s| outer_hold || **s != "outer_hold")
    .map(|s| s.to_string())
    .collect();
    h.extend(loop_columns("inner"));
    h.extend(
        ["inner_feasible", "inner_limiting", "outer_status"]
            .iter()
            .map(|s| s.to_string()),
    );
    h.extend(loop_columns("outer"));
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

fn opt_num(v: Option<f64>) -> String {
    v.map_or_else(String::new, |v| format!("{v}"))
}

/// The cells of a cascade row in `sweep.csv` (`outer_hold`: as
/// `cascade_header`).
pub fn cascade_record(r: &CascadeRow, outer_hold: bool) -> Vec<String> {
    let p = &r.point;
    let mut cells: Vec<String> = vec![
        format!("{}", p.inner.rate_hz),
        p.ratio.to_string(),
        format!("{}", p.outer_rate_hz()),
        MethodChoice(p.inner.method).to_string(),
        p.inner.hold.name().to_string(),
        format!("{}", p.inner.delay),
        MethodChoice(p.outer_method).to_string(),
    ];
    if outer_hold {
        cells.push(p.outer_hold.name().to_string());
    }
    cells.extend([format!("{}", p.outer_delay), r.inner.status.label()]);
    let figures = |e: Option<&Evaluation>, cells: &mut Vec<String>| {
        let f = e.and_then(|e| e.figures.as_ref());
        cells.extend(figure_cells(&Figure::ALL, f));
        cells.push(
            f.map(|f| TimeFigure::joined(&f.undecided, " "))
                .unwrap_or_default(),
        );
    };
    figures(Some(&r.inner), &mut cells);
    cells.push(r.inner_verdict.feasible.to_string());
    cells.push(
        r.inner_verdict
            .limiting
            .map_or(String::new(), |l| l.key().to_string()),
    );
    cells.push(match (&r.outer, &r.skipped) {
        (Some(e), _) => e.status.label(),
        (None, Some(why)) => why.clone(),
        (None, None) => String::new(),
    });
    figures(r.outer.as_deref(), &mut cells);
    match &r.outer_verdict {
        Some(v) => {
            cells.push(v.feasible.to_string());
            cells.push(v.limiting.map_or(String::new(), |l| l.key().to_string()));
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
    cells
}

/// The whole cascade CSV (header and one line per row, grid order;
/// `outer_hold`: as `cascade_header`).
pub fn cascade_csv(rows: &[CascadeRow], outer_hold: bool) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    // Writing to a Vec cannot fail.
    let _ = w.write_record(cascade_header(outer_hold));
    for r in rows {
        let _ = w.write_record(cascade_record(r, outer_hold));
    }
    w.into_inner().unwrap_or_default()
}

/// Whether `case` names its outer hold in the outputs
/// (`OuterLoop::hold_named`).
fn hold_named(case: &Case) -> bool {
    case.outer.as_ref().is_some_and(|o| o.hold_named())
}

/// File name of the inner loop's own sweep in a cascade run (`sweep.csv`
/// holds the cascade's rows there).
pub const INNER_SWEEP_CSV: &str = "inner-sweep.csv";

/// The name of the single loop's `sweep.csv` in a run of `case`:
/// `inner-sweep.csv` when the case has `[outer]`.
pub fn loop_sweep_name(case: &Case) -> &'static str {
    if case.outer.is_some() {
        INNER_SWEEP_CSV
    } else {
        "sweep.csv"
    }
}

/// The cascade section of the terminal's answer: the report's section in
/// brief (no explanation, no per-rate table, no charts).
pub fn brief_blocks(pick: &CascadePick) -> Vec<Block> {
    report_blocks(pick, &[], Path::new(""), Detail::Brief)
}

/// The report's cascade section (`Detail::Brief`: the terminal's).
fn report_blocks(
    pick: &CascadePick,
    charts: &[Chart],
    out_dir: &Path,
    detail: Detail,
) -> Vec<Block> {
    let full = detail == Detail::Full;
    let mut b = vec![Block::Heading(2, "Cascade: inner and outer loop".into())];
    push_if(&mut b, full, Block::Para(
        "The outer loop updates every N-th inner tick on the same processor; its command is the inner loop's reference, held until the next outer update. Both loops are evaluated exactly over one outer period (lifting). The outer figures are broken at the outer controller's output and taken on the outer plant output between inner samples too; the inner figures are the inner loop's own, with the outer loop open. The pair chosen is the one meeting both specs with the least CPU load (inner cycles x f + outer cycles x f/N).".into(),
    ));
    let ramped = pick.series.iter().any(|s| {
        s.series
            .outer_hold
            .is_some_and(|h| h != HoldKind::ZeroOrder)
    });
    push_if(&mut b, full && ramped, Block::Para(
        "A ramped outer hold (`[outer.timing] hold`) shapes the outer command between outer updates as a single loop's hold shapes its command, read by the inner loop at its ticks: j inner ticks after the command v_k takes effect, its reference is v_k + (v_k - v_{k-1}) j/N (first-order) or v_{k-1} + (v_k - v_{k-1}) j/N (interpolating).".into(),
    ));
    let mut lines: Vec<String> = Vec::new();
    match &pick.chosen {
        Some(c) => {
            lines.push(format!(
                "chosen pair: inner loop {} ({}, computation delay {}), ratio {}, outer loop {} ({}{}, computation delay {})",
                hz(c.inner_rate_hz),
                c.series.inner_method,
                periods(c.series.inner_compute_delay),
                c.ratio,
                hz(c.outer_rate_hz),
                c.series.outer_method,
                c.series
                    .outer_hold
                    .map_or_else(String::new, |h| format!(", {h} hold")),
                periods_of(c.series.outer_compute_delay, "outer period")
            ));
            if let Some(l) = c.cost.total_load_pct {
                lines.push(format!(
                    "CPU load {} % = inner {} % + outer {} %",
                    fmt_num(l),
                    fmt_num(c.cost.inner_load_pct.unwrap_or(f64::NAN)),
                    fmt_num(c.cost.outer_load_pct.unwrap_or(f64::NAN))
                ));
            }
        }
        None => lines.push("no pair meets both specs within the budget".into()),
    }
    if let Some(r) = &pick.recommended {
        let verdict = |a: &crate::sampled::feasibility::Assessment| {
            if a.feasible {
                "passes".to_string()
            } else {
                format!(
                    "fails (limiting: {})",
                    a.limiting.map_or("stability".into(), |l| l.label())
                )
            }
        };
        lines.push(format!(
            "with headroom {}: inner loop {}, ratio {}, outer loop {}{}; inner loop {}, outer loop {} ({})",
            fmt_num(r.headroom),
            hz(r.inner_rate_hz),
            r.ratio,
            hz(r.outer_rate_hz),
            r.cost
                .total_load_pct
                .map_or_else(String::new, |l| format!(", CPU load {} %", fmt_num(l))),
            verdict(&r.inner_verdict),
            verdict(&r.outer_verdict),
            r.basis
        ));
        lines.extend(r.notes.iter().map(|n| format!("note: {n}")));
    }
    if let Some([lo, hi]) = pick.window_hz {
        lines.push(format!(
            "inner-rate window: {} to {}{}",
            hz(lo),
            hz(hi),
            (pick.window.as_ref())
                .map_or_else(String::new, |w| format!(" (top set by {})", w.high_bound))
        ));
    }
    lines.extend(pick.advice.iter().map(|a| format!("advice: {a}")));
    lines.extend(pick.notes.iter().map(|n| format!("note: {n}")));
    b.push(Block::List(lines));
    if let Some(c) = &pick.chosen {
        let head = vec![
            "figure".to_string(),
            "inner".to_string(),
            "outer".to_string(),
        ];
        let rows: Vec<Vec<String>> = Figure::ALL
            .into_iter()
            .map(|fig| {
                let cell = |e: &Evaluation| {
                    e.figures
                        .as_ref()
                        .map_or_else(|| e.status.label(), |f| fig.cell(f))
                };
                vec![fig.heading(), cell(&c.inner), cell(&c.outer)]
            })
            .collect();
        b.push(Block::Table(head, rows));
    }
    let largest: Vec<Vec<String>> = pick
        .series
        .iter()
        .flat_map(|s| {
            s.largest_ratio.iter().map(move |(f, n)| {
                vec![
                    format!(
                        "{} / {}{}",
                        s.series.inner_method,
                        s.series.outer_method,
                        s.series
                            .outer_hold
                            .as_ref()
                            .map_or_else(String::new, |h| format!(" ({h} hold)"))
                    ),
                    hz(*f),
                    n.map_or_else(|| "none".into(), |n| n.to_string()),
                ]
            })
        })
        .collect();
    if !full {
        return b;
    }
    b.push(Block::Para(
        "Per inner rate, the largest ratio (slowest outer rate) at which both loops meet their specs:".into(),
    ));
    b.push(Block::Table(
        vec![
            "methods (inner / outer)".into(),
            "inner rate".into(),
            "largest passing ratio".into(),
        ],
        largest,
    ));
    for ch in charts {
        let rel = ch
            .path
            .strip_prefix(out_dir)
            .unwrap_or(&ch.path)
            .display()
            .to_string();
        let caption = match ch.path.file_name().and_then(|n| n.to_str()) {
            Some(CPU_MAP) => {
                "Every (inner rate, ratio) pair: meeting both specs or not, the chosen pair, lines of equal CPU load"
            }
            _ => {
                "Outer-loop figures against the ratio, one series per inner rate, with the outer spec's limits"
            }
        };
        b.push(Block::Image {
            rel,
            png: ch.png.clone(),
            caption: caption.into(),
        });
    }
    b
}

/// A finished cascade run: its rows, its answer and `pick.json` as a value
/// (the single loop's object with the `cascade` object added).
pub struct CascadeRun {
    pub rows: Vec<CascadeRow>,
    pub pick: CascadePick,
    pub json: Value,
}

/// The cascade part of `pick` on a case with `[outer]` (prepared as
/// `pc`), after the inner loop's own pick and the cascade's search
/// (`search_cascade`): `sweep.csv` (the cascade's rows), `pick.json` (with
/// `cascade`), the two charts (unless `no_charts`) and the report with its
/// cascade section. `charts` are the single loop's.
pub fn finish_pick(
    out_dir: &Path,
    case: &Case,
    report: &PickReport,
    charts: &[Chart],
    no_charts: bool,
    pc: &PreparedCascade,
    searched: CascadeSearch,
) -> Result<CascadeRun, Error> {
    let CascadeSearch { rows, pick } = searched;
    write_rows(out_dir, case, |each| rows.iter().for_each(each))?;
    let mut json = serde_json::to_value(report).unwrap_or(Value::Null);
    if let Value::Object(m) = &mut json {
        m.insert(
            "cascade".into(),
            serde_json::to_value(&pick).unwrap_or(Value::Null),
        );
    }
    let pretty = serde_json::to_vec_pretty(&json).map_err(|e| Error::Output {
        path: out_dir.join("pick.json").display().to_string(),
        message: e.to_string(),
    })?;
    write_atomic(&out_dir.join("pick.json"), &pretty)?;
    let cascade_charts = if no_charts {
        Vec::new()
    } else {
        write_cascade_charts(out_dir, case, pc, &rows, &pick)?
    };
    write_report_extra(
        out_dir,
        case,
        report,
        charts,
        report_blocks(&pick, &cascade_charts, out_dir, Detail::Full),
    )?;
    Ok(CascadeRun { rows, pick, json })
}

/// The cascade part of `sweep` on a case with `[outer]`: every pair
/// evaluated and written to `sweep.csv` as it is finished (the bytes of
/// [`cascade_csv`] over `cascade_rows(case, pc, true)`; only a batch of
/// rows held at a time).
pub fn finish_sweep(out_dir: &Path, case: &Case) -> Result<(), Error> {
    let pc = prepare_cascade(case)?
        .ok_or_else(|| Error::Input("the case has no [outer] table".into()))?;
    write_rows(out_dir, case, |each| {
        each_cascade_row(case, &pc, &mut |row| each(&row))
    })
}

/// `sweep.csv` of a cascade, the bytes of [`cascade_csv`], written line by
/// line as `rows` hands the rows over (nothing but a line held).
fn write_rows(
    out_dir: &Path,
    case: &Case,
    rows: impl FnOnce(&mut dyn FnMut(&CascadeRow)),
) -> Result<(), Error> {
    let hold = hold_named(case);
    let path = out_dir.join("sweep.csv");
    let mut stream = SweepCsvStream::create_lines(&path, &cascade_header(hold), "cascade")?;
    rows(&mut |row| stream.push_record(cascade_record(row, hold)));
    stream.finish()
}
