//! Result files: `sweep.csv`, `pick.json`, written whole or not at all
//! (a temporary name in the same folder, renamed when complete).

use std::fs;
use std::io::Write;
use std::path::Path;

use crate::error::Error;
use crate::search::method_label;
use crate::sweep::SweepRow;

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

/// The columns of `sweep.csv`, in order.
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
    "horizon_capped",
    "max_pole_radius",
    "feasible",
    "limiting",
    "limiting_slack",
    "cpu_load_pct",
];

/// `sweep.csv`: one row per grid point, in grid order. Cells: empty where
/// a figure does not apply (an unstable point has no figures), `inf` for
/// an infinite margin, `not settled` / `not recovered` / `not reached`
/// where the response never got there within the horizon.
pub fn sweep_csv(rows: &[SweepRow]) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    // Writing to a Vec cannot fail.
    let _ = w.write_record(SWEEP_COLUMNS);
    for r in rows {
        let p = &r.point;
        let f = r.eval.figures.as_ref();
        let opt = |v: Option<Option<f64>>, missing: &str| match v {
            None => String::new(),
            Some(None) => missing.to_string(),
            Some(Some(x)) => num(x),
        };
        let rho = r
            .eval
            .closed_loop_poles
            .iter()
            .map(|q| q[0].hypot(q[1]))
            .fold(f64::NAN, f64::max);
        let rec = vec![
            num(p.rate_hz),
            num(1.0 / p.rate_hz),
            method_label(p.method),
            num(p.delay),
            r.eval.status.label(),
            opt(f.map(|f| Some(f.y_final)), ""),
            opt(f.map(|f| f.overshoot_pct), "no final value"),
            opt(f.map(|f| f.settling_time_s), "not settled"),
            opt(f.map(|f| f.rise_time_s), "not reached"),
            opt(f.map(|f| Some(f.disturbance_peak)), ""),
            opt(f.map(|f| f.recovery_time_s), "not recovered"),
            opt(f.map(|f| Some(f.u_peak)), ""),
            opt(f.map(|f| f.gain_margin_db), "inf"),
            opt(f.map(|f| f.phase_margin_deg), "inf"),
            opt(f.map(|f| f.crossover_hz), "none"),
            opt(f.map(|f| f.delay_margin_s), "inf"),
            opt(f.map(|f| Some(f.sensitivity_peak)), ""),
            f.map(|f| f.horizon_capped.to_string()).unwrap_or_default(),
            if rho.is_nan() {
                String::new()
            } else {
                num(rho)
            },
            r.assessment.feasible.to_string(),
            r.assessment.limiting.unwrap_or("").to_string(),
            num(r.assessment.slack),
            r.cpu_load_pct.map(num).unwrap_or_default(),
        ];
        let _ = w.write_record(&rec);
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
