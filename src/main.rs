//! The `fitaudit` command line: clap parsing, then library calls.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::{Parser, Subcommand};
use fitaudit::audit::{self, AuditOptions};
use fitaudit::cli_support::{self, classify, TerminalProgress};
use fitaudit::fit::Method;
use fitaudit::report::text;
use fitaudit::settings::Diagnostic;
use fitaudit::study;

/// Audit the uncertainties of a weighted nonlinear least-squares fit.
///
/// A study file (TOML) names a CSV file, a model formula and its parameters.
/// `fit` fits it; `audit` runs the diagnostics battery (bootstrap, Monte
/// Carlo, chi-squared profiles, contour maps, multi-start search), decides a
/// verdict per parameter and writes a report. Exit status: 0 success, 1
/// internal error, 2 bad input or usage, 3 with --strict when a verdict fails
/// or the audit was re-based at a better minimum than the study's start reaches.
#[derive(Parser, Debug)]
#[command(name = "fitaudit", version, about, long_about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Fit the study's model and print the parameters (value, standard error,
    /// relative error, bound flag) and goodness of fit.
    Fit {
        /// Study file (TOML).
        study: PathBuf,
        /// Print the fit result as JSON on stdout.
        #[arg(long)]
        json: bool,
        /// Minimisation method (overrides the study's [fit] method). With
        /// `steepest` the iteration cap is at least 100000.
        #[arg(long, value_enum)]
        method: Option<MethodArg>,
        /// Confidence level of `U = k u` and of the derived quantities'
        /// intervals, from 0.001 to 0.9999 (overrides audit.level).
        #[arg(long)]
        level: Option<f64>,
    },
    /// Validate the study file and its data, fit nothing, and say what was read.
    Check {
        /// Study file (TOML).
        study: PathBuf,
    },
    /// Run the diagnostics battery and write report.html, results.json,
    /// summary.md and figures/ into the output folder. Several studies, or
    /// a folder of them, make a batch: OUT/<study>/ for each, with
    /// OUT/index.html and OUT/index.json (docs/CLUSTER.md).
    Audit(AuditArgs),
    /// Join the part folders of `audit --shard K/N` (every K of one N, in
    /// any order) into the full report, equal to the single-machine run's.
    Merge {
        /// Part folders written by `audit --shard`.
        #[arg(required = true)]
        parts: Vec<PathBuf>,
        /// Output folder of the report (or of the batch).
        #[arg(long)]
        out: PathBuf,
        /// Worker threads (default: all cores).
        #[arg(long, value_parser = parse_threads)]
        threads: Option<usize>,
        /// No output on stderr.
        #[arg(long)]
        quiet: bool,
    },
    /// Run the built-in demonstration scenarios on embedded data.
    Demo {
        /// Output folder of the demo reports.
        #[arg(long, default_value = "out/demo")]
        out: PathBuf,
        /// Worker threads (default: all cores).
        #[arg(long, value_parser = parse_threads)]
        threads: Option<usize>,
        /// No progress output.
        #[arg(long)]
        quiet: bool,
    },
    /// List the functions and constants of the formula language.
    Models,
}

