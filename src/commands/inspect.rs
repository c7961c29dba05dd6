//! `lobeflow inspect CAPTURE`: what a capture holds — format, rate,
//! channels and roles, length, per-channel levels — and the installation's
//! numbers measured at full rate (src/inspect/): PRF, pulse length, echo
//! window, sync levels and dwell, switch instants, tone, SNR per lobe.
//! `--params-for GRAPH` prints only a params file for that graph.
//! Streams the file with constant memory.

use crate::capture::reader::{CaptureInfo, Format, OpenOptions, open};
use crate::capture::roles::{ChunkPools, NonFinite, Replaced, Role, RoleMap};
use crate::error::Error;
use lobeflow_blocks::{RawValue, Value};
use num_complex::Complex32;
use rustfft::FftPlanner;
use std::fmt::Write;

/// Envelopes are block-averaged down to about this rate before the FFT, so
/// switch rates and PRFs up to a few kHz show.
pub const ENVELOPE_RATE: f64 = 8000.0;
/// Longest envelope FFT (a power of two): about 8 s at the envelope rate.
pub const MAX_FFT: usize = 1 << 16;
/// Periodicities listed per envelope.
pub const PEAKS: usize = 5;
/// Frames read per step.
const BLOCK: usize = 1 << 15;

/// What to inspect and how to read it.
#[derive(Clone, Debug)]
pub struct InspectArgs {
    /// Capture path; `-` reads standard input (raw, with datatype and rate).
    pub path: String,
    pub options: OpenOptions,
    /// Channel roles; empty for the default by channel count.
    pub roles: Vec<String>,
    /// Look at no more than this many seconds from the start.
    pub max_seconds: f64,
}

/// Longest stretch the installation figures are measured over (each of
/// their passes reads it again).
pub const MAX_MEASURE_SECONDS: f64 = 10.0;

impl InspectArgs {
    fn measure_source(&self, lobe_order: Vec<String>) -> crate::inspect::Source {
        crate::inspect::Source {
            path: self.path.clone(),
            options: self.options.clone(),
            roles: self.roles.clone(),
            seconds: self.max_seconds.min(MAX_MEASURE_SECONDS),
            lobe_order,
        }
    }
}

/// `inspect CAPTURE --params-for GRAPH`: a params file with the graph's
/// setting names (measured values), its figures as comments.
pub fn params_for(args: &InspectArgs, graph: &std::path::Path) -> Result<String, Error> {
    let file = crate::graph::file::GraphFile::load(graph)?;
    let names: Vec<String> = file.settings.iter().map(|k| k.name.clone()).collect();
    let lobe_order = file
        .settings
        .iter()
        .find(|k| k.name == "lobe_order")
        .and_then(|k| k.default.as_ref())
        .map(|v| v.to_string().split(',').map(|l| l.trim().to_string()).filter(|l| !l.is_empty()).collect())
        .unwrap_or_default();
    let inst = crate::inspect::measure(&args.measure_source(lobe_order)).map_err(Error::Input)?;
    Ok(crate::inspect::params_for(&inst, &graph.display().to_string(), &names, &args.path))
}

/// Arguments as typed on the command line; the rate takes units like the
/// `rate` parameter of `capture_reader` (e.g. `2.4 MS/s`).
pub fn args_from_text(
    path: String,
    format: &str,
    datatype: Option<String>,
    rate: Option<&str>,
    channels: Option<usize>,
    roles: Option<&str>,
    max_seconds: f64,
) -> Result<InspectArgs, Error> {
    let rate = match rate {
        None => None,
        Some(text) => {
            let spec =
                crate::capture::source::SPEC.param("rate").ok_or_else(|| Error::Usage("no rate parameter".into()))?;
            match spec.parse(&RawValue::from_text(text)) {
                Ok(Value::Number(r)) if r > 0.0 => Some(r),
                Ok(_) => {
                    return Err(Error::Usage(format!("--rate {text}: the rate must be above 0")));
                }
                Err(e) => return Err(Error::Usage(format!("--rate {text}: {e}"))),
            }
        }
    };
    let roles = roles
        .map(|r| r.split(',').map(|x| x.trim().to_string()).filter(|x| !x.is_empty()).collect())
        .unwrap_or_default();
    Ok(InspectArgs {
        path,
        options: OpenOptions {
            format: Format::parse(format).map_err(|e| Error::Usage(e.to_string()))?,
            datatype,
            rate,
            channels: channels.filter(|&c| c > 0),
        },
        roles,
        max_seconds,
    })
}

