//! `lobeflow batch GRAPH CAPTURES... | --list FILE --out DIR` and
//! `lobeflow batch merge DIR... --out DIR`.

use crate::batch::plan::{Shard, read_list};
use crate::batch::{BatchArgs, merge, run_batch};
use crate::error::Error;
use std::path::{Path, PathBuf};

pub struct BatchCommand {
    pub graph: PathBuf,
    pub captures: Vec<PathBuf>,
    pub list: Option<PathBuf>,
    pub out: PathBuf,
    pub params: Option<PathBuf>,
    pub sets: Vec<String>,
    pub jobs: usize,
    pub shard: Option<String>,
}

/// Run the batch; exit 2 (after writing the summary) when a capture failed.
pub fn batch(cmd: &BatchCommand) -> Result<(), Error> {
    let (captures, base) = match &cmd.list {
        Some(_) if !cmd.captures.is_empty() => {
            return Err(Error::Usage("give captures after the graph or --list FILE, not both".into()));
        }
        Some(list) => (read_list(list)?, list.parent().map(Path::to_path_buf).unwrap_or_default()),
        None => (cmd.captures.iter().map(|c| c.to_string_lossy().into_owned()).collect(), PathBuf::new()),
    };
    let args = BatchArgs {
        graph: cmd.graph.clone(),
        captures,
        base,
        overrides: super::overrides(cmd.params.as_deref(), &cmd.sets, None)?,
        out: cmd.out.clone(),
        jobs: cmd.jobs,
        shard: cmd.shard.as_deref().map(Shard::parse).transpose()?.unwrap_or(Shard::WHOLE),
    };
    let report = run_batch(&args)?;
    eprintln!(
        "{} captures ran, {} complete from an earlier run, {} failed; summary in {}",
        report.ran,
        report.skipped,
        report.failed.len(),
        args.out.join("summary.csv").display()
    );
    match report.failed.len() {
        0 => Ok(()),
        n => Err(Error::Input(format!(
            "{n} captures failed (their rows in summary.csv say why; run again to retry them)"
        ))),
    }
}

pub fn batch_merge(dirs: &[PathBuf], out: &Path) -> Result<(), Error> {
    let n = merge::merge(dirs, out)?;
    eprintln!("merged {n} captures from {} shards into {}", dirs.len(), out.join("summary.csv").display());
    Ok(())
}
