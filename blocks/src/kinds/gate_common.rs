//! Parameter handling and notice routing shared by `lobe_gate` and `sweep_gate`.

use crate::block::Outputs;
use crate::dsp::switch_sync::{Irregularity, NoticeLimiter, ScheduleSettings, SwitchEvent, SwitchSync, SyncSettings};
use crate::item::{Item, Notice, Stamp};
use crate::param::{ParamSpec, ParamType, Params, Unit, Value};
use std::sync::Arc;

/// The gate parameters, checked once at build time.
pub struct GateConfig {
    pub names: Vec<Arc<str>>,
    pub sync_timing: bool,
    params: Params,
}

/// Time parameters a gate converts to samples.
const TIME_PARAMS: [&str; 5] = ["dwell", "first_start", "guard", "min_dwell", "learn"];

impl GateConfig {
    pub fn from_params(p: &Params) -> Result<GateConfig, String> {
        let list = p.names("lobes")?;
        if list.len() < 2 {
            return Err(format!("'lobes' needs at least two lobe names, got '{}'", list.join(",")));
        }
        for (i, a) in list.iter().enumerate() {
            if list[..i].contains(a) {
                return Err(format!("lobe name '{a}' appears twice in 'lobes'"));
            }
        }
        let sync_timing = p.text("timing")? == "sync";
        if !sync_timing
            && p.get("dwell")
                .is_some_and(|v| matches!(v, Value::Seconds(s) | Value::Samples(s) | Value::Pulses(s) if *s <= 0.0))
        {
            return Err("timing 'schedule' needs a 'dwell' longer than zero".into());
        }
        Ok(GateConfig { names: list.iter().map(|n| Arc::from(n.as_str())).collect(), sync_timing, params: p.clone() })
    }

    /// True when a time parameter is given in pulses (the caller must know the PRI).
    pub fn needs_pri(&self) -> bool {
        TIME_PARAMS.iter().any(|n| matches!(self.params.get(n), Some(Value::Pulses(_))))
    }

    fn samples(&self, name: &str, rate: f64, pri: Option<f64>) -> Result<f64, String> {
        Ok(self.params.samples_at(name, rate, pri)?)
    }

    /// The switch source and the guard length in samples, for a stream at `rate`.
    pub fn source(&self, rate: f64, pri: Option<f64>) -> Result<(SwitchSync, u64), String> {
        let guard = self.samples("guard", rate, pri)?.round().max(0.0) as u64;
        let dwell = self.samples("dwell", rate, pri)?;
        if dwell > 0.0 && guard as f64 >= dwell {
            return Err(format!(
                "guard of {guard} samples is not shorter than the dwell of {dwell} samples at {rate} S/s; every sample would be left out"
            ));
        }
        let source = if self.sync_timing {
            SwitchSync::from_sync(SyncSettings {
                names: self.names.clone(),
                learn: self.samples("learn", rate, pri)?.round().max(0.0) as usize,
                hysteresis: self.params.num("hysteresis")?,
                min_dwell: self.samples("min_dwell", rate, pri)?.round().max(1.0) as usize,
                expected_dwell: (dwell > 0.0).then_some(dwell),
                tolerance: self.params.num("tolerance")?,
            })
        } else {
            SwitchSync::from_schedule(ScheduleSettings {
                names: self.names.clone(),
                first_start: self.samples("first_start", rate, pri)?,
                dwell,
            })?
        };
        Ok((source, guard))
    }
}

/// Routes notices: every one to the optional notices port, the first few
/// of each irregular kind also to the run report.
pub struct NoticeRouter {
    pub block: Arc<str>,
    pub port: usize,
    limiter: NoticeLimiter,
}

impl NoticeRouter {
    pub fn new(block: &str, port: usize) -> NoticeRouter {
        NoticeRouter { block: Arc::from(block), port, limiter: NoticeLimiter::default() }
    }

    /// An irregularity: to the port, and to the report unless rate-limited.
    pub fn irregular(&mut self, out: &mut Outputs, stamp: Stamp, kind: Irregularity, what: String) {
        if self.limiter.admit(kind) {
            out.notice(stamp, what.clone());
        }
        self.timeline(out, stamp, what);
    }

