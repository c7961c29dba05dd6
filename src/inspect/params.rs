//! From measured figures to a graph's installation settings: the values
//! `--params-for` writes and `auto` settings resolve to.

use super::{DEFAULT_SECONDS, Installation, Source, measure, number};
use crate::capture::reader::OpenOptions;
use lobeflow_blocks::RawValue;
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// Settings of the reference graphs that accept `auto`.
pub const AUTO_SETTINGS: [&str; 10] = [
    "prf",
    "dwell",
    "first_start",
    "tone",
    "pulse",
    "blank",
    "search_start",
    "search_end",
    "noise_start",
    "noise_width",
];

/// True when `value` asks for the setting to be measured.
pub fn auto_value(name: &str, value: &str) -> bool {
    value.trim() == "auto" && AUTO_SETTINGS.contains(&name)
}

/// Range bins of margin kept around the echo window.
const MARGIN_BINS: f64 = 3.0;
/// Range bins the noise region needs at least.
const MIN_NOISE_BINS: f64 = 6.0;

/// The search and noise regions: the search window starts a margin before
/// the echoes and ends at the end of a noise region placed after them, short
/// of the switch transients and the sweep's end (the range gate wants its
/// noise region inside the search window).
fn regions(inst: &Installation) -> Result<Regions, String> {
    let (a, b) = inst.echo_window_m.ok_or("no echo window was found")?;
    let sweep = inst.sweep_m.ok_or("no PRF was found")?;
    let bin = lobeflow_blocks::SPEED_OF_LIGHT / 2.0 / inst.rate;
    let leak = inst.leakage_s.unwrap_or(0.0) * lobeflow_blocks::SPEED_OF_LIGHT / 2.0;
    let pulse = inst.pulse_s.unwrap_or(0.0) * lobeflow_blocks::SPEED_OF_LIGHT / 2.0;
    let margin = (MARGIN_BINS * bin).max(pulse);
    let transient = inst.figure("switch transient delay").map(|f| f.value).filter(|&t| t > b);
    let end = transient.unwrap_or(sweep).min(sweep) - MARGIN_BINS * bin;
    let search_start = (a - margin).max(leak + bin);
    let noise_start = b + margin;
    if end - noise_start >= MIN_NOISE_BINS * bin {
        return Ok(Regions { search_start, search_end: end, noise_start, noise_width: end - noise_start });
    }
    // no room after the echoes: the noise region before them
    let noise_start = leak + bin;
    let noise_end = a - margin;
    if noise_end - noise_start >= MIN_NOISE_BINS * bin {
        return Ok(Regions {
            search_start: noise_start,
            search_end: b + margin,
            noise_start,
            noise_width: noise_end - noise_start,
        });
    }
    Err(format!(
        "no echo-free stretch of {MIN_NOISE_BINS} range bins for the noise region in a sweep of {} m",
        number(sweep)
    ))
}

struct Regions {
    search_start: f64,
    search_end: f64,
    noise_start: f64,
    noise_width: f64,
}

/// The value of setting `name` from the measurement, as text with its unit,
/// and what it rests on.
pub fn value_for(inst: &Installation, name: &str) -> Result<(String, String), String> {
    let figure = |what: &str| inst.figure(what).map(|f| f.line()).ok_or_else(|| format!("the capture gave no {what}"));
    let need = |v: Option<f64>, what: &str| v.ok_or_else(|| format!("the capture gave no {what}"));
    match name {
        "prf" => Ok((format!("{} Hz", number(need(inst.prf_hz, "PRF")?)), figure("PRF")?)),
        "tone" => Ok((format!("{} Hz", number(need(inst.tone_hz, "tone")?)), figure("tone frequency")?)),
        "pulse" => Ok((format!("{} us", number(need(inst.pulse_s, "pulse length")? * 1e6)), figure("pulse length")?)),
        "blank" => {
            let leak = need(inst.leakage_s, "leakage length")? + 2.0 / inst.rate;
            Ok((
                format!("{} us", number(leak * 1e6)),
                format!("leakage length and two samples: {}", figure("transmit leakage length")?),
            ))
        }
        "dwell" => {
            let s = inst.switching.as_ref().ok_or("no lobe switching was found")?;
            match s.dwell_pulses {
                Some(p) => Ok((format!("{p} pulses"), figure("dwell (pulses)")?)),
                None => Ok((format!("{} ms", number(s.dwell_s * 1e3)), figure("dwell")?)),
            }
        }
        "first_start" => {
            let s = inst.switching.as_ref().ok_or("no lobe switching was found")?;
            let t = s.first_start_s.ok_or_else(|| {
                format!(
                    "switches at {} ms + k x {} ms, but {}; set first_start yourself (or label a dwell in the SigMF annotations)",
                    number(s.switch_phase_s * 1e3),
                    number(s.dwell_s * 1e3),
                    s.identity
                )
            })?;
            Ok((
                format!("{} ms", number(t * 1e3)),
                format!("{}; {}", figure("switch instant").unwrap_or_default(), s.identity),
            ))
        }
        "search_start" | "search_end" | "noise_start" | "noise_width" => {
            let r = regions(inst)?;
            let v = match name {
                "search_start" => r.search_start,
                "search_end" => r.search_end,
                "noise_start" => r.noise_start,
                _ => r.noise_width,
            };
            let (a, b) = inst.echo_window_m.unwrap_or_default();
            Ok((
                format!("{} m", number(v.round())),
                format!("echoes at {}..{} m, sweep {} m", number(a), number(b), number(inst.sweep_m.unwrap_or(0.0))),
            ))
        }
        _ => Err(format!("'{name}' is not a setting lobeflow can measure")),
    }
}

