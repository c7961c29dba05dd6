//! Measuring an installation's numbers from the start of a capture: transmit
//! instants and PRF, pulse length, the range window holding echoes, the sync
//! channel's levels and dwell, the switch instants when there is no sync
//! channel, a beacon's tone, and SNR per lobe.
//!
//! Every estimator reads the full-rate samples (nothing is decimated before
//! a periodicity is judged) in a few streaming passes over the first
//! seconds, each pass with memory bounded by the constants of its module.
//! Each result is a [`Figure`]: what it is, the value, and a stated
//! confidence (the interval the true value is claimed to lie in).
//! The methods are written out in `docs/inspect.md`.

mod levels;
pub mod params;
mod pulses;
mod tone;

use crate::capture::reader::{CaptureInfo, OpenOptions, open};
use crate::capture::roles::{ChunkPools, NonFinite, Replaced, RoleMap};
use num_complex::Complex32;
use std::fmt::Write;

pub use params::{AUTO_SETTINGS, auto_value, measured_settings, params_for, settle_auto, value_for};

/// Frames read per step.
const BLOCK: usize = 1 << 15;

/// One measured number, labelled by what it is, with its confidence.
#[derive(Clone, Debug, PartialEq)]
pub struct Figure {
    /// What the number is, e.g. "PRF" or "dwell".
    pub what: String,
    pub value: f64,
    pub unit: &'static str,
    /// Stated confidence: the true value lies within `value ± within`
    /// (0 for a count or an index, which is exact when right at all).
    pub within: f64,
    /// How the figure was found and what the confidence rests on.
    pub basis: String,
}

impl Figure {
    fn new(what: &str, value: f64, unit: &'static str, within: f64, basis: String) -> Figure {
        Figure { what: what.to_string(), value, unit, within, basis }
    }

    /// `PRF  6250.01 Hz ± 0.05 Hz  (basis)`.
    pub fn line(&self) -> String {
        let conf = if self.within > 0.0 { format!(" ± {}", number(self.within)) } else { " (exact)".to_string() };
        format!("{:<34} {} {}{conf}  [{}]", self.what, number(self.value), self.unit, self.basis)
    }
}

/// A number with about six significant digits, no trailing zeros.
pub fn number(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (5 - v.abs().log10().floor() as i32).clamp(0, 12) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') { s.trim_end_matches('0').trim_end_matches('.').to_string() } else { s }
}

/// What kind of signal the capture holds.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SignalKind {
    /// Regular strong transmit pulses (leakage) with echoes.
    Pulsed,
    /// A continuous tone.
    Beacon,
    /// Neither found.
    Unknown,
}

/// Lobe switching found from the sync channel or from the signal.
#[derive(Clone, Debug, PartialEq)]
pub struct Switching {
    /// Dwell length, seconds.
    pub dwell_s: f64,
    /// Dwell in pulses (pulsed captures).
    pub dwell_pulses: Option<u64>,
    /// Time of a start of the first lobe's dwell (seconds from the
    /// capture's first sample), when which lobe is first is known; else
    /// `None` and `switch_phase_s` still gives the switch instants.
    pub first_start_s: Option<f64>,
    /// A switch instant: every switch lies at this plus a whole number of dwells.
    pub switch_phase_s: f64,
    /// How the lobe identity was settled, or why it was not.
    pub identity: String,
}

/// Everything measured; `figures` lists each number with its confidence.
#[derive(Clone, Debug)]
pub struct Installation {
    pub kind: SignalKind,
    pub rate: f64,
    pub seconds_used: f64,
    pub prf_hz: Option<f64>,
    pub pulse_s: Option<f64>,
    /// Range window holding echoes, metres from the transmit instant.
    pub echo_window_m: Option<(f64, f64)>,
    /// Range where each sweep ends (c / 2PRF).
    pub sweep_m: Option<f64>,
    /// Leakage (and its ringing) length after each transmit instant, seconds.
    pub leakage_s: Option<f64>,
    /// Sync channel levels, lowest first.
    pub sync_levels: Vec<f64>,
    pub switching: Option<Switching>,
    pub tone_hz: Option<f64>,
    pub figures: Vec<Figure>,
    /// Things the reader should know (what could not be measured and why).
    pub remarks: Vec<String>,
}

impl Installation {
    pub fn figure(&self, what: &str) -> Option<&Figure> {
        self.figures.iter().find(|f| f.what == what)
    }

    /// The figures as text, one per line (each prefixed by `prefix`).
    pub fn render(&self, prefix: &str) -> String {
        let mut s = String::new();
        let kind = match self.kind {
            SignalKind::Pulsed => "pulsed (regular transmit pulses found)",
            SignalKind::Beacon => "beacon (a continuous tone found)",
            SignalKind::Unknown => "neither regular pulses nor a tone found",
        };
        let _ = writeln!(s, "{prefix}signal: {kind}; measured over the first {} s", number(self.seconds_used));
        for f in &self.figures {
            let _ = writeln!(s, "{prefix}{}", f.line());
        }
        for r in &self.remarks {
            let _ = writeln!(s, "{prefix}note: {r}");
        }
        s
    }
}

