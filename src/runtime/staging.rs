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

#[cfg(test)]
mod tests {
    //! The failure paths of committing a run's outputs: nothing is renamed
    //! into place unless everything is, earlier files come back, and the
    //! staged files are gone afterwards.

    use super::*;
    use lobeflow_blocks::{DeliveryPolicy, FileStager, OutputFile};
    use std::io::Write;

    fn out_dir(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("lobeflow-staging-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    fn write(stager: &FileStager, path: &Path, text: &str) -> PathBuf {
        let mut f: OutputFile = stager.create(path).unwrap();
        f.write_all(text.as_bytes()).unwrap();
        f.finish(stager).unwrap();
        staged_files(stager).last().cloned().unwrap()
    }

    fn staged_files(stager: &FileStager) -> Vec<PathBuf> {
        let mut files: Vec<PathBuf> = std::fs::read_dir(stager.folder().unwrap())
            .unwrap()
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.file_name().is_some_and(|n| n != LOCK))
            .collect();
        files.sort();
        files
    }

    #[test]
    fn equal_names_are_staged_apart() {
        let out = out_dir("names");
        let staging = Staging::create(&out).unwrap();
        let stager = FileStager::in_folder(staging.dir().to_path_buf(), DeliveryPolicy::default());
        std::fs::create_dir_all(out.join("a")).unwrap();
        std::fs::create_dir_all(out.join("b")).unwrap();
        write(&stager, &out.join("a/x.csv"), "first");
        write(&stager, &out.join("b/x.csv"), "second");
        assert_eq!(staged_files(&stager).len(), 2, "two staged files for two outputs named x.csv");
        stager.commit().unwrap();
        assert_eq!(std::fs::read_to_string(out.join("a/x.csv")).unwrap(), "first");
        assert_eq!(std::fs::read_to_string(out.join("b/x.csv")).unwrap(), "second");
    }

    #[test]
    fn a_failed_rename_puts_every_earlier_file_back() {
        let out = out_dir("undo");
        std::fs::write(out.join("angles.csv"), "previous run").unwrap();
        let staging = Staging::create(&out).unwrap();
        let stager = FileStager::in_folder(staging.dir().to_path_buf(), DeliveryPolicy::default());
        write(&stager, &out.join("angles.csv"), "this run");
        // The second output's staged file vanishes before the commit, so its
        // rename fails after the first one was made.
        let lost = write(&stager, &out.join("dwells.csv"), "this run");
        std::fs::remove_file(&lost).unwrap();
        let e = stager.commit().expect_err("the commit must fail");
        assert!(e.to_string().contains("dwells.csv"), "{e}");
        assert_eq!(std::fs::read_to_string(out.join("angles.csv")).unwrap(), "previous run");
        assert!(!out.join("dwells.csv").exists());
        assert!(staged_files(&stager).is_empty(), "staged files left: {:?}", staged_files(&stager));
        drop(staging);
        let left: Vec<_> = std::fs::read_dir(&out).unwrap().flatten().map(|e| e.file_name()).collect();
        assert_eq!(left, vec![std::ffi::OsString::from("angles.csv")], "only the earlier file is left");
    }

    #[test]
    fn a_final_place_that_cannot_be_made_renames_nothing() {
        let out = out_dir("parent");
        // A file where the output's folder would have to be.
        std::fs::write(out.join("plots"), "not a folder").unwrap();
        let staging = Staging::create(&out).unwrap();
        let stager = FileStager::in_folder(staging.dir().to_path_buf(), DeliveryPolicy::default());
        write(&stager, &out.join("angles.csv"), "this run");
        write(&stager, &out.join("plots/angles.png"), "png");
        assert!(stager.commit().is_err());
        assert!(!out.join("angles.csv").exists(), "renamed although another output could not be placed");
        assert!(staged_files(&stager).is_empty(), "staged files left: {:?}", staged_files(&stager));
    }

    #[test]
    fn a_discarded_run_leaves_nothing() {
        let out = out_dir("discard");
        let staging = Staging::create(&out).unwrap();
        let stager = FileStager::in_folder(staging.dir().to_path_buf(), DeliveryPolicy::default());
        write(&stager, &out.join("angles.csv"), "this run");
        // An output still being written when the run fails.
        let mut unfinished = stager.create(&out.join("dwells.csv")).unwrap();
        unfinished.write_all(b"half").unwrap();
        drop(unfinished);
        stager.discard();
        assert!(staged_files(&stager).is_empty());
        drop(staging);
        assert_eq!(std::fs::read_dir(&out).unwrap().count(), 0, "the output folder is empty again");
    }
}
