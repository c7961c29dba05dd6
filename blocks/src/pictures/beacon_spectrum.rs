//! `beacon_spectrum`: per lobe, the power spectrum of its dwells averaged,
//! with what the tone integrator reads marked on it: the tone setting, the
//! window searched for the tone's peak and the bins its noise estimate
//! comes from (both from `tone_dwell`'s own definitions, so the picture
//! shows the integrator's regions, not a copy). A person checks that the
//! tone stands inside the search window for every lobe and that no other
//! line sits in the noise bins.

use super::accum::decimate_min_max;
use super::{
    Chart, Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend, padded, palette, picture_base,
    write_picture,
};
use crate::block::{BlockError, BlockSpec, BuildContext, FileStager, Outputs};
use crate::dsp::spectrum::{FftCache, Window, next_pow2, parabolic_offset};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, LobeSegment, LobeTag, Stamp};
use crate::kinds::tone_dwell::{noise_exclusion_bins, search_reach_bins};
use crate::param::{ParamType, Unit};
use crate::typed::{Choice, NoPorts, TypedBlock};
use num_complex::Complex32;
use plotters::coord::Shift;
use plotters::prelude::*;
use std::sync::Arc;

pub const SPEC: BlockSpec = BlockSpec::typed::<BeaconSpectrum>(
    "beacon_spectrum",
    "Beacon spectrum picture: per lobe, the power spectrum of its dwells averaged (whole band and around the tone), \
     with the tone setting, the peak search window and the noise bins of tone_dwell marked; writes <path>.png and \
     <path>.svg. Set tone, search and window as the tone_dwell block has them.",
);

crate::block_ports! {
    inputs pub enum SpectrumIn {
        Segments = required("segments", ItemKind::Segment, "lobe segments; dwell_end closes a dwell"),
    }
}

crate::block_settings! {
    /// Settings of `beacon_spectrum`.
    pub struct BeaconSpectrumSettings {
        tone: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: None,
            doc: "beacon tone frequency at baseband (as tone_dwell's)",
        },
        search: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 0.0, max: 5e9 },
            default: Some("0 Hz"),
            doc: "extra half-width searched for the tone's peak (as tone_dwell's)",
        },
        window: Window {
            ty: ParamType::Choice(Window::WORDS),
            default: Some("rect"),
            doc: "data window (as tone_dwell's): sets the noise bins' distance from the tone",
        },
        span: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 0.0, max: 5e9 },
            default: Some("0 Hz"),
            doc: "half-width of the panel around the tone (0: four times the noise exclusion)",
        },
        max_samples: usize {
            ty: ParamType::Integer { min: 16, max: 1 << 20 },
            default: Some("65536"),
            doc: "most samples of a dwell transformed (the rest are left out)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("beacon-spectrum"),
            doc: "base name: writes <path>.png and <path>.svg (see formats)",
        },
        formats: PictureFormats {
            ty: ParamType::Choice(PictureFormats::WORDS),
            default: Some("both"),
            doc: "which files: both (<path>.png and <path>.svg), svg or png (svg alone skips the bitmap, most of the cost)",
        },
    }
}

/// Distinct dwell lengths (transform sizes) kept; the picture shows the one
/// with the most dwells (a capture's first and last dwells are often cut).
const MAX_LENGTHS: usize = 4;
/// Lobes drawn; later new lobes are counted as left out.
const MAX_LOBES: usize = 8;

pub struct BeaconSpectrum {
    tone_hz: f64,
    search_hz: f64,
    window: Window,
    span_hz: f64,
    cap: usize,
    path: String,
    formats: PictureFormats,
    files: FileStager,
    fft: FftCache,
    samples: Vec<Complex32>,
    weights: Vec<f64>,
    buf: Vec<Complex32>,
    open: Option<(LobeTag, f64)>,
    lengths: Vec<LengthGroup>,
    left_out: u64,
    last_stamp: Stamp,
}

/// The dwells transformed at one size.
struct LengthGroup {
    nfft: usize,
    rate: f64,
    samples: u64,
    dwells: u64,
    lobes: Vec<LobeSum>,
}

/// Sum over one lobe's dwells of |X|^2 / (sum w)^2 (a tone of amplitude A
/// on a bin reads A^2).
struct LobeSum {
    lobe: usize,
    name: Arc<str>,
    power: Vec<f64>,
    dwells: u64,
}

impl TypedBlock for BeaconSpectrum {
    type Settings = BeaconSpectrumSettings;
    type In = SpectrumIn;
    type Out = NoPorts;