/// Level statistics of one component of one channel (full scale = 1).
#[derive(Clone, Debug, PartialEq)]
pub struct ComponentStats {
    /// e.g. "ch1 i" or "ch2 sync.re".
    pub label: String,
    /// Finite values seen.
    pub count: u64,
    pub min: f64,
    pub max: f64,
    pub mean: f64,
    pub rms: f64,
    /// 20 log10 of the largest magnitude.
    pub peak_dbfs: f64,
    /// Values at or beyond full scale (integer codes at their limits; floats with |v| >= 1).
    pub clipped: u64,
    pub nonfinite: u64,
}

/// One spectral peak of an envelope.
#[derive(Clone, Debug, PartialEq)]
pub struct Periodicity {
    pub frequency_hz: f64,
    pub period_s: f64,
    /// Power relative to the strongest peak of the same envelope, dB.
    pub relative_db: f64,
}

/// The periodicities of one envelope (|iq| or the sync channel).
#[derive(Clone, Debug, PartialEq)]
pub struct Envelope {
    pub source: &'static str,
    /// Samples averaged into one envelope sample.
    pub decimation: usize,
    pub rate: f64,
    /// Envelope samples used (the FFT is zero-padded to `fft_len`).
    pub used: usize,
    pub fft_len: usize,
    pub peaks: Vec<Periodicity>,
}

/// Everything `inspect` found; [`Inspection::render`] prints it.
#[derive(Clone, Debug)]
pub struct Inspection {
    pub info: CaptureInfo,
    pub roles: String,
    /// Samples (frames) looked at.
    pub frames_seen: u64,
    /// True when the look stopped before the end of the capture.
    pub limited: bool,
    pub max_seconds: f64,
    pub stats: Vec<ComponentStats>,
    pub envelopes: Vec<Envelope>,
    /// The installation figures, or why they could not be measured.
    pub installation: Result<crate::inspect::Installation, String>,
}

/// Inspect a capture and return the printed report.
///
/// Reads at most `args.max_seconds` from the start (the report says when it
/// stopped early), with memory independent of the capture's length.
pub fn inspect(args: &InspectArgs) -> Result<String, Error> {
    Ok(examine(args)?.render())
}

struct Accumulator {
    count: u64,
    min: f64,
    max: f64,
    sum: f64,
    sum_sq: f64,
    clipped: u64,
    nonfinite: u64,
}

/// Block means of a real signal, kept up to [`MAX_FFT`] values.
struct Decimator {
    factor: usize,
    acc: f64,
    n: usize,
    values: Vec<f32>,
}

impl Decimator {
    fn push(&mut self, v: f32) {
        if self.values.len() >= MAX_FFT {
            return;
        }
        self.acc += f64::from(v);
        self.n += 1;
        if self.n == self.factor {
            self.values.push((self.acc / self.factor as f64) as f32);
            self.acc = 0.0;
            self.n = 0;
        }
    }
}

