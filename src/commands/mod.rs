//! Entry points of the `lobeflow` command, one per subcommand. `main` parses
//! the command line and calls one of these; each returns an [`Error`] that
//! `main` prints once.

pub mod batch;
pub mod bus_error;
pub mod calibrate;
pub mod catalog;
pub mod check;
pub mod inspect;
pub mod regress;
pub mod run;
pub mod synth;

use crate::error::Error;
use crate::graph::Overrides;
use std::path::{Path, PathBuf};

/// Knob overrides shared by `run` and `check`: params file first, then each
/// `--set` in order, then `--input` (which sets the knob named `input`).
pub fn overrides(params: Option<&Path>, sets: &[String], input: Option<&PathBuf>) -> Result<Overrides, Error> {
    let mut o = Overrides::default();
    if let Some(p) = params {
        o.add_params_file(p)?;
    }
    for s in sets {
        o.set_text(s).map_err(Error::Usage)?;
    }
    if let Some(i) = input {
        o.set("input", lobeflow_blocks::RawValue::Text(i.to_string_lossy().into_owned()));
    }
    Ok(o)
}

/// Write a report or table: to standard output for `-`, else through a
/// temporary file beside `path` renamed into place (never half a file).
pub fn write_output(path: &Path, text: &str) -> Result<(), Error> {
    use std::io::Write;
    if path == Path::new("-") {
        let mut out = std::io::stdout().lock();
        return out
            .write_all(text.as_bytes())
            .and_then(|_| out.flush())
            .map_err(|e| Error::Output(format!("cannot write to standard output: {e}")));
    }
    let tmp = lobeflow_blocks::FileStager::temp_path(path);
    std::fs::write(&tmp, text).and_then(|_| std::fs::rename(&tmp, path)).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::Output(format!("cannot write {}: {e}", path.display()))
    })
}
