//! Where a gate's notices go: every one to its notices port, the first few
//! of each irregular kind also to the run report.

use crate::block::Outputs;
use crate::dsp::switch_sync::{Irregularity, NoticeLimiter, SwitchEvent};
use crate::item::{Item, Notice, Severity, Stamp};
use crate::typed::OutputPort;
use std::sync::Arc;

/// Routes notices: every one to the optional notices port, the first few
/// of each irregular kind also to the run report.
pub struct NoticeRouter<O> {
    pub block: Arc<str>,
    pub port: O,
    limiter: NoticeLimiter,
}

impl<O: OutputPort> NoticeRouter<O> {
    pub fn new(block: &str, port: O) -> NoticeRouter<O> {
        NoticeRouter { block: Arc::from(block), port, limiter: NoticeLimiter::default() }
    }

    /// An irregularity: to the port, and to the report unless rate-limited.
    pub fn irregular(&mut self, out: &mut Outputs, stamp: Stamp, kind: Irregularity, what: String) {
        if self.limiter.admit(kind) {
            out.warn(stamp, what.clone());
        }
        self.mark(out, stamp, what, Severity::Warning);
    }

    /// A timeline mark (e.g. a switch instant): to the port only.
    pub fn timeline(&mut self, out: &mut Outputs, stamp: Stamp, what: String) {
        self.mark(out, stamp, what, Severity::Information);
    }

    fn mark(&mut self, out: &mut Outputs, stamp: Stamp, what: String, severity: Severity) {
        out.push(self.port, Item::Notice(Notice { stamp, block: Arc::clone(&self.block), what, severity }));
    }

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
            SwitchEvent::Note { at, what } => self.timeline(out, Stamp::new(*at, rate), what.clone()),
        }
    }

    /// At finish: say how many notices were held back.
    pub fn summarise(&mut self, out: &mut Outputs, stamp: Stamp) {
        for line in self.limiter.summary() {
            out.warn(stamp, line.clone());
            self.mark(out, stamp, line, Severity::Warning);
        }
    }
}

/// Whether a notice text is a gate's routine report of a switch (written by
/// [`NoticeRouter::report`]) rather than an irregularity; timelines draw the
/// switches as bars and mark only the irregularities.
pub fn is_switch_report(what: &str) -> bool {
    what.starts_with("switch to lobe ") || (what.starts_with("lobe ") && what.contains(" active at the first sample"))
}
