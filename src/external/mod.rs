//! `external_program`: a block whose work is done by another program (a
//! Python script, say). The program describes its ports and parameters
//! (`describe`), reads the items of its inputs on standard input and writes
//! the items of its outputs on standard output (`framing`), and is started,
//! fed and watched by `child`. The framing and the researcher's side are in
//! `docs/external-blocks.md`; `python/lobeflow_block.py` implements it.

pub mod child;
pub mod describe;
pub mod framing;

use lobeflow_blocks::{
    BlockSpec, BuildContext, BuildError, ParamError, ParamSpec, ParamType, Params, Settings, Unit, Value,
};
use std::path::{Path, PathBuf};
use std::time::Duration;

pub const KIND: &str = "external_program";

/// The parameters every external block has: how to start the program. The
/// program's own parameters follow them in its described spec.
pub const LAUNCH_PARAMS: &[ParamSpec] = &[
    ParamSpec {
        name: "command",
        ty: ParamType::Names,
        default: None,
        doc: "the program and its arguments, e.g. [python3, my_block.py]; started in 'folder'",
    },
    ParamSpec {
        name: "folder",
        ty: ParamType::InputPath,
        default: Some(""),
        doc: "working folder of the program (empty: the folder of the graph file declaring the block)",
    },
    ParamSpec {
        name: "timeout",
        ty: ParamType::Number { unit: Unit::Seconds, min: 0.001, max: 86400.0 },
        default: Some("30 s"),
        doc: "longest wait for the program to take input or answer before the run stops",
    },
];

/// The kind as the catalog lists it; each instance is declared by its program.
pub const SPEC: BlockSpec = BlockSpec::typed::<child::ExternalBlock>(
    KIND,
    "Runs another program (a Python script, say) as a block: the items of its inputs go to the program's \
     standard input and what it writes on standard output becomes the items of its outputs (framing in \
     docs/external-blocks.md). Its ports and further parameters come from the program's own description \
     (`PROGRAM --describe`, or PROGRAM.block.yaml beside it); `lobeflow blocks GRAPH` or \
     `lobeflow blocks PROGRAM` lists them.",
);

/// Settings of an external block: how to start its program, and every
/// parameter the graph set (the program's own, declared by its description,
/// among them).
#[derive(Clone, Debug)]
pub struct ExternalSettings {
    pub launch: Launch,
    pub given: Params,
}

impl Settings for ExternalSettings {
    const PARAMS: &'static [ParamSpec] = LAUNCH_PARAMS;
    fn from_params(p: &Params) -> Result<Self, ParamError> {
        // The described spec made the folder's default the graph's folder,
        // so the launch is complete here.
        Ok(ExternalSettings { launch: Launch::from_params(p, Path::new("."))?, given: p.clone() })
    }
}

/// How to start one external block's program.
#[derive(Clone, Debug)]
pub struct Launch {
    pub command: String,
    pub args: Vec<String>,
    pub folder: PathBuf,
    pub timeout: Duration,
}

impl Launch {
    /// From the launch parameters; an unset or empty folder is `graph_dir`.
    pub fn from_params(p: &Params, graph_dir: &Path) -> Result<Launch, ParamError> {
        let mut words = match p.get("command") {
            Some(Value::Names(n)) => n.clone(),
            _ => return Err(ParamError::invalid("command", "the program and its arguments are not set")),
        };
        if words.is_empty() {
            return Err(ParamError::invalid("command", "names no program"));
        }
        let command = words.remove(0);
        let folder = match p.get("folder") {
            Some(Value::Text(f)) if !f.is_empty() => PathBuf::from(f),
            _ => graph_dir.to_path_buf(),
        };
        // A graph named without a folder (`run graph.yaml`) has the empty
        // path for one, which no process can be started in.
        let folder = if folder.as_os_str().is_empty() { PathBuf::from(".") } else { folder };
        let timeout = match p.get("timeout") {
            Some(Value::Number(s)) => *s,
            _ => 30.0,
        };
        Ok(Launch { command, args: words, folder, timeout: Duration::from_secs_f64(timeout) })
    }

    /// A program started from its own file (`./my_block`; a `.py` file by
    /// `python3`), described from the current folder (`lobeflow blocks PROGRAM`).
    pub fn program(path: &Path) -> Launch {
        let abs = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf()).to_string_lossy().into_owned();
        let (command, args) =
            if path.extension().is_some_and(|e| e == "py") { ("python3".into(), vec![abs]) } else { (abs, Vec::new()) };
        Launch { command, args, folder: std::env::current_dir().unwrap_or_default(), timeout: Duration::from_secs(30) }
    }

    /// The command as a person would type it.
    pub fn command_line(&self) -> String {
        std::iter::once(&self.command).chain(&self.args).cloned().collect::<Vec<_>>().join(" ")
    }

    fn spawn_error(&self, e: &std::io::Error) -> String {
        let hint = if e.kind() == std::io::ErrorKind::NotFound {
            format!(" (is '{}' installed and on the PATH?)", self.command)
        } else {
            String::new()
        };
        format!("cannot start `{}` in {}: {e}{hint}", self.command_line(), self.folder.display())
    }
}

/// The registry hook: an instance's spec from its program's description.
pub fn describe_instance(launch: &Params, graph_dir: &Path) -> Result<BlockSpec, String> {
    describe::described_spec(&Launch::from_params(launch, graph_dir).map_err(|e| e.to_string())?)
}

/// Start the program of an instance whose settings the graph gave.
fn start_program(s: ExternalSettings, ctx: &BuildContext) -> Result<child::ExternalBlock, BuildError> {
    let spec = describe::described_spec(&s.launch)?;
    let own: Vec<(String, Value)> = spec
        .params
        .iter()
        .filter(|ps| !LAUNCH_PARAMS.iter().any(|l| l.name == ps.name))
        .filter_map(|ps| s.given.get(ps.name).map(|v| (ps.name.to_string(), v.clone())))
        .collect();
    Ok(child::ExternalBlock::start(&ctx.name, s.launch, &spec, &own)?)
}
