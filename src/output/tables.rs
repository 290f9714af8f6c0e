//! CSV tables: `sweep.csv` (whole or streamed row by row), `variants.csv`
//! and the traces of `eval --trace`. Columns follow the figure catalogue;
//! numbers are plain SI values in the shortest form that reads back to
//! the same double.

use std::fs;
use std::io::Write;
use std::path::Path;

use crate::error::Error;
use crate::explore::search::method_label;
use crate::explore::sweep::SweepRow;
use crate::explore::variants::VariantSet;
use crate::output::writer::folder_of;
use crate::sampled::evaluate::{Evaluation, Figures, Status};
use crate::sampled::feasibility::Assessment;
use crate::sampled::figure::Figure;
use crate::sampled::time_response::TimeFigure;

/// A number cell: shortest round-trip form.
fn num(v: f64) -> String {
    if v.is_infinite() {
        if v > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{v}")
    }
}

/// The columns of `sweep.csv` before the figures: the grid point and
/// the evaluation's status.
const POINT_COLUMNS: [&str; 6] = [
    "rate_hz",
    "period_s",
    "method",
    "hold",
    "compute_delay",
    "status",
];

/// The columns after the figures: the figures left undecided, the closed loop's largest
/// pole radius, the verdict and the CPU load.
const VERDICT_COLUMNS: [&str; 6] = [
    "undecided",
    "max_pole_radius",
    "feasible",
    "limiting",
    "limiting_slack",
    "cpu_load_pct",
];

/// The columns of `sweep.csv` every sweep has, in order: the point, every
/// figure of the catalogue ([`Figure::ALL`], by key), the verdict. A case
/// with `[uncertainty]` adds [`ROBUST_COLUMNS`] and the figures at their
/// worst, one with `[arithmetic]` adds [`PRECISION_COLUMNS`] per number
/// format (prefixed `q15_` etc.).
pub fn sweep_columns() -> Vec<String> {
    POINT_COLUMNS
        .into_iter()
        .chain(Figure::ALL.map(Figure::key))
        .chain(VERDICT_COLUMNS)
        .map(str::to_string)
        .collect()
}