/// Read the capture and gather the figures of the report.
pub fn examine(args: &InspectArgs) -> Result<Inspection, Error> {
    let mut reader = open(&args.path, &args.options).map_err(|e| Error::Input(e.to_string()))?;
    let info = reader.info().clone();
    let roles = RoleMap::new(&args.roles, &info).map_err(|e| Error::Input(e.to_string()))?;
    let max_frames = if args.max_seconds.is_finite() && args.max_seconds > 0.0 {
        (args.max_seconds * info.rate).ceil() as u64
    } else {
        u64::MAX
    };
    let per_frame = info.components_per_frame();
    let full_scale = info.encoding.full_scale_positive();
    let mut acc: Vec<Accumulator> = (0..per_frame)
        .map(|_| Accumulator {
            count: 0,
            min: f64::INFINITY,
            max: f64::NEG_INFINITY,
            sum: 0.0,
            sum_sq: 0.0,
            clipped: 0,
            nonfinite: 0,
        })
        .collect();
    let factor = ((info.rate / ENVELOPE_RATE).round() as usize).max(1);
    let new_dec = || Decimator { factor, acc: 0.0, n: 0, values: Vec::with_capacity(MAX_FFT) };
    let mut magnitude = new_dec();
    let mut sync = roles.has_sync().then(new_dec);
    let mut frames = Vec::new();
    let mut seen = 0u64;
    let mut replaced = Replaced::default();
    let pools = ChunkPools::default();
    let limited = loop {
        if seen >= max_frames {
            break info.frames().is_none_or(|total| total > seen);
        }
        let want = (BLOCK as u64).min(max_frames - seen) as usize;
        let n = reader.read_frames(want, &mut frames).map_err(|e| Error::Input(e.to_string()))?;
        if n == 0 {
            break false;
        }
        for frame in frames.chunks_exact(per_frame) {
            for (a, &v) in acc.iter_mut().zip(frame) {
                if !v.is_finite() {
                    a.nonfinite += 1;
                    continue;
                }
                if v >= full_scale || v <= -1.0 {
                    a.clipped += 1;
                }
                let x = f64::from(v);
                a.count += 1;
                a.min = a.min.min(x);
                a.max = a.max.max(x);
                a.sum += x;
                a.sum_sq += x * x;
            }
        }
        let chunk = roles
            .chunk(&mut frames, seen, &info, NonFinite::Zero, &mut replaced, &pools)
            .map_err(|e| Error::Input(e.to_string()))?;
        for z in chunk.iq.iter() {
            magnitude.push(z.norm());
        }
        if let (Some(d), Some(s)) = (sync.as_mut(), chunk.sync.as_ref()) {
            for &v in s.iter() {
                d.push(v);
            }
        }
        seen += n as u64;
    };

    let labels = component_labels(&info, roles.roles());
    let stats = acc
        .iter()
        .zip(labels)
        .map(|(a, label)| {
            let n = a.count as f64;
            let (min, max, mean, rms) = if a.count > 0 {
                (a.min, a.max, a.sum / n, (a.sum_sq / n).sqrt())
            } else {
                (f64::NAN, f64::NAN, f64::NAN, f64::NAN)
            };
            let peak = min.abs().max(max.abs());
            ComponentStats {
                label,
                count: a.count,
                min,
                max,
                mean,
                rms,
                peak_dbfs: 20.0 * peak.log10(),
                clipped: a.clipped,
                nonfinite: a.nonfinite,
            }
        })
        .collect();
    let mut planner = FftPlanner::<f32>::new();
    let mut envelopes = vec![periodicities("|iq|", &magnitude, info.rate, &mut planner)];
    if let Some(d) = &sync {
        envelopes.push(periodicities("sync", d, info.rate, &mut planner));
    }
    let installation = crate::inspect::measure(&args.measure_source(Vec::new()));
    Ok(Inspection {
        installation,
        info,
        roles: roles.describe(),
        frames_seen: seen,
        limited,
        max_seconds: args.max_seconds,
        stats,
        envelopes,
    })
}

fn component_labels(info: &CaptureInfo, roles: &[Role]) -> Vec<String> {
    let mut v = Vec::new();
    for (k, r) in roles.iter().enumerate() {
        if info.complex {
            v.push(format!("ch{} {}.re", k + 1, r.name()));
            v.push(format!("ch{} {}.im", k + 1, r.name()));
        } else {
            v.push(format!("ch{} {}", k + 1, r.name()));
        }
    }
    v
}

