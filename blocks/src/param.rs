//! Block parameters: declared once per block kind, parsed and checked once.
//!
//! A [`ParamSpec`] names a parameter, its type, unit, default, allowed range
//! and a one-line doc. Graph validation, the `blocks` catalog and `--set`
//! overrides all read the same declaration, and all values go through
//! [`ParamSpec::parse`].

use crate::dsp::discriminator::{LobePair, parse_key_values, parse_pairs};
use crate::error::ParamError;
use crate::limits::{MAX_PRF, MAX_SAMPLE_RATE};
use std::borrow::Cow;
use std::collections::BTreeMap;
use std::fmt;

/// The physical dimension of a numeric parameter. Values are stored in the
/// canonical unit shown first; the others are accepted when written with a
/// unit suffix (e.g. `"20 us"`, `"10 km"`, `"2.4 MS/s"`).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Unit {
    /// A plain number.
    None,
    /// Seconds: s, ms, us, ns; also `samples` and `pulses` where the block
    /// allows counts (see [`ParamType::Time`]).
    Seconds,
    /// Hertz: Hz, kHz, MHz, GHz.
    Hertz,
    /// Samples per second: S/s, kS/s, MS/s (Hz accepted too).
    SampleRate,
    /// Degrees: deg, rad, mrad.
    Degrees,
    /// Metres: m, km; also `bins` where the block allows it.
    Metres,
    /// Decibels: dB.
    Decibels,
}

impl Unit {
    /// The canonical unit symbol, as printed by the catalog.
    pub fn symbol(&self) -> &'static str {
        match self {
            Unit::None => "",
            Unit::Seconds => "s",
            Unit::Hertz => "Hz",
            Unit::SampleRate => "S/s",
            Unit::Degrees => "deg",
            Unit::Metres => "m",
            Unit::Decibels => "dB",
        }
    }

    /// Scale factor of a suffix to the canonical unit, or None when the suffix
    /// does not belong to this dimension.
    fn scale(&self, suffix: &str) -> Option<f64> {
        let s = suffix;
        match self {
            Unit::None => None,
            Unit::Seconds => match s {
                "s" => Some(1.0),
                "ms" => Some(1e-3),
                "us" | "µs" => Some(1e-6),
                "ns" => Some(1e-9),
                _ => None,
            },
            Unit::Hertz | Unit::SampleRate => match s {
                "Hz" | "S/s" | "sps" => Some(1.0),
                "kHz" | "kS/s" => Some(1e3),
                "MHz" | "MS/s" => Some(1e6),
                "GHz" | "GS/s" => Some(1e9),
                _ => None,
            },
            Unit::Degrees => match s {
                "deg" | "°" => Some(1.0),
                "rad" => Some(180.0 / std::f64::consts::PI),
                "mrad" => Some(0.18 / std::f64::consts::PI),
                _ => None,
            },
            Unit::Metres => match s {
                "m" => Some(1.0),
                "km" => Some(1e3),
                _ => None,
            },
            Unit::Decibels => match s {
                "dB" => Some(1.0),
                _ => None,
            },
        }
    }

    fn accepted(&self) -> &'static str {
        match self {
            Unit::None => "a plain number",
            Unit::Seconds => "s, ms, us, ns",
            Unit::Hertz | Unit::SampleRate => "Hz, kHz, MHz, GHz (or S/s, kS/s, MS/s)",
            Unit::Degrees => "deg, rad, mrad",
            Unit::Metres => "m, km",
            Unit::Decibels => "dB",
        }
    }
}

/// What a parameter holds.
#[derive(Clone, Copy, Debug)]
pub enum ParamType {
    /// A real number in `unit`, within `min..=max` (canonical unit).
    Number {
        unit: Unit,
        min: f64,
        max: f64,
    },
    /// A duration in seconds, or a count of `samples` (and of `pulses` when
    /// `pulses` is true).
    Time {
        min_s: f64,
        max_s: f64,
        pulses: bool,
    },
    /// A distance in metres, or a count of range `bins`.
    Distance {
        min_m: f64,
        max_m: f64,
    },
    /// A whole number within `min..=max`.
    Integer {
        min: i64,
        max: i64,
    },
    Bool,
    /// Free text.
    Text,
    /// One word out of a fixed list.
    Choice(&'static [&'static str]),
    /// A comma-separated list of names (e.g. a lobe order).
    Names,
    /// Opposite lobe pairs, `axis=plus/minus` separated by commas
    /// (`az=right/left, el=-up/down`), checked when the graph is read.
    LobePairs,
    /// Per-lobe gains in dB, `lobe=gain` separated by commas
    /// (`right=0.4, left=-0.2 dB`); may be empty.
    LobeGains,
    /// A file to read; relative paths resolve against the file that set it.
    InputPath,
    /// A file to write; relative paths resolve against the output directory.
    OutputPath,
}

