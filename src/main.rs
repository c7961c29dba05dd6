//! The `lobeflow` command: parse, dispatch to one entry point, print any
//! error once, exit with its code (0 ok, 1 a check failed, 2 usage or input).

use clap::{Parser, Subcommand};
use lobeflow::Error;
use lobeflow::commands;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(name = "lobeflow", version, about = "Lobe-switching angle trackers from recorded IQ and WAV captures")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

/// How to read the capture, for every capture reader of the graph.
#[derive(clap::Args)]
struct CaptureFlags {
    /// Capture container: auto, wav, sigmf or raw (standard input and FIFOs are raw).
    #[arg(long)]
    format: Option<String>,
    /// SigMF datatype name of raw data (cf32_le, ci16_le, ci8, cu8, ...).
    #[arg(long)]
    datatype: Option<String>,
    /// Sample rate, e.g. 1.024MS/s (needed for raw data).
    #[arg(long)]
    rate: Option<String>,
    /// Channels in raw data.
    #[arg(long)]
    channels: Option<usize>,
    /// Channel roles, comma-separated (i,q,sync,trigger,- or iq,sync,trigger,-).
    #[arg(long)]
    roles: Option<String>,
}

impl CaptureFlags {
    /// The capture reader parameters these flags set, as (name, value).
    fn params(self) -> Vec<(&'static str, String)> {
        let mut p = Vec::new();
        // A datatype alone means raw data: the format need not be said too.
        let format = self.format.or_else(|| self.datatype.as_ref().map(|_| "raw".to_string()));
        for (name, value) in [
            ("format", format),
            ("datatype", self.datatype),
            ("rate", self.rate),
            ("channels", self.channels.map(|c| c.to_string())),
            ("roles", self.roles),
        ] {
            if let Some(v) = value {
                p.push((name, v));
            }
        }
        p
    }
}

#[derive(Subcommand)]
enum Command {
    /// Run a graph on a capture and write its outputs.
    Run {
        /// The graph file.
        graph: PathBuf,
        /// Capture to read instead of the graph's default (sets the knob `input`).
        #[arg(long)]
        input: Option<PathBuf>,
        /// Output directory.
        #[arg(long, default_value = "out")]
        out: PathBuf,
        /// Override a knob: name=value (repeatable).
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        /// A YAML file of knob values (an installation's numbers).
        #[arg(long)]
        params: Option<PathBuf>,
        /// Print per-block statistics.
        #[arg(long)]
        stats: bool,
        /// No progress bar, no summary.
        #[arg(long)]
        quiet: bool,
        /// Worker threads (default: one per core; at most 256).
        #[arg(long, value_parser = clap::value_parser!(u16).range(1..=MAX_THREADS))]
        threads: Option<u16>,
        #[command(flatten)]
        capture: CaptureFlags,
        /// Print the rows of this table writer block on standard output as
        /// they are made (e.g. --stream angles); the table file is still written.
        #[arg(long, value_name = "TABLE")]
        stream: Option<String>,
        /// Format of the printed table: csv or jsonl (default: the table's own).
        #[arg(long, value_name = "FORMAT", requires = "stream")]
        stream_format: Option<String>,
    },
    /// Validate a graph as a run would up to its first sample (inputs opened,
    /// blocks built, nothing written) and print it resolved: blocks, wires,
    /// every value with its unit and origin.
    Check {
        graph: PathBuf,
        #[arg(long)]
        input: Option<PathBuf>,
        /// The output folder a run would use (outputs are checked against it).
        #[arg(long, default_value = "out")]
        out: PathBuf,
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        #[arg(long)]
        params: Option<PathBuf>,
        #[command(flatten)]
        capture: CaptureFlags,
    },
    /// List block kinds with their ports and parameters (or one kind in full).
    Blocks { kind: Option<String> },
    /// Run every sample in DIR through its graph and check it against its manifest.
    Regress {
        /// Folder of samples with their `*.check.yaml` manifests.
        #[arg(default_value = "samples")]
        dir: PathBuf,
        /// Also write every row as JSON to this file ('-': standard output).
        #[arg(long)]
        report: Option<PathBuf>,
        /// Also write a JUnit XML report to this file ('-': standard output).
        #[arg(long)]
        junit: Option<PathBuf>,
        /// Rewrite the golden files of samples whose other checks all pass, and say what moved.
        #[arg(long)]
        update: bool,
        /// Where each sample's outputs go, one folder per sample (default: a new folder under the system's temporary folder).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Samples run at once (default: one per core).
        #[arg(long)]
        jobs: Option<usize>,
    },
    /// Run a graph over many captures, each into its own folder, with a summary row per capture.
    #[command(args_conflicts_with_subcommands = true)]
    Batch {
        #[command(subcommand)]
        merge: Option<BatchMerge>,
        /// The graph file.
        #[arg(required = true)]
        graph: Option<PathBuf>,
        /// Captures to run (or give --list).
        captures: Vec<PathBuf>,
        /// A file naming one capture per line (relative paths from the file's folder).
        #[arg(long)]
        list: Option<PathBuf>,
        /// Batch folder: a folder per capture, summary.csv and timings.csv.
        #[arg(long, required = true)]
        out: Option<PathBuf>,
        /// A YAML file of setting values.
        #[arg(long)]
        params: Option<PathBuf>,
        /// Override a setting: name=value (repeatable).
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        /// Captures run at once (default: one per core).
        #[arg(long)]
        jobs: Option<usize>,
        /// Run only share K of N (K from 0 to N-1), e.g. a job array's index.
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
    },
    /// Write a synthetic capture with known truth from a scenario file.
    Synth {
        /// The scenario file (YAML).
        scenario: PathBuf,
        /// Output prefix: writes PREFIX.wav or PREFIX.sigmf-data/-meta, and PREFIX.truth.csv.
        #[arg(long)]
        out: PathBuf,
    },
    /// Measure the discriminator from a scan across a known source; writes a params file for GRAPH.
    Calibrate {
        /// The graph whose chain makes the dwell records (the one to calibrate).
        graph: PathBuf,
        /// The scan capture (sets the knob `input`).
        #[arg(long)]
        input: Option<PathBuf>,
        /// Pointing telemetry CSV: time_s,az_deg,el_deg.
        #[arg(long)]
        pointing: PathBuf,
        /// Source position AZ,EL in degrees.
        #[arg(long)]
        source: String,
        /// Added to the telemetry's time_s to put it on the capture's clock (e.g. -0.25s).
        #[arg(long, default_value = "0", allow_hyphen_values = true)]
        clock_offset: String,
        /// Dwells further than this (deg) off the pair's axis across it are not used (default: a tenth of the beamwidth setting).
        #[arg(long)]
        cross_limit: Option<f64>,
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        #[arg(long)]
        params: Option<PathBuf>,
        /// Output directory.
        #[arg(long)]
        out: PathBuf,
        /// Worker threads (default: one per core).
        #[arg(long)]
        threads: Option<usize>,
    },
    /// Describe a capture: format, rate, channels and roles, levels, envelope periodicities.
    Inspect {
        /// WAV, SigMF recording (either file or base name), raw file, or '-' for standard input.
        capture: String,
        #[command(flatten)]
        how: CaptureFlags,
        /// Look at no more than this many seconds from the start (the installation figures: at most 10).
        #[arg(long, default_value_t = 60.0)]
        seconds: f64,
        /// Print only a params file for this graph (measured installation settings; figures as comments).
        #[arg(long, value_name = "GRAPH")]
        params_for: Option<PathBuf>,
    },
}

