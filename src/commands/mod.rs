//! Entry points of the `lobeflow` command, one per subcommand. `main` parses
//! the command line and calls one of these; each returns an [`Error`] that
//! `main` prints once.

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