impl ParamType {
    /// Short description for the catalog and error hints.
    pub fn describe(&self) -> String {
        match self {
            ParamType::Number { unit, min, max } => {
                let u = unit.symbol();
                format!(
                    "number{}{}",
                    if u.is_empty() { String::new() } else { format!(" [{u}]") },
                    range_text(*min, *max)
                )
            }
            ParamType::Time { min_s, max_s, pulses } => {
                format!("time [s, or samples{}]{}", if *pulses { "/pulses" } else { "" }, range_text(*min_s, *max_s))
            }
            ParamType::Distance { min_m, max_m } => format!("distance [m, or bins]{}", range_text(*min_m, *max_m)),
            ParamType::Integer { min, max } => format!("integer{}", range_text(*min as f64, *max as f64)),
            ParamType::Bool => "true/false".into(),
            ParamType::Text => "text".into(),
            ParamType::Choice(c) => format!("one of {}", c.join(", ")),
            ParamType::Names => "comma-separated names".into(),
            ParamType::LobePairs => "lobe pairs: axis=plus/minus, comma-separated (e.g. az=right/left)".into(),
            ParamType::LobeGains => "per-lobe gains: lobe=dB, comma-separated (e.g. right=0.4, left=-0.2)".into(),
            ParamType::InputPath => "input file path".into(),
            ParamType::OutputPath => "output file path".into(),
        }
    }
}

fn range_text(min: f64, max: f64) -> String {
    let (lo, hi) = (num_text(min), num_text(max));
    match (min.is_finite(), max.is_finite()) {
        (true, true) => format!(", {lo} to {hi}"),
        (true, false) => format!(", at least {lo}"),
        (false, true) => format!(", at most {hi}"),
        _ => String::new(),
    }
}

/// A number for a message: plain, or in exponent form when very large or
/// very small (`1e30`, not thirty-one digits).
pub fn num_text(x: f64) -> String {
    let a = x.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e15).contains(&a) { format!("{x:e}") } else { format!("{x}") }
}

/// One parameter's declaration.
#[derive(Clone, Copy, Debug)]
pub struct ParamSpec {
    pub name: &'static str,
    pub ty: ParamType,
    /// Default, written as it would be in a graph file; None = required.
    pub default: Option<&'static str>,
    pub doc: &'static str,
}

/// A value as written in a graph file, params file or `--set`, before checking.
#[derive(Clone, Debug, PartialEq)]
pub enum RawValue {
    Number(f64),
    Bool(bool),
    Text(String),
    List(Vec<RawValue>),
}

impl fmt::Display for RawValue {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            RawValue::Number(n) => write!(f, "{n}"),
            RawValue::Bool(b) => write!(f, "{b}"),
            RawValue::Text(t) => write!(f, "{t}"),
            RawValue::List(l) => {
                let parts: Vec<String> = l.iter().map(|v| v.to_string()).collect();
                write!(f, "{}", parts.join(","))
            }
        }
    }
}

impl RawValue {
    /// Read a `--set` style text: numbers and booleans become typed values.
    pub fn from_text(s: &str) -> RawValue {
        let t = s.trim();
        if let Ok(n) = t.parse::<f64>() {
            return RawValue::Number(n);
        }
        match t {
            "true" => RawValue::Bool(true),
            "false" => RawValue::Bool(false),
            _ => RawValue::Text(t.to_string()),
        }
    }
}

/// A checked parameter value.
#[derive(Clone, Debug, PartialEq)]
pub enum Value {
    /// In the canonical unit of its [`Unit`].
    Number(f64),
    Seconds(f64),
    Samples(f64),
    Pulses(f64),
    Metres(f64),
    Bins(f64),
    Int(i64),
    Bool(bool),
    Text(String),
    Names(Vec<String>),
    /// Lobe pairs, with the text they were read from.
    LobePairs {
        text: String,
        pairs: Vec<LobePair>,
    },
    /// Per-lobe gains in dB, with the text they were read from.
    LobeGains {
        text: String,
        gains_db: Vec<(String, f64)>,
    },
}

