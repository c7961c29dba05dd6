//! `matched_filter`: pulse compression by correlation with the transmitted
//! pulse (FFT overlap-save, streaming). An echo that starts at sample `n`
//! peaks at output sample `n`: the output keeps the input's stamps, and the
//! auxiliary channels are held back by the same amount so they stay aligned.
//! The output is divided by the root of the reference energy, so white noise
//! keeps its power per sample.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::csv_table::{CsvError, read_rows};
use crate::dsp::spectrum::{OverlapSave, linear_chirp};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, SampleChunk, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::{TimeSetting, TypedBlock};
use num_complex::Complex32;
use std::path::{Path, PathBuf};

/// Longest reference accepted (the FFT size is four times this).
const MAX_TAPS: usize = 1 << 16;

pub const SPEC: BlockSpec = BlockSpec::typed::<MatchedFilter>(
    "matched_filter",
    "Pulse compression: correlates the samples with the transmitted pulse (rect, linear chirp or a taps file) \
     by FFT overlap-save; an echo starting at sample n peaks at sample n, noise power per sample is kept.",
);

crate::block_ports! {
    inputs pub enum MatchedFilterIn { Samples = required("samples", ItemKind::Samples, "baseband samples") }
}

crate::block_ports! {
    outputs pub enum MatchedFilterOut {
        Samples = optional("samples", ItemKind::Samples, "compressed samples, same stamps, aux channels aligned"),
    }
}

crate::block_choice! {
    /// The transmitted pulse the samples are correlated with.
    pub enum PulseCode { Rect = "rect", Chirp = "chirp", Taps = "taps" }
}

crate::block_settings! {
    /// Settings of `matched_filter`.
    pub struct MatchedFilterSettings {
        code: PulseCode {
            ty: ParamType::Choice(PulseCode::WORDS),
            default: Some("rect"),
            doc: "the transmitted pulse: rect, chirp (linear, centred on 0 Hz) or a taps file",
        },
        pulse: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: 0.1, pulses: false },
            default: Some("16 samples"),
            doc: "pulse length for rect and chirp",
        },
        bandwidth: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: Some("1 MHz"),
            doc: "chirp sweep width (negative sweeps down)",
        },
        taps: PathBuf {
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "CSV of re,im per line (im optional; # comments; an optional header line) for code: taps",
        },
    }
}

impl TypedBlock for MatchedFilter {
    type Settings = MatchedFilterSettings;
    type In = MatchedFilterIn;
    type Out = MatchedFilterOut;

    fn build(s: MatchedFilterSettings, _: &BuildContext) -> Result<Self, BuildError> {
        let taps = match s.code {
            PulseCode::Taps if s.taps.as_os_str().is_empty() => {
                return Err(ParamError::invalid("taps", "code 'taps' needs the 'taps' file").into());
            }
            PulseCode::Taps => Some(read_taps(&s.taps)?),
            PulseCode::Rect | PulseCode::Chirp => None,
        };
        Ok(MatchedFilter { settings: s, taps, reference: None, stream: None, notices: 0 })
    }

    /// A known rate makes the reference now, so a pulse or chirp the rate
    /// cannot hold is refused before the run.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(rate) = facts.rate {
            self.reference(rate)?;
        }
        Ok(facts)
    }

    fn process(&mut self, port: MatchedFilterIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (MatchedFilterIn::Samples, Item::Samples(chunk)) => self.take(chunk, out),
            (MatchedFilterIn::Samples, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if let Some(s) = &mut self.stream {
            s.flush(out);
        }
        self.stream = None;
        Ok(())
    }
}