    fn build(s: BeaconSpectrumSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let path = picture_base(&s.path)?;
        Ok(BeaconSpectrum {
            tone_hz: s.tone,
            search_hz: s.search,
            window: s.window,
            span_hz: s.span,
            cap: s.max_samples,
            path,
            formats: s.formats,
            files: ctx.files.clone(),
            fft: FftCache::new(),
            samples: Vec::new(),
            weights: Vec::new(),
            buf: Vec::new(),
            open: None,
            lengths: Vec::new(),
            left_out: 0,
            last_stamp: Stamp::new(0, 1.0),
        })
    }

    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(rate) = facts.rate
            && self.tone_hz.abs() > rate / 2.0
        {
            return Err(ParamError::invalid(
                "tone",
                format!("{} Hz lies outside the band of ±{} Hz of a stream of {rate} S/s", self.tone_hz, rate / 2.0),
            )
            .into());
        }
        Ok(facts)
    }

    fn process(&mut self, port: SpectrumIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let (SpectrumIn::Segments, Item::Segment(seg)) = (port, item) else { return Ok(()) };
        self.take(&seg);
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.close();
        let picture = self.picture();
        for lobe in &picture.lobes {
            self.report(lobe, &picture, out);
        }
        write_picture(&picture, &self.path, self.formats, &self.files)?;
        Ok(())
    }
}

impl BeaconSpectrum {
    fn take(&mut self, seg: &LobeSegment) {
        self.last_stamp = seg.chunk.stamp;
        if let Some((tag, _)) = &self.open
            && (tag.dwell != seg.tag.dwell || tag.lobe != seg.tag.lobe)
        {
            self.close();
        }
        if self.open.is_none() {
            self.open = Some((seg.tag.clone(), seg.chunk.stamp.rate));
        }
        let take = (self.cap - self.samples.len()).min(seg.chunk.len());
        self.samples.extend_from_slice(&seg.chunk.iq[..take]);
        if seg.dwell_end {
            self.close();
        }
    }

    /// Transform the open dwell and add its spectrum to its lobe's sum.
    fn close(&mut self) {
        let Some((tag, rate)) = self.open.take() else { return };
        let m = self.samples.len();
        if m < 16 {
            self.left_out += 1;
            self.samples.clear();
            return;
        }
        // The same transform length tone_dwell uses by default.
        let nfft = 2 * next_pow2(m);
        let group = match self.lengths.iter().position(|g| g.nfft == nfft && g.rate == rate) {
            Some(i) => i,
            None if self.lengths.len() < MAX_LENGTHS => {
                self.lengths.push(LengthGroup { nfft, rate, samples: 0, dwells: 0, lobes: Vec::new() });
                self.lengths.len() - 1
            }
            None => {
                self.left_out += 1;
                self.samples.clear();
                return;
            }
        };
        let group = &mut self.lengths[group];
        let lobe = match group.lobes.iter().position(|l| l.lobe == tag.lobe) {
            Some(i) => i,
            None if group.lobes.len() < MAX_LOBES => {
                group.lobes.push(LobeSum { lobe: tag.lobe, name: tag.name.clone(), power: vec![0.0; nfft], dwells: 0 });
                group.lobes.sort_by_key(|l| l.lobe);
                group.lobes.iter().position(|l| l.lobe == tag.lobe).unwrap_or(0)
            }
            None => {
                self.left_out += 1;
                self.samples.clear();
                return;
            }
        };
        self.weights.resize(m, 0.0);
        self.window.fill(&mut self.weights);
        let sum_w: f64 = self.weights.iter().sum();
        self.buf.clear();
        self.buf.extend(self.samples.iter().zip(&self.weights).map(|(x, &w)| x * w as f32));
        self.buf.resize(nfft, Complex32::new(0.0, 0.0));
        self.fft.forward(&mut self.buf);
        let norm = 1.0 / (sum_w * sum_w);
        let sum = &mut group.lobes[lobe];
        for (acc, x) in sum.power.iter_mut().zip(&self.buf) {
            *acc += x.norm_sqr() as f64 * norm;
        }
        sum.dwells += 1;
        group.dwells += 1;
        group.samples += m as u64;
        self.samples.clear();
    }