impl fmt::Display for Value {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Value::Number(n) => write!(f, "{}", short(*n)),
            Value::Seconds(s) => {
                let a = s.abs();
                let (v, u) = if a == 0.0 || a >= 1.0 {
                    (*s, "s")
                } else if a >= 1e-3 {
                    (s * 1e3, "ms")
                } else if a >= 1e-6 {
                    (s * 1e6, "us")
                } else {
                    (s * 1e9, "ns")
                };
                write!(f, "{} {u}", short(v))
            }
            Value::Samples(n) => write!(f, "{} samples", num_text(*n)),
            Value::Pulses(n) => write!(f, "{} pulses", num_text(*n)),
            Value::Metres(m) => write!(f, "{} m", num_text(*m)),
            Value::Bins(b) => write!(f, "{} bins", num_text(*b)),
            Value::Int(i) => write!(f, "{i}"),
            Value::Bool(b) => write!(f, "{b}"),
            Value::Text(t) => write!(f, "{t}"),
            Value::Names(n) => write!(f, "{}", n.join(",")),
            Value::LobePairs { pairs, .. } => {
                let parts: Vec<String> = pairs.iter().map(|p| format!("{}={}/{}", p.axis, p.plus, p.minus)).collect();
                write!(f, "{}", parts.join(", "))
            }
            Value::LobeGains { gains_db, .. } => {
                let parts: Vec<String> = gains_db.iter().map(|(l, g)| format!("{l}={} dB", short(*g))).collect();
                write!(f, "{}", parts.join(", "))
            }
        }
    }
}

/// A number without float noise: at most 9 decimals, trailing zeros dropped.
fn short(x: f64) -> String {
    if x.fract() == 0.0 && x.abs() < 1e15 {
        return format!("{x}");
    }
    let t = format!("{x:.9}");
    let t = t.trim_end_matches('0').trim_end_matches('.');
    if t == "0" || t == "-0" { format!("{x:e}") } else { t.to_string() }
}

/// Split `"20 us"` into (20.0, "us"); a bare number gives an empty suffix.
fn split_number(text: &str) -> Option<(f64, &str)> {
    let t = text.trim();
    let end = t
        .char_indices()
        .find(|&(i, c)| {
            !(c.is_ascii_digit()
                || c == '.'
                || c == '+'
                || c == '-'
                || ((c == 'e' || c == 'E')
                    && i > 0
                    && t[i + 1..].starts_with(|d: char| d.is_ascii_digit() || d == '-' || d == '+')))
        })
        .map(|(i, _)| i)
        .unwrap_or(t.len());
    let n: f64 = t[..end].parse().ok()?;
    Some((n, t[end..].trim()))
}

/// Words naming a count rather than a physical unit.
const COUNT_WORDS: &[&str] = &["samples", "sample", "pulses", "pulse", "bins", "bin"];

/// The unit word of a number written with one (`"4 pulses"` gives
/// `pulses`, `"20 us"` gives `us`); None for a bare number or other text.
pub fn unit_word(text: &str) -> Option<&str> {
    let (_, suffix) = split_number(text)?;
    let dims = [Unit::Seconds, Unit::Hertz, Unit::Degrees, Unit::Metres, Unit::Decibels];
    let known = COUNT_WORDS.contains(&suffix) || dims.iter().any(|u| u.scale(suffix).is_some());
    (!suffix.is_empty() && known).then_some(suffix)
}

/// `right=0.4, left=-0.2 dB`: each lobe's gain in dB (the `dB` may be left out).
fn parse_lobe_gains(text: &str) -> Result<Vec<(String, f64)>, String> {
    parse_key_values(text, "lobe gains")?
        .into_iter()
        .map(|(lobe, value)| {
            let db = value.trim_end_matches("dB").trim().parse::<f64>().ok().filter(|g| g.is_finite());
            db.map(|g| (lobe.clone(), g))
                .ok_or_else(|| format!("'{lobe}={value}' is not a gain in dB (e.g. {lobe}=0.5)"))
        })
        .collect()
}

impl ParamType {
    /// Numbers of this type may carry a unit word.
    fn takes_unit(&self) -> bool {
        matches!(self, ParamType::Number { .. } | ParamType::Time { .. } | ParamType::Distance { .. })
    }

    /// The units a bare number could mean when the type allows several
    /// (a time or a count, a distance or a count of bins); None when one
    /// canonical unit is the only reading.
    fn units_for_bare_number(&self) -> Option<&'static str> {
        match self {
            ParamType::Time { pulses: true, .. } => Some("s, ms, us, ns, samples, pulses"),
            ParamType::Time { pulses: false, .. } => Some("s, ms, us, ns, samples"),
            ParamType::Distance { .. } => Some("m, km, bins"),
            _ => None,
        }
    }
}

impl ParamSpec {
    /// Check a raw value against this declaration. The error says what was
    /// expected (type, unit, range); the caller adds where.
    pub fn parse(&self, raw: &RawValue) -> Result<Value, String> {
        let raw = self.with_default_unit(raw)?;
        let v = self.parse_as_written(&raw)?;
        self.check_range(&v)?;
        Ok(v)
    }