/// Read a taps CSV: `re[,im]` per row (quoted or not); `#` starts a
/// comment; the first row may be a header.
pub fn read_taps(path: &Path) -> Result<Vec<Complex32>, String> {
    let file = format!("taps file {}", path.display());
    let text = std::fs::read_to_string(path).map_err(|e| format!("{file}: {e}"))?;
    let mut taps = Vec::new();
    for (k, row) in read_rows(&text, &file)?.into_iter().enumerate() {
        // A comment may follow the numbers on their line.
        let mut fields = Vec::with_capacity(2);
        for f in &row.fields {
            let (value, comment) = f.split_once('#').map_or((f.as_str(), false), |(v, _)| (v, true));
            if !(comment && value.trim().is_empty()) {
                fields.push(value.trim());
            }
            if comment {
                break;
            }
        }
        let nums: Result<Vec<f32>, _> = fields.iter().map(|f| f.parse::<f32>()).collect();
        match nums {
            Ok(v) if (1..=2).contains(&v.len()) && v.iter().all(|x| x.is_finite()) => {
                taps.push(Complex32::new(v[0], v.get(1).copied().unwrap_or(0.0)))
            }
            Err(_) if k == 0 => continue, // header line
            _ => {
                let got = row.fields.join(",");
                return Err(
                    CsvError::at(&file, row.line, format!("expected 're' or 're,im' numbers, got '{got}'")).into()
                );
            }
        }
        if taps.len() > MAX_TAPS {
            return Err(format!("{file}: more than {MAX_TAPS} taps"));
        }
    }
    if taps.iter().all(|t| t.norm_sqr() == 0.0) {
        return Err(format!("{file}: no non-zero taps"));
    }
    Ok(taps)
}

/// One contiguous run of input being filtered.
struct Stream {
    engine: OverlapSave,
    rate: f64,
    next_in: u64,
    next_out: u64,
    sync: Option<Vec<f32>>,
    trigger: Option<Vec<f32>>,
    out: Vec<Complex32>,
}

pub struct MatchedFilter {
    settings: MatchedFilterSettings,
    /// The taps file's reference, for code `taps`.
    taps: Option<Vec<Complex32>>,
    /// The reference made for one sample rate.
    reference: Option<(f64, Vec<Complex32>)>,
    stream: Option<Stream>,
    notices: u64,
}

impl MatchedFilter {
    /// The reference at `rate`, made once per rate.
    fn reference(&mut self, rate: f64) -> Result<Vec<Complex32>, BlockError> {
        match &self.reference {
            Some((r, h)) if *r == rate => Ok(h.clone()),
            _ => {
                let h = self.make_reference(rate)?;
                self.reference = Some((rate, h.clone()));
                Ok(h)
            }
        }
    }

    fn make_reference(&self, rate: f64) -> Result<Vec<Complex32>, BlockError> {
        if !(rate.is_finite() && rate > 0.0) {
            return Err(BlockError::new(format!("matched_filter: chunk carries a sample rate of {rate} S/s")));
        }
        if let Some(r) = &self.taps {
            return Ok(r.clone());
        }
        let len = self.settings.pulse.samples(rate, None)?.round();
        if !(1.0..=MAX_TAPS as f64).contains(&len) {
            return Err(ParamError::invalid("pulse", format!("{len} samples at {rate} S/s (1 to {MAX_TAPS})")).into());
        }
        let len = len as usize;
        Ok(match self.settings.code {
            PulseCode::Chirp => {
                let bw = self.settings.bandwidth / rate;
                if bw.abs() > 1.0 {
                    return Err(ParamError::invalid(
                        "bandwidth",
                        format!("the chirp sweeps {:.3} times the sample rate (at most 1)", bw.abs()),
                    )
                    .into());
                }
                linear_chirp(len, bw)
            }
            PulseCode::Rect | PulseCode::Taps => vec![Complex32::new(1.0, 0.0); len],
        })
    }