#[derive(Subcommand)]
enum BatchMerge {
    /// Combine the summaries of a list's shards into one, in list order.
    Merge {
        /// The shards' batch folders.
        #[arg(required = true)]
        dirs: Vec<PathBuf>,
        /// Folder for the merged summary.csv and timings.csv.
        #[arg(long)]
        out: PathBuf,
    },
}

fn cores() -> usize {
    std::thread::available_parallelism().map(|n| n.get()).unwrap_or(2)
}

/// Most worker threads `run` starts: more only cost memory and start-up
/// (each worker has its own stack), and thousands fail to spawn at all.
const MAX_THREADS: i64 = 256;

fn main() -> ExitCode {
    commands::bus_error::install();
    match dispatch(Cli::parse()) {
        Ok(code) => code,
        Err(e) => {
            report(&e);
            exit_code(e.exit_code())
        }
    }
}

/// Print an error once. If standard error itself is gone there is no one to tell.
fn report(e: &Error) {
    let _ = write_all(&mut std::io::stderr(), &format!("error: {e}\n"));
}

fn exit_code(code: i32) -> ExitCode {
    ExitCode::from(u8::try_from(code).unwrap_or(2))
}

/// Write `text` to standard output. A reader that went away (`| head -1`)
/// is not an error: the rest is dropped quietly and the command ends with
/// its own status. Any other failure (a full disk) is reported.
fn print_out(text: &str) -> Result<(), Error> {
    write_quietly(&mut std::io::stdout(), text, "standard output")
}

/// As [`print_out`], for messages and summaries on standard error.
fn print_err(text: &str) -> Result<(), Error> {
    write_quietly(&mut std::io::stderr(), text, "standard error")
}

fn write_quietly(w: &mut dyn Write, text: &str, what: &str) -> Result<(), Error> {
    match write_all(w, text) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(Error::io(format!("cannot write to {what}"))(e)),
        _ => Ok(()),
    }
}

fn write_all(w: &mut dyn Write, text: &str) -> std::io::Result<()> {
    w.write_all(text.as_bytes())?;
    w.flush()
}

