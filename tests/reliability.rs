//! Regressions for inputs that once hung looprate, let a NaN decide a
//! verdict, gave the wrong exit code, panicked on an IO error or let two
//! runs mix their files in one folder. Each test names what was seen.
//! Every command runs under a watchdog: a run that does not finish in a
//! few seconds fails the test instead of hanging it.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use looprate::case::Case;
use looprate::explore::pick::{prepare, sweep_and_pick};
use looprate::explore::search::Silent;

const BIN: &str = env!("CARGO_BIN_EXE_looprate");

/// Longest a single command may take here. The cases are tiny (17 points
/// or fewer); a hang shows up as this timeout.
const WATCHDOG: Duration = Duration::from_secs(20);

struct Run {
    code: i32,
    stdout: String,
    stderr: String,
}

/// Run the binary with `args`, kill it after [`WATCHDOG`] and fail.
fn run(args: &[&str]) -> Run {
    let mut child = Command::new(BIN)
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the binary starts");
    let mut out = child.stdout.take().unwrap();
    let mut err = child.stderr.take().unwrap();
    let t_out = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = out.read_to_string(&mut s);
        s
    });
    let t_err = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = err.read_to_string(&mut s);
        s
    });
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if start.elapsed() > WATCHDOG {
            let _ = child.kill();
            let _ = child.wait();
            panic!("looprate {args:?} ran over {WATCHDOG:?}: a hang");
        }
        std::thread::sleep(Duration::from_millis(10));
    };
    Run {
        code: status.code().unwrap_or(-1),
        stdout: t_out.join().unwrap(),
        stderr: t_err.join().unwrap(),
    }
}

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("looprate-rel-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// A small case: the belt-conveyor loop (invented scenario) on 17 rates,
/// with the blocks given.
fn case_text(plant: &str, sensor: &str, controller: &str, extra: &str) -> String {
    format!(
        "title = \"regression\"\n[plant]\ntransfer = \"{plant}\"\n[sensor]\ntransfer = \"{sensor}\"\n\
         [controller]\ntransfer = \"{controller}\"\n[rates]\nmin_hz = 20\nmax_hz = 5000\npoints = 17\n\
         [methods]\nuse = [\"tustin\", \"step-invariant\"]\n[spec]\nmax_overshoot_pct = 30\n\
         max_sensitivity_peak = 1.6\n{extra}"
    )
}

const PLANT: &str = "38 / ((0.42*s + 1) * (0.004*s + 1))";
const CONTROLLER: &str = "0.05 * (s + 12) / s";

fn write_case(dir: &Path, name: &str, text: &str) -> String {
    let p = dir.join(format!("{name}.toml"));
    std::fs::write(&p, text).unwrap();
    p.to_string_lossy().into_owned()
}

/// Cases that looped forever at 100 % CPU (an overflowed state-matrix
/// entry made the balancing loop spin on infinity, or the matrix
/// exponential square without end). Each now stops at once with exit 2
/// naming the field.
#[test]
fn inputs_that_hung_now_fail_fast_naming_the_field() {
    let dir = scratch("hang");
    let cases = [
        (
            "tiny-lead",
            case_text("1/((1e-160*s + 1)*(1e-160*s + 1))", "1", CONTROLLER, ""),
            "plant.transfer",
        ),
        (
            "power-36",
            case_text("1/(1e-9*s + 1)^36", "1", CONTROLLER, ""),
            "plant.transfer",
        ),
        (
            "huge-sensor",
            case_text(PLANT, "2e305", CONTROLLER, ""),
            "sensor.transfer",
        ),
        (
            "slow-rate",
            case_text(PLANT, "1", CONTROLLER, "").replace("min_hz = 20", "min_hz = 1e-50"),
            "rates.min_hz",
        ),
    ];
    for (name, text, field) in cases {
        let path = write_case(&dir, name, &text);
        for cmd in ["check", "pick", "sweep"] {
            let out = dir.join(format!("out-{name}"));
            let out = out.to_string_lossy();
            let args: Vec<&str> = if cmd == "check" {
                vec![cmd, &path]
            } else {
                vec![cmd, &path, "--out", &out, "--quiet", "--no-charts"]
            };
            let r = run(&args);
            assert_eq!(r.code, 2, "{name} {cmd}: {}", r.stderr);
            assert!(r.stderr.contains(field), "{name} {cmd}: {}", r.stderr);
        }
    }
    // The command-line forms.
    let r = run(&[
        "discretize",
        "--transfer",
        "1/(1e-320*s^2+s+1)",
        "--rate",
        "1000",
        "--method",
        "step-invariant",
    ]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--transfer"), "{}", r.stderr);
    let base = write_case(&dir, "base", &case_text(PLANT, "1", CONTROLLER, ""));
    // A negative rate gets the same range message as a tiny one, not a
    // complaint about an unexpected argument.
    for rate in ["1e-38", "1e-40", "1e-300", "2e9", "-5"] {
        let r = run(&["eval", &base, "--rate", rate]);
        assert_eq!(r.code, 2, "eval --rate {rate}: {}", r.stderr);
        assert!(r.stderr.contains("--rate"), "{}", r.stderr);
        // No 300-digit number in the message.
        assert!(r.stderr.len() < 200, "{}", r.stderr);
        let r = run(&[
            "discretize",
            "--transfer",
            "1/(s+1)",
            "--rate",
            rate,
            "--method",
            "step-invariant",
        ]);
        assert_eq!(r.code, 2, "discretize --rate {rate}: {}", r.stderr);
    }
    let r = run(&["eval", &base, "--rate", "100", "--delay", "-1"]);
    assert_eq!(r.code, 2, "eval --delay -1: {}", r.stderr);
    assert!(r.stderr.contains("--delay must be"), "{}", r.stderr);
    // The slowest and fastest accepted rates still evaluate, and quickly.
    for rate in ["1e-6", "1e9"] {
        let r = run(&["eval", &base, "--rate", rate, "--method", "step-invariant"]);
        assert_eq!(r.code, 0, "eval --rate {rate}: {}", r.stderr);
    }
    // Thousands of threads: refused before any work.
    let out = dir.join("threads");
    let r = run(&[
        "pick",
        &base,
        "--threads",
        "100000",
        "--out",
        &out.to_string_lossy(),
    ]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--threads"), "{}", r.stderr);
    assert!(!out.exists(), "nothing is written for a refused run");
}

/// Tustin of 1/(1e-9 s + 1)^34 reported poles up to |z| = 1.58 for a
/// stable filter: its monic coefficients reach 1e306, where a 34-fold root
/// cannot be resolved in double precision. It is now refused (exit 2,
/// naming `--transfer`), and so is the same filter in a case file.
#[test]
fn a_filter_beyond_double_range_is_refused_not_misjudged() {
    let r = run(&[
        "discretize",
        "--transfer",
        "1/(1e-9*s + 1)^34",
        "--rate",
        "1000",
        "--method",
        "tustin",
    ]);
    assert_eq!(r.code, 2, "{}", r.stdout);
    assert!(r.stderr.contains("--transfer"), "{}", r.stderr);
    let text = case_text(PLANT, "1/(1e-9*s + 1)^34", CONTROLLER, "");
    let err = Case::parse(&text, Path::new("f.toml")).unwrap_err();
    assert_eq!(err.field(), Some("sensor.transfer"), "{err}");
}

/// A sensor written `1e-320/1e-320` is exactly 1: the pick must be that of
/// `transfer = "1"` (it said "the continuous design fails, Ms = NaN"). The two
/// forms differ by one power-of-two scale, exact in floating point, so
/// the reports are equal.
#[test]
fn a_subnormal_ratio_equal_to_one_is_one() {
    let pick = |sensor: &str| {
        let c = Case::parse(
            &case_text(PLANT, sensor, CONTROLLER, ""),
            Path::new("s.toml"),
        )
        .unwrap();
        let lp = prepare(&c).unwrap();
        let d = lp.design.as_ref().unwrap();
        assert!(d.figures.is_some(), "{sensor}: {:?}", d.status);
        sweep_and_pick(&c, &lp, &|| {}, &Silent).unwrap().report
    };
    let one = pick("1");
    let tiny = pick("1e-320/1e-320");
    assert!(one.recommended.is_some());
    assert_eq!(
        serde_json::to_value(&one).unwrap(),
        serde_json::to_value(&tiny).unwrap()
    );
}

/// No figure is NaN and no verdict rests on one: a controller gain of
/// -1e-303 printed `Ms NaN`. Whatever it prints, no cell says NaN.
#[test]
fn no_nan_in_any_output() {
    let dir = scratch("nan");
    for controller in ["-1e-303", "1e-303 * (s + 12) / s", "-1e-303*(s+1)/(s+2)"] {
        let path = write_case(&dir, "c", &case_text(PLANT, "1", controller, ""));
        let r = run(&["check", &path]);
        assert!(r.code == 0 || r.code == 2, "{controller}: {}", r.stderr);
        assert!(!r.stdout.contains("NaN"), "{controller}: {}", r.stdout);
        let r = run(&["eval", &path, "--rate", "100", "--json"]);
        assert!(!r.stdout.contains("NaN"), "{controller}: {}", r.stdout);
        let out = dir.join("out");
        let r = run(&[
            "pick",
            &path,
            "--out",
            &out.to_string_lossy(),
            "--quiet",
            "--no-charts",
        ]);
        assert!(r.code <= 2, "{controller}: {}", r.stderr);
        if r.code != 2 {
            let csv = std::fs::read_to_string(out.join("sweep.csv")).unwrap();
            assert!(!csv.contains("NaN"), "{controller}");
        }
    }
}

/// A sensor gain of 1e10 gave Ms = 3.455e-4 and "crossover none": the
/// frequency grid stopped far below the crossover. With a strictly proper
/// loop gain |S| tends to 1 at high frequency, so Ms >= 1 (a fact of the
/// trade, from memory); the crossover must be found, and a loop with
/// such a gain and an integrator has almost no phase margin left.
#[test]
fn a_huge_sensor_gain_keeps_ms_at_least_one() {
    let c = Case::parse(
        &case_text(PLANT, "1e10", CONTROLLER, ""),
        Path::new("g.toml"),
    )
    .unwrap();
    let lp = prepare(&c).unwrap();
    let f = lp.design.as_ref().unwrap().figures.as_ref().unwrap();
    assert!(f.sensitivity_peak >= 1.0, "Ms = {}", f.sensitivity_peak);
    let wc = f.crossover_hz.expect("a crossover") * 2.0 * std::f64::consts::PI;
    // |L(j wc)| = 1 at the reported crossover (closed form of the loop).
    let s = looprate::model::poly::C64::new(0.0, wc);
    let l = 1e10 * 38.0 * 0.05 * (s + 12.0) / (s * (0.42 * s + 1.0) * (0.004 * s + 1.0));
    assert!((l.norm() - 1.0).abs() < 1e-6, "|L| = {}", l.norm());
    assert!(f.phase_margin_deg.unwrap() < 1.0);
}

/// Controller `(s+20)/(1e-320*s^2+s)`: `check` exited 0 printing "a
/// coefficient is not finite" and `pick` exited 1 ("no answer"); both must
/// exit 2 naming the controller.
#[test]
fn a_controller_beyond_range_is_an_input_error_everywhere() {
    let dir = scratch("ctrl");
    let path = write_case(
        &dir,
        "c",
        &case_text(PLANT, "1", "(s+20)/(1e-320*s^2+s)", ""),
    );
    let out = dir.join("out");
    let out = out.to_string_lossy();
    for args in [
        vec!["check", path.as_str()],
        vec!["pick", path.as_str(), "--out", &out, "--no-charts"],
        vec!["eval", path.as_str(), "--rate", "100"],
    ] {
        let r = run(&args);
        assert_eq!(r.code, 2, "{args:?}: {}", r.stderr);
        assert!(r.stderr.contains("controller.transfer"), "{}", r.stderr);
    }
}

/// `check missing.toml 2>/dev/full` and `sweep ... 2>&1 | true` exited
/// 101 from a panic in the write to stderr.
#[test]
fn an_unwritable_stderr_is_not_a_panic() {
    if Path::new("/dev/full").exists() {
        let full = std::fs::OpenOptions::new()
            .write(true)
            .open("/dev/full")
            .unwrap();
        let status = Command::new(BIN)
            .args(["check", "/nonexistent/missing.toml"])
            .stderr(full)
            .status()
            .unwrap();
        assert_eq!(status.code(), Some(2));
    }
    // stderr and stdout a pipe whose reader is gone.
    let dir = scratch("pipe");
    let path = write_case(&dir, "c", &case_text(PLANT, "1", CONTROLLER, ""));
    let out = dir.join("out");
    let mut child = Command::new(BIN)
        .args([
            "sweep",
            &path,
            "--out",
            &out.to_string_lossy(),
            "--no-charts",
        ])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    drop(child.stdout.take());
    drop(child.stderr.take());
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        assert!(start.elapsed() < WATCHDOG, "sweep hung");
        std::thread::sleep(Duration::from_millis(10));
    };
    assert_ne!(status.code(), Some(101), "a panic");
    assert_eq!(status.code(), Some(0));
}

/// A model error's reason was printed twice ("...: the eigenvalue
/// iteration did not converge: the eigenvalue iteration did not converge").
#[test]
fn an_error_reason_is_printed_once() {
    let e = looprate::error::Error::Model {
        context: "the plant".into(),
        reason: looprate::model::matrix::ModelError::Eigen,
    };
    let text = format!("{:#}", anyhow::Error::from(e));
    assert_eq!(text.matches("did not converge").count(), 1, "{text}");
    let e = looprate::model::discretize::DiscretizeError::from(
        looprate::model::matrix::ModelError::Eigen,
    );
    let text = format!("{:#}", anyhow::Error::from(e));
    assert_eq!(text.matches("did not converge").count(), 1, "{text}");
}

/// `--prewarp-hz=-5`, `0`, `inf` and `NaN` all said "none given".
#[test]
fn a_bad_prewarp_frequency_is_named() {
    for w in ["-5", "0", "inf", "NaN"] {
        let arg = format!("--prewarp-hz={w}");
        let r = run(&[
            "discretize",
            "--transfer",
            "(s+1)/(s+10)",
            "--rate",
            "1000",
            "--method",
            "tustin-prewarped",
            &arg,
        ]);
        assert_eq!(r.code, 2, "{w}");
        assert!(r.stderr.contains("--prewarp-hz"), "{w}: {}", r.stderr);
        assert!(!r.stderr.contains("none given"), "{w}: {}", r.stderr);
    }
}

/// Two runs into one `--out` mixed their files (one case's sweep.csv with
/// the other's report). A run now holds the folder's lock: a second run
/// fails at once with exit 2 and says why, and writes nothing.
#[test]
fn a_second_run_into_a_held_folder_is_refused() {
    let dir = scratch("lock");
    let path = write_case(&dir, "c", &case_text(PLANT, "1", CONTROLLER, ""));
    let out = dir.join("out");
    let lock = looprate::output::writer::OutputLock::acquire(&out).unwrap();
    let r = run(&[
        "pick",
        &path,
        "--out",
        &out.to_string_lossy(),
        "--no-charts",
    ]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("another looprate run"), "{}", r.stderr);
    assert!(!out.join("sweep.csv").exists());
    assert!(!out.join("pick.json").exists());
    // Released (here by drop; a killed run's lock goes with its process).
    drop(lock);
    let r = run(&[
        "pick",
        &path,
        "--out",
        &out.to_string_lossy(),
        "--no-charts",
    ]);
    assert!(r.code == 0 || r.code == 1, "{}", r.stderr);
    assert!(out.join("sweep.csv").exists());
}

/// A killed run left `.sweep.csv.partial-PID` and
/// `.step-response.png.PID-1.tmp.png` behind forever. The next run into
/// the folder removes the temporaries of processes that are gone, and
/// leaves other files alone.
#[test]
fn temporaries_of_dead_runs_are_removed() {
    let dir = scratch("stale");
    let path = write_case(&dir, "c", &case_text(PLANT, "1", CONTROLLER, ""));
    let out = dir.join("out");
    std::fs::create_dir_all(&out).unwrap();
    // A process id that is not running (checked through /proc when there is one).
    let dead = (4_000_000u32..4_100_000)
        .find(|p| !Path::new(&format!("/proc/{p}")).exists())
        .unwrap();
    let stale = [
        format!(".sweep.csv.partial-{dead}"),
        format!(".step-response.png.{dead}-1.tmp.png"),
        format!(".sweep-series-3.csv.partial-{dead}"),
    ];
    for s in &stale {
        std::fs::write(out.join(s), b"left by a killed run").unwrap();
    }
    std::fs::write(out.join("notes.txt"), b"mine").unwrap();
    let r = run(&[
        "pick",
        &path,
        "--out",
        &out.to_string_lossy(),
        "--no-charts",
    ]);
    assert!(r.code == 0 || r.code == 1, "{}", r.stderr);
    for s in &stale {
        assert!(!out.join(s).exists(), "{s} is still there");
    }
    assert!(out.join("notes.txt").exists());
    // Nothing of this run's own is left either.
    let left: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| looprate::output::writer::temporary_owner(n).is_some())
        .collect();
    assert!(left.is_empty(), "{left:?}");
}

/// The streamed `sweep.csv` is byte for byte the file built from the rows
/// in memory, and the same for 1 and 2 threads (with plant variants and a
/// number format, so every kind of column is streamed).
#[test]
fn the_streamed_sweep_csv_is_the_whole_file() {
    let dir = scratch("stream");
    let text = case_text(
        "k / ((0.42*s + 1) * (0.004*s + 1))",
        "1",
        CONTROLLER,
        "[params]\nk = { nominal = 38, min = 30, max = 46 }\n[uncertainty]\nmode = \"corners\"\n\
         [arithmetic]\nformats = [\"q15\"]\n[timing]\ncompute_delay = [0, 1]\n",
    );
    let path = write_case(&dir, "c", &text);
    let c = Case::parse(&text, Path::new("c.toml")).unwrap();
    let lp = prepare(&c).unwrap();
    let picked = sweep_and_pick(&c, &lp, &|| {}, &Silent).unwrap();
    let whole = looprate::output::tables::sweep_csv(&picked.rows, picked.variants.as_ref());
    for threads in ["1", "2"] {
        for cmd in ["pick", "sweep"] {
            let out = dir.join(format!("{cmd}-{threads}"));
            let r = run(&[
                cmd,
                &path,
                "--out",
                &out.to_string_lossy(),
                "--threads",
                threads,
                "--no-charts",
                "--quiet",
            ]);
            assert!(r.code <= 1, "{}", r.stderr);
            let streamed = std::fs::read(out.join("sweep.csv")).unwrap();
            assert!(streamed == whole, "{cmd} with {threads} threads differs");
        }
    }
}

/// The balancing and the exponential end on any finite or infinite input
/// (unit level: the hangs above came from these two).
#[test]
fn numeric_kernels_end_on_extreme_matrices() {
    use nalgebra::DMatrix;
    let mut a = DMatrix::from_row_slice(2, 2, &[0.0, 1.0, -f64::INFINITY, -1e300]);
    let t = looprate::model::matrix::balancing_scale(&a);
    assert!(t.iter().all(|v| v.is_finite() && *v > 0.0));
    a[(1, 0)] = -1e308;
    let t = looprate::model::matrix::balancing_scale(&a);
    assert!(t.iter().all(|v| v.is_finite() && *v > 0.0));
    // A stable mode over a period of 1e38 s: e^{-1e38} = 0, at once.
    let m = DMatrix::from_row_slice(2, 2, &[-1e38, 0.0, 1e38, -2e38]);
    let e = looprate::model::matrix::expm(&m).unwrap();
    assert!(e.iter().all(|v| v.abs() < 1e-300), "{e}");
    // An unstable one overflows: an error, not a hang.
    let m = DMatrix::from_row_slice(2, 2, &[1e38, 0.0, 0.0, -1.0]);
    assert!(looprate::model::matrix::expm(&m).is_err());
    // Scaling and squaring by hand keeps a large exponent right: the
    // rotation [[0, w], [-w, 0]] with w = 2e8 + pi/4 has the exponential
    // [[cos w, sin w], [-sin w, cos w]] (closed form).
    let w = 2.0e8 + std::f64::consts::FRAC_PI_4;
    let m = DMatrix::from_row_slice(2, 2, &[0.0, w, -w, 0.0]);
    let e = looprate::model::matrix::expm(&m).unwrap();
    assert!((e[(0, 0)] - w.cos()).abs() < 1e-6, "{e}");
    assert!((e[(0, 1)] - w.sin()).abs() < 1e-6, "{e}");
}

/// Found by the fuzz run: a loop of pure gains (no state at all) panicked
/// in the continuous design's final values. Its figures exist: the loop
/// C P / (1 + C P H) with C = 3, P = 2, H = 1 settles at once to 6/7
/// (closed form), so the step never overshoots.
#[test]
fn a_loop_of_pure_gains_is_evaluated() {
    let dir = scratch("static");
    let text = case_text("2", "1", "3", "");
    let path = write_case(&dir, "c", &text);
    let r = run(&["check", &path]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let c = Case::parse(&text, Path::new("c.toml")).unwrap();
    let lp = prepare(&c).unwrap();
    let f = lp.design.as_ref().unwrap().figures.as_ref().unwrap();
    assert!((f.y_final - 6.0 / 7.0).abs() < 1e-12, "{}", f.y_final);
    assert_eq!(f.overshoot_pct, Some(0.0));
    let out = dir.join("out");
    let r = run(&[
        "pick",
        &path,
        "--out",
        &out.to_string_lossy(),
        "--no-charts",
    ]);
    assert!(r.code == 0 || r.code == 1, "{}", r.stderr);
}

/// A very low loop gain (the belt loop with its controller 500 times
/// weaker: crossover near 0.03 rad/s, settling in minutes) on 17 rates:
/// once a 16 s run walking each response toward a period cap. `pick`
/// gives its answer (every rate passes, so f_star is the lowest rate).
#[test]
fn a_very_low_loop_gain_gets_its_answer() {
    let dir = scratch("low-gain");
    let text = case_text(PLANT, "1", "1e-4 * (s + 12) / s", "");
    let path = write_case(&dir, "c", &text);
    let out = dir.join("out");
    let r = run(&[
        "pick",
        &path,
        "--out",
        &out.to_string_lossy(),
        "--no-charts",
        "--json",
        "--quiet",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    let rec = &v["recommended"];
    assert!(rec["rate_hz"].as_f64().is_some(), "{}", r.stdout);
    // Its settling time is the loop's own: minutes, not a horizon cap.
    let settle = rec["figures"]["settling_time_s"].as_f64().unwrap();
    assert!(settle > 10.0 && settle.is_finite(), "settling {settle} s");
}

/// When the continuous design already fails the spec no rate can pass
/// (loop model): `pick` says so first and sweeps nothing, `sweep` still
/// writes a row for every grid point, each giving that reason.
#[test]
fn a_failing_design_is_said_first_and_every_point_keeps_a_row() {
    let dir = scratch("design-fails");
    let text = case_text(
        PLANT,
        "1",
        "1e-4 * (s + 12) / s",
        "max_settling_s = 1\n[timing]\ncompute_delay = [0, 1]\n",
    );
    let path = write_case(&dir, "c", &text);
    let rows_expected = 17 * 2 * 2;
    for cmd in ["pick", "sweep"] {
        let out = dir.join(cmd);
        let r = run(&[cmd, &path, "--out", &out.to_string_lossy(), "--quiet"]);
        let said = format!("{}{}", r.stdout, r.stderr);
        assert!(
            said.contains("the continuous design already fails the spec"),
            "{cmd}: {said}"
        );
        assert_eq!(r.code, if cmd == "pick" { 1 } else { 0 }, "{cmd}: {said}");
        let csv = std::fs::read_to_string(out.join("sweep.csv")).unwrap();
        let mut lines = csv.lines();
        let columns = lines.next().unwrap().split(',').count();
        let rows: Vec<&str> = lines.collect();
        assert_eq!(rows.len(), rows_expected, "{cmd}");
        for row in rows {
            assert!(
                row.contains(
                    "not evaluated: the continuous design already fails the spec (settling time fails)"
                ),
                "{cmd}: {row}"
            );
            assert!(row.contains(",false,settling_time_s,"), "{cmd}: {row}");
            assert_eq!(row.split(',').count(), columns, "{cmd}: {row}");
        }
    }
}

/// The dryer demo (6 s of transport delay on the plant, 2 s on the sensor)
/// asked at 10 kHz: 80 000 periods of delay, each a state of the exact
/// loop, once asked the allocator for 29 GB and aborted (and at 1 kHz ran
/// for ten minutes). The exact column now says why it is not built; the
/// continuous design still answers.
#[test]
fn delays_of_many_periods_are_refused_with_their_reason() {
    let case = demo_case("dryer-transport-delay");
    for rate in ["1000", "10000"] {
        let out = says(
            &["eval", &case, "--rate", rate],
            "more than the 256 the exact loop is built with",
        );
        assert!(out.contains("continuous"), "{out}");
    }
}

/// A shipped demo case's path.
fn demo_case(name: &str) -> String {
    format!("{}/demo-cases/{name}.toml", env!("CARGO_MANIFEST_DIR"))
}

/// Run looprate with `args`: exit 0 and `text` in what it printed, which
/// is returned.
fn says(args: &[&str], text: &str) -> String {
    let r = run(args);
    assert_eq!(r.code, 0, "{args:?}: {}", r.stderr);
    assert!(r.stdout.contains(text), "{args:?}: {}", r.stdout);
    r.stdout
}

/// A 1 ms transport delay at 141 kHz is 141 states of delay: the stretch
/// searches run out and the fallback walk went through its million
/// periods at 145 states, 7.6 s for one `eval` and 15 s for a 3-point
/// pick (found by the fuzz). The walk's work is now bounded (a large loop
/// walks fewer periods): what it has not fixed is `undecided`, in a
/// fraction of that time (about 1.3 s; the watchdog allows 20).
#[test]
fn a_walk_of_many_delay_states_is_bounded_in_work() {
    let dir = scratch("walk-work");
    // The belt-conveyor loop of `case_text` behind 1 ms of transport delay.
    let text =
        case_text(PLANT, "1", CONTROLLER, "").replace("[sensor]", "delay_s = 1e-3\n[sensor]");
    let case = write_case(&dir, "delay", &text);
    says(
        &["eval", &case, "--rate", "141421", "--method", "tustin"],
        // Since the rescaled modal check (`certificate::Conditioning`)
        // this loop's figures are decided; the run must still end.
        "settling time",
    );
}

/// `eval --ratio 10 --outer-delay 1e300` on the cascade demo panicked (a
/// capacity overflow: each whole outer period of delay is a state of the
/// lifted loop). The outer column now says why it is not built.
#[test]
fn an_outer_delay_of_many_periods_is_refused_not_a_panic() {
    let case = demo_case("motor-drive-cascade");
    for delay in ["1e300", "300"] {
        let args = ["eval", &case, "--rate", "20000", "--ratio", "10"];
        let text = "more than the 256 the lifted loop is built with";
        says(&[&args[..], &["--outer-delay", delay]].concat(), text);
    }
}

/// `eval --ratio 300 --trace` on the cascade demo (the outer loop
/// unstable there) traced 200 000 outer periods of 4 800 points: 40 s and
/// 24 GB, and the values diverged to NaN. An unstable outer loop's trace
/// is now a few periods of its start, and a trace holds at most
/// `TRACE_POINTS` points point by point.
#[test]
fn an_unstable_outer_loop_traces_briefly_and_finitely() {
    let dir = scratch("outer-trace");
    let trace = dir.join("trace.csv");
    let case = demo_case("motor-drive-cascade");
    let t = trace.to_string_lossy().into_owned();
    let args = [
        "eval", &case, "--rate", "20000", "--ratio", "300", "--trace", &t,
    ];
    says(&args, "unstable");
    let text = std::fs::read_to_string(&trace).unwrap();
    assert!(
        !text.contains("NaN") && !text.contains("inf"),
        "a value not finite"
    );
    assert!(
        text.lines().count() < 2_000_000,
        "{} lines",
        text.lines().count()
    );
}