    fn start_stream(&mut self, chunk: &SampleChunk) -> Result<Stream, BlockError> {
        let h = self.reference(chunk.stamp.rate)?;
        let energy: f64 = h.iter().map(|x| x.norm_sqr() as f64).sum();
        let engine = OverlapSave::new(&h, (1.0 / energy.sqrt()) as f32).map_err(BlockError::new)?;
        Ok(Stream {
            engine,
            rate: chunk.stamp.rate,
            next_in: chunk.stamp.index,
            next_out: chunk.stamp.index,
            sync: chunk.sync.as_ref().map(|_| Vec::new()),
            trigger: chunk.trigger.as_ref().map(|_| Vec::new()),
            out: Vec::new(),
        })
    }

    fn take(&mut self, chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        if chunk.is_empty() {
            return Ok(());
        }
        if let Some(s) = &mut self.stream
            && !s.fits(&chunk)
        {
            s.flush(out);
            self.notices += 1;
            if self.notices <= 3 {
                out.warn(
                    chunk.stamp,
                    format!(
                        "input jumps from sample {} (or its channels or rate change); the filter restarts",
                        s.next_in
                    ),
                );
            }
            self.stream = None;
        }
        if self.stream.is_none() {
            self.stream = Some(self.start_stream(&chunk)?);
        }
        if let Some(s) = &mut self.stream {
            s.feed(&chunk, out);
        }
        Ok(())
    }
}

impl Stream {
    fn fits(&self, c: &SampleChunk) -> bool {
        c.stamp.index == self.next_in
            && c.stamp.rate == self.rate
            && c.sync.is_some() == self.sync.is_some()
            && c.trigger.is_some() == self.trigger.is_some()
    }

    fn feed(&mut self, c: &SampleChunk, out: &mut Outputs) {
        self.engine.push(&c.iq, &mut self.out);
        if let (Some(buf), Some(s)) = (&mut self.sync, &c.sync) {
            buf.extend_from_slice(s);
        }
        if let (Some(buf), Some(t)) = (&mut self.trigger, &c.trigger) {
            buf.extend_from_slice(t);
        }
        self.next_in += c.len() as u64;
        self.emit(out);
    }

    fn flush(&mut self, out: &mut Outputs) {
        self.engine.flush(&mut self.out);
        self.emit(out);
    }

    /// Send what is ready, with the aux samples of the same indices.
    fn emit(&mut self, out: &mut Outputs) {
        let n = self.out.len();
        if n == 0 {
            return;
        }
        let take =
            |buf: &mut Option<Vec<f32>>| buf.as_mut().map(|b| b.drain(..n.min(b.len())).collect::<Vec<f32>>().into());
        let chunk = SampleChunk {
            stamp: Stamp::new(self.next_out, self.rate),
            iq: std::mem::take(&mut self.out).into(),
            sync: take(&mut self.sync),
            trigger: take(&mut self.trigger),
        };
        self.next_out += n as u64;
        out.push(MatchedFilterOut::Samples, Item::Samples(chunk));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn taps_quoted_by_python_and_trailing_comments() {
        let fixture = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/taps_quoted.csv"));
        let taps = read_taps(fixture).unwrap();
        // The 13-chip Barker code.
        let barker = [1.0, 1.0, 1.0, 1.0, 1.0, -1.0, -1.0, 1.0, 1.0, -1.0, 1.0, -1.0, 1.0];
        assert_eq!(taps.iter().map(|t| t.re).collect::<Vec<_>>(), barker);
        assert!(taps.iter().all(|t| t.im == 0.0));

        let dir = std::env::temp_dir().join(format!("lobeflow-taps-unit-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("t.csv");
        std::fs::write(&path, "# code\n1,0 # first, chip\n\"-1\",\"0.5\"\n").unwrap();
        assert_eq!(read_taps(&path).unwrap(), [Complex32::new(1.0, 0.0), Complex32::new(-1.0, 0.5)]);
        std::fs::write(&path, "re,im\n1,0\n\"0.5, 2\",0\n").unwrap();
        let e = read_taps(&path).unwrap_err();
        assert!(e.contains("t.csv line 3: expected 're' or 're,im' numbers"), "{e}");
        let _ = std::fs::remove_dir_all(&dir);
    }
}
