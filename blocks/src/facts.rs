//! What is known about a stream before any sample flows.
//!
//! A capture reader knows its rate and channels from the file's header when
//! it is built; a pulse framer knows the pulse interval from its `prf`; a
//! gate knows its lobes. Before a run, the engine hands each block the facts
//! of its inputs (in the graph's order, sources first) through
//! [`crate::TypedBlock::start`], and the block answers with the facts of its
//! outputs, so time and range parameters are turned into samples and bins
//! once, and a bad one is refused by `check` as well as by `run`.

use std::sync::Arc;

/// Which auxiliary channels ride along with the samples.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Channels {
    /// A switch-sync channel (one level per lobe).
    pub sync: bool,
    /// A transmit-trigger channel.
    pub trigger: bool,
}

/// The facts of one stream; `None` where nothing upstream knows.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct StreamFacts {
    /// Samples per second that the items' stamps count.
    pub rate: Option<f64>,
    /// The pulse repetition interval, in samples at `rate`.
    pub pri_samples: Option<f64>,
    /// The lobe names, in switch order.
    pub lobes: Option<Arc<[Arc<str>]>>,
    /// The auxiliary channels of sample chunks.
    pub channels: Option<Channels>,
    /// Labelled stretches of the capture (its SigMF annotations), which may
    /// name the lobe active there.
    pub marks: Option<Arc<[LabelledSpan]>>,
}

/// A stretch of the capture its metadata gives a label. Times are seconds
/// from the capture's first sample, so blocks that change the sample rate
/// pass them on unchanged.
#[derive(Clone, Debug, PartialEq)]
pub struct LabelledSpan {
    pub start_s: f64,
    pub length_s: Option<f64>,
    pub label: Arc<str>,
}

impl StreamFacts {
    /// A stream at `rate` samples per second, nothing else known.
    pub fn at_rate(rate: f64) -> Self {
        StreamFacts { rate: Some(rate), ..StreamFacts::default() }
    }

    /// The pulse repetition frequency, when rate and interval are known.
    pub fn prf(&self) -> Option<f64> {
        Some(self.rate? / self.pri_samples?)
    }

    /// These facts, with every unknown one filled from `other`.
    pub fn or(self, other: &StreamFacts) -> StreamFacts {
        StreamFacts {
            rate: self.rate.or(other.rate),
            pri_samples: self.pri_samples.or(other.pri_samples),
            lobes: self.lobes.or_else(|| other.lobes.clone()),
            channels: self.channels.or(other.channels),
            marks: self.marks.or_else(|| other.marks.clone()),
        }
    }
}

/// The facts of a block's inputs, one per input port (unwired ports know
/// nothing), handed to its `start` hook.
#[derive(Clone, Copy, Debug)]
pub struct Facts<'a> {
    inputs: &'a [StreamFacts],
}

impl<'a> Facts<'a> {
    pub fn new(inputs: &'a [StreamFacts]) -> Self {
        Facts { inputs }
    }

    /// The facts of input port `index`.
    pub fn input(&self, index: usize) -> StreamFacts {
        self.inputs.get(index).cloned().unwrap_or_default()
    }

    /// What the inputs know together, earlier ports first: for blocks whose
    /// inputs share one time base.
    pub fn merged(&self) -> StreamFacts {
        self.inputs.iter().fold(StreamFacts::default(), |acc, f| acc.or(f))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn merged_facts_take_the_first_known_value() {
        let a = StreamFacts { pri_samples: Some(400.0), ..StreamFacts::default() };
        let b = StreamFacts { rate: Some(2e6), pri_samples: Some(10.0), ..StreamFacts::default() };
        let inputs = [a, b];
        let m = Facts::new(&inputs).merged();
        assert_eq!((m.rate, m.pri_samples), (Some(2e6), Some(400.0)));
        assert_eq!(m.prf(), Some(5000.0));
        assert_eq!(Facts::new(&inputs).input(5), StreamFacts::default());
    }
}