    /// The unit word of this parameter's default (`"4 pulses"` gives
    /// `pulses`): the unit a bare number given to it is in.
    pub fn default_unit(&self) -> Option<&'static str> {
        self.default.and_then(unit_word)
    }

    /// A bare number takes the unit of the default; where the parameter
    /// could be in several units (a time or a count, a distance or bins) and
    /// the default names none, a bare number is refused.
    fn with_default_unit<'a>(&self, raw: &'a RawValue) -> Result<Cow<'a, RawValue>, String> {
        let bare = match raw {
            RawValue::Number(n) => Some(*n),
            RawValue::Text(t) => split_number(t).filter(|(_, suffix)| suffix.is_empty()).map(|(n, _)| n),
            _ => None,
        };
        let Some(n) = bare.filter(|_| self.ty.takes_unit()) else {
            return Ok(Cow::Borrowed(raw));
        };
        match (self.default_unit(), self.ty.units_for_bare_number()) {
            (Some(word), _) => Ok(Cow::Owned(RawValue::Text(format!("{n} {word}")))),
            (None, Some(units)) => Err(format!(
                "a bare {n} is ambiguous here: write it with its unit, one of {units} (e.g. '{n} {}')",
                units.split(", ").next().unwrap_or("")
            )),
            (None, None) => Ok(Cow::Borrowed(raw)),
        }
    }

    /// A value whose unit (if any) is written out, checked against the type.
    fn parse_as_written(&self, raw: &RawValue) -> Result<Value, String> {
        let v = match (&self.ty, raw) {
            // A bare number is in the canonical unit.
            (ParamType::Number { .. }, RawValue::Number(n)) => Value::Number(*n),
            (ParamType::Number { unit, .. }, RawValue::Text(t)) => {
                let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a number, got '{t}'"))?;
                if suffix.is_empty() {
                    Value::Number(n)
                } else {
                    let k = unit.scale(suffix).ok_or_else(|| {
                        format!("unit '{suffix}' does not fit this parameter (accepted: {})", unit.accepted())
                    })?;
                    Value::Number(n * k)
                }
            }
            (ParamType::Time { .. }, RawValue::Number(n)) => Value::Seconds(*n),
            (ParamType::Time { pulses, .. }, RawValue::Text(t)) => {
                let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a time, got '{t}'"))?;
                match suffix {
                    "" => Value::Seconds(n),
                    "samples" | "sample" => Value::Samples(n),
                    "pulses" | "pulse" if *pulses => Value::Pulses(n),
                    _ => match Unit::Seconds.scale(suffix) {
                        Some(k) => Value::Seconds(n * k),
                        None => {
                            return Err(format!(
                                "unit '{suffix}' does not fit a time (accepted: s, ms, us, ns, samples{})",
                                if *pulses { ", pulses" } else { "" }
                            ));
                        }
                    },
                }
            }
            (ParamType::Distance { .. }, RawValue::Number(n)) => Value::Metres(*n),
            (ParamType::Distance { .. }, RawValue::Text(t)) => {
                let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a distance, got '{t}'"))?;
                match suffix {
                    "" => Value::Metres(n),
                    "bins" | "bin" => Value::Bins(n),
                    _ => match Unit::Metres.scale(suffix) {
                        Some(k) => Value::Metres(n * k),
                        None => return Err(format!("unit '{suffix}' does not fit a distance (accepted: m, km, bins)")),
                    },
                }
            }
            (ParamType::Integer { .. }, RawValue::Number(n)) if n.fract() == 0.0 => Value::Int(*n as i64),
            (ParamType::Integer { .. }, RawValue::Text(t)) if t.trim().parse::<i64>().is_ok() => {
                Value::Int(t.trim().parse().unwrap_or_default())
            }
            (ParamType::Integer { .. }, other) => return Err(format!("expected a whole number, got '{other}'")),
            (ParamType::Bool, RawValue::Bool(b)) => Value::Bool(*b),
            (ParamType::Bool, other) => return Err(format!("expected true or false, got '{other}'")),
            (ParamType::Text | ParamType::InputPath | ParamType::OutputPath, RawValue::List(_)) => {
                return Err("expected a single value, got a list".into());
            }
            (ParamType::Text | ParamType::InputPath | ParamType::OutputPath, v) => Value::Text(v.to_string()),
            (ParamType::Choice(options), v) => {
                let t = v.to_string();
                if options.contains(&t.as_str()) {
                    Value::Text(t)
                } else {
                    let hint = closest(&t, options.iter().copied())
                        .map(|c| format!("; did you mean '{c}'?"))
                        .unwrap_or_default();
                    return Err(format!("'{t}' is not one of {}{hint}", options.join(", ")));
                }
            }
            (ParamType::Names, RawValue::List(items)) => {
                Value::Names(items.iter().map(|i| i.to_string().trim().to_string()).collect())
            }
            (ParamType::Names, v) => {
                Value::Names(v.to_string().split(',').map(|s| s.trim().to_string()).filter(|s| !s.is_empty()).collect())
            }
            (ParamType::LobePairs | ParamType::LobeGains, RawValue::Number(_) | RawValue::Bool(_)) => {
                return Err(format!("expected {}, got '{raw}'", self.ty.describe()));
            }
            (ParamType::LobePairs, v) => {
                let text = v.to_string();
                Value::LobePairs { pairs: parse_pairs(&text)?, text }
            }
            (ParamType::LobeGains, v) => {
                let text = v.to_string();
                Value::LobeGains { gains_db: parse_lobe_gains(&text)?, text }
            }
            (_, RawValue::Bool(b)) => return Err(format!("expected {}, got '{b}'", self.ty.describe())),
            (_, RawValue::List(_)) => return Err(format!("expected {}, got a list", self.ty.describe())),
        };
        Ok(v)
    }

    fn check_range(&self, v: &Value) -> Result<(), String> {
        let (x, min, max, unit) = match (&self.ty, v) {
            (ParamType::Number { min, max, unit }, Value::Number(x)) => (*x, *min, *max, unit.symbol()),
            (ParamType::Time { min_s, max_s, .. }, Value::Seconds(x)) => (*x, *min_s, *max_s, "s"),
            (ParamType::Time { min_s, max_s, .. }, Value::Samples(x)) => {
                (*x, count_floor(*min_s) * MAX_SAMPLE_RATE, max_s * MAX_SAMPLE_RATE, "samples")
            }
            (ParamType::Time { min_s, max_s, .. }, Value::Pulses(x)) => {
                (*x, count_floor(*min_s) * MAX_PRF, max_s * MAX_PRF, "pulses")
            }
            (ParamType::Distance { min_m, max_m }, Value::Metres(x)) => (*x, *min_m, *max_m, "m"),
            (ParamType::Distance { min_m, max_m }, Value::Bins(x)) => {
                let per_m = 1.0 / range_bin_m(MAX_SAMPLE_RATE);
                (*x, count_floor(*min_m) * per_m, max_m * per_m, "bins")
            }
            (ParamType::Integer { min, max }, Value::Int(i)) => (*i as f64, *min as f64, *max as f64, ""),
            (ParamType::Names, Value::Names(n)) if n.is_empty() => return Err("expected at least one name".into()),
            _ => return Ok(()),
        };
        if !x.is_finite() || x < min || x > max {
            let u = if unit.is_empty() { String::new() } else { format!(" {unit}") };
            // Counts are bounded through the seconds or metres limit at the
            // highest rate; say so, since the limit is not written anywhere.
            let why = match v {
                Value::Samples(_) => {
                    format!(" {unit}: its limit in seconds at {} S/s, the highest rate", num_text(MAX_SAMPLE_RATE))
                }
                Value::Pulses(_) => {
                    format!(" {unit}: its limit in seconds at {} Hz, the highest PRF", num_text(MAX_PRF))
                }
                Value::Bins(_) => {
                    format!(" {unit}: its limit in metres at {} S/s, the highest rate", num_text(MAX_SAMPLE_RATE))
                }
                _ => String::new(),
            };
            return Err(format!(
                "{}{u} is out of range (allowed{}{why})",
                num_text(x),
                range_text(min, max).trim_start_matches(',')
            ));
        }
        Ok(())
    }
}

