//! Learning the levels of a recorded sync staircase from the data: histogram
//! peaks split by deep valleys, refined by trimmed means. The lobe at
//! position `i` of the configured order has the `i`-th lowest level.

use super::sync_tracker::min_spacing;

/// Spread (standard deviation) below which one sync level is called flat:
/// a few percent of the usual staircase spacing (levels 0.5 apart or more).
const FLAT_SPREAD: f64 = 0.05;

/// Why a single level (or none) was found: a flat channel, or one that
/// wanders like noise (which a flat message would misdescribe).
fn one_level_msg(finite: &[f64], lo: f64, hi: f64, level: Option<f64>) -> String {
    let n = finite.len() as f64;
    let mean = finite.iter().sum::<f64>() / n;
    let spread = (finite.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n).sqrt();
    if spread <= FLAT_SPREAD {
        return format!(
            "sync channel is flat in the learning window ({} samples, all near {:.4}, spread {spread:.4}): no transitions, \
             so no lobe levels to learn; check the channel map, or use timing: schedule",
            finite.len(),
            level.unwrap_or(mean)
        );
    }
    format!(
        "sync channel looks like noise in the learning window ({} samples from {lo:.4} to {hi:.4}, mean {mean:.4}, \
         spread {spread:.4}, no separate levels): no lobe staircase to learn; check the channel map, or use timing: schedule",
        finite.len()
    )
}

/// Learn `lobes` sync levels (ascending) from `values`.
///
/// Levels are the peaks of a smoothed histogram that are separated by a deep
/// valley and hold a fair share of the samples; each is then refined to the
/// mean of the samples within a quarter spacing of it.
pub fn learn_levels(values: &[f32], lobes: usize) -> Result<Vec<f64>, String> {
    const BINS: usize = 256;
    let finite: Vec<f64> = values.iter().filter(|v| v.is_finite()).map(|&v| v as f64).collect();
    if finite.len() < 16 {
        return Err(format!("too few sync samples to learn the levels ({} usable); make 'learn' longer", finite.len()));
    }
    let lo = finite.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = finite.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let flat_msg = |near: f64| {
        format!(
            "sync channel is flat in the learning window ({} samples, all near {near:.4}): no transitions, \
             so no lobe levels to learn; check the channel map, or use timing: schedule",
            finite.len()
        )
    };
    if hi - lo <= 1e-6 * (1.0 + lo.abs().max(hi.abs())) {
        return Err(flat_msg(lo));
    }
    let width = (hi - lo) / BINS as f64;
    let bin_of = |v: f64| (((v - lo) / width) as usize).min(BINS - 1);
    let mut counts = [0f64; BINS];
    for &v in &finite {
        counts[bin_of(v)] += 1.0;
    }
    let kernel = [1.0, 2.0, 3.0, 2.0, 1.0];
    let smooth: Vec<f64> = (0..BINS)
        .map(|i| {
            kernel
                .iter()
                .enumerate()
                .filter_map(|(k, w)| (i + k).checked_sub(2).filter(|&j| j < BINS).map(|j| w * counts[j]))
                .sum::<f64>()
                / 9.0
        })
        .collect();
    let mut peaks: Vec<usize> = (0..BINS)
        .filter(|&i| {
            let left = if i == 0 { 0.0 } else { smooth[i - 1] };
            let right = if i + 1 == BINS { 0.0 } else { smooth[i + 1] };
            smooth[i] > left && smooth[i] >= right
        })
        .collect();
    peaks.sort_by(|&a, &b| smooth[b].total_cmp(&smooth[a]));
    let min_mass = (0.05 * finite.len() as f64 / lobes as f64).max(8.0);
    let mass = |p: usize| counts[p.saturating_sub(3)..(p + 4).min(BINS)].iter().sum::<f64>();
    let mut accepted: Vec<usize> = Vec::new();
    for p in peaks {
        if mass(p) < min_mass {
            continue;
        }
        let distinct = accepted.iter().all(|&a| {
            let (x, y) = (a.min(p), a.max(p));
            let valley = smooth[x..=y].iter().copied().fold(f64::INFINITY, f64::min);
            valley < 0.5 * smooth[a].min(smooth[p])
        });
        if distinct {
            accepted.push(p);
        }
    }
    accepted.sort_unstable();
    let mut levels: Vec<f64> = accepted.iter().map(|&b| lo + (b as f64 + 0.5) * width).collect();
    if levels.len() <= 1 {
        return Err(one_level_msg(&finite, lo, hi, levels.first().copied()));
    }
    if levels.len() != lobes {
        let list: Vec<String> = levels.iter().map(|l| format!("{l:.3}")).collect();
        return Err(format!(
            "found {} sync levels in the learning window ({}), expected {lobes}, one per lobe; \
             check the 'lobes' list, the sync channel, and that 'learn' covers a full lobe cycle",
            levels.len(),
            list.join(", ")
        ));
    }
    for _ in 0..3 {
        let spacing = min_spacing(&levels);
        let mut refined = levels.clone();
        for (r, &l) in refined.iter_mut().zip(&levels) {
            let (mut sum, mut n) = (0.0, 0usize);
            for &v in &finite {
                if (v - l).abs() <= 0.25 * spacing {
                    sum += v;
                    n += 1;
                }
            }
            if n > 0 {
                *r = sum / n as f64;
            }
        }
        levels = refined;
    }
    Ok(levels)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    #[test]
    fn noise_on_the_sync_channel_is_not_called_flat() {
        let mut rng = Rng::new(17);
        let noise: Vec<f32> = (0..20_000).map(|_| (0.3 * rng.gaussian()) as f32).collect();
        let e = learn_levels(&noise, 4).unwrap_err();
        assert!(e.contains("looks like noise") && !e.contains("flat"), "{e}");
        let steady: Vec<f32> = (0..20_000).map(|_| (0.2 + 0.01 * rng.gaussian()) as f32).collect();
        let e = learn_levels(&steady, 4).unwrap_err();
        assert!(e.contains("sync channel is flat"), "{e}");
    }
}
