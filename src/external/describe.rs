//! An external program's description of itself: its ports with their item
//! kinds and its parameters with type, unit, default, range and doc, read
//! from `PROGRAM --describe` or from a `*.block.yaml` file beside it, and
//! turned into a [`BlockSpec`] so validation, `lobeflow blocks` and `--set`
//! treat it like a built-in kind.
//!
//! `BlockSpec` holds `'static` text (built-in kinds are constants, copied
//! freely through graph resolution and the runtime). A described spec leaks
//! its text once per distinct program, arguments, folder and program-file
//! version, remembered in a process-wide table: a few hundred bytes per
//! program a process ever describes, in exchange for one spec type for all
//! kinds.

use super::framing::kind_from_name;
use super::{LAUNCH_PARAMS, Launch, SPEC};
use lobeflow_blocks::{BlockSpec, ParamSpec, ParamType, PortSpec, RawValue, Unit};
use serde::Deserialize;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::{Mutex, OnceLock};
use std::time::{Duration, Instant, SystemTime};

/// The flag a program is started with to print its description.
pub const DESCRIBE_FLAG: &str = "--describe";
/// Longest wait for a description (an interpreter loading its libraries on
/// a busy machine can take seconds; the block's own timeout may be shorter).
const DESCRIBE_WAIT: Duration = Duration::from_secs(60);

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Description {
    name: String,
    #[serde(default)]
    doc: String,
    #[serde(default)]
    inputs: Vec<PortDescription>,
    #[serde(default)]
    outputs: Vec<PortDescription>,
    #[serde(default)]
    params: Vec<ParamDescription>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PortDescription {
    name: String,
    kind: String,
    #[serde(default)]
    doc: String,
    #[serde(default = "yes")]
    required: bool,
}

fn yes() -> bool {
    true
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ParamDescription {
    name: String,
    #[serde(rename = "type")]
    ty: String,
    #[serde(default)]
    unit: String,
    #[serde(default)]
    default: Option<serde_yaml::Value>,
    #[serde(default)]
    min: Option<f64>,
    #[serde(default)]
    max: Option<f64>,
    #[serde(default)]
    choices: Vec<String>,
    #[serde(default)]
    doc: String,
}

fn leak(s: &str) -> &'static str {
    Box::leak(s.to_owned().into_boxed_str())
}

fn leak_slice<T>(v: Vec<T>) -> &'static [T] {
    Box::leak(v.into_boxed_slice())
}

fn unit_from(symbol: &str) -> Option<Unit> {
    Some(match symbol {
        "" => Unit::None,
        "s" => Unit::Seconds,
        "Hz" => Unit::Hertz,
        "S/s" => Unit::SampleRate,
        "deg" => Unit::Degrees,
        "m" => Unit::Metres,
        "dB" => Unit::Decibels,
        _ => return None,
    })
}

fn param_type(p: &ParamDescription) -> Result<ParamType, String> {
    let (min, max) = (p.min.unwrap_or(f64::NEG_INFINITY), p.max.unwrap_or(f64::INFINITY));
    if min > max {
        return Err(format!("parameter '{}': min {min} is above max {max}", p.name));
    }
    Ok(match p.ty.as_str() {
        "number" => ParamType::Number {
            unit: unit_from(&p.unit).ok_or_else(|| {
                format!("parameter '{}': unit '{}' is not one of s, Hz, S/s, deg, m, dB (or none)", p.name, p.unit)
            })?,
            min,
            max,
        },
        "integer" => ParamType::Integer {
            min: p.min.map_or(i64::MIN, |m| m.ceil() as i64),
            max: p.max.map_or(i64::MAX, |m| m.floor() as i64),
        },
        "bool" => ParamType::Bool,
        "text" => ParamType::Text,
        "names" => ParamType::Names,
        "file" => ParamType::InputPath,
        "choice" if !p.choices.is_empty() => ParamType::Choice(leak_slice(p.choices.iter().map(|c| leak(c)).collect())),
        "choice" => return Err(format!("parameter '{}': a choice needs 'choices'", p.name)),
        other => {
            return Err(format!(
                "parameter '{}': type '{other}' is not number, integer, bool, text, choice, names or file",
                p.name
            ));
        }
    })
}

fn default_text(v: &serde_yaml::Value) -> Option<String> {
    match v {
        serde_yaml::Value::String(s) => Some(s.clone()),
        serde_yaml::Value::Number(n) => Some(n.to_string()),
        serde_yaml::Value::Bool(b) => Some(b.to_string()),
        serde_yaml::Value::Sequence(items) => {
            let parts: Option<Vec<String>> = items.iter().map(default_text).collect();
            parts.map(|p| p.join(","))
        }
        _ => None,
    }
}

fn ports(list: &[PortDescription], side: &str) -> Result<&'static [PortSpec], String> {
    let mut out = Vec::new();
    for p in list {
        let kind = kind_from_name(&p.kind).ok_or_else(|| {
            format!(
                "{side} port '{}': kind '{}' is not samples, sweep, segment, dwell, estimate, row or notice",
                p.name, p.kind
            )
        })?;
        if p.name.is_empty() || out.iter().any(|q: &PortSpec| q.name == p.name) {
            return Err(format!("{side} port '{}' is unnamed or declared twice", p.name));
        }
        out.push(PortSpec { name: leak(&p.name), kind, required: p.required, doc: leak(&p.doc) });
    }
    Ok(leak_slice(out))
}