/// The lower bound of a count whose time or distance form starts at `min`:
/// counts are never negative unless the time may be (an offset).
fn count_floor(min: f64) -> f64 {
    min.min(0.0)
}

/// The checked parameters of one block instance, by name.
#[derive(Clone, Debug, Default)]
pub struct Params {
    values: BTreeMap<String, Value>,
    /// The declared types, where known, so counts of samples, pulses and bins
    /// are held to the limits of their seconds or metres form once the rate
    /// is known.
    types: BTreeMap<String, ParamType>,
}

impl Params {
    pub fn new() -> Self {
        Params::default()
    }
    pub fn insert(&mut self, name: &str, v: Value) {
        self.values.insert(name.to_string(), v);
    }
    /// Insert a value checked by `spec`, keeping its limits for
    /// [`Params::samples_at`] and [`Params::bins_at`].
    pub fn insert_declared(&mut self, spec: &ParamSpec, v: Value) {
        self.types.insert(spec.name.to_string(), spec.ty);
        self.insert(spec.name, v);
    }
    pub fn get(&self, name: &str) -> Option<&Value> {
        self.values.get(name)
    }
    pub fn iter(&self) -> impl Iterator<Item = (&String, &Value)> {
        self.values.iter()
    }

    fn missing(name: &str) -> ParamError {
        ParamError::Missing { name: name.to_string() }
    }

    fn wrong(name: &str, v: &Value, expected: &'static str) -> ParamError {
        ParamError::WrongType { name: name.to_string(), value: v.to_string(), expected }
    }

