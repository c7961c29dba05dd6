//! The private staging folder of a run inside its output folder.
//!
//! Every output of a run is written into `OUT/.lobeflow-staging-PID-N/` and
//! renamed into place only when the whole run succeeded. The folder holds a
//! `lock` file the run keeps locked (an advisory `flock`) while it lives: a
//! later run that finds a staging folder whose lock it can take knows the
//! owner was killed, and removes the folder. Nothing outside the output
//! folder is ever deleted, and inside it only these folders.

use std::fs::File;
use std::path::{Path, PathBuf};

/// Names of staging folders start with this.
pub const PREFIX: &str = ".lobeflow-staging-";
const LOCK: &str = "lock";
/// A staging folder younger than this may still be getting its lock file.
const LOCKLESS_GRACE: std::time::Duration = std::time::Duration::from_secs(30);

/// A run's staging folder; removed with everything in it when dropped.
pub struct Staging {
    dir: PathBuf,
    /// Held (and locked) for the life of the run.
    _lock: File,
}

impl Staging {
    /// Make a fresh staging folder in `out_dir` and lock it.
    pub fn create(out_dir: &Path) -> std::io::Result<Staging> {
        for attempt in 0u32.. {
            let dir = out_dir.join(format!("{PREFIX}{}-{attempt}", std::process::id()));
            match std::fs::create_dir(&dir) {
                Ok(()) => {
                    let lock = File::create(dir.join(LOCK))?;
                    if !try_lock(&lock) {
                        return Err(std::io::Error::other(format!("cannot lock {}", dir.display())));
                    }
                    return Ok(Staging { dir, _lock: lock });
                }
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && attempt < 1000 => {}
                Err(e) => {
                    return Err(std::io::Error::new(e.kind(), format!("cannot create {}: {e}", dir.display())));
                }
            }
        }
        unreachable!("the loop returns")
    }

    pub fn dir(&self) -> &Path {
        &self.dir
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

/// Remove staging folders in `out_dir` left by runs that were killed; returns
/// one line per folder removed. Folders of runs still going are left alone.
pub fn remove_stale(out_dir: &Path) -> Vec<String> {
    let Ok(entries) = std::fs::read_dir(out_dir) else {
        return Vec::new();
    };
    let mut removed = Vec::new();
    for entry in entries.flatten() {
        let name = entry.file_name();
        let is_staging = name.to_str().is_some_and(|n| n.starts_with(PREFIX));
        // Only real folders (not links to elsewhere) are ever removed.
        if !is_staging || !entry.file_type().is_ok_and(|t| t.is_dir()) {
            continue;
        }
        let dir = entry.path();
        if !abandoned(&dir) {
            continue;
        }
        let files = std::fs::read_dir(&dir).map(|d| d.count()).unwrap_or(0).saturating_sub(1);
        if std::fs::remove_dir_all(&dir).is_ok() {
            removed.push(format!(
                "removed {} left by an earlier run that did not finish ({files} unfinished file(s))",
                dir.display()
            ));
        }
    }
    removed
}

/// True when no live run holds the folder's lock.
fn abandoned(dir: &Path) -> bool {
    match File::open(dir.join(LOCK)) {
        Ok(f) => try_lock(&f),
        // Killed between making the folder and its lock file, or still
        // making it: only an old one is taken as abandoned.
        Err(_) => std::fs::metadata(dir)
            .and_then(|m| m.modified())
            .is_ok_and(|t| t.elapsed().is_ok_and(|age| age > LOCKLESS_GRACE)),
    }
}

/// Take the exclusive advisory lock without waiting. The lock lasts until
/// the file is closed (or the process dies).
fn try_lock(f: &File) -> bool {
    f.try_lock().is_ok()
}
