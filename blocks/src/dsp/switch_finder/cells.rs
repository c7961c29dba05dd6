//! The finder's cells and the per-cell switch feature: a switch shows as a
//! step of the cells' energy between the dwells on either side and as a
//! peak (its transient); both are standardised by robust scales learned at
//! acquisition. Shared by acquisition and tracking.

/// One cell: its first sample, its samples, their summed and largest power.
#[derive(Clone, Copy, Debug)]
pub(super) struct Cell {
    pub(super) start: u64,
    pub(super) count: u32,
    pub(super) energy: f64,
    pub(super) peak: f64,
}

/// Location and scale of a feature, robust to the events in it.
#[derive(Clone, Copy, Debug)]
struct Scale {
    median: f64,
    spread: f64,
}

impl Scale {
    fn of(values: &[f64]) -> Scale {
        let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
        if v.is_empty() {
            return Scale { median: 0.0, spread: 1.0 };
        }
        v.sort_by(f64::total_cmp);
        let median = v[v.len() / 2];
        let mut dev: Vec<f64> = v.iter().map(|x| (x - median).abs()).collect();
        dev.sort_by(f64::total_cmp);
        Scale { median, spread: (1.4826 * dev[dev.len() / 2]).max(1e-9) }
    }
    fn z(&self, x: f64) -> f64 {
        (x - self.median) / self.spread
    }
}

/// The per-cell feature: standardised step across the cell's start plus standardised log peak.
#[derive(Clone, Copy, Debug)]
pub(super) struct Feature {
    pub(super) cells: usize,
    /// Each cell is a sweep (switches fall between cells), not a run of samples.
    pub(super) whole_cells: bool,
    step: Scale,
    peak: Scale,
}

/// |ln| of the mean power of `k` cells from `j` over the `k` cells before `j`.
fn step_at(cells: &[Cell], j: usize, k: usize) -> f64 {
    if j < k || j + k > cells.len() {
        return f64::NAN;
    }
    let mean = |r: &[Cell]| {
        let (e, n) = r.iter().fold((0.0, 0u64), |a, c| (a.0 + c.energy, a.1 + u64::from(c.count)));
        e / n.max(1) as f64
    };
    let (before, after) = (mean(&cells[j - k..j]), mean(&cells[j..j + k]));
    if before > 0.0 && after > 0.0 { (after / before).ln().abs() } else { f64::NAN }
}

fn log_peak(c: &Cell) -> f64 {
    c.peak.max(1e-30).ln()
}

impl Feature {
    /// Scales from the acquisition cells.
    pub(super) fn learn(cells: &[Cell], k: usize, whole_cells: bool) -> Feature {
        let steps: Vec<f64> = (0..cells.len()).map(|j| step_at(cells, j, k)).collect();
        let peaks: Vec<f64> = cells.iter().map(log_peak).collect();
        Feature { cells: k, whole_cells, step: Scale::of(&steps), peak: Scale::of(&peaks) }
    }

    /// The feature of cell `j` (0 where the step window does not fit).
    pub(super) fn at(&self, cells: &[Cell], j: usize) -> f64 {
        let step = step_at(cells, j, self.cells);
        let step = if step.is_finite() { self.step.z(step) } else { 0.0 };
        // the transient begins at the switch, inside the cell before the
        // first whole cell of the new dwell (or at the tail of the sweep before)
        // (a run of samples: a transient of a few samples may reach into it)
        let last = if self.whole_cells { j } else { j + 1 };
        let peak = (j.saturating_sub(1)..last)
            .filter_map(|i| cells.get(i))
            .map(|c| self.peak.z(log_peak(c)))
            .fold(0.0, f64::max);
        step + peak
    }
}

/// Half-width (samples) of the search about a predicted switch: a quarter
/// dwell, but at least two and a half cells (a dwell of a few sweeps), and
/// short of the neighbouring switches.
pub(super) fn reach(dwell: f64, spacing: f64) -> f64 {
    (dwell / 4.0).max(2.5 * spacing).min(0.45 * dwell)
}

/// Position (samples) of a fractional cell index.
pub(super) fn position(cells: &[Cell], p: f64) -> f64 {
    let j = (p.floor().max(0.0) as usize).min(cells.len() - 1);
    let c = &cells[j];
    c.start as f64 + (p - j as f64) * f64::from(c.count)
}

/// The switch's position (samples) in a window of (cell, feature) pairs:
/// the centroid of the peak, when it stands out of the window's median.
/// Returns the position and the peak's height over the median; `threshold`
/// is the least height that counts.
pub(super) fn locate(cells: &[Cell], window: &[(usize, f64)], whole_cells: bool, threshold: f64) -> Option<(f64, f64)> {
    if window.len() < 3 {
        return None;
    }
    let mut sorted: Vec<f64> = window.iter().map(|w| w.1).collect();
    sorted.sort_by(f64::total_cmp);
    let median = sorted[sorted.len() / 2];
    let (at, peak) =
        window.iter().enumerate().fold((0, f64::NEG_INFINITY), |a, (i, w)| if w.1 > a.1 { (i, w.1) } else { a });
    if peak - median < threshold {
        return None;
    }
    // A cell's step is across its start, and the switch lies in the cell
    // before (its transient too): on average half a cell before that start
    // for runs of samples; a sweep switches at its end.
    let (mut num, mut den) = (0.0, 0.0);
    for &(j, v) in window.iter().skip(at.saturating_sub(1)).take(3) {
        let w = (v - median).max(0.0);
        let half = match j.checked_sub(1) {
            Some(i) if !whole_cells => f64::from(cells[i].count) / 2.0,
            _ => 0.0,
        };
        num += w * (position(cells, j as f64) - half);
        den += w;
    }
    (den > 0.0).then(|| (num / den, peak - median))
}
