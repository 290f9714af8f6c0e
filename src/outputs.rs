//! Result files: `sweep.csv`, `pick.json`, written whole or not at all
//! (a temporary name in the same folder, renamed when complete).

use std::fs;
use std::io::Write;
use std::path::Path;

use crate::error::Error;
use crate::evaluate::{Evaluation, Figures};
use crate::feasibility::Assessment;
use crate::search::method_label;
use crate::sweep::SweepRow;
use crate::variants::VariantSet;

/// Write `bytes` to `path` through a temporary file in the same folder and
/// a rename, so a reader never sees a half-written file under the final
/// name.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), Error> {
    let err = |e: std::io::Error| Error::Output {
        path: path.display().to_string(),
        message: e.to_string(),
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    fs::create_dir_all(dir).map_err(err)?;
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(err)
}

/// A number cell: shortest round-trip form.
fn num(v: f64) -> String {
    if v.is_infinite() {
        if v > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{v}")
    }
}

/// The columns of `sweep.csv` every sweep has, in order. A case with
/// `[uncertainty]` adds [`ROBUST_COLUMNS`], one with `[arithmetic]` adds
/// [`PRECISION_COLUMNS`] per number format (prefixed `q15_` etc.).
pub const SWEEP_COLUMNS: [&str; 23] = [
    "rate_hz",
    "period_s",
    "method",
    "compute_delay",
    "status",
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
    "sensitivity_peak",
    "undecided",
    "max_pole_radius",
    "feasible",
    "limiting",
    "limiting_slack",
    "cpu_load_pct",
];

/// Columns added by plant variants: the verdict over all of them, the
/// worst variant, and each figure at its worst (prefixed `worst_`).
pub const ROBUST_COLUMNS: [&str; 6] = [
    "variants",
    "variants_unstable",
    "robust_feasible",
    "robust_limiting",
    "robust_slack",
    "worst_variant",
];

/// The figures given at their worst over the variants.
const WORST_FIGURES: [&str; 10] = [
    "overshoot_pct",
    "settling_time_s",
    "rise_time_s",
    "disturbance_peak",
    "recovery_time_s",
    "u_peak",
    "gain_margin_db",
    "phase_margin_deg",
    "delay_margin_s",
    "sensitivity_peak",
];

/// Columns per number format (each prefixed with the format's name).
pub const PRECISION_COLUMNS: [&str; 9] = [
    "q_format",
    "pole_shift",
    "pole_error_pct",
    "zero_shift",
    "dc_gain_error_pct",
    "crossover_gain_error_pct",
    "integral_kept",
    "feasible",
    "limiting",
];

/// A cell for a figure that may not exist: empty when the evaluation has
/// no figures, `missing` when the figure itself does not exist.
fn cell(v: Option<Option<f64>>, missing: &str) -> String {
    match v {
        None => String::new(),
        Some(None) => missing.to_string(),
        Some(Some(x)) => num(x),
    }
}

/// The cells of [`WORST_FIGURES`] for `f`.
fn figure_cells(f: Option<&Figures>) -> Vec<String> {
    // An undecided figure reads `undecided` (never a time or "not settled").
    let time = |key: &str, get: &dyn Fn(&Figures) -> Option<f64>, missing: &'static str| {
        let v = f.map(|f| f.decided(key, get(f)));
        cell(v, f.map_or(missing, |f| f.missing_text(key, missing)))
    };
    vec![
        time("overshoot_pct", &|f| f.overshoot_pct, "no final value"),
        time("settling_time_s", &|f| f.settling_time_s, "not settled"),
        time("rise_time_s", &|f| f.rise_time_s, "not reached"),
        time("disturbance_peak", &|f| Some(f.disturbance_peak), ""),
        time("recovery_time_s", &|f| f.recovery_time_s, "not recovered"),
        time("u_peak", &|f| Some(f.u_peak), ""),
        cell(f.map(|f| f.gain_margin_db), "inf"),
        cell(f.map(|f| f.phase_margin_deg), "inf"),
        cell(f.map(|f| f.delay_margin_s), "inf"),
        cell(f.map(|f| Some(f.sensitivity_peak)), ""),
    ]
}

