//! Amplitude-ratio angle extraction (docs/derivations.md §3-4): which
//! lobes form a pair, the error signal of a pair's two amplitudes, the angle
//! through the beam model, and the spread to expect.

use crate::dsp::beam::PairModel;
use crate::item::Flag;
use std::sync::Arc;

/// A pair of opposite lobes forming one axis.
#[derive(Clone, Debug, PartialEq)]
pub struct LobePair {
    pub axis: Arc<str>,
    /// The lobe whose axis sits at `+squint` (positive angles lie toward it).
    pub plus: String,
    /// The opposite lobe, at `-squint`.
    pub minus: String,
}

/// Split `key=value, key=value` text into trimmed pairs. `what` names the
/// parameter in error messages. Empty text gives an empty list.
pub fn parse_key_values(text: &str, what: &str) -> Result<Vec<(String, String)>, String> {
    let mut out: Vec<(String, String)> = Vec::new();
    for (i, part) in text.split(',').enumerate() {
        let part = part.trim();
        if part.is_empty() {
            continue;
        }
        let Some((k, v)) = part.split_once('=') else {
            return Err(format!("{what}: entry {} '{part}' is not of the form name=value", i + 1));
        };
        let (k, v) = (k.trim(), v.trim());
        if k.is_empty() || v.is_empty() {
            return Err(format!("{what}: entry {} '{part}' has an empty name or value", i + 1));
        }
        if out.iter().any(|(seen, _)| seen == k) {
            return Err(format!("{what}: '{k}' is given twice"));
        }
        out.push((k.to_string(), v.to_string()));
    }
    Ok(out)
}

/// Read `az=right/left, el=-up/down`: axis name, then the lobe at `+squint`
/// over the lobe at `-squint`. A leading `-` swaps the roles of the two lobes
/// (the pair's sign is flipped).
pub fn parse_pairs(text: &str) -> Result<Vec<LobePair>, String> {
    let mut pairs: Vec<LobePair> = Vec::new();
    for (axis, spec) in parse_key_values(text, "pairs")? {
        let (flipped, body) = match spec.strip_prefix('-') {
            Some(rest) => (true, rest.trim()),
            None => (false, spec.as_str()),
        };
        let Some((num, den)) = body.split_once('/') else {
            return Err(format!("pairs: '{axis}={spec}' needs two lobe names as plus/minus, e.g. right/left"));
        };
        let (num, den) = (num.trim(), den.trim());
        if num.is_empty() || den.is_empty() || den.contains('/') {
            return Err(format!("pairs: '{axis}={spec}' needs exactly two lobe names as plus/minus"));
        }
        if num == den {
            return Err(format!("pairs: '{axis}' pairs lobe '{num}' with itself"));
        }
        for lobe in [num, den] {
            if let Some(other) = pairs.iter().find(|p| p.plus == lobe || p.minus == lobe) {
                return Err(format!("pairs: lobe '{lobe}' is used by both '{}' and '{axis}'", other.axis));
            }
        }
        let (plus, minus) = if flipped { (den, num) } else { (num, den) };
        pairs.push(LobePair { axis: Arc::from(axis.as_str()), plus: plus.to_string(), minus: minus.to_string() });
    }
    if pairs.is_empty() {
        return Err("pairs: no pair given (e.g. az=right/left)".into());
    }
    Ok(pairs)
}

crate::block_choice! {
    /// How the two amplitudes are combined before the beam model is inverted.
    pub enum ErrorSignal {
        /// `ln(A/B)`.
        LogRatio = "log_ratio",
        /// `(A-B)/(A+B) = tanh(ln(A/B)/2)`, inverted through the model's own
        /// difference-over-sum curve.
        DiffSum = "diff_sum",
    }
}

impl ErrorSignal {
    /// The error signal of amplitudes `a` (plus lobe) and `b` (minus lobe).
    pub fn measure(&self, a: f64, b: f64) -> f64 {
        match self {
            ErrorSignal::LogRatio => (a / b).ln(),
            ErrorSignal::DiffSum => (a - b) / (a + b),
        }
    }

    /// The model's log ratio that produces error signal `s`; None when `s`
    /// lies outside what any angle can produce (|d| >= 1 for diff_sum).
    pub fn to_log_ratio(&self, s: f64) -> Option<f64> {
        match self {
            ErrorSignal::LogRatio => s.is_finite().then_some(s),
            // d = tanh(r/2)  =>  r = 2 atanh(d), defined for |d| < 1 only.
            ErrorSignal::DiffSum => (s.abs() < 1.0).then(|| 2.0 * s.atanh()),
        }
    }
}