#[derive(clap::Args, Debug)]
struct AuditArgs {
    /// Study file(s) (TOML), or folders of them (a batch).
    #[arg(required = true)]
    studies: Vec<PathBuf>,
    /// Output folder [default: out/<study name>/, out/batch/ for a batch,
    /// with `.part-K-of-N` appended under --shard]. Must not be a link,
    /// nor hold anything fitaudit did not write, nor contain a study or
    /// its data.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Run only the K-th of N slices of the work (bootstrap and Monte Carlo
    /// replicates, profiles, contour maps; in a batch of at least N studies,
    /// the studies) and write a part folder for `fitaudit merge`.
    #[arg(long, value_name = "K/N")]
    shard: Option<fitaudit::shard::Slice>,
    /// Seconds between progress lines when stderr is not a terminal (0:
    /// a line at every update).
    #[arg(long, default_value_t = 30.0, value_name = "SECONDS", value_parser = parse_seconds)]
    progress_interval: f64,
    /// Comma-separated diagnostics to run: bootstrap, monte-carlo, profile,
    /// contours, multistart, coverage [default: all but coverage; coverage
    /// too when the study sets audit.coverage.enabled (and the list is the
    /// default one)].
    #[arg(long, value_delimiter = ',', value_parser = parse_diagnostic)]
    only: Option<Vec<Diagnostic>>,
    /// Replicates of both bootstrap and Monte Carlo (overrides the study;
    /// at most 1000000).
    #[arg(long, value_parser = parse_replicates)]
    replicates: Option<usize>,
    /// Starts of the first multi-start batch (overrides the study; batches
    /// are added up to audit.multistart.max_starts; at most 100000).
    #[arg(long, value_parser = parse_starts)]
    starts: Option<usize>,
    /// Seed of every random stream (overrides the study).
    #[arg(long)]
    seed: Option<u64>,
    /// Confidence level of every interval, from 0.001 to 0.9999 (overrides
    /// audit.level).
    #[arg(long)]
    level: Option<f64>,
    /// Worker threads (default: all cores; at most 256); results do not
    /// depend on it.
    #[arg(long, value_parser = parse_threads)]
    threads: Option<usize>,
    /// No progress output on stderr.
    #[arg(long)]
    quiet: bool,
    /// Exit with status 3 when any verdict is `fails`, or when the study's
    /// start reaches only a local minimum (the audit was re-based).
    #[arg(long)]
    strict: bool,
    /// Audit the fit from the study's start even when the multi-start
    /// search finds a clearly better minimum (by default the whole battery
    /// is then re-based at the best minimum).
    #[arg(long)]
    keep_start: bool,
    /// Also write replicates.csv with every bootstrap and Monte Carlo estimate.
    #[arg(long)]
    replicates_csv: bool,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum MethodArg {
    /// Levenberg-Marquardt (default).
    Lm,
    /// Steepest descent (simple, slower).
    Steepest,
}

/// Iteration cap of steepest descent chosen on the command line.
const STEEPEST_MIN_ITERATIONS: usize = 100_000;

fn parse_diagnostic(s: &str) -> Result<Diagnostic, String> {
    Diagnostic::SELECTABLE
        .into_iter()
        .find(|d| d.cli_name() == s.trim())
        .ok_or_else(|| {
            let names: Vec<_> = Diagnostic::SELECTABLE.iter().map(|d| d.cli_name()).collect();
            format!("unknown diagnostic '{s}'; choose from {}", names.join(", "))
        })
}

fn parse_positive(s: &str) -> Result<usize, String> {
    match s.parse::<usize>() {
        Ok(0) => Err("must be at least 1".into()),
        Ok(n) => Ok(n),
        Err(_) => Err(format!("'{s}' is not a positive whole number")),
    }
}

fn parse_seconds(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v.is_finite() && (0.0..=1e6).contains(&v) => Ok(v),
        _ => Err(format!("'{s}' is not a number of seconds from 0 to 1e6")),
    }
}

/// A positive whole number of at most `max`.
fn parse_at_most(s: &str, max: usize) -> Result<usize, String> {
    let n = parse_positive(s)?;
    if n > max {
        return Err(format!("{n} is more than the largest allowed, {max}"));
    }
    Ok(n)
}

fn parse_replicates(s: &str) -> Result<usize, String> {
    parse_at_most(s, fitaudit::settings::MAX_REPLICATES)
}

fn parse_starts(s: &str) -> Result<usize, String> {
    parse_at_most(s, fitaudit::settings::MAX_STARTS)
}

