//! Running the graph's chain on the scan capture and locating each dwell:
//! the dwell records are taken from the wire into the graph's
//! `ratio_discriminator`, and each gets the source's off-axis angle from
//! the pointing telemetry at its own mid time.

use super::pattern::AmpPoint;
use super::telemetry::{Pointing, antenna_frame_offset};
use crate::error::Error;
use crate::graph::ResolvedGraph;
use crate::runtime::{RunOptions, RunReport, Tap, run};
use lobeflow_blocks::dsp::discriminator::{LobePair, parse_pairs};
use lobeflow_blocks::kinds::ratio_discriminator::RatioDiscriminatorSettings;
use lobeflow_blocks::{DwellRecord, Item, Settings};

/// What calibration needs from the graph's discriminator.
#[derive(Clone, Debug)]
pub struct Discriminator {
    pub block: String,
    pub pairs: Vec<LobePair>,
    pub way: u32,
    pub floor_db: f64,
    pub unbias: bool,
    /// The installation's numbers as given (starting values of the fits).
    pub beamwidth: f64,
    pub squint: f64,
    /// `block.port` feeding the discriminator's dwells.
    pub dwell_port: String,
}

impl Discriminator {
    /// The one `ratio_discriminator` of `graph` and the port feeding it.
    pub fn find(graph: &ResolvedGraph) -> Result<Discriminator, Error> {
        let found: Vec<usize> =
            (0..graph.blocks.len()).filter(|&i| graph.blocks[i].spec.kind == "ratio_discriminator").collect();
        let &[index] = found.as_slice() else {
            return Err(Error::Usage(format!(
                "{}: calibrate needs exactly one ratio_discriminator block, the graph has {}",
                graph.path.display(),
                found.len()
            )));
        };
        let block = &graph.blocks[index];
        let wire = graph.wires.iter().find(|w| w.to == (index, 0)).ok_or_else(|| {
            Error::Usage(format!("{}: block '{}' has no dwells wired in", graph.path.display(), block.name))
        })?;
        let from = &graph.blocks[wire.from.0];
        let dwell_port = format!("{}.{}", from.name, from.spec.outputs[wire.from.1].name);
        let bad = |e: &dyn std::fmt::Display| Error::Usage(format!("block '{}': {e}", block.name));
        let s = RatioDiscriminatorSettings::from_params(&block.params).map_err(|e| bad(&e))?;
        Ok(Discriminator {
            block: block.name.clone(),
            pairs: parse_pairs(&s.pairs).map_err(|e| bad(&e))?,
            way: s.way.passes(),
            floor_db: s.floor,
            unbias: s.unbias,
            beamwidth: s.beamwidth,
            squint: s.squint,
            dwell_port,
        })
    }

    /// Names of all paired lobes: pair k has lobes 2k (plus) and 2k+1 (minus).
    pub fn lobe_names(&self) -> Vec<String> {
        self.pairs.iter().flat_map(|p| [p.plus.clone(), p.minus.clone()]).collect()
    }
}

/// Run the graph, keeping its own outputs in `opts.out_dir`, and return
/// the dwell records that reached the discriminator.
pub fn collect_dwells(
    graph: &ResolvedGraph,
    disc: &Discriminator,
    opts: &RunOptions,
) -> Result<(Vec<DwellRecord>, RunReport), Error> {
    let (tx, rx) = crossbeam_channel::bounded(1024);
    let tap = Tap { port: disc.dwell_port.clone(), sender: tx, index: 0, waker: None };
    let (g, o) = (graph.clone(), opts.clone());
    let handle = std::thread::spawn(move || run(&g, &o, vec![tap]));
    let mut dwells = Vec::new();
    for (_, item) in rx.iter() {
        if let Item::Dwell(d) = item {
            dwells.push(d);
        }
    }
    let report = handle.join().map_err(|_| Error::Output("the scan run's thread failed".into()))??;
    Ok((dwells, report))
}

/// Where one dwell was, seen from the antenna.
#[derive(Clone, Debug)]
pub struct LocatedDwell {
    /// Position among all dwells of the pair's two lobes (dropped ones too).
    pub seq: u64,
    pub time_s: f64,
    pub pair: usize,
    pub plus: bool,
    /// Off-axis angle along the pair's axis, degrees (dwells too far
    /// across it are left out before this).
    pub theta: f64,
    pub y: f64,
    pub var: f64,
}

/// One ratio of a plus dwell over the next minus dwell (or the reverse),
/// located at the pair's mid time, as the discriminator pairs them.
#[derive(Clone, Debug)]
pub struct RatioPoint {
    pub time_s: f64,
    pub pair: usize,
    pub theta: f64,
    /// ln(plus / minus).
    pub r: f64,
    pub var: f64,
    pub plus_y: f64,
    pub minus_y: f64,
}

/// Dwells whose ln(amplitude) is less certain than this (sigma 0.5, a
/// dwell energy over noise near 2) are left out as without signal: they
/// carry almost no weight, and the second-order bias correction no longer
/// holds for them.
const MAX_VAR_LN_AMP: f64 = 0.25;