/// Columns added by plant variants: the verdict over all of them, the
/// worst variant, what the row judged (`robust_scope`: `all` variants, or
/// `verdict-only`: it stopped at the first variant that fails, which
/// `worst_variant` and `robust_limiting` then name, and
/// `variants_unstable`, `robust_slack` and the worst figures are empty;
/// `docs/figures.md`, "Plant variants"), and each figure at its worst
/// (prefixed `worst_`).
pub const ROBUST_COLUMNS: [&str; 8] = [
    "variants",
    "variants_unstable",
    "robust_feasible",
    "robust_limiting",
    "robust_slack",
    "worst_variant",
    "robust_scope",
    "variants_evaluated",
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

/// A cell for a value that may not exist: empty when there is nothing
/// to measure, `missing` when the value itself does not exist.
fn cell(v: Option<Option<f64>>, missing: &str) -> String {
    match v {
        None => String::new(),
        Some(None) => missing.to_string(),
        Some(Some(x)) => num(x),
    }
}

/// The cells of `figures` for `f`: the value in the shortest form that
/// reads back to the same double, the absence's CSV token, or empty when
/// the evaluation has no figures (an unstable loop).
pub(crate) fn figure_cells(figures: &[Figure], f: Option<&Figures>) -> Vec<String> {
    figures
        .iter()
        .map(|fig| match f {
            None => String::new(),
            Some(f) => fig.value(f).map_or(fig.missing(f).csv().to_string(), num),
        })
        .collect()
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
    let mut rec = vec![
        num(p.rate_hz),
        num(1.0 / p.rate_hz),
        method_label(p.method).to_string(),
        p.hold.name().to_string(),
        num(p.delay),
        e.status.label(),
    ];
    rec.extend(figure_cells(&Figure::ALL, f));
    rec.extend([
        f.map(|f| TimeFigure::joined(&f.undecided, " "))
            .unwrap_or_default(),
        if rho.is_nan() {
            String::new()
        } else {
            num(rho)
        },
        a.feasible.to_string(),
        a.limiting.map_or(String::new(), |l| l.key().to_string()),
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
    let formats: Vec<String> = rows
        .first()
        .map(|r| r.precision.iter().map(|p| p.format.name()).collect())
        .unwrap_or_default();
    // Writing to a Vec cannot fail.
    let _ = w.write_record(sweep_header(&formats, variants.is_some()));
    for r in rows {
        let _ = w.write_record(sweep_record(r, variants));
    }
    w.into_inner().unwrap_or_default()
}

/// The header of `sweep.csv` for these format names (f64 left out) and
/// with or without plant variants.
pub fn sweep_header(formats: &[String], variants: bool) -> Vec<String> {
    let mut header = sweep_columns();
    if variants {
        header.extend(ROBUST_COLUMNS.iter().map(|c| c.to_string()));
        header.extend(
            Figure::WORST_OVER_VARIANTS
                .iter()
                .map(|c| format!("worst_{}", c.key())),
        );
    }
    for f in formats {
        header.extend(PRECISION_COLUMNS.iter().map(|c| format!("{f}_{c}")));
    }
    header
}

/// One row of `sweep.csv`, cells in the order of [`sweep_header`].
pub fn sweep_record(r: &SweepRow, variants: Option<&VariantSet>) -> Vec<String> {
    {
        let mut rec = point_cells(r, &r.eval, &r.assessment);
        if let (Some(set), Some(rb)) = (variants, r.robust.as_ref()) {
            // A verdict-only row's count of unstable variants and slack are
            // those of the variants it tried, not of all: left empty.
            let whole = |v: String| if rb.verdict_only { String::new() } else { v };
            rec.extend([
                set.len().to_string(),
                whole(rb.unstable.to_string()),
                rb.assessment.feasible.to_string(),
                rb.assessment
                    .limiting
                    .map_or(String::new(), |l| l.key().to_string()),
                whole(num(rb.assessment.slack)),
                set.describe(rb.worst),
                if rb.verdict_only {
                    "verdict-only"
                } else {
                    "all"
                }
                .to_string(),
                rb.evaluated.to_string(),
            ]);
            rec.extend(figure_cells(
                &Figure::WORST_OVER_VARIANTS,
                rb.worst_figures.as_ref(),
            ));
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
                pp.assessment
                    .limiting
                    .map_or(String::new(), |l| l.key().to_string()),
            ]);
        }
        rec
    }
}

/// `sweep.csv` written while the sweep runs, so no row waits in memory for
/// the end.
///
/// The sweep finishes points in groups that share (rate, delay), across
/// methods, while the file is in grid order (method, delay, rate): so each
/// (method, delay) series goes to a temporary file of its own, in
/// ascending rate as the groups finish, and [`SweepCsvStream::finish`]
/// joins them in grid order under a temporary name, then renames it into
/// place. Nothing but one CSV line per series is held at a time; the bytes
/// are those of [`sweep_csv`] over the same rows. Dropped unfinished (an
/// error, a panic), it removes its temporaries.
pub struct SweepCsvStream {
    path: std::path::PathBuf,
    header: Vec<u8>,
    /// Cells a line has (a row that was not evaluated is padded to it).
    columns: usize,
    series_len: usize,
    /// Names the spill files (`sweep`, `variants`).
    prefix: &'static str,
    spills: Vec<(std::path::PathBuf, std::io::BufWriter<fs::File>)>,
    error: Option<std::io::Error>,
}

impl SweepCsvStream {
    /// A stream for `series` series of `series_len` points each (grid
    /// index `i` belongs to series `i / series_len`), with the columns of
    /// these formats and variants.
    pub fn create(
        path: &Path,
        series: usize,
        series_len: usize,
        formats: &[String],
        variants: bool,
    ) -> Result<SweepCsvStream, Error> {
        let header = sweep_header(formats, variants);
        SweepCsvStream::create_with(path, series, series_len, &header, "sweep")
    }

    /// `variants.csv` as a stream (`sweep --variants`): the lines of
    /// [`variants_csv`], written as the rows are finished.
    pub fn create_variants(
        path: &Path,
        series: usize,
        series_len: usize,
        variants: &VariantSet,
    ) -> Result<SweepCsvStream, Error> {
        let header = variants_header(variants);
        SweepCsvStream::create_with(path, series, series_len, &header, "variants")
    }

    /// Any CSV of one series in row order, `header` first: the lines
    /// given to [`SweepCsvStream::push_record`] (the cascade's
    /// `sweep.csv`).
    pub fn create_lines(
        path: &Path,
        header: &[String],
        prefix: &'static str,
    ) -> Result<SweepCsvStream, Error> {
        SweepCsvStream::create_with(path, 1, usize::MAX, header, prefix)
    }

    /// Add one line of a stream made by [`SweepCsvStream::create_lines`].
    pub fn push_record(&mut self, record: Vec<String>) {
        self.write_records(0, [record]);
    }

    fn create_with(
        path: &Path,
        series: usize,
        series_len: usize,
        header: &[String],
        prefix: &'static str,
    ) -> Result<SweepCsvStream, Error> {
        let err = |e: std::io::Error| Error::Output {
            path: path.display().to_string(),
            message: e.to_string(),
        };
        let dir = folder_of(path).map_err(err)?;
        let mut w = csv::Writer::from_writer(Vec::new());
        let _ = w.write_record(header);
        let header_bytes = w.into_inner().unwrap_or_default();
        let mut stream = SweepCsvStream {
            path: path.to_path_buf(),
            header: header_bytes,
            columns: header.len(),
            series_len: series_len.max(1),
            prefix,
            spills: Vec::with_capacity(series),
            error: None,
        };
        let pid = std::process::id();
        for k in 0..series {
            let spill = dir.join(format!(".{prefix}-series-{k}.csv.partial-{pid}"));
            let f = fs::File::create(&spill).map_err(err)?;
            stream.spills.push((spill, std::io::BufWriter::new(f)));
        }
        Ok(stream)
    }

    /// Add the row of grid point `index` (`variants`: the plant variants
    /// it was evaluated on). Rows of one series must come in grid order
    /// (the sweep delivers them so). A write error is kept and returned by
    /// `finish`.
    pub fn push(&mut self, index: usize, row: &SweepRow, variants: Option<&VariantSet>) {
        self.write_records(index, [sweep_record(row, variants)]);
    }

    /// Add the lines of grid point `index` to a `variants.csv` stream: one
    /// per plant variant (none when the row kept no variant's evaluation).
    pub fn push_variants(&mut self, index: usize, row: &SweepRow, variants: &VariantSet) {
        self.write_records(index, variant_records(row, variants));
    }

    fn write_records(&mut self, index: usize, records: impl IntoIterator<Item = Vec<String>>) {
        if self.error.is_some() {
            return;
        }
        let k = index / self.series_len;
        let Some((_, out)) = self.spills.get_mut(k) else {
            return;
        };
        let mut w = csv::Writer::from_writer(Vec::new());
        for mut rec in records {
            // A row that was not evaluated has its point, status and
            // verdict: the figure columns after them stay empty.
            if rec.len() < self.columns {
                rec.resize(self.columns, String::new());
            }
            let _ = w.write_record(&rec);
        }
        let line = w.into_inner().unwrap_or_default();
        if let Err(e) = out.write_all(&line) {
            self.error = Some(e);
        }
    }

    /// Join the series in grid order into the final file (through a
    /// temporary name and a rename).
    pub fn finish(mut self) -> Result<(), Error> {
        let err = |e: std::io::Error| Error::Output {
            path: self.path.display().to_string(),
            message: e.to_string(),
        };
        if let Some(e) = self.error.take() {
            return Err(err(e));
        }
        let dir = self
            .path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        let name = self
            .path
            .file_name()
            .map(|n| n.to_string_lossy().to_string())
            .unwrap_or_default();
        let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
        let spills = std::mem::take(&mut self.spills);
        let result = (|| {
            let mut out = std::io::BufWriter::new(fs::File::create(&tmp)?);
            out.write_all(&self.header)?;
            for (spill, w) in spills {
                w.into_inner().map_err(|e| e.into_error())?.sync_all()?;
                let mut f = fs::File::open(&spill)?;
                std::io::copy(&mut f, &mut out)?;
                drop(f);
                fs::remove_file(&spill)?;
            }
            out.into_inner().map_err(|e| e.into_error())?.sync_all()?;
            fs::rename(&tmp, &self.path)
        })();
        if result.is_err() {
            let _ = fs::remove_file(&tmp);
            self.remove_spills_named(dir);
        }
        result.map_err(err)
    }

    /// Remove whatever spill files of this process are left in `dir`.
    fn remove_spills_named(&self, dir: &Path) {
        let pid = std::process::id();
        if let Ok(entries) = fs::read_dir(dir) {
            for e in entries.flatten() {
                let n = e.file_name().to_string_lossy().into_owned();
                if n.starts_with(&format!(".{}-series-", self.prefix))
                    && n.ends_with(&format!(".partial-{pid}"))
                {
                    let _ = fs::remove_file(e.path());
                }
            }
        }
    }
}

impl Drop for SweepCsvStream {
    fn drop(&mut self) {
        for (spill, _) in self.spills.drain(..) {
            let _ = fs::remove_file(spill);
        }
    }
}

/// `variants.csv` (`sweep --variants`): one row per grid point and plant
/// variant, in grid order then variant order (variant 0 is the nominal
/// one): the point, the variant's parameter values, and its evaluation in
/// the columns of [`sweep_columns`].
pub fn variants_csv(rows: &[SweepRow], variants: &VariantSet) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(variants_header(variants));
    for r in rows {
        for rec in variant_records(r, variants) {
            let _ = w.write_record(&rec);
        }
    }
    w.into_inner().unwrap_or_default()
}