    /// The picture of the dwell length with the most dwells.
    fn picture(&self) -> SpectrumPicture {
        let Some(group) = self.lengths.iter().max_by_key(|g| (g.dwells, g.nfft)) else {
            return SpectrumPicture::empty(self.tone_hz, self.left_out);
        };
        let left_out =
            self.left_out + self.lengths.iter().filter(|g| g.nfft != group.nfft).map(|g| g.dwells).sum::<u64>();
        let (nfft, rate) = (group.nfft, group.rate);
        let mean_samples = (group.samples as f64 / group.dwells as f64).round().max(1.0) as usize;
        let bin_hz = rate / nfft as f64;
        let search_hz = search_reach_bins(self.search_hz, rate, mean_samples, nfft) * bin_hz;
        let exclusion_hz = noise_exclusion_bins(self.window, mean_samples, nfft) * bin_hz;
        let span_hz = if self.span_hz > 0.0 { self.span_hz } else { (4.0 * exclusion_hz).max(10.0 * bin_hz) };
        let lobes = group
            .lobes
            .iter()
            .map(|sum| LobeSpectrum::from_sum(sum, rate, self.tone_hz, search_hz, exclusion_hz))
            .collect();
        SpectrumPicture {
            tone_hz: self.tone_hz,
            search_hz,
            exclusion_hz,
            span_hz,
            rate,
            nfft,
            mean_samples,
            window: self.window,
            lobes,
            left_out,
        }
    }

    /// Warn of a clear line outside the search window (a wrong tone
    /// setting, or an interferer the noise estimate counts); the figures
    /// themselves are in the picture's legend.
    fn report(&self, lobe: &LobeSpectrum, p: &SpectrumPicture, out: &mut Outputs) {
        // A clear line outside the search window (a wrong tone setting, an
        // interferer the noise estimate would count).
        if let Some((f, db)) = lobe.strongest_outside
            && db - lobe.floor_db > 10.0
            && db > lobe.peak_db
        {
            out.warn(
                self.last_stamp,
                format!(
                    "beacon spectrum of lobe {}: the strongest line is at {f:.1} Hz, {:.1} dB over the noise, \
                     among the noise bins, outside the search window {:.1} ± {:.1} Hz; is the tone setting right?",
                    lobe.name,
                    db - lobe.floor_db,
                    p.tone_hz,
                    p.search_hz
                ),
            );
        }
    }
}

/// One lobe's averaged spectrum and what is read off it.
pub struct LobeSpectrum {
    pub lobe: usize,
    pub name: Arc<str>,
    pub dwells: u64,
    /// (frequency Hz, power dB) from -rate/2 to rate/2.
    pub points: Vec<(f64, f64)>,
    /// Mean power of the noise bins, dB.
    pub floor_db: f64,
    /// Strongest bin within the search window, interpolated: Hz and dB.
    pub peak_hz: f64,
    pub peak_db: f64,
    /// Strongest bin outside the noise exclusion, Hz and dB.
    pub strongest_outside: Option<(f64, f64)>,
}

/// Distance from `f` to `tone` on a spectrum that wraps every `rate`.
fn offset_from(f: f64, tone: f64, rate: f64) -> f64 {
    (f - tone + rate / 2.0).rem_euclid(rate) - rate / 2.0
}

impl LobeSpectrum {
    fn from_sum(sum: &LobeSum, rate: f64, tone: f64, search_hz: f64, exclusion_hz: f64) -> LobeSpectrum {
        let nfft = sum.power.len();
        let bin_hz = rate / nfft as f64;
        let n = sum.dwells.max(1) as f64;
        // Bins in frequency order: the negative half first.
        let order = (nfft / 2..nfft).chain(0..nfft / 2);
        let freq = |k: usize| if k >= nfft / 2 { (k as f64 - nfft as f64) * bin_hz } else { k as f64 * bin_hz };
        let power = |k: usize| sum.power[k] / n;
        let db = |p: f64| 10.0 * p.max(1e-30).log10();
        let (mut noise, mut noise_bins) = (0.0, 0usize);
        let mut peak: Option<usize> = None;
        let mut outside: Option<usize> = None;
        for k in 0..nfft {
            let d = offset_from(freq(k), tone, rate).abs();
            if d > exclusion_hz {
                noise += power(k);
                noise_bins += 1;
                if outside.is_none_or(|o| power(k) > power(o)) {
                    outside = Some(k);
                }
            }
            if d <= search_hz && peak.is_none_or(|p| power(k) > power(p)) {
                peak = Some(k);
            }
        }
        let floor_db = if noise_bins > 0 { db(noise / noise_bins as f64) } else { f64::NAN };
        let (peak_hz, peak_db) = match peak {
            Some(k) => {
                let ln = |j: usize| power(j % nfft).max(1e-300).ln();
                let offset = parabolic_offset(ln(k + nfft - 1), ln(k), ln(k + 1));
                (tone + offset_from(freq(k) + offset * bin_hz, tone, rate), db(power(k)))
            }
            None => (f64::NAN, f64::NAN),
        };
        LobeSpectrum {
            lobe: sum.lobe,
            name: sum.name.clone(),
            dwells: sum.dwells,
            points: order.map(|k| (freq(k), db(power(k)))).collect(),
            floor_db,
            peak_hz,
            peak_db,
            strongest_outside: outside.map(|k| (freq(k), db(power(k)))),
        }
    }
}