/// Why dwells were left out.
#[derive(Clone, Debug, Default)]
pub struct Dropped {
    pub no_signal: usize,
    pub no_pointing: usize,
    pub off_cross_axis: usize,
    pub other_lobes: usize,
}

/// Off-axis angles (along, across) of a pair's axis: `az` pairs read the
/// traverse angle, `el` pairs the elevation offset.
fn axis_angles(axis: &str, offset: (f64, f64)) -> Option<(f64, f64)> {
    match axis {
        "az" => Some((offset.0, offset.1)),
        "el" => Some((offset.1, offset.0)),
        _ => None,
    }
}

/// Check every pair's axis is one the telemetry can give.
pub fn check_axes(disc: &Discriminator) -> Result<(), Error> {
    for p in &disc.pairs {
        if axis_angles(&p.axis, (0.0, 0.0)).is_none() {
            return Err(Error::Usage(format!(
                "block '{}': pair axis '{}' is neither az nor el; calibrate takes the off-axis angles of the az and el axes from the pointing telemetry",
                disc.block, p.axis
            )));
        }
    }
    Ok(())
}

/// Locate each dwell of a paired lobe; dwells without signal or pointing,
/// or too far off the pair's axis across it, are counted and left out.
pub fn locate(
    dwells: &[DwellRecord],
    disc: &Discriminator,
    pointing: &Pointing,
    source: (f64, f64),
    cross_limit: f64,
) -> (Vec<LocatedDwell>, Dropped) {
    let mut out = Vec::new();
    let mut dropped = Dropped::default();
    let mut seq = vec![0u64; disc.pairs.len()];
    for d in dwells {
        let name: &str = &d.tag.name;
        let Some((pair, plus)) = disc.pairs.iter().enumerate().find_map(|(k, p)| {
            if p.plus == name {
                Some((k, true))
            } else if p.minus == name {
                Some((k, false))
            } else {
                None
            }
        }) else {
            dropped.other_lobes += 1;
            continue;
        };
        seq[pair] += 1;
        if d.amplitude.is_nan() || d.amplitude <= 0.0 || d.var_ln_amp.is_nan() || d.var_ln_amp > MAX_VAR_LN_AMP {
            dropped.no_signal += 1;
            continue;
        }
        let t = d.mid.seconds();
        let Some(p) = pointing.at(t) else {
            dropped.no_pointing += 1;
            continue;
        };
        let Some((theta, cross)) = axis_angles(&disc.pairs[pair].axis, antenna_frame_offset(p, source)) else {
            continue;
        };
        if cross.abs() > cross_limit {
            dropped.off_cross_axis += 1;
            continue;
        }
        let unbias = if disc.unbias { d.var_ln_amp } else { 0.0 };
        out.push(LocatedDwell {
            seq: seq[pair],
            time_s: t,
            pair,
            plus,
            theta,
            y: d.amplitude.ln() + unbias,
            var: d.var_ln_amp,
        });
    }
    (out, dropped)
}

/// Pair each dwell with the next dwell of the opposite lobe, as the
/// discriminator does, but only when no dwell of the pair was left out
/// between them; the ratio's angle is taken at the pair's mid time.
pub fn ratios(
    located: &[LocatedDwell],
    disc: &Discriminator,
    pointing: &Pointing,
    source: (f64, f64),
) -> Vec<RatioPoint> {
    let mut waiting: Vec<Option<&LocatedDwell>> = vec![None; disc.pairs.len()];
    let mut out = Vec::new();
    for d in located {
        match waiting[d.pair].take() {
            Some(w) if w.plus != d.plus && d.seq == w.seq + 1 => {
                let (p, m) = if d.plus { (d, w) } else { (w, d) };
                let t = 0.5 * (p.time_s + m.time_s);
                let at = pointing
                    .at(t)
                    .and_then(|pt| axis_angles(&disc.pairs[d.pair].axis, antenna_frame_offset(pt, source)));
                if let Some((theta, _)) = at {
                    out.push(RatioPoint {
                        time_s: t,
                        pair: d.pair,
                        theta,
                        r: p.y - m.y,
                        var: p.var + m.var,
                        plus_y: p.y,
                        minus_y: m.y,
                    });
                }
            }
            _ => waiting[d.pair] = Some(d),
        }
    }
    out
}

/// The amplitude points of the pairs in `which`; the lobes are numbered
/// 2 k (plus) and 2 k + 1 (minus) for the k-th pair of `which`.
pub fn amp_points(located: &[LocatedDwell], which: &[usize]) -> Vec<AmpPoint> {
    located
        .iter()
        .filter_map(|d| {
            let k = which.iter().position(|&w| w == d.pair)?;
            Some(AmpPoint { theta: d.theta, plus: d.plus, lobe: 2 * k + usize::from(!d.plus), y: d.y, var: d.var })
        })
        .collect()
}
