//! The scenario file of `lobeflow synth`: a YAML mapping describing a made-up
//! tracker, its target and the capture to produce.
//!
//! Numbers with a dimension take a unit suffix as in graph files (`"2 us"`,
//! `"10 km"`, `"2.4 MS/s"`, `"6 deg"`, `"20 dB"`); a bare number is in the
//! canonical unit (s, Hz, S/s, deg, m, dB). Times are on the *scenario
//! clock*; the capture's first sample sits at `capture.start` on it.
//!
//! ```yaml
//! name: ridge four-lobe            # free text, required
//! about: one paragraph              # optional
//! seed: 7                           # random seed (default 0); same seed, same bytes
//! capture:
//!   sample_rate: 2 MS/s             # required
//!   duration: 40 ms                 # required: samples = round(duration * rate)
//!   start: 0.3 ms                   # scenario time of the first sample (default 0);
//!                                   # lets a capture start and end mid-dwell
//!   format: sigmf_ci16_le           # wav_f32 | wav_i16 | sigmf_cf32_le | sigmf_ci16_le | sigmf_cu8
//!   scale: auto                     # IQ factor before encoding: auto (from the expected
//!                                   # peak, so nothing clips) or a number (1: noise power 1)
//!   frequency: 9.4 GHz              # optional centre frequency for the SigMF meta
//!   sync: channel                   # channel (record the sync staircase) | schedule (none)
//!   trigger: true                   # pulsed only: record a trigger channel (default false)
//!   chunk: 65536                    # samples generated per step (default 65536)
//! antenna:
//!   beam: gaussian                  # gaussian | uniform | cosine | table
//!   beamwidth: 6 deg                # one-way 3 dB beamwidth (not for table)
//!   pattern: dish.csv               # table only: angle_deg,gain_db CSV, relative to this file
//!   squint: 2.4 deg                 # lobe offset used by `toward`
//!   way: two                        # one | two (default: two pulsed, one beacon), as the
//!                                   # ratio discriminator's `way`
//! lobes:                            # in switching order, at least two
//!   - {name: right, toward: right}  # toward: right (+az) | left (-az) | up (+el) | down (-el)
//!   - {name: odd, az: 1 deg, el: -0.5 deg}   # or explicit axis offsets
//!   - {name: weak, toward: left, gain_db: -0.3 dB}   # optional path gain of the lobe
//! signal:                           # exactly one of pulsed / beacon
//!   pulsed:
//!     prf: 2 kHz                    # PRI = 1/PRF
//!     pulse: 2 us                   # pulse length
//!     pulses_per_dwell: 4
//!     first_transmit: 0.1 ms        # t0: transmit instant of pulse 0, the first pulse of a
//!                                   # dwell of the first lobe (default 0)
//!     prf_jitter: 0 us              # rms jitter of each transmit instant (default 0)
//!     switch_lead: 50 us            # switch instant before a dwell's first transmit
//!                                   # (default 10 % of the PRI)
//!     snr: 20 dB                    # echo power per sample at beam peak over noise power 1
//!     leakage: 45 dB                # optional transmit leakage level over the noise
//!     fluctuation: none             # none | per_dwell (Rayleigh, Swerling-1-like) | per_pulse
//!     phase: per_pulse              # random echo phase per_pulse | per_dwell
//!   # beacon:
//!   #   tone: 25 kHz                # baseband offset of the CW tone
//!   #   snr: 10 dB                  # tone power per sample at beam peak over noise power 1
//!   #   dwell: 5 ms                 # dwell length
//!   #   first_start: 1 ms           # t0: a dwell of the first lobe starts here (default 0)
//!   #   fluctuation: none           # none | per_dwell
//! switch_transient:                 # optional: a decaying burst at each switch instant
//!   level: 25 dB                    # peak power over the noise
//!   length: 20 us
//! target:                           # angles off boresight; each track is
//!   az: {at: 0.4 deg, per_second: -0.5 deg, swing: {amplitude: 0.2 deg, period: 2 s, phase: 0 deg}}
//!   el: {at: -0.2 deg}              # value(t) = at + per_second*t + amplitude*sin(2 pi t/period + phase)
//!   range: {at: 12 km, per_second: -150 m}   # pulsed only (required there)
//! scan:                             # optional: a calibration scan across a fixed source;
//!   source_az: 131.4 deg            # the target track is the source's offset from
//!   source_el: 23 deg               # boresight (az: across, el: up, antenna frame),
//!   interval: 0.1 s                 # and PREFIX.pointing.csv gets the antenna pointing
//!   clock_lead: 0 s                 # that makes it (time_s on a clock this far ahead)
//! ```

