//! Reading a value as written (a number with or without its unit word, a
//! word, a list, a parameter language) against its declaration, and
//! checking its range.

use super::{ParamSpec, ParamType, RawValue, Unit, Value, closest, num_text, range_bin_m, range_text};
use crate::dsp::discriminator::{parse_key_values, parse_pairs};
use crate::limits::{MAX_PRF, MAX_SAMPLE_RATE};
use std::borrow::Cow;

/// Split `"20 us"` into (20.0, "us"); a bare number gives an empty suffix.
pub(super) fn split_number(text: &str) -> Option<(f64, &str)> {
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
            (ParamType::Number { unit, .. }, RawValue::Text(t)) => number_as_written(*unit, t)?,
            (ParamType::Time { .. }, RawValue::Number(n)) => Value::Seconds(*n),
            (ParamType::Time { pulses, .. }, RawValue::Text(t)) => time_as_written(t, *pulses)?,
            (ParamType::Distance { .. }, RawValue::Number(n)) => Value::Metres(*n),
            (ParamType::Distance { .. }, RawValue::Text(t)) => distance_as_written(t)?,
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
            (ParamType::Choice(options), v) => choice_as_written(options, v)?,
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

/// A number in `unit`, its unit word (if any) converted to the canonical unit.
fn number_as_written(unit: Unit, t: &str) -> Result<Value, String> {
    let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a number, got '{t}'"))?;
    if suffix.is_empty() {
        return Ok(Value::Number(n));
    }
    let k = unit
        .scale(suffix)
        .ok_or_else(|| format!("unit '{suffix}' does not fit this parameter (accepted: {})", unit.accepted()))?;
    Ok(Value::Number(n * k))
}

/// A time in seconds (any time unit), samples, or (where `pulses`) pulses.
fn time_as_written(t: &str, pulses: bool) -> Result<Value, String> {
    let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a time, got '{t}'"))?;
    Ok(match suffix {
        "" => Value::Seconds(n),
        "samples" | "sample" => Value::Samples(n),
        "pulses" | "pulse" if pulses => Value::Pulses(n),
        _ => match Unit::Seconds.scale(suffix) {
            Some(k) => Value::Seconds(n * k),
            None => {
                return Err(format!(
                    "unit '{suffix}' does not fit a time (accepted: s, ms, us, ns, samples{})",
                    if pulses { ", pulses" } else { "" }
                ));
            }
        },
    })
}

/// A distance in metres (m, km) or range bins.
fn distance_as_written(t: &str) -> Result<Value, String> {
    let (n, suffix) = split_number(t).ok_or_else(|| format!("expected a distance, got '{t}'"))?;
    Ok(match suffix {
        "" => Value::Metres(n),
        "bins" | "bin" => Value::Bins(n),
        _ => match Unit::Metres.scale(suffix) {
            Some(k) => Value::Metres(n * k),
            None => return Err(format!("unit '{suffix}' does not fit a distance (accepted: m, km, bins)")),
        },
    })
}

/// One of the accepted words; a near miss is named in the error.
fn choice_as_written(options: &[&str], v: &RawValue) -> Result<Value, String> {
    let t = v.to_string();
    if options.contains(&t.as_str()) {
        return Ok(Value::Text(t));
    }
    let hint = closest(&t, options.iter().copied()).map(|c| format!("; did you mean '{c}'?")).unwrap_or_default();
    Err(format!("'{t}' is not one of {}{hint}", options.join(", ")))
}