/// The strongest spectral peaks of a decimated envelope: mean removed, Hann
/// window, zero-padded power-of-two FFT, local maxima refined by a parabola
/// through the log power of the peak bin and its neighbours.
fn periodicities(source: &'static str, d: &Decimator, rate: f64, planner: &mut FftPlanner<f32>) -> Envelope {
    let env_rate = rate / d.factor as f64;
    let n = d.values.len();
    let fft_len = n.next_power_of_two().clamp(64, MAX_FFT);
    let mut envelope = Envelope { source, decimation: d.factor, rate: env_rate, used: n, fft_len, peaks: Vec::new() };
    if n < 8 {
        return envelope;
    }
    let mean = d.values.iter().map(|&v| f64::from(v)).sum::<f64>() / n as f64;
    let mut buf: Vec<Complex32> = d
        .values
        .iter()
        .enumerate()
        .map(|(k, &v)| {
            let w = 0.5 - 0.5 * (2.0 * std::f64::consts::PI * k as f64 / n as f64).cos();
            Complex32::new(((f64::from(v) - mean) * w) as f32, 0.0)
        })
        .collect();
    buf.resize(fft_len, Complex32::new(0.0, 0.0));
    planner.plan_fft_forward(fft_len).process(&mut buf);
    let power: Vec<f64> = buf[..fft_len / 2 + 1].iter().map(|z| f64::from(z.norm_sqr())).collect();
    let strongest = power.iter().skip(1).cloned().fold(0.0, f64::max);
    if strongest <= 0.0 || !strongest.is_finite() {
        return envelope;
    }
    let mut peaks: Vec<(usize, f64)> = (2..power.len().saturating_sub(1))
        .filter(|&k| power[k] > power[k - 1] && power[k] >= power[k + 1] && power[k] > strongest * 1e-9)
        .map(|k| (k, power[k]))
        .collect();
    peaks.sort_by(|a, b| b.1.total_cmp(&a.1));
    let bin_hz = env_rate / fft_len as f64;
    let top = peaks.first().map(|p| p.1).unwrap_or(strongest);
    envelope.peaks = peaks
        .iter()
        .take(PEAKS)
        .map(|&(k, p)| {
            let (a, b, c) = (power[k - 1].max(1e-300).ln(), p.ln(), power[k + 1].max(1e-300).ln());
            let denom = a - 2.0 * b + c;
            let delta = if denom < 0.0 { (0.5 * (a - c) / denom).clamp(-0.5, 0.5) } else { 0.0 };
            let f = (k as f64 + delta) * bin_hz;
            Periodicity { frequency_hz: f, period_s: 1.0 / f, relative_db: 10.0 * (p / top).log10() }
        })
        .collect();
    envelope
}

fn engineering(v: f64, unit: &str) -> String {
    let a = v.abs();
    let (scale, prefix) = if a >= 1e9 {
        (1e-9, "G")
    } else if a >= 1e6 {
        (1e-6, "M")
    } else if a >= 1e3 {
        (1e-3, "k")
    } else if a >= 1.0 || a == 0.0 {
        (1.0, "")
    } else if a >= 1e-3 {
        (1e3, "m")
    } else {
        (1e6, "u")
    };
    format!("{} {prefix}{unit}", trim_number(v * scale))
}

fn trim_number(v: f64) -> String {
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    s.to_string()
}