/// Where the samples come from.
#[derive(Clone, Debug)]
pub struct Source {
    pub path: String,
    pub options: OpenOptions,
    pub roles: Vec<String>,
    /// Seconds from the start to look at.
    pub seconds: f64,
    /// Lobe names in switching order, when known (from a graph's settings):
    /// their count sets the lobe cycle and lets annotations name a lobe.
    pub lobe_order: Vec<String>,
}

/// Default stretch measured by `auto` settings and `--params-for`.
pub const DEFAULT_SECONDS: f64 = 2.0;

/// One chunk of samples handed to a pass.
pub(crate) struct Chunk<'a> {
    pub first: u64,
    pub iq: &'a [Complex32],
    pub sync: Option<&'a [f32]>,
}

impl Source {
    /// Read the first `seconds` once more, chunk by chunk.
    fn pass(&self, mut each: impl FnMut(&Chunk)) -> Result<CaptureInfo, String> {
        // a pipe, FIFO or device cannot be read a second time
        if self.path == "-" || !std::fs::metadata(&self.path).is_ok_and(|m| m.is_file()) {
            return Err("the installation figures need a capture file (it is read several times), not a stream".into());
        }
        let mut reader = open(&self.path, &self.options).map_err(|e| e.to_string())?;
        let info = reader.info().clone();
        let roles = RoleMap::new(&self.roles, &info)?;
        let limit = (self.seconds.max(0.0) * info.rate).ceil() as u64;
        let (mut frames, mut seen, mut replaced, pools) =
            (Vec::new(), 0u64, Replaced::default(), ChunkPools::default());
        while seen < limit {
            let want = (BLOCK as u64).min(limit - seen) as usize;
            let n = reader.read_frames(want, &mut frames).map_err(|e| e.to_string())?;
            if n == 0 {
                break;
            }
            let chunk = roles
                .chunk(&mut frames, seen, &info, NonFinite::Zero, &mut replaced, &pools)
                .map_err(|e| e.to_string())?;
            each(&Chunk { first: seen, iq: &chunk.iq, sync: chunk.sync.as_deref() });
            seen += n as u64;
        }
        Ok(info)
    }
}

/// Measure the installation from the start of the capture.
pub fn measure(source: &Source) -> Result<Installation, String> {
    let first = levels::survey(source)?;
    let mut inst = Installation {
        kind: SignalKind::Unknown,
        rate: first.rate,
        seconds_used: first.frames as f64 / first.rate,
        prf_hz: None,
        pulse_s: None,
        echo_window_m: None,
        sweep_m: None,
        leakage_s: None,
        sync_levels: Vec::new(),
        switching: None,
        tone_hz: None,
        figures: Vec::new(),
        remarks: Vec::new(),
    };
    if first.frames < 64 {
        return Err(format!("only {} samples in the first {} s: too few to measure", first.frames, source.seconds));
    }
    let sync = first.sync.as_deref().map(levels::SyncLevels::from_histogram);
    if let Some(levels) = &sync {
        levels.describe(&mut inst);
    }
    if pulses::measure(source, &first, sync.as_ref(), &mut inst)? {
        inst.kind = SignalKind::Pulsed;
    } else if tone::measure(source, &first, sync.as_ref(), &mut inst)? {
        inst.kind = SignalKind::Beacon;
    } else {
        inst.remarks.push("no regular transmit pulses and no tone standing above the noise were found".into());
    }
    Ok(inst)
}

/// Which lobe starts when, from SigMF annotations that name a lobe: the
/// annotation's start moved to the nearest switch instant. Returns the time
/// of a start of the first lobe's dwell, in (-cycle, 0], and how it was found.
fn identity_from_annotations(
    info: &CaptureInfo,
    lobe_order: &[String],
    phase_s: f64,
    dwell_s: f64,
) -> Option<(f64, String)> {
    let meta = info.sigmf.as_ref()?;
    for a in &meta.annotations {
        let Some(label) = a.label.as_deref() else { continue };
        let Some(position) = lobe_order.iter().position(|l| l.eq_ignore_ascii_case(label.trim())) else { continue };
        let start = a.sample_start as f64 / info.rate;
        let dwells = ((start - phase_s) / dwell_s).round();
        let cycle = dwell_s * lobe_order.len() as f64;
        let first = phase_s + dwells * dwell_s - position as f64 * dwell_s;
        let folded = first - (first / cycle).ceil() * cycle;
        let moved = phase_s + dwells * dwell_s - start;
        return Some((
            folded,
            format!(
                "lobe '{label}' from the SigMF annotation at sample {} (moved {} ms to the switch instant found)",
                a.sample_start,
                number(moved * 1e3)
            ),
        ));
    }
    None
}