/// Run the command; Ok carries the exit code of a command that ended
/// without an error of its own (a run stopped by a signal).
fn dispatch(cli: Cli) -> Result<ExitCode, Error> {
    match cli.command {
        Command::Run { graph, input, out, set, params, stats, quiet, threads, capture, stream, stream_format } => {
            let args = commands::run::RunArgs {
                graph,
                overrides: commands::overrides(params.as_deref(), &set, input.as_ref())?,
                out_dir: out,
                threads: threads.map(usize::from),
                quiet,
                stats,
                capture: capture.params(),
                stream,
                stream_format,
            };
            run(&args)
        }
        Command::Check { graph, input, out, set, params, capture } => {
            let args = commands::check::CheckArgs {
                graph,
                overrides: commands::overrides(params.as_deref(), &set, input.as_ref())?,
                out_dir: out,
                capture: capture.params(),
            };
            done(print_out(&commands::check::check_graph(&args)?))
        }
        Command::Regress { dir, report, junit, update, out, jobs } => {
            done(regress(dir, report, junit, update, out, jobs))
        }
        Command::Batch { merge: Some(BatchMerge::Merge { dirs, out }), .. } => {
            done(commands::batch::batch_merge(&dirs, &out))
        }
        Command::Batch { merge: None, graph, captures, list, out, params, set, jobs, shard } => {
            let cmd = commands::batch::BatchCommand {
                graph: graph.unwrap_or_default(),
                captures,
                list,
                out: out.unwrap_or_default(),
                params,
                sets: set,
                jobs: jobs.unwrap_or_else(cores),
                shard,
            };
            done(commands::batch::batch(&cmd))
        }
        Command::Inspect { capture, how, seconds, params_for } => {
            let args = commands::inspect::args_from_text(
                capture,
                how.format.as_deref().unwrap_or("auto"),
                how.datatype,
                how.rate.as_deref(),
                how.channels,
                how.roles.as_deref(),
                seconds,
            )?;
            match params_for {
                Some(graph) => done(print_out(&commands::inspect::params_for(&args, &graph)?)),
                None => done(print_out(&commands::inspect::inspect(&args)?)),
            }
        }
        Command::Calibrate { graph, input, pointing, source, clock_offset, cross_limit, set, params, out, threads } => {
            let args = lobeflow::calibrate::CalibrateArgs {
                graph,
                overrides: commands::overrides(params.as_deref(), &set, input.as_ref())?,
                pointing,
                source: commands::calibrate::parse_source(&source)?,
                clock_offset_s: commands::calibrate::parse_seconds(&clock_offset, "--clock-offset")?,
                cross_limit_deg: cross_limit,
                out_dir: out,
                threads,
            };
            done(print_err(&commands::calibrate::run(&args)?))
        }
        Command::Blocks { kind } => {
            done(print_out(&commands::catalog::catalog(&lobeflow::registry(), kind.as_deref())?))
        }
        Command::Synth { scenario, out } => {
            let (_, summary) = commands::synth::synth(&scenario, &out)?;
            done(print_err(&summary))
        }
    }
}

/// A command that has no exit code of its own: 0 when it succeeded.
fn done(result: Result<(), Error>) -> Result<ExitCode, Error> {
    result.map(|()| ExitCode::SUCCESS)
}

/// `run`: the summary is printed here, so a closed or full standard error
/// is handled in one place. A run stopped by a signal ends with 128 + the
/// signal, whether it kept its outputs (a live input cut short) or not.
fn run(args: &commands::run::RunArgs) -> Result<ExitCode, Error> {
    let (result, signal_code) = commands::run::run_with_exit(args);
    if let Ok(report) = &result
        && !args.quiet
    {
        print_err(&commands::run::summary(report, args.stats))?;
    }
    match (result, signal_code) {
        (Ok(_), None) => Ok(ExitCode::SUCCESS),
        (result, Some(code)) => {
            if let Err(e) = result {
                report(&e);
            }
            Ok(exit_code(code))
        }
        (Err(e), None) => Err(e),
    }
}

/// `regress`: with a report on standard output, the table a person reads
/// goes to standard error.
fn regress(
    dir: PathBuf,
    report: Option<PathBuf>,
    junit: Option<PathBuf>,
    update: bool,
    out: Option<PathBuf>,
    jobs: Option<usize>,
) -> Result<(), Error> {
    let out = out.unwrap_or_else(commands::regress::default_out);
    let to_stdout = [&report, &junit].iter().any(|p| p.as_deref() == Some(std::path::Path::new("-")));
    let args = commands::regress::RegressArgs { dir, report, junit, update, out, jobs: jobs.unwrap_or_else(cores) };
    let regression = commands::regress::regress(&args)?;
    let mut text = commands::regress::table(&regression.rows);
    for moved in &regression.updates {
        text.push_str(&format!("golden {moved}"));
    }
    text.push_str(&format!("outputs in {}\n", args.out.display()));
    if to_stdout {
        print_err(&text)?
    } else {
        print_out(&text)?
    }
    regression.outcome()
}