/// The spec of a described program: the launch parameters (the folder's
/// default being `folder`) followed by the program's own.
fn spec_from(d: &Description, launch: &Launch) -> Result<BlockSpec, String> {
    let mut params: Vec<ParamSpec> = LAUNCH_PARAMS.to_vec();
    for p in params.iter_mut() {
        if p.name == "folder" {
            p.default = Some(leak(&launch.folder.to_string_lossy()));
        }
    }
    for p in &d.params {
        if params.iter().any(|q| q.name == p.name) {
            return Err(format!("parameter '{}' is declared twice or is one lobeflow reserves for the launch", p.name));
        }
        let default = match &p.default {
            None => None,
            Some(v) => {
                Some(default_text(v).ok_or_else(|| format!("parameter '{}': default {v:?} is not a value", p.name))?)
            }
        };
        let spec = ParamSpec {
            name: leak(&p.name),
            ty: param_type(p)?,
            default: default.as_deref().map(leak),
            doc: leak(&p.doc),
        };
        if let Some(d) = spec.default {
            spec.parse(&RawValue::from_text(d)).map_err(|e| format!("parameter '{}': default '{d}': {e}", p.name))?;
        }
        params.push(spec);
    }
    let doc = format!("{} (external program `{}`): {}", d.name, launch.command_line(), d.doc.trim());
    Ok(BlockSpec {
        kind: super::KIND,
        doc: leak(&doc),
        inputs: ports(&d.inputs, "input")?,
        outputs: ports(&d.outputs, "output")?,
        params: leak_slice(params),
        build: SPEC.build,
    })
}

/// The program's file (the first of the command and its arguments naming a
/// file in the folder), for its description file and its version.
fn program_file(launch: &Launch) -> Option<PathBuf> {
    std::iter::once(&launch.command).chain(&launch.args).map(|a| launch.folder.join(a)).find(|p| p.is_file())
}

/// `dos.py` -> `dos.block.yaml` beside it.
fn description_file(program: &Path) -> PathBuf {
    let stem = program.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    program.with_file_name(format!("{stem}.block.yaml"))
}

fn modified(p: &Path) -> Option<SystemTime> {
    std::fs::metadata(p).and_then(|m| m.modified()).ok()
}

type CacheKey = (String, Vec<String>, PathBuf, Option<SystemTime>, Option<SystemTime>);

fn cache() -> &'static Mutex<HashMap<CacheKey, BlockSpec>> {
    static CACHE: OnceLock<Mutex<HashMap<CacheKey, BlockSpec>>> = OnceLock::new();
    CACHE.get_or_init(Default::default)
}

/// The spec of the program `launch` starts, described once per version.
pub fn described_spec(launch: &Launch) -> Result<BlockSpec, String> {
    let program = program_file(launch);
    let yaml = program.as_deref().map(description_file).filter(|p| p.is_file());
    let key = (
        launch.command.clone(),
        launch.args.clone(),
        launch.folder.clone(),
        program.as_deref().and_then(modified),
        yaml.as_deref().and_then(modified),
    );
    if let Some(spec) = cache().lock().unwrap_or_else(|e| e.into_inner()).get(&key) {
        return Ok(*spec);
    }
    let (text, from) = match &yaml {
        Some(y) => (
            std::fs::read_to_string(y).map_err(|e| format!("cannot read {}: {e}", y.display()))?,
            y.display().to_string(),
        ),
        None => (ask_program(launch)?, format!("`{} {DESCRIBE_FLAG}`", launch.command_line())),
    };
    let d: Description =
        serde_yaml::from_str(&text).map_err(|e| format!("the description from {from} does not read: {e}"))?;
    let spec = spec_from(&d, launch).map_err(|e| format!("the description from {from}: {e}"))?;
    cache().lock().unwrap_or_else(|e| e.into_inner()).insert(key, spec);
    Ok(spec)
}

/// Run the program with the describe flag and return what it printed.
fn ask_program(launch: &Launch) -> Result<String, String> {
    let mut child = Command::new(&launch.command)
        .args(&launch.args)
        .arg(DESCRIBE_FLAG)
        .current_dir(&launch.folder)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| launch.spawn_error(&e))?;
    let (stdout, stderr) = (child.stdout.take(), child.stderr.take());
    let out = std::thread::spawn(move || read_all(stdout));
    let err = std::thread::spawn(move || read_all(stderr));
    let deadline = Instant::now() + DESCRIBE_WAIT.max(launch.timeout);
    let status = loop {
        match child.try_wait().map_err(|e| e.to_string())? {
            Some(s) => break s,
            None if Instant::now() > deadline => {
                let _ = child.kill();
                let _ = child.wait();
                return Err(format!(
                    "`{} {DESCRIBE_FLAG}` did not finish within {} s",
                    launch.command_line(),
                    DESCRIBE_WAIT.max(launch.timeout).as_secs_f64()
                ));
            }
            None => std::thread::sleep(Duration::from_millis(5)),
        }
    };
    let text = out.join().unwrap_or_default();
    let errors = err.join().unwrap_or_default();
    if !status.success() {
        let tail: Vec<&str> = errors.lines().rev().take(super::child::STDERR_TAIL).collect();
        let tail: Vec<&str> = tail.into_iter().rev().collect();
        return Err(format!(
            "`{} {DESCRIBE_FLAG}` failed ({status}){}",
            launch.command_line(),
            super::child::tail_text(&tail)
        ));
    }
    Ok(text)
}

fn read_all(stream: Option<impl std::io::Read>) -> String {
    let mut s = String::new();
    if let Some(mut r) = stream {
        let _ = r.read_to_string(&mut s);
    }
    s
}
