//! # lobeflow
//!
//! Lobe-switching angle trackers from recorded captures. A graph file wires
//! blocks (capture readers, switch-sync gate, pulse framing, range-gate
//! integrator, amplitude-ratio discriminator, tracker, tables, pictures);
//! this crate loads, checks and runs it.
//!
//! ```no_run
//! let mut session = lobeflow::Session::open("graphs/four-lobe-pulsed.yaml")?;
//! session.set("beamwidth", "6 deg").out_dir("out");
//! let report = session.run()?;
//! for path in &report.written {
//!     println!("wrote {}", path.display());
//! }
//! # Ok::<(), lobeflow::Error>(())
//! ```
//!
//! Where things live: `graph` reads and checks graph files, `runtime`
//! schedules blocks, `capture` reads and writes recordings (pictures are
//! drawn by `lobeflow_blocks::pictures`),
//! `commands` holds the entry points of the `lobeflow` command.

pub(crate) mod batch;
pub mod calibrate;
pub mod capture;
pub mod commands;
pub mod config;
pub mod error;
pub(crate) mod external;
#[doc(hidden)]
pub mod fuzzing;
pub mod graph;
pub mod inspect;
pub mod regress;
pub mod report;
pub mod runtime;
pub mod session;
pub mod synth;

pub use capture::live::{PushFormat, SampleFeeder};
pub use error::Error;
pub use lobeflow_blocks as blocks;
pub use session::{ItemStream, PortStream, Session};

/// Every block kind the `lobeflow` command knows: the standard DSP blocks of
/// `lobeflow-blocks` (pictures included) plus the capture readers and writers
/// and the external-program kind of this crate.
pub fn registry() -> lobeflow_blocks::Registry {
    let mut r = lobeflow_blocks::standard_registry();
    for spec in FILE_KINDS {
        r.register(*spec);
    }
    // Declared per instance by the program it runs.
    r.register_described(external::SPEC, external::describe_instance);
    r
}

/// Block kinds of this crate (they read or write files), one entry each.
const FILE_KINDS: &[lobeflow_blocks::BlockSpec] = &[capture::source::SPEC, capture::sink::SPEC];
