//! The checked parameters of a block instance, read back by name, and the
//! conversion of times and distances into samples and range bins.

use super::{LobePair, ParamSpec, ParamType, Value, num_text, range_bin_m, range_text};
use crate::error::ParamError;
use std::collections::BTreeMap;

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