/// The header of `variants.csv`.
fn variants_header(variants: &VariantSet) -> Vec<String> {
    let mut header: Vec<String> = vec!["variant".into()];
    header.extend(variants.names.iter().cloned());
    header.extend(sweep_columns());
    header
}

/// The lines of `variants.csv` for one row, in variant order.
fn variant_records(r: &SweepRow, variants: &VariantSet) -> Vec<Vec<String>> {
    let Some(rb) = r.robust.as_ref() else {
        // A row not evaluated says so for every variant.
        if !matches!(r.eval.status, Status::NotEvaluated(_)) {
            return Vec::new();
        }
        return (0..variants.len())
            .map(|i| {
                let mut rec = vec![i.to_string()];
                rec.extend(variants.values[i].iter().map(|v| num(*v)));
                rec.extend(point_cells(r, &r.eval, &r.assessment));
                rec
            })
            .collect();
    };
    (rb.each.iter().enumerate())
        .map(|(i, (e, a))| {
            let mut rec = vec![i.to_string()];
            rec.extend(variants.values[i].iter().map(|v| num(*v)));
            rec.extend(point_cells(r, e, a));
            rec
        })
        .collect()
}

/// `--trace` CSV: `response,t_s,y,u,sample` rows for the reference step
/// then the load-disturbance step.
pub fn trace_csv(
    step: &[crate::sampled::time_response::TracePoint],
    dist: &[crate::sampled::time_response::TracePoint],
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