/// What one pair of amplitudes says about the target angle.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PairReading {
    /// Degrees off the pair's axis; None unless `flag` is Ok.
    pub error_deg: Option<f64>,
    /// Expected one-sigma spread of `error_deg` (NaN when there is no angle).
    pub sigma_deg: f64,
    /// 20 log10(A/B), NaN when either amplitude is unusable.
    pub ratio_db: f64,
    pub flag: Flag,
}

/// Turn gain-corrected amplitudes `a` (plus lobe) and `b` (minus lobe) with
/// their ln-amplitude variances into an angle through `model`. With
/// `edge_sigmas` > 0, a ratio within that many of its own sigmas of the usable
/// region's edge is flagged out of range (0 turns the test off).
pub fn read_pair(
    model: &PairModel,
    signal: ErrorSignal,
    a: f64,
    b: f64,
    var_ln_a: f64,
    var_ln_b: f64,
    edge_sigmas: f64,
) -> PairReading {
    let usable = |x: f64| x.is_finite() && x > 0.0;
    if !usable(a) || !usable(b) {
        return PairReading { error_deg: None, sigma_deg: f64::NAN, ratio_db: f64::NAN, flag: Flag::NoSignal };
    }
    let ratio_db = 20.0 * (a / b).log10();
    let theta = signal.to_log_ratio(signal.measure(a, b)).and_then(|r| model.angle(r));
    // An estimate whose ratio cannot be told from the region's edge (within
    // `edge_sigmas` of its own spread) may as well lie beyond it.
    let r = (a / b).ln();
    let near_edge = edge_sigmas > 0.0 && r.abs() + edge_sigmas * (var_ln_a + var_ln_b).sqrt() > model.r_limit();
    match theta {
        Some(theta) if !near_edge => PairReading {
            error_deg: Some(theta),
            sigma_deg: angle_sigma_deg(model, theta, var_ln_a, var_ln_b),
            ratio_db,
            flag: Flag::Ok,
        },
        Some(_) => PairReading { error_deg: None, sigma_deg: f64::NAN, ratio_db, flag: Flag::OutOfRange },
        None => PairReading { error_deg: None, sigma_deg: f64::NAN, ratio_db, flag: Flag::OutOfRange },
    }
}

/// docs/derivations.md §3: `sigma = sqrt(var ln A + var ln B) / |dr/dtheta|`,
/// degrees. For a Gaussian beam the slope is `8 n ln2 SQ / BW^2` everywhere.
pub fn angle_sigma_deg(model: &PairModel, theta_deg: f64, var_ln_a: f64, var_ln_b: f64) -> f64 {
    let slope = model.slope(theta_deg).abs();
    let spread = (var_ln_a + var_ln_b).sqrt();
    if slope > 0.0 && spread.is_finite() { spread / slope } else { f64::NAN }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::beam::{Beam, BeamShape};

    #[test]
    fn pairs_parse_with_flip_and_reject_mistakes() {
        let p = parse_pairs("az=right/left, el=-up/down").unwrap();
        assert_eq!(p[0], LobePair { axis: "az".into(), plus: "right".into(), minus: "left".into() });
        assert_eq!(p[1], LobePair { axis: "el".into(), plus: "down".into(), minus: "up".into() });
        for bad in ["", "az=right", "az=right/right", "az=a/b, el=b/c", "az=a/b/c", "az=a/b, az=c/d", "right/left"] {
            assert!(parse_pairs(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn both_signals_give_the_same_angle() {
        let m = PairModel::new(Beam::new(BeamShape::Cosine, 6.0).unwrap(), 2.4, 2).unwrap();
        let (a, b) = m.amplitudes(1.3);
        for s in [ErrorSignal::LogRatio, ErrorSignal::DiffSum] {
            let r = read_pair(&m, s, a, b, 0.001, 0.002, 0.0);
            assert!((r.error_deg.unwrap() - 1.3).abs() < 1e-6, "{s:?} {r:?}");
        }
        assert_eq!(ErrorSignal::DiffSum.to_log_ratio(1.0), None);
        let r = read_pair(&m, ErrorSignal::LogRatio, f64::NAN, b, 0.0, 0.0, 0.0);
        assert_eq!(r.flag, Flag::NoSignal);
        let r = read_pair(&m, ErrorSignal::LogRatio, 0.0, b, 0.0, 0.0, 0.0);
        assert_eq!(r.flag, Flag::NoSignal);
    }
}
