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
//! schedules blocks; recordings are read and written by
//! `lobeflow_blocks::capture` (re-exported as `capture`) and pictures are
//! drawn by `lobeflow_blocks::pictures`;
//! `commands` holds the entry points of the `lobeflow` command.

pub(crate) mod batch;
pub mod calibrate;
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
/// Reading and writing recordings; kept at this path for the crate's own modules.
pub use lobeflow_blocks::capture;
pub use session::{ItemStream, PortStream, Session};

/// Every block kind the `lobeflow` command knows: the standard kinds of
/// `lobeflow-blocks` (capture readers and writers and pictures included)
/// plus the external-program kind of this crate.
pub fn registry() -> lobeflow_blocks::Registry {
    let mut r = lobeflow_blocks::standard_registry();
    // Declared per instance by the program it runs.
    r.register_described(external::SPEC, external::describe_instance);
    r
}
