//! The `lobeflow` command: parse, dispatch to one entry point, print any
//! error once, exit with its code (0 ok, 1 a check failed, 2 usage or input).

use clap::{Parser, Subcommand};
use lobeflow::Error;
use lobeflow::commands;
use std::io::Write;
use std::path::PathBuf;

#[derive(Parser)]
#[command(name = "lobeflow", version, about = "Lobe-switching angle trackers from recorded IQ and WAV captures")]
struct Cli {
    #[command(subcommand)]
    command: Command,
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
    },
    /// Validate a graph and print it resolved: blocks, wires, knob values and their origins.
    Check {
        graph: PathBuf,
        #[arg(long)]
        input: Option<PathBuf>,
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        #[arg(long)]
        params: Option<PathBuf>,
    },
    /// List block kinds with their ports and parameters (or one kind in full).
    Blocks { kind: Option<String> },
    /// Run every sample in DIR through its graph and check it against its manifest.
    Regress {
        /// Folder of samples with their `*.check.yaml` manifests.
        #[arg(default_value = "samples")]
        dir: PathBuf,
        /// Also write the table as JSON to this file.
        #[arg(long)]
        report: Option<PathBuf>,
        /// Rewrite golden files from this run and say what changed.
        #[arg(long)]
        update: bool,
        /// Where each sample's outputs go (one folder per sample).
        #[arg(long, default_value = "target/regress")]
        out: PathBuf,
        /// Samples run at once (default: one per core).
        #[arg(long)]
        jobs: Option<usize>,
    },
    /// Write a synthetic capture with known truth from a scenario file.
    Synth {
        /// The scenario file (YAML).
        scenario: PathBuf,
        /// Output prefix: writes PREFIX.wav or PREFIX.sigmf-data/-meta, and PREFIX.truth.csv.
        #[arg(long)]
        out: PathBuf,
    },
    /// Describe a capture: format, rate, channels and roles, levels, envelope periodicities.
    Inspect {
        /// WAV, SigMF recording (either file or base name), raw file, or '-' for standard input.
        capture: String,
        /// auto, wav, sigmf or raw.
        #[arg(long, default_value = "auto")]
        format: String,
        /// SigMF datatype name of raw data (cf32_le, ci16_le, ci8, cu8, ...).
        #[arg(long)]
        datatype: Option<String>,
        /// Sample rate, e.g. 2.4MS/s (needed for raw data).
        #[arg(long)]
        rate: Option<String>,
        /// Channels in a raw file.
        #[arg(long)]
        channels: Option<usize>,
        /// Channel roles, comma-separated (i,q,sync,trigger,- or iq,sync,trigger,-).
        #[arg(long)]
        roles: Option<String>,
        /// Look at no more than this many seconds from the start.
        #[arg(long, default_value_t = 60.0)]
        seconds: f64,
    },
}

/// Most worker threads `run` starts: more only cost memory and start-up
/// (each worker has its own stack), and thousands fail to spawn at all.
const MAX_THREADS: i64 = 256;

fn main() {
    let cli = Cli::parse();
    let code = match dispatch(cli) {
        Ok(()) => 0,
        Err(e) => {
            // If standard error itself is gone there is no one to tell.
            let _ = write_all(&mut std::io::stderr(), &format!("error: {e}\n"));
            e.exit_code()
        }
    };
    std::process::exit(code);
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
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => {
            Err(Error::Output(format!("cannot write to {what}: {e}")))
        }
        _ => Ok(()),
    }
}

fn write_all(w: &mut dyn Write, text: &str) -> std::io::Result<()> {
    w.write_all(text.as_bytes())?;
    w.flush()
}

fn dispatch(cli: Cli) -> Result<(), Error> {
    match cli.command {
        Command::Run { graph, input, out, set, params, stats, quiet, threads } => {
            let overrides = commands::overrides(params.as_deref(), &set, input.as_ref())?;
            let threads = threads.map(usize::from);
            let args = commands::run::RunArgs { graph, overrides, out_dir: out, threads, quiet, stats };
            let report = commands::run::run_graph(&args)?;
            if !quiet {
                print_err(&commands::run::summary(&report, stats))?;
            }
            Ok(())
        }
        Command::Check { graph, input, set, params } => {
            let overrides = commands::overrides(params.as_deref(), &set, input.as_ref())?;
            print_out(&commands::check::check(&graph, &overrides)?)
        }
        Command::Regress { dir, report, update, out, jobs } => {
            let jobs = jobs.unwrap_or_else(|| std::thread::available_parallelism().map(|n| n.get()).unwrap_or(2));
            let args = commands::regress::RegressArgs { dir, report, update, out, jobs };
            let rows = commands::regress::regress(&args)?;
            print_out(&commands::regress::table(&rows))?;
            match rows.iter().filter(|r| !r.passed).count() {
                0 => Ok(()),
                n => Err(Error::Failed(format!("{n} regression checks failed"))),
            }
        }
        Command::Inspect { capture, format, datatype, rate, channels, roles, seconds } => {
            let args = commands::inspect::args_from_text(
                capture,
                &format,
                datatype,
                rate.as_deref(),
                channels,
                roles.as_deref(),
                seconds,
            )?;
            print_out(&commands::inspect::inspect(&args)?)
        }
        Command::Blocks { kind } => print_out(&commands::catalog::catalog(&lobeflow::registry(), kind.as_deref())?),
        Command::Synth { scenario, out } => {
            let (_, summary) = commands::synth::synth(&scenario, &out)?;
            print_err(&summary)
        }
    }
}