/// The first columns of a row: the point and the nominal evaluation.
fn point_cells(r: &SweepRow, e: &Evaluation, a: &Assessment) -> Vec<String> {
    let p = &r.point;
    let f = e.figures.as_ref();
    let rho = e
        .closed_loop_poles
        .iter()
        .map(|q| q[0].hypot(q[1]))
        .fold(f64::NAN, f64::max);
    let figs = figure_cells(f);
    let mut rec = vec![
        num(p.rate_hz),
        num(1.0 / p.rate_hz),
        method_label(p.method),
        num(p.delay),
        e.status.label(),
        cell(f.map(|f| Some(f.y_final)), ""),
    ];
    rec.extend_from_slice(&figs[..8]);
    rec.push(cell(f.map(|f| f.crossover_hz), "none"));
    rec.extend_from_slice(&figs[8..]);
    rec.extend([
        f.map(|f| f.undecided.join(" ")).unwrap_or_default(),
        if rho.is_nan() {
            String::new()
        } else {
            num(rho)
        },
        a.feasible.to_string(),
        a.limiting.unwrap_or("").to_string(),
        num(a.slack),
        r.cpu_load_pct.map(num).unwrap_or_default(),
    ]);
    rec
}

/// `sweep.csv`: one row per grid point, in grid order. Cells: empty where
/// a figure does not apply (an unstable point has no figures), `inf` for
/// an infinite margin, `not settled` / `not recovered` / `not reached`
/// where the response never got there, `undecided` where the horizon's
/// bound could not decide the figure (the `undecided` column lists them).
pub fn sweep_csv(rows: &[SweepRow], variants: Option<&VariantSet>) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<String> = SWEEP_COLUMNS.iter().map(|c| c.to_string()).collect();
    if variants.is_some() {
        header.extend(ROBUST_COLUMNS.iter().map(|c| c.to_string()));
        header.extend(WORST_FIGURES.iter().map(|c| format!("worst_{c}")));
    }
    let formats: Vec<String> = rows
        .first()
        .map(|r| r.precision.iter().map(|p| p.format.name()).collect())
        .unwrap_or_default();
    for f in &formats {
        header.extend(PRECISION_COLUMNS.iter().map(|c| format!("{f}_{c}")));
    }
    // Writing to a Vec cannot fail.
    let _ = w.write_record(&header);
    for r in rows {
        let mut rec = point_cells(r, &r.eval, &r.assessment);
        if let (Some(set), Some(rb)) = (variants, r.robust.as_ref()) {
            rec.extend([
                set.len().to_string(),
                rb.unstable.to_string(),
                rb.assessment.feasible.to_string(),
                rb.assessment.limiting.unwrap_or("").to_string(),
                num(rb.assessment.slack),
                set.describe(rb.worst),
            ]);
            rec.extend(figure_cells(rb.worst_figures.as_ref()));
        }
        for pp in &r.precision {
            let d = pp.damage.as_ref();
            rec.extend([
                d.and_then(|d| d.q_format.clone()).unwrap_or_default(),
                d.map(|d| num(d.pole_shift)).unwrap_or_default(),
                d.map(|d| num(d.pole_error_pct)).unwrap_or_default(),
                d.map(|d| num(d.zero_shift)).unwrap_or_default(),
                cell(d.map(|d| d.dc_gain_error_pct), "integrators changed"),
                cell(d.map(|d| d.crossover_gain_error_pct), "no crossover"),
                d.map(|d| d.integral_kept().to_string()).unwrap_or_default(),
                pp.assessment.feasible.to_string(),
                pp.assessment.limiting.unwrap_or("").to_string(),
            ]);
        }
        let _ = w.write_record(&rec);
    }
    w.into_inner().unwrap_or_default()
}

/// `variants.csv` (`sweep --variants`): one row per grid point and plant
/// variant, in grid order then variant order (variant 0 is the nominal
/// one): the point, the variant's parameter values, and its evaluation in
/// the columns of [`SWEEP_COLUMNS`].
pub fn variants_csv(rows: &[SweepRow], variants: &VariantSet) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<String> = vec!["variant".into()];
    header.extend(variants.names.iter().cloned());
    header.extend(SWEEP_COLUMNS.iter().map(|c| c.to_string()));
    let _ = w.write_record(&header);
    for r in rows {
        let Some(rb) = r.robust.as_ref() else {
            continue;
        };
        for (i, (e, a)) in rb.each.iter().enumerate() {
            let mut rec = vec![i.to_string()];
            rec.extend(variants.values[i].iter().map(|v| num(*v)));
            rec.extend(point_cells(r, e, a));
            let _ = w.write_record(&rec);
        }
    }
    w.into_inner().unwrap_or_default()
}

/// `--trace` CSV: `response,t_s,y,u,sample` rows for the reference step
/// then the load-disturbance step.
pub fn trace_csv(
    step: &[crate::time_response::TracePoint],
    dist: &[crate::time_response::TracePoint],
) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(["response", "t_s", "y", "u", "sample"]);
    for (name, pts) in [("step", step), ("disturbance", dist)] {
        for p in pts {
            let _ = w.write_record([
                name.to_string(),
                num(p.t),
                num(p.y),
                num(p.u),
                u8::from(p.sample).to_string(),
            ]);
        }
    }
    w.into_inner().unwrap_or_default()
}
