//! The `looprate` command: parses arguments, calls the library, prints.
//!
//! Exit codes: 0 success, 1 no answer (no rate meets the spec, or the rate
//! window is empty), 2 error (bad input, unwritable output).

use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{Context, Result, anyhow};
use clap::{Parser, Subcommand};
use indicatif::{ProgressBar, ProgressStyle};

use looprate::case::Case;
use looprate::case::expr::Expr;
use looprate::explore::cascade::{prepare_cascade, search_cascade};
use looprate::explore::pick::{
    Streamed, case_sweep_grid, case_variants, not_evaluated_rows, prepare, sweep_streaming,
};
use looprate::explore::search::Silent;
use looprate::explore::sweep;
use looprate::explore::variants::VariantSet;
use looprate::model::discretize::{Method, discretize};
use looprate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use looprate::output::chart_rows::ChartRows;
use looprate::output::charts::ChartInput;
use looprate::output::{summary, tables, writer};
use looprate::sampled::cascade::evaluate::PairControllers;
use looprate::sampled::continuous::HoldApprox;
use looprate::sampled::evaluate::{Given, Point, PointError, PreparedLoop};
use looprate::spec::HoldKind;

/// Choose the slowest loop rate for a digital controller that still meets
/// the spec, from an exact model of the sampled-data loop (hold, computation
/// delay, output between samples). Results are model-based: confirm them on
/// hardware with protective limits.
#[derive(Parser)]
#[command(name = "looprate", version)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Print the controller in z that a method gives at one rate: the
    /// controller of a case file (any form, PID included), or one written
    /// with --transfer.
    Discretize {
        /// A case file whose [controller] is discretized (its pre-warp
        /// frequency and loop crossover apply to tustin-prewarped).
        case: Option<PathBuf>,
        /// Continuous controller, a rational expression in s, e.g. "0.05*(s+12)/s"
        /// (instead of a case file).
        #[arg(long, conflicts_with = "case")]
        transfer: Option<String>,
        /// Refused: renamed --transfer.
        #[arg(long = "tf", hide = true)] // old name
        old_transfer: Option<String>,
        /// Loop rate, Hz.
        #[arg(long, allow_negative_numbers = true)]
        rate: f64,
        /// step-invariant, ramp-invariant, impulse-invariant, tustin, tustin-prewarped, pole-zero-match, forward-euler, backward-euler.
        #[arg(long)]
        method: String,
        /// Pre-warp frequency for tustin-prewarped, Hz (default with a case
        /// file: the case's own, else the continuous loop's crossover).
        #[arg(long = "prewarp-hz", allow_negative_numbers = true)]
        prewarp_hz: Option<f64>,
        /// Print JSON (keys method, rate_hz, numerator, denominator, poles, zeros).
        #[arg(long)]
        json: bool,
    },
    /// Validate a case file and print the parsed loop.
    Check {
        /// The case file (TOML).
        case: PathBuf,
    },
    /// Evaluate the loop at one rate, method and computation delay.
    Eval {
        /// The case file (TOML).
        case: PathBuf,
        /// Loop rate, Hz.
        #[arg(long, allow_negative_numbers = true)]
        rate: f64,
        /// Discretization method (not needed for a controller given in z).
        #[arg(long)]
        method: Option<String>,
        /// Computation delay in periods, any finite value >= 0 (default: the case's first).
        #[arg(long, allow_negative_numbers = true)]
        delay: Option<f64>,
        /// Actuator hold kind: zero-order, first-order or interpolating
        /// (default: the case's first).
        #[arg(long)]
        hold: Option<String>,
        /// Print JSON with the loop model's keys.
        #[arg(long)]
        json: bool,
        /// Write t, y, u and a sample flag of both responses to this CSV.
        #[arg(long)]
        trace: Option<PathBuf>,
        /// With [outer]: the outer loop updates every N-th inner tick
        /// (outer rate = --rate / N, N a whole number >= 1); adds the
        /// `outer` figures (the trace, if asked, is then the outer loop's).
        #[arg(long)]
        ratio: Option<String>,
        /// Outer discretization method (default: the first of [outer.methods]).
        #[arg(long = "outer-method", requires = "ratio")]
        outer_method: Option<String>,
        /// Outer computation delay, a fraction of the outer period (default:
        /// the first of [outer.timing] compute_delay).
        #[arg(
            long = "outer-delay",
            requires = "ratio",
            allow_negative_numbers = true
        )]
        outer_delay: Option<f64>,
        /// Outer hold: how the outer command is shaped as the inner loop's
        /// reference between outer updates, `zero-order`, `first-order` or
        /// `interpolating` (default: the first of [outer.timing] hold).
        #[arg(long = "outer-hold", requires = "ratio")]
        outer_hold: Option<String>,
    },
    /// Evaluate every grid point of the case and write DIR/sweep.csv.
    Sweep {
        /// The case file (TOML).
        case: PathBuf,
        /// Output folder (created if missing).
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Worker threads (default: all cores). Results do not depend on it.
        #[arg(long)]
        threads: Option<usize>,
        /// No progress bar.
        #[arg(long)]
        quiet: bool,
        /// Skip the PNG charts (batch use).
        #[arg(long = "no-charts")]
        no_charts: bool,
        /// Also write DIR/variants.csv: one row per grid point and plant
        /// variant (needs [uncertainty] in the case).
        #[arg(long)]
        variants: bool,
    },
    /// Find the slowest rate that meets the spec for each method, recommend
    /// one with headroom, and check the CPU budget.
    Pick {
        /// The case file (TOML).
        case: PathBuf,
        /// Output folder for sweep.csv, pick.json, the report and the
        /// charts (created if missing).
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Print pick.json to stdout instead of the summary.
        #[arg(long)]
        json: bool,
        /// Worker threads (default: all cores). Results do not depend on it.
        #[arg(long)]
        threads: Option<usize>,
        /// No progress bar.
        #[arg(long)]
        quiet: bool,
        /// Skip the PNG charts (the report is still written).
        #[arg(long = "no-charts")]
        no_charts: bool,
    },
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            if is_broken_pipe(&e) {
                return ExitCode::SUCCESS;
            }
            warn(&format!("looprate: {e:#}"));
            ExitCode::from(2)
        }
    }
}

fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}

/// Most worker threads `--threads` accepts: far above any core count that
/// helps, low enough that a typo does not start thousands of threads.
const MAX_THREADS: usize = 256;

/// Write a line to stderr, ignoring a failure (a full disk or a closed
/// pipe there must not turn into a panic or change the exit code).
fn warn(text: &str) {
    let mut err = std::io::stderr().lock();
    let _ = writeln!(err, "{text}");
    let _ = err.flush();
}

/// A loop rate from the command line, within the case file's limits.
fn check_rate(flag: &str, rate: f64) -> Result<f64> {
    looprate::spec::rate_in_range(rate).map_err(|m| anyhow!("{flag} {m}"))
}

fn print(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

/// `--ratio`: a whole number >= 1, on a case with [outer].
fn cascade_ratio(c: &Case, text: &str) -> Result<usize> {
    if c.outer.is_none() {
        return Err(anyhow!(
            "--ratio: {} has no [outer] table, so there is no outer loop",
            c.source.display()
        ));
    }
    let n: f64 = text
        .trim()
        .parse()
        .map_err(|_| anyhow!("--ratio must be a whole number >= 1, got `{text}`"))?;
    if !(n.is_finite() && n.fract() == 0.0 && n >= 1.0 && n <= looprate::case::MAX_RATIO as f64) {
        return Err(anyhow!(
            "--ratio must be a whole number from 1 to {}, got `{text}`",
            looprate::case::MAX_RATIO
        ));
    }
    Ok(n as usize)
}

/// The outer loop of `eval --ratio`: the cascade, its point and the outer
/// figures (exact delay margin searched).
fn eval_outer(
    c: &Case,
    inner: Point,
    ratio: usize,
    method: Option<&str>,
    delay: Option<f64>,
    hold: Option<&str>,
    inner_c: &std::result::Result<DiscreteTransfer, PointError>,
) -> Result<(
    looprate::sampled::cascade::evaluate::PreparedCascade,
    looprate::sampled::cascade::evaluate::CascadePoint,
    looprate::sampled::evaluate::Evaluation,
    PairControllers,
)> {
    let outer = c
        .outer
        .as_ref()
        .ok_or_else(|| anyhow!("--ratio needs [outer]"))?;
    let pc = looprate::explore::cascade::prepare_cascade(c)?
        .ok_or_else(|| anyhow!("--ratio needs [outer]"))?;
    let outer_method = match (&pc.outer_models.controller, method) {
        (Controller::Continuous(_), Some(m)) => Some(
            m.parse::<Method>()
                .map_err(|e| anyhow!("--outer-method: {e}"))?,
        ),
        (Controller::Continuous(_), None) => outer.methods.first().copied(),
        (Controller::Discrete(_), Some(_)) => {
            return Err(anyhow!(
                "--outer-method: the outer controller is given in z, so nothing is discretized"
            ));
        }
        (Controller::Discrete(_), None) => None,
    };
    let outer_delay = delay.unwrap_or(outer.compute_delays[0]);
    if !(outer_delay >= 0.0 && outer_delay.is_finite()) {
        return Err(anyhow!(
            "--outer-delay must be a finite fraction of the outer period >= 0, got {outer_delay}"
        ));
    }
    let outer_hold = match hold {
        None => outer.holds[0],
        Some(h) => HoldKind::from_name(h).ok_or_else(|| {
            anyhow!(
                "--outer-hold: unknown hold kind `{h}`; the kinds are: {}",
                HoldKind::names()
            )
        })?,
    };
    if matches!(pc.outer_models.controller, Controller::Discrete(_)) && outer_hold != outer.holds[0]
    {
        return Err(anyhow!(
            "--outer-hold {outer_hold}: the outer controller is given in z and assumes a {} hold",
            outer.holds[0]
        ));
    }
    let cp = looprate::sampled::cascade::evaluate::CascadePoint {
        inner,
        ratio,
        outer_method,
        outer_delay,
        outer_hold,
    };
    // The inner controller is the one the inner figures ran; the outer one
    // is discretized once for the figures and the trace.
    let ctrls = PairControllers {
        inner: inner_c.clone(),
        outer: pc.outer_controller(&cp),
    };
    let e = pc.evaluate_outer_with(&cp, &ctrls, true);
    Ok((pc, cp, e, ctrls))
}

fn parse_method(name: &str) -> Result<Method> {
    name.parse::<Method>().map_err(|e| anyhow!("--method: {e}"))
}

/// The controller written with `--transfer`, errors located by column.
fn transfer_from_option(text: &str) -> Result<Transfer> {
    let located = |e: looprate::case::expr::ExprError| {
        anyhow!(
            "--transfer: column {}: {}\n    {}\n    {}",
            e.column,
            e.message,
            text,
            e.caret_line(text)
        )
    };
    let expr = Expr::parse(text).map_err(located)?;
    let (num, den) = expr.eval(&|_| None).map_err(located)?;
    let c = Transfer::new(num, den).with_sane_scale();
    if let Some(big) = looprate::case::monic_overflow(&c) {
        return Err(anyhow!(
            "--transfer: the numbers are beyond the range looprate computes in: divided by the \
             leading denominator coefficient, a coefficient is {big:e} (at most {:e} \
             allowed); rescale its time unit or its gain",
            looprate::spec::MAX_MONIC_COEFF
        ));
    }
    Ok(c)
}

fn run(cli: Cli) -> Result<ExitCode> {
    match cli.command {
        Command::Discretize {
            case,
            transfer,
            old_transfer,
            rate,
            method,
            prewarp_hz,
            json,
        } => {
            if old_transfer.is_some() {
                return Err(anyhow!("--tf is now called --transfer"));
            }
            let m = parse_method(&method)?;
            let rate = check_rate("--rate", rate)?;
            if let Some(f) = prewarp_hz
                && !(f > 0.0 && f.is_finite())
            {
                return Err(anyhow!(
                    "--prewarp-hz must be a positive, finite frequency in Hz, got {f}"
                ));
            }
            if let Some(f) = prewarp_hz
                && !(f > 0.0 && f.is_finite())
            {
                return Err(anyhow!("--prewarp-hz must be positive and finite, got {f}"));
            }
            let given_w0 = prewarp_hz.map(|f| 2.0 * std::f64::consts::PI * f);
            let (c, w0) = match (case, transfer) {
                (Some(path), _) => {
                    let case = Case::load(&path)?;
                    let lp = prepare(&case)?;
                    match &lp.controller {
                        Controller::Continuous(c) => (c.clone(), given_w0.or(lp.prewarp_rad_s)),
                        Controller::Discrete(_) => {
                            return Err(anyhow!(
                                "{}: the controller is given in z; there is nothing to discretize",
                                path.display()
                            ));
                        }
                    }
                }
                (None, Some(text)) => (transfer_from_option(&text)?, given_w0),
                (None, None) => {
                    return Err(anyhow!(
                        "give a case file (looprate discretize CASE.toml --rate HZ --method NAME) or --transfer EXPR"
                    ));
                }
            };
            if m == Method::TustinPrewarped && w0.is_none() {
                return Err(anyhow!(
                    "tustin-prewarped needs a pre-warp frequency: give --prewarp-hz"
                ));
            }
            let d =
                discretize(&c, m, 1.0 / rate, w0).map_err(|e| anyhow!("{m} at {rate} Hz: {e}"))?;
            if json {
                print(&format!(
                    "{:#}\n",
                    summary::discretized_json(m.name(), rate, &d)
                ))?;
            } else {
                print(&summary::discretized_text(m.name(), rate, &d))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Check { case } => {
            let c = Case::load(&case)?;
            let lp = prepare(&c)?;
            print(&summary::check_text(&c, &lp))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Eval {
            case,
            rate,
            method,
            delay,
            hold,
            json,
            trace,
            ratio,
            outer_method,
            outer_delay,
            outer_hold,
        } => {
            let c = Case::load(&case)?;
            let lp = prepare(&c)?;
            let ratio = ratio.map(|r| cascade_ratio(&c, &r)).transpose()?;
            let method = match (&lp.controller, method) {
                (Controller::Continuous(_), Some(m)) => Some(parse_method(&m)?),
                (Controller::Continuous(_), None) => match c.methods.first() {
                    Some(m) => Some(*m),
                    None => return Err(anyhow!("--method is needed for a continuous controller")),
                },
                (Controller::Discrete(_), _) => None,
            };
            let delay = delay.unwrap_or(c.compute_delays[0]);
            if !(delay >= 0.0 && delay.is_finite()) {
                return Err(anyhow!(
                    "--delay must be a finite number of periods >= 0, got {delay}"
                ));
            }
            let rate = check_rate("--rate", rate)?;
            let hold = match hold {
                None => c.holds[0],
                Some(h) => HoldKind::from_name(&h).ok_or_else(|| {
                    anyhow!(
                        "--hold: unknown hold kind `{h}`; the kinds are: {}",
                        HoldKind::names()
                    )
                })?,
            };
            if matches!(lp.controller, Controller::Discrete(_)) && hold != c.holds[0] {
                return Err(anyhow!(
                    "--hold {hold}: the controller is given in z and assumes a {} hold",
                    c.holds[0]
                ));
            }
            let p = Point {
                rate_hz: rate,
                method,
                delay,
                hold,
            };
            // One controller for the figures and the trace.
            let own = lp.controller_at(p.rate_hz, p.method);
            let exact = lp.evaluate(
                &p,
                Given {
                    controller: Some(own.as_ref()),
                    ..Given::with_delay_margin()
                },
            );
            let approx: Vec<(HoldApprox, _)> = if matches!(lp.controller, Controller::Continuous(_))
            {
                HoldApprox::ALL
                    .iter()
                    .map(|&k| (k, lp.hold_approx(&p, k)))
                    .collect()
            } else {
                Vec::new()
            };
            let cascade = match ratio {
                Some(n) => Some(eval_outer(
                    &c,
                    p,
                    n,
                    outer_method.as_deref(),
                    outer_delay,
                    outer_hold.as_deref(),
                    &own,
                )?),
                None => None,
            };
            if let Some(path) = trace {
                let (step, dist) = match &cascade {
                    Some((pc, cp, _, ctrls)) => {
                        (pc.outer_traces_with(cp, ctrls, None)).map_err(|e| anyhow!(e))?
                    }
                    None => (own.as_ref().map_err(|e| anyhow!(e.clone())))
                        .and_then(|c| lp.traces_around(&p, c, None).map_err(|e| anyhow!(e)))?,
                };
                writer::write_atomic(&path, &tables::trace_csv(&step, &dist))?;
            }
            if json {
                let mut v = summary::eval_json(&exact, lp.design.as_ref(), &approx);
                if let (Some((_, cp, outer, _)), serde_json::Value::Object(m)) = (&cascade, &mut v)
                {
                    m.insert(
                        "outer".into(),
                        looprate::output::cascade::outer_json(&c, cp, outer),
                    );
                }
                if let Some(notes) = v.get_mut("notes").and_then(|n| n.as_array_mut()) {
                    notes.extend(
                        lp.cautions(&p, &exact)
                            .into_iter()
                            .map(serde_json::Value::from),
                    );
                }
                print(&format!("{v:#}\n"))?;
            } else {
                let header = format!(
                    "rate {} (period {}), method {}, {} hold, computation delay {}",
                    looprate::engineering::hz(rate),
                    looprate::engineering::seconds(1.0 / rate),
                    looprate::explore::search::method_label(method),
                    hold,
                    looprate::engineering::periods(delay)
                );
                let mut text = summary::evaluation_text(
                    &c.title,
                    &header,
                    &exact,
                    lp.design.as_ref(),
                    &approx,
                    &c.spec,
                );
                for note in lp.cautions(&p, &exact) {
                    text.push_str(&format!("\nNote: {note}\n"));
                }
                if let Some((_, cp, outer, _)) = &cascade {
                    text.push_str(&looprate::output::cascade::outer_text(&c, cp, outer));
                }
                print(&text)?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Sweep {
            case,
            out,
            threads,
            quiet,
            no_charts,
            variants,
        } => {
            let c = Case::load(&case)?;
            if variants && c.uncertainty.is_none() {
                return Err(anyhow!(
                    "--variants: {} has no [uncertainty] table, so there are no variants to list",
                    case.display()
                ));
            }
            let lp = prepare(&c)?;
            check_threads(threads)?;
            let _lock = writer::OutputLock::acquire(&out)?;
            let swept = in_pool(threads, || -> Result<_> {
                let set = case_variants(&c, &lp)?;
                let swept = run_sweep(&c, &lp, set.as_ref(), variants, quiet, no_charts, &out)?;
                if c.outer.is_some() {
                    looprate::output::cascade::finish_sweep(&out, &c)?;
                }
                Ok(swept)
            })??;
            let path = out.join("sweep.csv");
            if let Some(reason) = &swept.design_failure {
                warn(&format!(
                    "{reason}: no sampling rate can fix that, so no grid point was evaluated (each row of {} says so); revise the controller or the spec first",
                    path.display()
                ));
            }
            if !quiet {
                warn(&format!(
                    "{} points ({} feasible) written to {}",
                    swept.rows,
                    swept.feasible,
                    path.display()
                ));
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Pick {
            case,
            out,
            json,
            threads,
            quiet,
            no_charts,
        } => {
            let c = Case::load(&case)?;
            let lp = prepare(&c)?;
            check_threads(threads)?;
            let _lock = writer::OutputLock::acquire(&out)?;
            let report = in_pool(threads, || -> Result<_> {
                // A cascade is prepared first: a case whose outer loop
                // cannot be built stops before the sweep.
                let cascade = prepare_cascade(&c)?;
                let grid = case_sweep_grid(&c, &lp);
                let bar = progress(grid.len(), quiet);
                let mut stream = csv_stream(&c, &lp, &out)?;
                let mut chart_rows = ChartRows::new(&c, &lp, &grid);
                // A cascade's search reads the inner loop's figures from
                // this sweep instead of evaluating them again.
                let mut inner_known = looprate::explore::cascade::InnerEvaluations::default();
                let swept = sweep_streaming(&c, &lp, &|| bar.inc(1), &mut |i, row, v| {
                    stream.push(i, row, v);
                    if !no_charts {
                        chart_rows.push(i, row);
                    }
                    if c.outer.is_some() {
                        inner_known.push(row);
                    }
                })?;
                bar.finish_and_clear();
                // The inner loop's pick beside the cascade's search: both
                // read the sweep only.
                let (Streamed { report, .. }, searched) = rayon::join(
                    || swept.pick(&c, &lp, &Silent),
                    || (cascade.as_ref()).map(|pc| search_cascade(&c, pc, &inner_known)),
                );
                // Charts are drawn while the CSV and JSON are written.
                let (charts, tables) = rayon::join(
                    || -> Result<_> {
                        if no_charts {
                            Ok(Vec::new())
                        } else {
                            let rows = chart_rows.finish();
                            let input = ChartInput {
                                case: &c,
                                lp: &lp,
                                rows: &rows,
                                pick: Some(&report),
                            };
                            Ok(looprate::output::charts::write_charts(&out, &input)?)
                        }
                    },
                    || write_pick_outputs(&out, stream, &report),
                );
                tables?;
                let charts = charts?;
                let cascade = if let (Some(pc), Some(searched)) = (&cascade, searched) {
                    Some(looprate::output::cascade::finish_pick(
                        &out, &c, &report, &charts, no_charts, pc, searched,
                    )?)
                } else {
                    looprate::output::report::write_report(&out, &c, &report, &charts)?;
                    None
                };
                Ok((report, cascade))
            })??;
            let (report, cascade) = report;
            if json {
                let v = match &cascade {
                    Some(run) => run.json.clone(),
                    None => serde_json::to_value(&report)?,
                };
                print(&format!("{v:#}\n"))?;
            } else {
                let extra = cascade
                    .as_ref()
                    .map(|run| looprate::output::cascade::brief_blocks(&run.pick))
                    .unwrap_or_default();
                print(&looprate::output::report::pick_text(&c, &report, &extra)?)?;
                // Say where the files went, the default folder above all.
                print(&format!(
                    "\nWrote {}: report.md, report.html, pick.json, sweep.csv{}.\n",
                    out.display(),
                    if no_charts { "" } else { " and the charts" }
                ))?;
            }
            let answered = match &cascade {
                Some(run) => run.pick.chosen.is_some(),
                None => report.has_answer(),
            };
            Ok(if answered {
                ExitCode::SUCCESS
            } else {
                ExitCode::from(1)
            })
        }
    }
}

/// `DIR/sweep.csv` as a stream the sweep writes row by row.
fn csv_stream(c: &Case, lp: &PreparedLoop, out: &Path) -> Result<tables::SweepCsvStream> {
    let grid = case_sweep_grid(c, lp);
    let series = grid.series_count();
    let formats: Vec<String> = sweep::Plan::for_case(c, lp, None)
        .formats()
        .iter()
        .map(|f| f.name())
        .collect();
    Ok(tables::SweepCsvStream::create(
        &out.join(looprate::output::cascade::loop_sweep_name(c)),
        series,
        grid.rates.len(),
        &formats,
        c.uncertainty.is_some(),
    )?)
}

fn write_pick_outputs(
    out: &Path,
    stream: tables::SweepCsvStream,
    report: &looprate::explore::pick::PickReport,
) -> Result<()> {
    stream.finish()?;
    let json = serde_json::to_vec_pretty(report)?;
    writer::write_atomic(&out.join("pick.json"), &json)?;
    Ok(())
}

fn check_threads(threads: Option<usize>) -> Result<()> {
    match threads {
        Some(n) if n == 0 || n > MAX_THREADS => Err(anyhow!(
            "--threads must be from 1 to {MAX_THREADS}, got {n}"
        )),
        _ => Ok(()),
    }
}

fn in_pool<T: Send>(threads: Option<usize>, f: impl FnOnce() -> T + Send) -> Result<T> {
    let mut b = rayon::ThreadPoolBuilder::new();
    if let Some(n) = threads {
        check_threads(threads)?;
        b = b.num_threads(n);
    }
    let pool = b.build().context("starting worker threads")?;
    Ok(pool.install(f))
}

/// A progress bar on a terminal, hidden otherwise or with `--quiet`.
fn progress(len: usize, quiet: bool) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let b = ProgressBar::new(len as u64);
    if let Ok(style) =
        ProgressStyle::with_template("{bar:40} {pos}/{len} points  {elapsed_precise} (eta {eta})")
    {
        b.set_style(style);
    }
    b
}

/// What `sweep` did: rows written, how many feasible, and why nothing
/// was evaluated when the continuous design already fails the spec.
struct Swept {
    rows: usize,
    feasible: usize,
    design_failure: Option<String>,
}

/// `sweep`: every grid point to `DIR/sweep.csv` (and `variants.csv` with
/// `--variants`) as it is finished, and the charts that need no search,
/// keeping only what they draw.
fn run_sweep(
    c: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    keep_variants: bool,
    quiet: bool,
    no_charts: bool,
    out: &Path,
) -> Result<Swept> {
    let grid = case_sweep_grid(c, lp);
    let bar = progress(grid.len(), quiet);
    let plan = sweep::Plan {
        keep_variants,
        ..sweep::Plan::for_case(c, lp, variants)
    };
    let mut stream = csv_stream(c, lp, out)?;
    let mut variants_stream = match variants.filter(|_| keep_variants) {
        Some(set) => Some((
            tables::SweepCsvStream::create_variants(
                &out.join("variants.csv"),
                grid.series_count(),
                grid.rates.len(),
                set,
            )?,
            set,
        )),
        None => None,
    };
    let mut chart_rows = ChartRows::new(c, lp, &grid);
    let (mut rows, mut feasible) = (0, 0);
    let mut take = |i: usize, row: &sweep::SweepRow| {
        stream.push(i, row, variants);
        if let Some((s, set)) = variants_stream.as_mut() {
            s.push_variants(i, row, set);
        }
        if !no_charts {
            chart_rows.push(i, row);
        }
        rows += 1;
        feasible += usize::from(row.assessment.feasible);
    };
    let design_failure = looprate::explore::pick::design_failure(c, lp).map(|d| d.0);
    if design_failure.is_some() {
        // No rate can pass: every row says why, and nothing is evaluated.
        not_evaluated_rows(c, lp, &grid, &mut |i, row| {
            bar.inc(1);
            take(i, row)
        });
    } else {
        sweep::run_streaming(&plan, &grid, &|| bar.inc(1), &mut |i, row| take(i, &row));
    }
    bar.finish_and_clear();
    stream.finish()?;
    if let Some((s, _)) = variants_stream {
        s.finish()?;
    }
    if !no_charts {
        // Without a search there is no recommendation: the charts that
        // need none (figures against rate, CPU load, precision).
        let rows = chart_rows.finish();
        let input = ChartInput {
            case: c,
            lp,
            rows: &rows,
            pick: None,
        };
        looprate::output::charts::write_charts(out, &input)?;
    }
    Ok(Swept {
        rows,
        feasible,
        design_failure,
    })
}
