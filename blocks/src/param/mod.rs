//! Block parameters: declared once per block kind, parsed and checked once.
//!
//! A [`ParamSpec`] names a parameter, its type, unit, default, allowed range
//! and a one-line doc. Graph validation, the `blocks` catalog and `--set`
//! overrides all read the same declaration, and all values go through
//! [`ParamSpec::parse`].

mod params;
mod parse;

use crate::dsp::discriminator::LobePair;
use std::fmt;

pub use params::Params;
pub(crate) use params::{distance_in_bins, time_in_samples};
pub use parse::unit_word;

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