    /// A plain or unit-carrying number, in its canonical unit.
    pub fn num(&self, name: &str) -> Result<f64, ParamError> {
        match self.get(name) {
            Some(Value::Number(n)) | Some(Value::Seconds(n)) | Some(Value::Metres(n)) => Ok(*n),
            Some(Value::Int(i)) => Ok(*i as f64),
            Some(v) => Err(Self::wrong(name, v, "a number")),
            None => Err(Self::missing(name)),
        }
    }
    pub fn int(&self, name: &str) -> Result<i64, ParamError> {
        match self.get(name) {
            Some(Value::Int(i)) => Ok(*i),
            Some(v) => Err(Self::wrong(name, v, "a whole number")),
            None => Err(Self::missing(name)),
        }
    }
    pub fn flag(&self, name: &str) -> Result<bool, ParamError> {
        match self.get(name) {
            Some(Value::Bool(b)) => Ok(*b),
            Some(v) => Err(Self::wrong(name, v, "true/false")),
            None => Err(Self::missing(name)),
        }
    }
    /// Text, choice and path parameters.
    pub fn text(&self, name: &str) -> Result<&str, ParamError> {
        match self.get(name) {
            Some(Value::Text(t)) | Some(Value::LobePairs { text: t, .. }) | Some(Value::LobeGains { text: t, .. }) => {
                Ok(t)
            }
            Some(v) => Err(Self::wrong(name, v, "text")),
            None => Err(Self::missing(name)),
        }
    }
    /// Lobe pairs, read when the graph was.
    pub fn lobe_pairs(&self, name: &str) -> Result<&[LobePair], ParamError> {
        match self.get(name) {
            Some(Value::LobePairs { pairs, .. }) => Ok(pairs),
            Some(v) => Err(Self::wrong(name, v, "lobe pairs")),
            None => Err(Self::missing(name)),
        }
    }
    /// Per-lobe gains in dB, read when the graph was.
    pub fn lobe_gains_db(&self, name: &str) -> Result<&[(String, f64)], ParamError> {
        match self.get(name) {
            Some(Value::LobeGains { gains_db, .. }) => Ok(gains_db),
            Some(v) => Err(Self::wrong(name, v, "per-lobe gains")),
            None => Err(Self::missing(name)),
        }
    }
    pub fn names(&self, name: &str) -> Result<Vec<String>, ParamError> {
        match self.get(name) {
            Some(Value::Names(n)) => Ok(n.clone()),
            Some(Value::Text(t)) => Ok(t.split(',').map(|s| s.trim().to_string()).filter(|s| !s.is_empty()).collect()),
            Some(v) => Err(Self::wrong(name, v, "a list of names")),
            None => Err(Self::missing(name)),
        }
    }
    /// The declared type of `name`, when it was inserted with its declaration.
    pub fn declared(&self, name: &str) -> Option<&ParamType> {
        self.types.get(name)
    }
    /// A time parameter as a count of samples at `rate` (pulses use
    /// `pri_samples`). A count is held to the limits of its seconds form at
    /// this rate, so `1e30 samples` is refused like `1e24 s` would be.
    pub fn samples_at(&self, name: &str, rate: f64, pri_samples: Option<f64>) -> Result<f64, ParamError> {
        let v = self.get(name).ok_or_else(|| Self::missing(name))?;
        time_in_samples(name, v, self.types.get(name), rate, pri_samples)
    }
    /// A distance parameter as a (fractional) count of range bins at `rate`;
    /// a count of bins is held to the limits of its metres form.
    pub fn bins_at(&self, name: &str, rate: f64) -> Result<f64, ParamError> {
        let v = self.get(name).ok_or_else(|| Self::missing(name))?;
        distance_in_bins(name, v, self.types.get(name), rate)
    }
}

/// A time value as a count of samples at `rate`, a count held to the limits
/// `ty` gives its seconds form (see [`Params::samples_at`]).
pub(crate) fn time_in_samples(
    name: &str,
    v: &Value,
    ty: Option<&ParamType>,
    rate: f64,
    pri_samples: Option<f64>,
) -> Result<f64, ParamError> {
    let n = match v {
        Value::Seconds(s) => return Ok(s * rate),
        Value::Number(n) => return Ok(n * rate),
        Value::Samples(n) => *n,
        Value::Pulses(p) => match pri_samples {
            Some(pri) => p * pri,
            None => return Err(ParamError::NoPulseInterval { name: name.to_string() }),
        },
        v => return Err(Params::wrong(name, v, "a time")),
    };
    if let Some(ParamType::Time { min_s, max_s, .. }) = ty {
        let s = n / rate;
        if !s.is_finite() || s < *min_s || s > *max_s {
            return Err(ParamError::OutOfRange {
                name: name.to_string(),
                value: format!("{v} = {} at {} S/s", Value::Seconds(s), num_text(rate)),
                allowed: format!("{} s", range_text(*min_s, *max_s).trim_start_matches(',')),
            });
        }
    }
    Ok(n)
}