fn parse_threads(s: &str) -> Result<usize, String> {
    parse_at_most(s, cli_support::MAX_THREADS).map_err(|e| format!("thread count: {e}"))
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(err) => {
            let code = classify(&err);
            eprintln!("error: {}", cli_support::terminal_safe(&message(&err)));
            ExitCode::from(code)
        }
    }
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Fit {
            study,
            json,
            method,
            level,
        } => {
            let overrides = fitaudit::batch::Overrides {
                level,
                ..Default::default()
            };
            let mut study = overrides.load(&study)?;
            if let Some(m) = method {
                study.fit_options.method = match m {
                    MethodArg::Lm => Method::Lm,
                    MethodArg::Steepest => Method::Steepest,
                };
                if study.fit_options.method == Method::Steepest {
                    // The simple method needs far more, far cheaper iterations.
                    study.fit_options.max_iterations =
                        study.fit_options.max_iterations.max(STEEPEST_MIN_ITERATIONS);
                }
            }
            let fit = fitaudit::fit::fit(&study.problem(), &study.dataset)?;
            let derived = fitaudit::diagnostics::derived::for_fit(
                &study.derived,
                &fit,
                &study.audit,
                study.dataset.has_sigma(),
            );
            let datasets =
                fitaudit::audit::dataset_shares(study.model_fn(), &study.dataset, &fit, &study.parameters);
            if json {
                #[derive(serde::Serialize)]
                struct Wrapped<'a> {
                    fit: &'a fitaudit::fit::FitResult,
                    derived: &'a [fitaudit::diagnostics::derived::DerivedResult],
                    nonlinearity: fitaudit::diagnostics::nonlinearity::NonlinearityResult,
                    #[serde(skip_serializing_if = "<[_]>::is_empty")]
                    datasets: &'a [fitaudit::audit::DatasetShare],
                }
                let wrapped = Wrapped {
                    fit: &fit,
                    derived: &derived,
                    nonlinearity: fitaudit::diagnostics::nonlinearity::compute(
                        study.model_fn(),
                        &study.dataset,
                        &fit,
                    ),
                    datasets: &datasets,
                };
                emit(&(serde_json::to_string_pretty(&wrapped)? + "\n"))?;
            } else {
                emit(&text::fit_table(study.title.as_deref(), &study.parameters, &fit))?;
                emit(&text::derived_table(&fit, &derived))?;
                emit(&text::datasets_table(
                    &datasets,
                    fit.sigma_given,
                    fit.likelihood == fitaudit::fit::Likelihood::Poisson,
                ))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Check { study } => {
            let study = study::load(&study)?;
            emit(&cli_support::check_summary(&study))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Audit(args) => audit_command(args),
        Command::Merge {
            parts,
            out,
            threads,
            quiet,
        } => merge_command(parts, out, threads, quiet),
        Command::Demo { out, threads, quiet } => cli_support::with_threads(threads, || {
            let progress = TerminalProgress::new(quiet);
            let summary = fitaudit::demo::run_all(&out, &command_line(), &progress)?;
            emit(&cli_support::demo_summary(&summary))?;
            Ok(ExitCode::SUCCESS)
        }),
        Command::Models => {
            emit(&text::models_table())?;
            Ok(ExitCode::SUCCESS)
        }
    }
}