impl Inspection {
    /// The report as printed by `lobeflow inspect`.
    pub fn render(&self) -> String {
        let i = &self.info;
        let mut s = String::new();
        let _ = writeln!(s, "capture      {}", i.path);
        if let Some(m) = &i.meta_path {
            let _ = writeln!(s, "metadata     {m}");
        }
        let fmt = match i.format {
            Format::Wav => "WAV",
            Format::Sigmf => "SigMF recording",
            Format::Raw if i.path == "-" => "raw, standard input",
            _ => "raw",
        };
        let _ = writeln!(s, "format       {fmt}: {}", i.encoding_text);
        let _ = writeln!(s, "rate         {}", engineering(i.rate, "S/s"));
        let kind = if i.complex { "complex" } else { "real" };
        let _ = writeln!(s, "channels     {} {kind}: {}", i.channels, self.roles);
        if let Some(f) = i.frequency {
            let _ = writeln!(s, "frequency    {}", engineering(f, "Hz"));
        }
        match (i.frames(), i.data_bytes) {
            (Some(n), Some(b)) => {
                let _ = writeln!(
                    s,
                    "length       {n} samples, {} ({b} bytes of data from byte offset {})",
                    engineering(n as f64 / i.rate, "s"),
                    i.data_offset
                );
            }
            _ => {
                let _ = writeln!(s, "length       unknown (a stream)");
            }
        }
        if let Some(meta) = &i.sigmf {
            let _ = write!(s, "annotations  {}", meta.annotations.len());
            if let Some(a) = meta.annotations.first() {
                let label = a.label.as_deref().unwrap_or("");
                let count = a.sample_count.map(|c| format!(" +{c}")).unwrap_or_default();
                let _ = write!(s, " (first: sample {}{count} \"{label}\")", a.sample_start);
            }
            s.push('\n');
        }
        let span = engineering(self.frames_seen as f64 / i.rate, "s");
        if self.limited {
            let _ = writeln!(
                s,
                "examined     only the first {span} ({} samples, limit {} s); the figures below cover that part alone",
                self.frames_seen, self.max_seconds
            );
        } else {
            let _ = writeln!(s, "examined     all {} samples ({span})", self.frames_seen);
        }
        let _ = writeln!(s, "\nlevels (full scale 1)");
        let _ = writeln!(
            s,
            "  {:<14} {:>10} {:>10} {:>10} {:>10} {:>10} {:>8} {:>10}",
            "channel", "min", "max", "mean", "rms", "peak dBFS", "clipped", "non-finite"
        );
        for c in &self.stats {
            let num = |v: f64| {
                if v.is_finite() { format!("{v:.6}") } else { "-".to_string() }
            };
            let peak = if c.peak_dbfs.is_finite() { format!("{:.2}", c.peak_dbfs) } else { "-inf".to_string() };
            let _ = writeln!(
                s,
                "  {:<14} {:>10} {:>10} {:>10} {:>10} {:>10} {:>8} {:>10}",
                c.label,
                num(c.min),
                num(c.max),
                num(c.mean),
                num(c.rms),
                peak,
                c.clipped,
                c.nonfinite
            );
        }
        let _ = writeln!(s, "\ninstallation (measured at the full rate; value ± stated confidence [how])");
        match &self.installation {
            Ok(inst) => s.push_str(&inst.render("  ")),
            Err(why) => {
                let _ = writeln!(s, "  not measured: {why}");
            }
        }
        for e in &self.envelopes {
            let _ = writeln!(
                s,
                "\nenvelope periodicities of {} (means of {} samples -> {}, {} values, {}-point FFT, bins of {}; harmonics and aliases of the PRF show here, the figures above do not)",
                e.source,
                e.decimation,
                engineering(e.rate, "S/s"),
                e.used,
                e.fft_len,
                engineering(e.rate / e.fft_len as f64, "Hz")
            );
            if e.peaks.is_empty() {
                let _ = writeln!(s, "  none (too short, or a constant envelope)");
            }
            for (k, p) in e.peaks.iter().enumerate() {
                let _ = writeln!(
                    s,
                    "  {}. {:>14}  period {:>12}  {:>7.1} dB",
                    k + 1,
                    engineering(p.frequency_hz, "Hz"),
                    engineering(p.period_s, "s"),
                    p.relative_db
                );
            }
        }
        s
    }
}