use crate::config::{Document, Seg, key};
use lobeflow_blocks::{ParamSpec, ParamType, RawValue, Unit, Value};
use serde::Deserialize;
use serde::de::{self, Deserializer, Visitor};
use std::fmt;
use std::path::{Path, PathBuf};

/// A number that carries a unit (see the module docs).
pub trait Quantity: Copy {
    fn value(&self) -> f64;
}

/// A number given bare or as text with a unit suffix.
fn deserialize_quantity<'de, D: Deserializer<'de>>(d: D, unit: Unit, what: &'static str) -> Result<f64, D::Error> {
    struct V(Unit, &'static str);
    impl<'de> Visitor<'de> for V {
        type Value = f64;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            write!(f, "{} (a number, or text with a unit such as \"{}\")", self.1, example(self.0))
        }
        fn visit_f64<E: de::Error>(self, v: f64) -> Result<f64, E> {
            Ok(v)
        }
        fn visit_i64<E: de::Error>(self, v: i64) -> Result<f64, E> {
            Ok(v as f64)
        }
        fn visit_u64<E: de::Error>(self, v: u64) -> Result<f64, E> {
            Ok(v as f64)
        }
        fn visit_str<E: de::Error>(self, v: &str) -> Result<f64, E> {
            let spec = ParamSpec {
                name: "",
                ty: ParamType::Number { unit: self.0, min: f64::NEG_INFINITY, max: f64::INFINITY },
                default: None,
                doc: "",
            };
            match spec.parse(&RawValue::Text(v.to_string())) {
                Ok(Value::Number(n)) => Ok(n),
                Ok(other) => Err(E::custom(format!("expected {}, got {other}", self.1))),
                Err(e) => Err(E::custom(format!("{}: {e}", self.1))),
            }
        }
    }
    d.deserialize_any(V(unit, what))
}

fn example(unit: Unit) -> &'static str {
    match unit {
        Unit::Seconds => "20 us",
        Unit::Hertz => "2 kHz",
        Unit::SampleRate => "2 MS/s",
        Unit::Degrees => "0.5 deg",
        Unit::Metres => "10 km",
        Unit::Decibels => "20 dB",
        Unit::None => "1",
    }
}

macro_rules! quantity {
    ($name:ident, $unit:expr, $what:literal) => {
        #[doc = concat!("A ", $what, " (canonical unit: ", stringify!($unit), ").")]
        #[derive(Clone, Copy, Debug, Default, PartialEq)]
        pub struct $name(pub f64);
        impl<'de> Deserialize<'de> for $name {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                deserialize_quantity(d, $unit, $what).map($name)
            }
        }
        impl Quantity for $name {
            fn value(&self) -> f64 {
                self.0
            }
        }
    };
}

quantity!(Seconds, Unit::Seconds, "time");
quantity!(Hertz, Unit::Hertz, "frequency");
quantity!(SampleRate, Unit::SampleRate, "sample rate");
quantity!(Degrees, Unit::Degrees, "angle");
quantity!(Metres, Unit::Metres, "distance");
quantity!(Decibels, Unit::Decibels, "level in dB");

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scenario {
    pub name: String,
    #[serde(default)]
    pub about: String,
    #[serde(default)]
    pub seed: u64,
    pub capture: CaptureSpec,
    pub antenna: AntennaSpec,
    pub lobes: Vec<LobeSpec>,
    pub signal: SignalSpec,
    #[serde(default)]
    pub switch_transient: Option<TransientSpec>,
    pub target: TargetSpec,
    #[serde(default)]
    pub scan: Option<ScanSpec>,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CaptureSpec {
    pub sample_rate: SampleRate,
    pub duration: Seconds,
    #[serde(default)]
    pub start: Seconds,
    pub format: String,
    #[serde(default)]
    pub scale: ScaleSpec,
    #[serde(default)]
    pub frequency: Option<Hertz>,
    #[serde(default)]
    pub sync: SyncMode,
    #[serde(default)]
    pub trigger: bool,
    #[serde(default = "default_chunk")]
    pub chunk: usize,
}

fn default_chunk() -> usize {
    65536
}

/// `auto` or a fixed factor.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub enum ScaleSpec {
    #[default]
    Auto,
    Fixed(f64),
}

