//! Checks on the files a graph will write, made before any sample flows
//! (also by `lobeflow check`): every output inside the output folder, none
//! the same as an input or as another output, none where a folder is, and at
//! most one table on standard output.

use crate::error::Error;
use crate::graph::ResolvedGraph;
use lobeflow_blocks::kinds::table_writer::STDOUT_PATH;
use lobeflow_blocks::pictures::is_picture_kind;
use lobeflow_blocks::{ParamType, Value};
use std::path::{Component, Path, PathBuf};

/// Extensions writers add to a base name (pictures write `BASE.png` and
/// `BASE.svg`; a SigMF recording has a data and a meta file). A picture
/// claims both names whatever its `formats`: two pictures never share a
/// base name, so a page that shows a PNG only where no SVG of its name was
/// written shows every picture once.
const PICTURE_EXTENSIONS: &[&str] = &["png", "svg"];

/// An output-path parameter resolved against the output folder (absolute
/// paths stay as they are; `-` is standard output).
pub fn output_path(out_dir: &Path, p: &str) -> String {
    if p == STDOUT_PATH || Path::new(p).is_absolute() {
        p.to_string()
    } else {
        out_dir.join(p).to_string_lossy().into_owned()
    }
}

/// `path` made absolute with `.` and `..` taken out, symbolic links of its
/// existing part followed, so two spellings of one file compare equal.
pub fn normalize(path: &Path) -> PathBuf {
    let absolute =
        if path.is_absolute() { path.to_path_buf() } else { std::env::current_dir().unwrap_or_default().join(path) };
    let mut lexical = PathBuf::new();
    for c in absolute.components() {
        match c {
            Component::ParentDir => {
                lexical.pop();
            }
            Component::CurDir => {}
            c => lexical.push(c),
        }
    }
    // Follow links in the longest part that exists.
    let mut existing = lexical.clone();
    let mut rest = Vec::new();
    while !existing.exists() {
        match (existing.file_name().map(|n| n.to_os_string()), existing.parent()) {
            (Some(name), Some(parent)) => {
                rest.push(name);
                existing = parent.to_path_buf();
            }
            _ => return lexical,
        }
    }
    let mut real = std::fs::canonicalize(&existing).unwrap_or(existing);
    for name in rest.into_iter().rev() {
        real.push(name);
    }
    real
}

/// The files a block's output parameter stands for.
fn files_of(kind: &str, resolved: &Path) -> Vec<PathBuf> {
    if is_picture_kind(kind) {
        let base = resolved.as_os_str().to_os_string();
        PICTURE_EXTENSIONS
            .iter()
            .map(|ext| {
                let mut p = base.clone();
                p.push(format!(".{ext}"));
                PathBuf::from(p)
            })
            .collect()
    } else if resolved.extension().is_some_and(|e| e == "sigmf-data") {
        vec![resolved.to_path_buf(), resolved.with_extension("sigmf-meta")]
    } else {
        vec![resolved.to_path_buf()]
    }
}

/// The files an input parameter reads (a SigMF recording is two).
fn inputs_of(path: &str) -> Vec<PathBuf> {
    let p = Path::new(path);
    match p.extension().and_then(|e| e.to_str()) {
        Some("sigmf-meta" | "sigmf-data") => vec![p.with_extension("sigmf-meta"), p.with_extension("sigmf-data")],
        _ => vec![p.to_path_buf(), p.with_extension("sigmf-meta"), p.with_extension("sigmf-data")],
    }
}

/// Check the outputs of `graph` written into `out_dir`; `stream_table` names
/// a table writer echoed on standard output. Errors name block and parameter.
pub fn check_outputs(graph: &ResolvedGraph, out_dir: &Path, stream_table: Option<&str>) -> Result<(), Error> {
    let out_root = normalize(out_dir);
    let mut inputs = Vec::new();
    for b in &graph.blocks {
        for ps in b.spec.params {
            if let (ParamType::InputPath, Some(Value::Text(p))) = (&ps.ty, b.params.get(ps.name))
                && !p.is_empty()
                && p != "-"
            {
                inputs.extend(inputs_of(p).iter().map(|f| (normalize(f), b.name.as_str(), ps.name)));
            }
        }
    }
    check_printed_tables(graph, stream_table)?;
    let mut outputs: Vec<(PathBuf, &str, &str)> = Vec::new();
    for b in &graph.blocks {
        for ps in b.spec.params {
            let (ParamType::OutputPath, Some(Value::Text(p))) = (&ps.ty, b.params.get(ps.name)) else {
                continue;
            };
            let place = |what: String| Error::Block {
                block: b.name.clone(),
                kind: b.spec.kind.to_string(),
                message: format!("parameter '{}' = '{p}': {what}", ps.name),
            };
            if p.trim() == STDOUT_PATH && b.spec.kind == TABLE_KIND {
                continue;
            }
            let resolved = PathBuf::from(output_path(out_dir, p));
            let real = normalize(&resolved);
            if !real.starts_with(&out_root) || real == out_root {
                return Err(place(format!(
                    "the output would be {}, which is not inside the output folder {}; outputs go inside it",
                    real.display(),
                    out_root.display()
                )));
            }
            for file in files_of(b.spec.kind, &real) {
                if file.is_dir() {
                    return Err(place(format!("{} is a folder; an output file cannot replace it", file.display())));
                }
                if let Some((_, blk, param)) = inputs.iter().find(|(i, _, _)| *i == file) {
                    return Err(place(format!(
                        "{} is an input of the run (block '{blk}', parameter '{param}'); an output never replaces an input",
                        file.display()
                    )));
                }
                if let Some((_, blk, param)) = outputs.iter().find(|(o, _, _)| *o == file) {
                    return Err(place(format!(
                        "{} is also written by block '{blk}' (parameter '{param}'); each output needs its own name",
                        file.display()
                    )));
                }
                outputs.push((file, b.name.as_str(), ps.name));
            }
        }
    }
    Ok(())
}

const TABLE_KIND: &str = lobeflow_blocks::kinds::table_writer::SPEC.kind;

/// `stream_table` names a table writer, and at most one table prints on
/// standard output (it and those whose path is `-`).
pub fn check_printed_tables(graph: &ResolvedGraph, stream_table: Option<&str>) -> Result<(), Error> {
    let mut to_stdout = Vec::new();
    if let Some(name) = stream_table {
        let Some(i) = graph.block_index(name) else {
            return Err(Error::Usage(format!("--stream {name}: the graph has no block named '{name}'")));
        };
        if graph.blocks[i].spec.kind != TABLE_KIND {
            return Err(Error::Usage(format!(
                "--stream {name}: block '{name}' is a {}, not a {TABLE_KIND}",
                graph.blocks[i].spec.kind
            )));
        }
        to_stdout.push(name.to_string());
    }
    for b in graph.blocks.iter().filter(|b| b.spec.kind == TABLE_KIND) {
        let dash = b.spec.params.iter().any(|ps| {
            matches!((&ps.ty, b.params.get(ps.name)), (ParamType::OutputPath, Some(Value::Text(p))) if p.trim() == STDOUT_PATH)
        });
        if dash && !to_stdout.contains(&b.name) {
            to_stdout.push(b.name.clone());
        }
    }
    if to_stdout.len() > 1 {
        return Err(Error::Usage(format!(
            "tables {} would all print on standard output; only one table can",
            to_stdout.join(", ")
        )));
    }
    Ok(())
}