/// A distance value as a fractional count of range bins at `rate`, a count
/// held to the limits `ty` gives its metres form.
pub(crate) fn distance_in_bins(name: &str, v: &Value, ty: Option<&ParamType>, rate: f64) -> Result<f64, ParamError> {
    match v {
        Value::Metres(m) | Value::Number(m) => Ok(m / range_bin_m(rate)),
        Value::Bins(b) => {
            if let Some(ParamType::Distance { min_m, max_m }) = ty {
                let m = b * range_bin_m(rate);
                if !m.is_finite() || m < *min_m || m > *max_m {
                    return Err(ParamError::OutOfRange {
                        name: name.to_string(),
                        value: format!("{} bins = {} m at {} S/s", num_text(*b), num_text(m), num_text(rate)),
                        allowed: format!("{} m", range_text(*min_m, *max_m).trim_start_matches(',')),
                    });
                }
            }
            Ok(*b)
        }
        v => Err(Params::wrong(name, v, "a distance")),
    }
}

/// Speed of light in vacuum, m/s (SI definition).
pub const SPEED_OF_LIGHT: f64 = 299_792_458.0;

/// Range covered by one sample of delay at `rate`: c / (2 fs).
pub fn range_bin_m(rate: f64) -> f64 {
    SPEED_OF_LIGHT / (2.0 * rate)
}

/// The closest candidate by edit distance, if it is close enough to be a
/// plausible typo. Used for every "did you mean" hint.
pub fn closest<'a>(word: &str, candidates: impl Iterator<Item = &'a str>) -> Option<&'a str> {
    let mut best: Option<(&str, usize)> = None;
    for c in candidates {
        let d = edit_distance(word, c);
        if best.is_none_or(|(_, bd)| d < bd) {
            best = Some((c, d));
        }
    }
    best.filter(|&(c, d)| d <= 2.max(c.len() / 3)).map(|(c, _)| c)
}

fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for i in 1..=a.len() {
        let mut cur = vec![i; b.len() + 1];
        for j in 1..=b.len() {
            let sub = prev[j - 1] + usize::from(a[i - 1] != b[j - 1]);
            cur[j] = sub.min(prev[j] + 1).min(cur[j - 1] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(ty: ParamType) -> ParamSpec {
        ParamSpec { name: "p", ty, default: None, doc: "" }
    }

    #[test]
    fn units_convert_to_canonical() {
        let t = spec(ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: true });
        match t.parse(&RawValue::Text("20 us".into())) {
            Ok(Value::Seconds(s)) => assert!((s - 20e-6).abs() < 1e-18),
            other => panic!("{other:?}"),
        }
        assert_eq!(t.parse(&RawValue::Text("12 samples".into())), Ok(Value::Samples(12.0)));
        assert_eq!(t.parse(&RawValue::Text("3 pulses".into())), Ok(Value::Pulses(3.0)));
        let r = spec(ParamType::Number { unit: Unit::SampleRate, min: 1.0, max: 1e10 });
        assert_eq!(r.parse(&RawValue::Text("2.4 MS/s".into())), Ok(Value::Number(2.4e6)));
        let d = spec(ParamType::Distance { min_m: 0.0, max_m: 1e6 });
        assert_eq!(d.parse(&RawValue::Text("10 km".into())), Ok(Value::Metres(10e3)));
        assert_eq!(d.parse(&RawValue::Text("4 bins".into())), Ok(Value::Bins(4.0)));
    }

    #[test]
    fn wrong_unit_and_range_are_explained() {
        let t = spec(ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false });
        let e = t.parse(&RawValue::Text("5 km".into())).unwrap_err();
        assert!(e.contains("unit 'km'") && e.contains("accepted"), "{e}");
        let e = t.parse(&RawValue::Text("3 pulses".into())).unwrap_err();
        assert!(e.contains("unit 'pulses'"), "{e}");
        let n = spec(ParamType::Number { unit: Unit::Degrees, min: 0.1, max: 90.0 });
        let e = n.parse(&RawValue::Number(120.0)).unwrap_err();
        assert!(e.contains("out of range") && e.contains("0.1 to 90"), "{e}");
    }

    fn with_default(ty: ParamType, default: &'static str) -> ParamSpec {
        ParamSpec { name: "p", ty, default: Some(default), doc: "" }
    }

    #[test]
    fn a_bare_number_takes_the_unit_of_the_default() {
        let time = ParamType::Time { min_s: 0.0, max_s: 10.0, pulses: true };
        let dist = ParamType::Distance { min_m: 0.0, max_m: 1e6 };
        assert_eq!(with_default(time, "4 pulses").parse(&RawValue::Number(5.0)), Ok(Value::Pulses(5.0)));
        assert_eq!(with_default(time, "4 pulses").parse(&RawValue::Text("5".into())), Ok(Value::Pulses(5.0)));
        assert_eq!(with_default(time, "20 us").parse(&RawValue::Number(3.0)), Ok(Value::Seconds(3e-6)));
        assert_eq!(with_default(dist, "5 bins").parse(&RawValue::Number(7.0)), Ok(Value::Bins(7.0)));
        assert_eq!(with_default(dist, "1 km").parse(&RawValue::Number(2.0)), Ok(Value::Metres(2000.0)));
        // A unit written out wins over the default's.
        assert_eq!(with_default(dist, "5 bins").parse(&RawValue::Text("7 m".into())), Ok(Value::Metres(7.0)));
        let rate = ParamType::Number { unit: Unit::Hertz, min: 0.0, max: 1e9 };
        assert_eq!(with_default(rate, "1 MHz").parse(&RawValue::Number(2.0)), Ok(Value::Number(2e6)));
        // A default without a unit word leaves a bare number in the canonical unit.
        assert_eq!(with_default(rate, "0").parse(&RawValue::Number(2.0)), Ok(Value::Number(2.0)));
    }

    #[test]
    fn a_bare_number_no_default_decides_is_refused_with_the_units() {
        let e =
            spec(ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: true }).parse(&RawValue::Number(5.0)).unwrap_err();
        assert!(e.contains("ambiguous") && e.contains("one of s, ms, us, ns, samples, pulses"), "{e}");
        let e = spec(ParamType::Distance { min_m: 0.0, max_m: 1e6 }).parse(&RawValue::Number(7.0)).unwrap_err();
        assert!(e.contains("one of m, km, bins"), "{e}");
        // One canonical unit: no doubt.
        let deg = spec(ParamType::Number { unit: Unit::Degrees, min: 0.0, max: 90.0 });
        assert_eq!(deg.parse(&RawValue::Number(5.0)), Ok(Value::Number(5.0)));
    }

    #[test]
    fn unit_words_are_read_from_defaults() {
        assert_eq!(unit_word("4 pulses"), Some("pulses"));
        assert_eq!(unit_word("5 bins"), Some("bins"));
        assert_eq!(unit_word("2.4 MS/s"), Some("MS/s"));
        assert_eq!(unit_word("6"), None);
        assert_eq!(unit_word("3,4"), None);
        assert_eq!(unit_word("../x.wav"), None);
        assert_eq!(unit_word("az=right/left"), None);
    }

    #[test]
    fn lobe_pairs_and_gains_are_read_once() {
        let pairs = spec(ParamType::LobePairs);
        match pairs.parse(&RawValue::Text("az=right/left, el=-up/down".into())) {
            Ok(Value::LobePairs { pairs, text }) => {
                assert_eq!(text, "az=right/left, el=-up/down");
                assert_eq!((pairs[1].plus.as_str(), pairs[1].minus.as_str()), ("down", "up"));
            }
            other => panic!("{other:?}"),
        }
        let e = pairs.parse(&RawValue::Text("az=right-left; el".into())).unwrap_err();
        assert!(e.contains("needs two lobe names"), "{e}");
        let gains = spec(ParamType::LobeGains);
        let v = gains.parse(&RawValue::Text("right=0.4, left=-0.2 dB".into())).unwrap();
        let mut p = Params::new();
        p.insert("g", v);
        assert_eq!(p.lobe_gains_db("g").unwrap(), &[("right".to_string(), 0.4), ("left".to_string(), -0.2)]);
        assert_eq!(p.text("g").unwrap(), "right=0.4, left=-0.2 dB");
        let e = gains.parse(&RawValue::Text("right=loud".into())).unwrap_err();
        assert!(e.contains("'right=loud' is not a gain in dB"), "{e}");
        assert!(gains.parse(&RawValue::Text(String::new())).is_ok(), "no gains is fine");
    }

    #[test]
    fn choices_hint_the_closest() {
        let c = spec(ParamType::Choice(&["gaussian", "uniform", "cosine"]));
        let e = c.parse(&RawValue::Text("gausian".into())).unwrap_err();
        assert!(e.contains("did you mean 'gaussian'"), "{e}");
    }

    #[test]
    fn range_bin_matches_field_values() {
        // c/(2 fs): 37.47 m at 4 MS/s, 62.46 m at 2.4 MS/s (docs/derivations.md section 5).
        assert!((range_bin_m(4e6) - 37.47).abs() < 0.005);
        assert!((range_bin_m(2.4e6) - 62.46).abs() < 0.005);
    }
}