/// The drawing: one row per lobe, the whole band on the left and the
/// neighbourhood of the tone on the right.
pub struct SpectrumPicture {
    pub tone_hz: f64,
    /// Half-width of the peak search window around the tone setting, Hz.
    pub search_hz: f64,
    /// Half-width around the tone left out of the noise estimate, Hz.
    pub exclusion_hz: f64,
    pub span_hz: f64,
    pub rate: f64,
    pub nfft: usize,
    pub mean_samples: usize,
    pub window: Window,
    pub lobes: Vec<LobeSpectrum>,
    pub left_out: u64,
}

const WIDTH: u32 = 1200;
const ROW_HEIGHT: u32 = 300;

impl SpectrumPicture {
    fn empty(tone_hz: f64, left_out: u64) -> SpectrumPicture {
        SpectrumPicture {
            tone_hz,
            search_hz: 0.0,
            exclusion_hz: 0.0,
            span_hz: 1.0,
            rate: 1.0,
            nfft: 0,
            mean_samples: 0,
            window: Window::Rect,
            lobes: Vec::new(),
            left_out,
        }
    }

    /// One vertical range for every panel, so lobes compare by eye.
    fn y_range(&self) -> (f64, f64) {
        let floor = self.lobes.iter().map(|l| l.floor_db).filter(|v| v.is_finite()).fold(f64::INFINITY, f64::min);
        let top = self.lobes.iter().flat_map(|l| l.points.iter().map(|p| p.1)).fold(f64::NEG_INFINITY, f64::max);
        padded(floor - 12.0, top, 0.05, 10.0)
    }
}

impl Picture for SpectrumPicture {
    fn size(&self) -> (u32, u32) {
        (WIDTH, 70 + ROW_HEIGHT * self.lobes.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let subtitle = if self.lobes.is_empty() {
            "no dwells arrived".to_string()
        } else {
            format!(
                "power per bin of each lobe's dwells averaged ({} window, {} samples in a {}-point transform, bin \
                 {:.1} Hz; a tone of amplitude 1 reads 0 dB){}",
                self.window.word(),
                self.mean_samples,
                self.nfft,
                self.rate / self.nfft as f64,
                if self.left_out > 0 {
                    format!("; {} dwells of other lengths left out", self.left_out)
                } else {
                    String::new()
                }
            )
        };
        let body = frame(root, "Beacon spectrum per lobe", &subtitle)?;
        if self.lobes.is_empty() {
            return Ok(());
        }
        let y = self.y_range();
        let rows = body.split_evenly((self.lobes.len(), 1));
        for (lobe, row) in self.lobes.iter().zip(&rows) {
            let (left, rest) = row.split_horizontally((WIDTH as f64 * 0.36) as u32);
            let (middle, key) = rest.split_horizontally((WIDTH as f64 * 0.38) as u32);
            self.draw_band(lobe, &left, y)?;
            self.draw_zoom(lobe, &middle, y)?;
            self.draw_key(lobe, &key)?;
        }
        Ok(())
    }
}

impl SpectrumPicture {
    /// Shade the noise bins, the search window and the tone setting over `x`.
    fn draw_regions<DB: DrawingBackend>(
        &self,
        c: &mut Chart<'_, DB>,
        x: (f64, f64),
        y: (f64, f64),
    ) -> Result<(), String> {
        let k = |hz: f64| hz / 1e3;
        let (lo, hi) = (k(self.tone_hz - self.exclusion_hz), k(self.tone_hz + self.exclusion_hz));
        let noise = [(x.0, lo.max(x.0)), (hi.min(x.1), x.1)];
        c.draw_series(
            noise
                .iter()
                .filter(|r| r.1 > r.0)
                .map(|r| Rectangle::new([(r.0, y.0), (r.1, y.1)], palette::BAND.mix(0.3).filled())),
        )
        .map_err(draw_err)?;
        let search = [(k(self.tone_hz - self.search_hz), y.0), (k(self.tone_hz + self.search_hz), y.1)];
        c.draw_series(std::iter::once(Rectangle::new(search, palette::GATE.mix(0.55).filled()))).map_err(draw_err)?;
        Ok(())
    }