    /// A timeline mark (e.g. a switch instant): to the port only.
    pub fn timeline(&mut self, out: &mut Outputs, stamp: Stamp, what: String) {
        out.push(self.port, Item::Notice(Notice { stamp, block: Arc::clone(&self.block), what }));
    }

    /// At finish: say how many notices were held back.
    /// Report a switch event as both gates do (see [`is_switch_report`]): switch instants go to the
    /// timeline port, irregularities to the person running the graph too.
    pub fn report(&mut self, out: &mut Outputs, event: &SwitchEvent, names: &[Arc<str>], rate: f64) {
        match event {
            SwitchEvent::Begin { at, lobe, .. } => {
                let what = format!("lobe {} active at the first sample {at}", names[*lobe]);
                self.timeline(out, Stamp::new(*at, rate), what);
            }
            SwitchEvent::Switch { at, lobe } => {
                let what = format!("switch to lobe {} at sample {at}", names[*lobe]);
                self.timeline(out, Stamp::new(*at, rate), what);
            }
            SwitchEvent::Irregular { at, kind, what } => {
                self.irregular(out, Stamp::new(*at, rate), *kind, what.clone())
            }
        }
    }

    pub fn summarise(&mut self, out: &mut Outputs, stamp: Stamp) {
        for line in self.limiter.summary() {
            out.notice(stamp, line.clone());
            self.timeline(out, stamp, line);
        }
    }
}

/// Whether a notice text is a gate's routine report of a switch (written by
/// [`NoticeRouter::report`]) rather than an irregularity; timelines draw the
/// switches as bars and mark only the irregularities.
pub fn is_switch_report(what: &str) -> bool {
    what.starts_with("switch to lobe ") || (what.starts_with("lobe ") && what.contains(" active at the first sample"))
}

/// The parameters of both gates; `pulses` lets times be given in pulses.
pub const fn gate_params(pulses: bool) -> [ParamSpec; 9] {
    [
        ParamSpec {
            name: "lobes",
            ty: ParamType::Names,
            default: Some("up,right,down,left"),
            doc: "lobe names in switch order; the i-th has the i-th lowest sync level",
        },
        ParamSpec {
            name: "timing",
            ty: ParamType::Choice(&["sync", "schedule"]),
            default: Some("sync"),
            doc: "lobe timing from the sync channel, or from a known schedule",
        },
        ParamSpec {
            name: "dwell",
            ty: time(0.0, pulses),
            default: Some("0 s"),
            doc: "dwell length (schedule: required; sync: expected length, 0 = learn the median)",
        },
        ParamSpec {
            name: "first_start",
            ty: time(-3600.0, pulses),
            default: Some("0 s"),
            doc: "schedule: start of the first lobe's dwell (earlier samples belong to the previous lobes)",
        },
        ParamSpec {
            name: "guard",
            ty: time(0.0, pulses),
            default: Some("20 us"),
            doc: "time after each switch instant left out (switch transient)",
        },
        ParamSpec {
            name: "hysteresis",
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 0.45 },
            default: Some("0.2"),
            doc: "switch only when nearer another level by this fraction of the level spacing",
        },
        ParamSpec {
            name: "min_dwell",
            ty: time(0.0, pulses),
            default: Some("100 us"),
            doc: "a new sync level must hold this long to count as a switch (longer than a switch ramp)",
        },
        ParamSpec {
            name: "learn",
            ty: time(0.0, pulses),
            default: Some("200 ms"),
            doc: "sync data used to learn the levels: at least one full lobe cycle (at most 4 Mi samples)",
        },
        ParamSpec {
            name: "tolerance",
            ty: ParamType::Number { unit: Unit::None, min: 0.01, max: 10.0 },
            default: Some("0.25"),
            doc: "relative dwell-length deviation reported as irregular",
        },
    ]
}

const fn time(min_s: f64, pulses: bool) -> ParamType {
    ParamType::Time { min_s, max_s: 3600.0, pulses }
}
