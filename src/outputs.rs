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

/// Name of the lock file a run holds in its output folder.
pub const LOCK_FILE: &str = ".looprate.lock";

/// One output folder, one run: an exclusive lock on `DIR/.looprate.lock`
/// held while a run writes there (the operating system drops it when the
/// process ends, however it ends, so a killed run never leaves a stale
/// lock). Taking it also removes the temporary files of runs that died
/// mid-write (`.NAME.partial-PID`, `.NAME.PID-N.tmp.png`).
#[derive(Debug)]
pub struct OutputLock {
    _file: fs::File,
}

impl OutputLock {
    /// Create `dir` if needed and take its lock, or fail at once naming
    /// the folder when another run holds it.
    pub fn acquire(dir: &Path) -> Result<OutputLock, Error> {
        let err = |message: String| Error::Output {
            path: dir.display().to_string(),
            message,
        };
        fs::create_dir_all(dir).map_err(|e| err(e.to_string()))?;
        let path = dir.join(LOCK_FILE);
        let file = fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| err(format!("cannot open the lock file {}: {e}", path.display())))?;
        match file.try_lock() {
            Ok(()) => {}
            Err(fs::TryLockError::WouldBlock) => {
                return Err(err(
                    "another looprate run is writing to this folder; wait for it or give another --out"
                        .into(),
                ));
            }
            Err(fs::TryLockError::Error(e)) => {
                return Err(err(format!("cannot lock {}: {e}", path.display())));
            }
        }
        remove_stale_temporaries(dir);
        Ok(OutputLock { _file: file })
    }
}

/// The process id a temporary file name of ours carries, if it is one:
/// `.NAME.partial-PID` (`write_atomic`) or `.NAME.PID-N.tmp.png` (charts).
pub fn temporary_owner(name: &str) -> Option<u32> {
    if !name.starts_with('.') {
        return None;
    }
    if let Some((_, pid)) = name.rsplit_once(".partial-") {
        return pid.parse().ok();
    }
    let stem = name.strip_suffix(".tmp.png")?;
    let (_, tail) = stem.rsplit_once('.')?;
    let (pid, n) = tail.split_once('-')?;
    n.parse::<u64>().ok()?;
    pid.parse().ok()
}

/// Remove the temporaries of runs no longer alive (under the folder's lock
/// no other run writes here; a process id still alive is left alone, in
/// case a single-file command such as `eval --trace` is writing). Best
/// effort: a file that cannot be removed is left.
fn remove_stale_temporaries(dir: &Path) {
    let Ok(entries) = fs::read_dir(dir) else {
        return;
    };
    let me = std::process::id();
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(pid) = temporary_owner(&name) else {
            continue;
        };
        if pid != me && !process_alive(pid) {
            let _ = fs::remove_file(entry.path());
        }
    }
}

/// Whether a process id is running (Linux `/proc`; elsewhere every other
/// process counts as gone, which the folder lock makes safe for the runs
/// that take it).
fn process_alive(pid: u32) -> bool {
    Path::new("/proc/self").exists() && Path::new(&format!("/proc/{pid}")).exists()
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
pub const SWEEP_COLUMNS: [&str; 25] = [
    "rate_hz",
    "period_s",
    "method",
    "hold",
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
    "delay_margin_estimate_s",
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
        cell(
            f.map(|f| f.delay_margin_s),
            f.map_or("", |f| f.delay_margin_missing()),
        ),
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
        p.hold.name().to_string(),
        num(p.delay),
        e.status.label(),
        cell(f.map(|f| Some(f.y_final)), ""),
    ];
    rec.extend_from_slice(&figs[..8]);
    rec.push(cell(f.map(|f| f.crossover_hz), "none"));
    rec.push(figs[8].clone());
    rec.push(cell(f.map(|f| f.delay_margin_estimate_s), "inf"));
    rec.extend_from_slice(&figs[9..]);
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
    let mut header: Vec<String> = SWEEP_COLUMNS.iter().map(|c| c.to_string()).collect();
    if variants {
        header.extend(ROBUST_COLUMNS.iter().map(|c| c.to_string()));
        header.extend(WORST_FIGURES.iter().map(|c| format!("worst_{c}")));
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
    series_len: usize,
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
        let err = |e: std::io::Error| Error::Output {
            path: path.display().to_string(),
            message: e.to_string(),
        };
        let dir = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        fs::create_dir_all(dir).map_err(err)?;
        let mut w = csv::Writer::from_writer(Vec::new());
        let _ = w.write_record(sweep_header(formats, variants));
        let header = w.into_inner().unwrap_or_default();
        let mut stream = SweepCsvStream {
            path: path.to_path_buf(),
            header,
            series_len: series_len.max(1),
            spills: Vec::with_capacity(series),
            error: None,
        };
        let pid = std::process::id();
        for k in 0..series {
            let spill = dir.join(format!(".sweep-series-{k}.csv.partial-{pid}"));
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
        if self.error.is_some() {
            return;
        }
        let k = index / self.series_len;
        let Some((_, out)) = self.spills.get_mut(k) else {
            return;
        };
        let mut w = csv::Writer::from_writer(Vec::new());
        let _ = w.write_record(sweep_record(row, variants));
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
                if n.starts_with(".sweep-series-") && n.ends_with(&format!(".partial-{pid}")) {
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