    fn draw_tone_and_floor<DB: DrawingBackend>(
        &self,
        c: &mut Chart<'_, DB>,
        lobe: &LobeSpectrum,
        x: (f64, f64),
        y: (f64, f64),
    ) -> Result<(), String> {
        let t = self.tone_hz / 1e3;
        c.draw_series(std::iter::once(PathElement::new(vec![(t, y.0), (t, y.1)], palette::ALERT.stroke_width(1))))
            .map_err(draw_err)?;
        if lobe.floor_db.is_finite() {
            c.draw_series(std::iter::once(PathElement::new(
                vec![(x.0, lobe.floor_db), (x.1, lobe.floor_db)],
                palette::INK.stroke_width(1),
            )))
            .map_err(draw_err)?;
        }
        Ok(())
    }

    fn draw_band<DB: DrawingBackend>(
        &self,
        lobe: &LobeSpectrum,
        area: &DrawingArea<DB, Shift>,
        y: (f64, f64),
    ) -> Result<(), String> {
        let x = (-self.rate / 2e3, self.rate / 2e3);
        let mut c = chart(area, &format!("lobe {}: whole band", lobe.name), x.0..x.1, y.0..y.1)?;
        self.draw_regions(&mut c, x, y)?;
        draw_mesh(&mut c, "frequency (kHz)", "power per bin (dB)")?;
        let pts: Vec<(f64, f64)> = lobe.points.iter().map(|&(f, db)| (f / 1e3, db.max(y.0))).collect();
        let colour = palette::lobe(lobe.lobe);
        c.draw_series(LineSeries::new(decimate_min_max(&pts, 1200), colour.stroke_width(1))).map_err(draw_err)?;
        self.draw_tone_and_floor(&mut c, lobe, x, y)
    }

    fn draw_zoom<DB: DrawingBackend>(
        &self,
        lobe: &LobeSpectrum,
        area: &DrawingArea<DB, Shift>,
        y: (f64, f64),
    ) -> Result<(), String> {
        let x = ((self.tone_hz - self.span_hz) / 1e3, (self.tone_hz + self.span_hz) / 1e3);
        let caption = format!("lobe {} ({} dwells): around the tone", lobe.name, lobe.dwells);
        let mut c = chart(area, &caption, x.0..x.1, y.0..y.1)?;
        self.draw_regions(&mut c, x, y)?;
        draw_mesh(&mut c, "frequency (kHz)", "power per bin (dB)")?;
        // Bins near the tone, unwrapped so a tone near ±rate/2 stays whole.
        let mut near: Vec<(f64, f64)> = lobe
            .points
            .iter()
            .map(|&(f, db)| ((self.tone_hz + offset_from(f, self.tone_hz, self.rate)) / 1e3, db.max(y.0)))
            .filter(|p| p.0 >= x.0 && p.0 <= x.1)
            .collect();
        near.sort_by(|a, b| a.0.total_cmp(&b.0));
        let colour = palette::lobe(lobe.lobe);
        c.draw_series(LineSeries::new(near, colour.stroke_width(1))).map_err(draw_err)?;
        self.draw_tone_and_floor(&mut c, lobe, x, y)?;
        if lobe.peak_hz.is_finite() {
            c.draw_series(std::iter::once(Circle::new((lobe.peak_hz / 1e3, lobe.peak_db), 4, palette::INK.filled())))
                .map_err(draw_err)?;
        }
        Ok(())
    }

    fn draw_key<DB: DrawingBackend>(&self, lobe: &LobeSpectrum, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        legend(
            area,
            44,
            &[
                (palette::lobe(lobe.lobe), format!("{}: mean of {} dwells", lobe.name, lobe.dwells)),
                (palette::ALERT, format!("tone setting {:.1} Hz", self.tone_hz)),
                (palette::GATE, format!("peak search ±{:.1} Hz", self.search_hz)),
                (palette::BAND, format!("noise bins beyond ±{:.1} Hz", self.exclusion_hz)),
                (palette::INK, format!("noise bin mean {:.1} dB", lobe.floor_db)),
                (
                    palette::INK,
                    format!("peak {:.1} Hz, {:.1} dB over noise", lobe.peak_hz, lobe.peak_db - lobe.floor_db),
                ),
            ],
        )
    }
}