impl<'de> Deserialize<'de> for ScaleSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = ScaleSpec;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("`auto` or a positive number")
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<ScaleSpec, E> {
                if v.is_finite() && v > 0.0 {
                    Ok(ScaleSpec::Fixed(v))
                } else {
                    Err(E::custom(format!("scale {v} must be positive")))
                }
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<ScaleSpec, E> {
                self.visit_f64(v as f64)
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<ScaleSpec, E> {
                self.visit_f64(v as f64)
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<ScaleSpec, E> {
                match v.trim() {
                    "auto" => Ok(ScaleSpec::Auto),
                    t => t
                        .parse::<f64>()
                        .map_err(|_| E::custom(format!("scale '{v}' is not `auto` or a number")))
                        .and_then(|x| self.visit_f64(x)),
                }
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Clone, Copy, Debug, Default, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum SyncMode {
    #[default]
    Channel,
    Schedule,
}

#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum BeamKind {
    Gaussian,
    Uniform,
    Cosine,
    Table,
}

/// Which way the beam pattern applies, as the ratio discriminator's `way`.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Way {
    /// Receive only: the pattern once.
    One,
    /// Transmit and receive: the pattern squared.
    Two,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AntennaSpec {
    pub beam: BeamKind,
    #[serde(default)]
    pub beamwidth: Option<Degrees>,
    #[serde(default)]
    pub pattern: Option<String>,
    #[serde(default)]
    pub squint: Option<Degrees>,
    #[serde(default)]
    pub way: Option<Way>,
}

#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Toward {
    Right,
    Left,
    Up,
    Down,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LobeSpec {
    pub name: String,
    #[serde(default)]
    pub toward: Option<Toward>,
    #[serde(default)]
    pub az: Option<Degrees>,
    #[serde(default)]
    pub el: Option<Degrees>,
    /// Gain of this lobe's own path (switch, cable, amplifier), dB.
    #[serde(default)]
    pub gain_db: Option<Decibels>,
}

/// `scan:`: the antenna sweeps across a fixed source; the target track is
/// the source's offset from boresight, and the pointing that produces it
/// is written as telemetry beside the capture.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScanSpec {
    pub source_az: Degrees,
    pub source_el: Degrees,
    /// Telemetry row interval.
    #[serde(default = "default_telemetry_interval")]
    pub interval: Seconds,
    /// Telemetry clock minus capture clock.
    #[serde(default)]
    pub clock_lead: Seconds,
}

fn default_telemetry_interval() -> Seconds {
    Seconds(0.1)
}

/// `signal:` holds exactly one of `pulsed:` or `beacon:`.
#[derive(Clone, Debug, Deserialize)]
#[serde(try_from = "SignalKeys")]
pub enum SignalSpec {
    Pulsed(PulsedSpec),
    Beacon(BeaconSpec),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct SignalKeys {
    #[serde(default)]
    pulsed: Option<PulsedSpec>,
    #[serde(default)]
    beacon: Option<BeaconSpec>,
}

impl TryFrom<SignalKeys> for SignalSpec {
    type Error = String;
    fn try_from(k: SignalKeys) -> Result<SignalSpec, String> {
        match (k.pulsed, k.beacon) {
            (Some(p), None) => Ok(SignalSpec::Pulsed(p)),
            (None, Some(b)) => Ok(SignalSpec::Beacon(b)),
            _ => Err("signal needs exactly one of `pulsed:` or `beacon:`".into()),
        }
    }
}

#[derive(Clone, Copy, Debug, Default, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Fluctuation {
    #[default]
    None,
    PerDwell,
    PerPulse,
}

#[derive(Clone, Copy, Debug, Default, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum PhaseMode {
    #[default]
    PerPulse,
    PerDwell,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PulsedSpec {
    pub prf: Hertz,
    /// Pulse length, as the range gate's and matched filter's `pulse`.
    pub pulse: Seconds,
    pub pulses_per_dwell: u32,
    #[serde(default)]
    pub first_transmit: Seconds,
    #[serde(default)]
    pub prf_jitter: Seconds,
    #[serde(default)]
    pub switch_lead: Option<Seconds>,
    pub snr: Decibels,
    #[serde(default)]
    pub leakage: Option<Decibels>,
    #[serde(default)]
    pub fluctuation: Fluctuation,
    #[serde(default)]
    pub phase: PhaseMode,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BeaconSpec {
    pub tone: Hertz,
    pub snr: Decibels,
    pub dwell: Seconds,
    #[serde(default)]
    /// As the gates' `first_start`.
    pub first_start: Seconds,
    #[serde(default)]
    pub fluctuation: Fluctuation,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TransientSpec {
    pub level: Decibels,
    pub length: Seconds,
}

/// `at + per_second * t + amplitude * sin(2 pi t / period + phase)`.
#[derive(Clone, Copy, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Track<Q: Quantity + Default> {
    #[serde(default)]
    pub at: Q,
    #[serde(default)]
    pub per_second: Q,
    #[serde(default)]
    pub swing: Option<Swing<Q>>,
}

#[derive(Clone, Copy, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Swing<Q: Quantity> {
    pub amplitude: Q,
    pub period: Seconds,
    #[serde(default)]
    pub phase: Degrees,
}

impl<Q: Quantity + Default> Track<Q> {
    pub fn at_time(&self, t: f64) -> f64 {
        let mut v = self.at.value() + self.per_second.value() * t;
        if let Some(s) = &self.swing {
            v += s.amplitude.value() * (2.0 * std::f64::consts::PI * t / s.period.0 + s.phase.0.to_radians()).sin();
        }
        v
    }

    /// (lowest, highest) the track can reach over scenario times [t0, t1].
    pub fn bounds(&self, t0: f64, t1: f64) -> (f64, f64) {
        let lin = |t: f64| self.at.value() + self.per_second.value() * t;
        let swing = self.swing.map_or(0.0, |s| s.amplitude.value().abs());
        (lin(t0).min(lin(t1)) - swing, lin(t0).max(lin(t1)) + swing)
    }
}

#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TargetSpec {
    #[serde(default)]
    pub az: Track<Degrees>,
    #[serde(default)]
    pub el: Track<Degrees>,
    #[serde(default)]
    pub range: Option<Track<Metres>>,
}

/// A scenario with the file it came from (for messages and relative paths).
#[derive(Clone, Debug)]
pub struct ScenarioFile {
    pub path: PathBuf,
    pub text: String,
    pub scenario: Scenario,
    /// The parsed tree, for the positions of later messages.
    root: std::sync::Arc<crate::config::Node>,
}

impl ScenarioFile {
    /// Read and parse `path`; errors carry `file:line:column`.
    pub fn load(path: &Path) -> Result<ScenarioFile, String> {
        let text = crate::graph::file::read_limited(path)
            .map_err(|e| format!("cannot read scenario {}: {e}", path.display()))?;
        Self::parse(path, text)
    }

    /// Parse scenario text; `path` names it in messages and anchors relative paths.
    pub fn parse(path: &Path, text: String) -> Result<ScenarioFile, String> {
        let doc = Document::parse(path, text).map_err(|e| e.to_string())?;
        let scenario: Scenario = doc.read().map_err(|e| e.to_string())?;
        let Document { text, root, .. } = doc;
        Ok(ScenarioFile { path: path.to_path_buf(), text, scenario, root: std::sync::Arc::new(root) })
    }

    /// An error about the value at key path `at`, with its position.
    pub fn error_at(&self, at: &[Seg], message: impl fmt::Display) -> String {
        let p = self.root.locate(at);
        format!("{}:{}:{}: {message}", self.path.display(), p.line, p.column)
    }

    /// Shorthand for a key path written as `a/b/c` (numbers are indices).
    pub fn error_at_keys(&self, at: &str, message: impl fmt::Display) -> String {
        let segs: Vec<Seg> =
            at.split('/').map(|s| s.parse::<usize>().map(Seg::Index).unwrap_or_else(|_| key(s))).collect();
        self.error_at(&segs, message)
    }

    /// Directory that relative paths in the scenario resolve against.
    pub fn dir(&self) -> PathBuf {
        self.path.parent().map(Path::to_path_buf).unwrap_or_default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = "name: t\ncapture: {sample_rate: 1 MS/s, duration: 1 ms, format: wav_f32}\n\
antenna: {beam: gaussian, beamwidth: 6 deg, squint: 2.4 deg}\n\
lobes: [{name: a, toward: right}, {name: b, toward: left}]\n\
signal:\n  beacon: {tone: 10 kHz, snr: 10 dB, dwell: 100 us}\ntarget: {az: {at: 0.5 deg}}\n";

    #[test]
    fn units_and_defaults() {
        let f = ScenarioFile::parse(Path::new("s.yaml"), MINIMAL.into()).unwrap();
        let s = &f.scenario;
        assert_eq!(s.capture.sample_rate.0, 1e6);
        assert!((s.capture.duration.0 - 1e-3).abs() < 1e-15);
        assert_eq!(s.capture.scale, ScaleSpec::Auto);
        assert_eq!(s.capture.sync, SyncMode::Channel);
        let SignalSpec::Beacon(b) = &s.signal else { panic!("beacon expected") };
        assert_eq!(b.tone.0, 1e4);
        assert_eq!(s.target.az.at_time(3.0), 0.5);
    }

    #[test]
    fn errors_name_file_line_and_what() {
        let bad = MINIMAL.replace("dwell: 100 us", "dwell: 100 km");
        let e = ScenarioFile::parse(Path::new("s.yaml"), bad).unwrap_err();
        assert!(e.starts_with("s.yaml:6:") && e.contains("unit 'km'") && !e.contains("at line"), "{e}");
        let bad = MINIMAL.replace("toward: left", "toward: west");
        let e = ScenarioFile::parse(Path::new("s.yaml"), bad).unwrap_err();
        assert!(e.starts_with("s.yaml:4:") && e.contains("west"), "{e}");
        let bad = MINIMAL.replace("name: t\n", "name: t\nsede: 3\n");
        let e = ScenarioFile::parse(Path::new("s.yaml"), bad).unwrap_err();
        assert!(e.starts_with("s.yaml:2:") && e.contains("sede"), "{e}");
    }

    #[test]
    fn retired_words_are_refused_with_the_word_to_use() {
        let bad = MINIMAL.replace("dwell: 100 us", "dwell: 100 us, first_lobe_start: 0");
        let e = ScenarioFile::parse(Path::new("s.yaml"), bad).unwrap_err();
        assert!(e.starts_with("s.yaml:6:") && e.contains("'first_lobe_start' is now written 'first_start'"), "{e}");
        let bad = MINIMAL.replace("squint: 2.4 deg", "squint: 2.4 deg, way: two_way");
        let e = ScenarioFile::parse(Path::new("s.yaml"), bad).unwrap_err();
        assert!(e.starts_with("s.yaml:3:") && e.contains("'two_way' is now written 'two'"), "{e}");
    }

    #[test]
    fn track_follows_its_formula() {
        let node =
            crate::config::parse("{at: 1 deg, per_second: 0.5, swing: {amplitude: 2, period: 4 s, phase: 90 deg}}")
                .unwrap();
        let t: Track<Degrees> = crate::config::from_node(&node).unwrap();
        // 1 + 0.5*1 + 2*sin(pi/2 + pi/2) = 1.5
        assert!((t.at_time(1.0) - 1.5).abs() < 1e-12);
        let (lo, hi) = t.bounds(0.0, 2.0);
        assert!((lo + 1.0).abs() < 1e-12 && (hi - 4.0).abs() < 1e-12);
    }
}