fn audit_command(args: AuditArgs) -> anyhow::Result<ExitCode> {
    use fitaudit::batch;
    let overrides = batch::Overrides {
        replicates: args.replicates,
        starts: args.starts,
        seed: args.seed,
        keep_start: args.keep_start,
        level: args.level,
    };
    let mut only = args.only.clone().unwrap_or_else(|| Diagnostic::ALL.to_vec());
    // `--only profile,profile` runs (and records) the profile once.
    let mut seen = Vec::new();
    only.retain(|d| {
        let new = !seen.contains(d);
        seen.push(*d);
        new
    });
    let options = AuditOptions {
        only,
        command_line: command_line(),
        write_replicates: args.replicates_csv,
    };
    let is_batch = batch::is_batch(&args.studies);
    let studies = batch::expand(&args.studies)?;
    let interval = std::time::Duration::from_secs_f64(args.progress_interval);
    if !is_batch && args.shard.is_none() {
        let study = overrides.load(&studies[0])?;
        let out = args
            .out
            .clone()
            .unwrap_or_else(|| Path::new("out").join(cli_support::folder_name(&study.name)));
        let group_files: Vec<PathBuf> = study
            .dataset
            .groups
            .iter()
            .filter_map(|g| g.file.as_ref().map(PathBuf::from))
            .collect();
        let mut inputs: Vec<&Path> = vec![&study.path];
        inputs.extend(study.data_file.as_deref());
        inputs.extend(group_files.iter().map(PathBuf::as_path));
        fitaudit::output::preflight_protecting(&out, &inputs)?;
        return cli_support::with_threads(args.threads, || {
            let progress = TerminalProgress::with_interval(args.quiet, interval);
            let results = audit::run(&audit::input_from_study(&study), &options, &progress)?;
            let dir = fitaudit::report::write_report(&results, &out, &options)
                .with_context(|| format!("writing the report into {}", out.display()))?;
            if !args.quiet {
                eprintln!("report written to {}", dir.display());
            }
            emit(&text::verdict_lines(&results))?;
            Ok(ExitCode::from(batch::audit_status(&results, args.strict)))
        });
    }
    let base = if is_batch {
        "batch".to_string()
    } else {
        let stem = studies[0].file_stem().map(|s| s.to_string_lossy().into_owned());
        cli_support::folder_name(&stem.unwrap_or_default())
    };
    let out = args.out.clone().unwrap_or_else(|| match args.shard {
        Some(s) => Path::new("out").join(format!("{base}.part-{}-of-{}", s.k, s.n)),
        None => Path::new("out").join(&base),
    });
    cli_support::with_threads(args.threads, || {
        let progress = TerminalProgress::with_interval(args.quiet, interval);
        let req = batch::Request {
            studies,
            overrides,
            options,
            strict: args.strict,
            out: out.clone(),
            progress: &progress,
        };
        match args.shard {
            Some(slice) => {
                let part = batch::run_shard(&req, slice, is_batch)?;
                if !args.quiet {
                    eprintln!("part {} written to {}", part.shard, out.display());
                }
                emit(&text::part_lines(&part))?;
                Ok(ExitCode::SUCCESS)
            }
            None => {
                let index = batch::run_batch(&req)?;
                if !args.quiet {
                    eprintln!("batch written to {}", out.display());
                }
                emit(&text::index_lines(&index))?;
                Ok(ExitCode::from(index.exit_status))
            }
        }
    })
}

fn merge_command(
    parts: Vec<PathBuf>,
    out: PathBuf,
    threads: Option<usize>,
    quiet: bool,
) -> anyhow::Result<ExitCode> {
    cli_support::with_threads(threads, || {
        let merged = fitaudit::batch::merge(&parts, &out, &command_line())?;
        if !quiet {
            eprintln!("merged {} parts into {}", parts.len(), out.display());
        }
        if let Some(r) = &merged.results {
            emit(&text::verdict_lines(r))?;
        }
        if let Some(i) = &merged.index {
            emit(&text::index_lines(i))?;
        }
        Ok(ExitCode::from(merged.exit_status))
    })
}

/// The error and its causes joined by ": ", leaving out a cause whose text
/// is already shown (most errors quote their cause in their own message,
/// which `{:#}` would print twice).
fn message(err: &anyhow::Error) -> String {
    let mut text = String::new();
    for cause in err.chain() {
        let part = cause.to_string();
        if text.contains(&part) {
            continue;
        }
        if !text.is_empty() {
            text.push_str(": ");
        }
        text.push_str(&part);
    }
    text
}

/// Writes to stdout; a closed pipe (e.g. `| head`) ends the program
/// quietly; any other failure (a full disk, `> /dev/full`) is an error
/// naming standard output.
fn emit(text: &str) -> anyhow::Result<()> {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => std::process::exit(0),
        Err(e) => Err(anyhow::anyhow!(
            "cannot write the results to standard output: {e}"
        )),
        Ok(()) => Ok(()),
    }
}

/// The command line as recorded in the report, control characters
/// neutralised.
fn command_line() -> String {
    let args: Vec<String> = std::env::args_os()
        .map(|a| a.to_string_lossy().into_owned())
        .collect();
    fitaudit::study::neutralise(&args.join(" ")).into_owned()
}
