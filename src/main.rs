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
use looprate::continuous::HoldApprox;
use looprate::discretize::{Method, discretize};
use looprate::evaluate::{Point, PreparedLoop};
use looprate::expr::Expr;
use looprate::pick::{Picked, case_grid, case_variants, prepare, sweep_and_pick};
use looprate::search::Silent;
use looprate::transfer::{Controller, Transfer};
use looprate::variants::VariantSet;
use looprate::{outputs, summary, sweep};

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
    /// Print the controller in z that a method gives at one rate.
    Discretize {
        /// Continuous controller, a rational expression in s, e.g. "0.05*(s+12)/s".
        #[arg(long = "tf")]
        transfer: String,
        /// Loop rate, Hz.
        #[arg(long)]
        rate: f64,
        /// zoh, foh, impulse, tustin, tustin-prewarped, matched, forward-euler, backward-euler.
        #[arg(long)]
        method: String,
        /// Pre-warp frequency for tustin-prewarped, Hz.
        #[arg(long = "prewarp-hz")]
        prewarp_hz: Option<f64>,
        /// Print JSON (keys method, rate_hz, num, den, poles, zeros).
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
        case: PathBuf,
        /// Loop rate, Hz.
        #[arg(long)]
        rate: f64,
        /// Discretization method (not needed for a controller given in z).
        #[arg(long)]
        method: Option<String>,
        /// Computation delay as a fraction of a period (default: the case's first).
        #[arg(long)]
        delay: Option<f64>,
        /// Print JSON with the loop model's keys.
        #[arg(long)]
        json: bool,
        /// Write t, y, u and a sample flag of both responses to this CSV.
        #[arg(long)]
        trace: Option<PathBuf>,
    },
    /// Evaluate every grid point of the case and write DIR/sweep.csv.
    Sweep {
        case: PathBuf,
        /// Output folder.
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Worker threads (default: all cores).
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
        case: PathBuf,
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Print pick.json to stdout instead of the summary.
        #[arg(long)]
        json: bool,
        #[arg(long)]
        threads: Option<usize>,
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
            eprintln!("looprate: {e:#}");
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

fn print(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

fn parse_method(name: &str) -> Result<Method> {
    name.parse::<Method>().map_err(|e| anyhow!("--method: {e}"))
}

fn run(cli: Cli) -> Result<ExitCode> {
    match cli.command {
        Command::Discretize {
            transfer,
            rate,
            method,
            prewarp_hz,
            json,
        } => {
            let m = parse_method(&method)?;
            if !(rate > 0.0 && rate.is_finite()) {
                return Err(anyhow!("--rate must be positive and finite, got {rate}"));
            }
            let expr = Expr::parse(&tf).map_err(|e| {
                anyhow!(
                    "--transfer: column {}: {}\n    {}\n    {}",
                    e.column,
                    e.message,
                    transfer,
                    e.caret_line(&tf)
                )
            })?;
            let (num, den) = expr.eval(&|_| None).map_err(|e| {
                anyhow!(
                    "--transfer: column {}: {}\n    {}\n    {}",
                    e.column,
                    e.message,
                    transfer,
                    e.caret_line(&tf)
                )
            })?;
            let c = Transfer::new(num, den);
            let w0 = prewarp_hz.map(|f| 2.0 * std::f64::consts::PI * f);
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
            json,
            trace,
        } => {
            let c = Case::load(&case)?;
            let lp = prepare(&c)?;
            let method = match (&lp.controller, method) {
                (Controller::Continuous(_), Some(m)) => Some(parse_method(&m)?),
                (Controller::Continuous(_), None) => match c.methods.first() {
                    Some(m) => Some(*m),
                    None => return Err(anyhow!("--method is needed for a continuous controller")),
                },
                (Controller::Discrete(_), _) => None,
            };
            let delay = delay.unwrap_or(c.compute_delays[0]);
            if !(0.0..=1.0).contains(&delay) {
                return Err(anyhow!("--delay must be in [0, 1], got {delay}"));
            }
            if !(rate > 0.0 && rate.is_finite()) {
                return Err(anyhow!("--rate must be positive and finite, got {rate}"));
            }
            let p = Point {
                rate_hz: rate,
                method,
                delay,
            };
            let exact = lp.sampled(&p);
            let approx: Vec<(HoldApprox, _)> = if matches!(lp.controller, Controller::Continuous(_))
            {
                HoldApprox::ALL
                    .iter()
                    .map(|&k| (k, lp.hold_approx(&p, k)))
                    .collect()
            } else {
                Vec::new()
            };
            if let Some(path) = trace {
                let (step, dist) = lp.sampled_traces(&p, None).map_err(|e| anyhow!(e))?;
                outputs::write_atomic(&path, &outputs::trace_csv(&step, &dist))?;
            }
            if json {
                let mut v = summary::eval_json(&exact, lp.design.as_ref(), &approx);
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
                    "rate {} Hz, method {}, computation delay {} of a period",
                    rate,
                    looprate::search::method_label(method),
                    delay
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
            let (rows, set) = in_pool(threads, || -> Result<_> {
                let set = case_variants(&c, &lp)?;
                let rows = run_sweep(&c, &lp, set.as_ref(), variants, quiet);
                if let Some(set) = &set
                    && variants
                {
                    outputs::write_atomic(
                        &out.join("variants.csv"),
                        &outputs::variants_csv(&rows, set),
                    )?;
                }
                if !no_charts {
                    // Without a search there is no recommendation: the
                    // charts that need none (figures against rate, CPU load).
                    let report = looprate::pick::unsearched(&c, &lp);
                    looprate::charts::write_charts(&out, &c, &lp, &rows, &report)?;
                }
                Ok((rows, set))
            })??;
            let path = out.join("sweep.csv");
            outputs::write_atomic(&path, &outputs::sweep_csv(&rows, set.as_ref()))?;
            let feasible = rows.iter().filter(|r| r.assessment.feasible).count();
            if !quiet {
                eprintln!(
                    "{} points ({} feasible) written to {}",
                    rows.len(),
                    feasible,
                    path.display()
                );
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
            let report = in_pool(threads, || -> Result<_> {
                let bar = progress(case_grid(&c, &lp).len(), quiet);
                let Picked {
                    rows,
                    variants: set,
                    report,
                } = sweep_and_pick(&c, &lp, &|| bar.inc(1), &Silent)?;
                bar.finish_and_clear();
                // Charts are drawn while the CSV and JSON are written.
                let (charts, tables) = rayon::join(
                    || -> Result<_> {
                        if no_charts {
                            Ok(Vec::new())
                        } else {
                            Ok(looprate::charts::write_charts(
                                &out, &c, &lp, &rows, &report,
                            )?)
                        }
                    },
                    || write_pick_outputs(&out, &rows, set.as_ref(), &report),
                );
                tables?;
                looprate::report::write_report(&out, &c, &report, &charts?)?;
                Ok(report)
            })??;
            if json {
                print(&format!("{:#}\n", serde_json::to_value(&report)?))?;
            } else {
                print(&summary::pick_text(&report))?;
            }
            Ok(if report.has_answer() {
                ExitCode::SUCCESS
            } else {
                ExitCode::from(1)
            })
        }
    }
}

fn write_pick_outputs(
    out: &Path,
    rows: &[sweep::SweepRow],
    set: Option<&VariantSet>,
    report: &looprate::pick::PickReport,
) -> Result<()> {
    outputs::write_atomic(&out.join("sweep.csv"), &outputs::sweep_csv(rows, set))?;
    let json = serde_json::to_vec_pretty(report)?;
    outputs::write_atomic(&out.join("pick.json"), &json)?;
    Ok(())
}

fn in_pool<T: Send>(threads: Option<usize>, f: impl FnOnce() -> T + Send) -> Result<T> {
    let mut b = rayon::ThreadPoolBuilder::new();
    if let Some(n) = threads {
        if n == 0 {
            return Err(anyhow!("--threads must be at least 1"));
        }
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

fn run_sweep(
    c: &Case,
    lp: &PreparedLoop,
    variants: Option<&VariantSet>,
    keep_variants: bool,
    quiet: bool,
) -> Vec<sweep::SweepRow> {
    let points = case_grid(c, lp);
    let bar = progress(points.len(), quiet);
    let plan = sweep::Plan {
        keep_variants,
        ..sweep::Plan::for_case(c, lp, variants)
    };
    let rows = sweep::run(&plan, &points, &|| bar.inc(1));
    bar.finish_and_clear();
    rows
}