/// A setting measured: (name, value with its unit, what it rests on).
pub type Measured = (String, String, String);

/// Measure the settings of `given` (name, value, base folder of relative
/// paths) whose value is `auto` from the capture named by `input`, with
/// `sample_rate` and `lobe_order` when the graph has them. Returns (name,
/// value, origin) for each, or the first setting that failed and why.
pub fn settle_auto(given: &[(&str, &RawValue, &Path)]) -> Result<Vec<Measured>, (String, String)> {
    let text = |v: &RawValue| match v {
        RawValue::Text(t) => t.clone(),
        v => v.to_string(),
    };
    let wanted: Vec<String> =
        given.iter().filter(|(n, v, _)| auto_value(n, &text(v))).map(|(n, _, _)| n.to_string()).collect();
    let Some(first) = wanted.first() else { return Ok(Vec::new()) };
    let get = |name: &str| given.iter().find(|(n, _, _)| *n == name);
    let Some((_, input, base)) = get("input") else {
        return Err((first.clone(), format!("{first}=auto needs an 'input' setting naming the capture")));
    };
    let path = text(input);
    let path = if path != "-" && Path::new(&path).is_relative() { base.join(&path) } else { PathBuf::from(path) };
    let rate = get("sample_rate").and_then(|(_, v, _)| text(v).split_whitespace().next()?.parse::<f64>().ok());
    let lobe_order = get("lobe_order")
        .map(|(_, v, _)| text(v).split(',').map(|l| l.trim().to_string()).filter(|l| !l.is_empty()).collect())
        .unwrap_or_default();
    let source = Source {
        path: path.to_string_lossy().into_owned(),
        options: OpenOptions { rate: rate.filter(|&r| r > 0.0), ..Default::default() },
        roles: Vec::new(),
        seconds: DEFAULT_SECONDS,
        lobe_order,
    };
    let inst = measure(&source).map_err(|m| (first.clone(), format!("{first}=auto: {}: {m}", source.path)))?;
    wanted
        .iter()
        .map(|n| match value_for(&inst, n) {
            Ok((v, how)) => Ok((n.clone(), v, format!("measured from {}: {how}", source.path))),
            Err(m) => Err((n.clone(), format!("{n}=auto: {m}"))),
        })
        .collect()
}

/// A params file for a graph with these setting names: each measurable
/// setting the graph has, with the figures as comments.
pub fn params_for(inst: &Installation, graph: &str, settings: &[String], capture: &str) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "# installation settings for {graph}, measured by `lobeflow inspect {capture}`");
    for line in inst.render("#   ").lines() {
        let _ = writeln!(s, "{line}");
    }
    for name in AUTO_SETTINGS.iter().filter(|n| settings.iter().any(|s| s == *n)) {
        match value_for(inst, name) {
            Ok((value, _)) => {
                let _ = writeln!(s, "{name}: {value}");
            }
            Err(why) => {
                let _ = writeln!(s, "# {name}: not measured ({why})");
            }
        }
    }
    s
}

/// One line per setting measured from the capture (`auto`), for `run`.
pub fn measured_settings(settings: &[crate::graph::KnobValue]) -> String {
    let mut s = String::new();
    for k in settings {
        if let crate::graph::Origin::Measured(how) = &k.origin {
            let _ = writeln!(s, "auto: {} = {}    ({how})", k.name, k.value);
        }
    }
    s
}
