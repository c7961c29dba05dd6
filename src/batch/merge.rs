//! `batch merge`: the summaries of a list's shards combined in list order.

use super::plan::Plan;
use crate::error::Error;
use std::path::{Path, PathBuf};

/// Combine the batch folders `dirs` (one per shard of the same list, in any
/// order) into `out/summary.csv` and `out/timings.csv`.
pub fn merge(dirs: &[PathBuf], out: &Path) -> Result<usize, Error> {
    if dirs.is_empty() {
        return Err(Error::Usage("batch merge needs the shards' folders".into()));
    }
    let plans: Vec<Plan> = dirs.iter().map(|d| Plan::load(d)).collect::<Result<_, _>>()?;
    let first = &plans[0];
    let count = first.shard.count;
    let mut seen = vec![false; count];
    for (d, p) in dirs.iter().zip(&plans) {
        if p.captures != first.captures || p.shard.count != count {
            return Err(Error::Input(format!(
                "{} holds shard {} of another list than {} (shard {}): merge shards of one list",
                d.display(),
                p.shard,
                dirs[0].display(),
                first.shard
            )));
        }
        if std::mem::replace(&mut seen[p.shard.index], true) {
            return Err(Error::Input(format!("shard {} is given twice ({})", p.shard, d.display())));
        }
    }
    let missing: Vec<String> = (0..count).filter(|k| !seen[*k]).map(|k| format!("{k}/{count}")).collect();
    if !missing.is_empty() {
        return Err(Error::Input(format!("shards missing: {}", missing.join(", "))));
    }
    let mut summary = Vec::new();
    let mut timings = Vec::new();
    for (d, p) in dirs.iter().zip(&plans) {
        summary.push((p.shard.index, read_lines(&d.join("summary.csv"), p.mine().len())?));
        timings.push((p.shard.index, read_lines(&d.join("timings.csv"), p.mine().len())?));
    }
    let merged_summary = interleave(summary, count, "summary.csv")?;
    let merged_timings = interleave(timings, count, "timings.csv")?;
    std::fs::create_dir_all(out).map_err(|e| Error::Output(format!("cannot create {}: {e}", out.display())))?;
    crate::commands::write_output(&out.join("summary.csv"), &merged_summary)?;
    crate::commands::write_output(&out.join("timings.csv"), &merged_timings)?;
    Ok(first.captures.len())
}

/// Header and rows of a shard's table, which must hold `rows` rows.
fn read_lines(path: &Path, rows: usize) -> Result<(String, Vec<String>), Error> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("cannot read {}: {e} (did that shard finish?)", path.display())))?;
    let mut lines = text.split_inclusive('\n');
    let header = lines.next().unwrap_or("").to_string();
    let body: Vec<String> = lines.map(String::from).collect();
    if body.len() != rows {
        return Err(Error::Input(format!(
            "{} has {} rows, but its shard holds {rows} captures (did that shard finish?)",
            path.display(),
            body.len()
        )));
    }
    Ok((header, body))
}

/// Capture `i` of the list is row `i / count` of shard `i % count`.
fn interleave(mut shards: Vec<(usize, (String, Vec<String>))>, count: usize, what: &str) -> Result<String, Error> {
    shards.sort_by_key(|(k, _)| *k);
    let header = shards[0].1.0.clone();
    if shards.iter().any(|(_, (h, _))| *h != header) {
        return Err(Error::Input(format!("the shards' {what} files have different columns")));
    }
    let total: usize = shards.iter().map(|(_, (_, rows))| rows.len()).sum();
    let mut text = header;
    for i in 0..total {
        text.push_str(&shards[i % count].1.1[i / count]);
    }
    Ok(text)
}
