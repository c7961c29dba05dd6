//! The sync tracker's tests of sync values, in float32 and a block at a
//! time: bands and thresholds rounded so the float32 comparison decides as
//! the float64 one would (the sync channel arrives as float32, and twice as
//! many values fit a vector), the run of values inside a band, and midpoint
//! crossings found 32 values per bit mask.

use super::wide_vectors::wide_vectors;

/// A band no value falls in.
pub(crate) const EMPTY_BAND: (f32, f32) = (f32::INFINITY, f32::NEG_INFINITY);

/// The float32 values inside `[lo, hi]`, as float32 bounds rounded inwards
/// (the sync channel arrives as float32; comparing in its own type tests
/// twice as many samples per vector instruction, with no conversion).
pub(crate) fn float32_band(lo: f64, hi: f64) -> (f32, f32) {
    let (mut a, mut b) = (lo as f32, hi as f32);
    if (a as f64) < lo {
        a = a.next_up();
    }
    if (b as f64) > hi {
        b = b.next_down();
    }
    if a.is_finite() && b.is_finite() && a <= b { (a, b) } else { EMPTY_BAND }
}

/// The largest float32 `t` with `t <= x`: for float32 `v`, `v > t` exactly
/// when `v as f64 > x`.
pub(crate) fn float32_above(x: f64) -> f32 {
    let t = x as f32;
    if (t as f64) > x { t.next_down() } else { t }
}

/// The smallest float32 `t` with `t >= x`: `v < t` exactly when `v as f64 < x`.
pub(crate) fn float32_below(x: f64) -> f32 {
    let t = x as f32;
    if (t as f64) < x { t.next_up() } else { t }
}

/// Follow "past the midpoint" (`v > t` when `UP`, else `v < t`) over `values`
/// (the first at absolute index `first`) from `(past, crossed)`: returns
/// whether the last value is past, and where past last turned true. The
/// same as stepping value by value, 32 values per bit mask.
fn last_rising<const UP: bool>(
    values: &[f32],
    first: u64,
    t: f32,
    (mut past, mut crossed): (bool, u64),
) -> (bool, u64) {
    let is_past = |v: f32| if UP { v > t } else { v < t };
    let (blocks, tail) = values.as_chunks::<32>();
    for (b, block) in blocks.iter().enumerate() {
        let mut mask = 0u32;
        for (i, &v) in block.iter().enumerate() {
            mask |= (is_past(v) as u32) << i;
        }
        let rising = mask & !((mask << 1) | past as u32);
        if rising != 0 {
            crossed = first + (b * 32) as u64 + (31 - rising.leading_zeros()) as u64;
        }
        past = mask >> 31 == 1;
    }
    let tail_first = first + (blocks.len() * 32) as u64;
    for (n, &v) in (tail_first..).zip(tail) {
        let p = is_past(v);
        if p && !past {
            crossed = n;
        }
        past = p;
    }
    (past, crossed)
}

/// [`last_rising`] over `values` that all lie in `[lo, hi]`: when the whole
/// band is on one side of the midpoint, so is every value, and the answer
/// needs none of them (most lobes' midpoints lie outside a level's band).
pub(crate) fn rising_in_band<const UP: bool>(
    values: &[f32],
    first: u64,
    t: f32,
    (lo, hi): (f32, f32),
    (past, crossed): (bool, u64),
) -> (bool, u64) {
    let is_past = |v: f32| if UP { v > t } else { v < t };
    if values.is_empty() || is_past(lo) != is_past(hi) {
        return last_rising::<UP>(values, first, t, (past, crossed));
    }
    let all_past = is_past(lo);
    (all_past, if all_past && !past { first } else { crossed })
}

wide_vectors! {
/// The first index from `from` (below `until`) whose value lies outside
/// the `band` `[lo, hi]`, or `until`: whole blocks first (a branch-free test the
/// compiler vectorises), then single values.
pub(crate) fn end_of_band_run(values: &[f32], from: usize, until: usize, band: (f32, f32)) -> usize {
    let ((lo, hi), mut k) = (band, from);
    let inside = |v: f32| (v >= lo) & (v <= hi);
    const BLOCK: usize = 16;
    let until = until.min(values.len());
    while k + BLOCK <= until && values[k..k + BLOCK].iter().fold(true, |all, &v| all & inside(v)) {
        k += BLOCK;
    }
    while k < until && inside(values[k]) {
        k += 1;
    }
    k
}
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    #[test]
    fn float32_thresholds_decide_exactly_as_the_float64_comparison() {
        let mut rng = Rng::new(17);
        for _ in 0..2000 {
            let x = rng.gaussian() * 2.0;
            let (above, below) = (float32_above(x), float32_below(x));
            let near = x as f32;
            let mut v = near.next_down().next_down();
            for _ in 0..5 {
                assert_eq!(v > above, v as f64 > x, "{v} against {x}");
                assert_eq!(v < below, (v as f64) < x, "{v} against {x}");
                v = v.next_up();
            }
            let (lo, hi) = float32_band(x - 0.25, x + 0.25);
            assert!((lo as f64) >= x - 0.25 && (hi as f64) <= x + 0.25);
            assert!((lo.next_down() as f64) < x - 0.25 && (hi.next_up() as f64) > x + 0.25);
        }
        assert_eq!(float32_band(1.0, 0.5), EMPTY_BAND);
        assert_eq!(float32_band(f64::NEG_INFINITY, 0.0), EMPTY_BAND);
    }

    /// The crossings value by value, from index 1000: the definition the scans must meet.
    fn stepped(values: &[f32], t: f32, up: bool, (mut past, mut crossed): (bool, u64)) -> (bool, u64) {
        for (n, &v) in (1000u64..).zip(values) {
            let p = if up { v > t } else { v < t };
            if p && !past {
                crossed = n;
            }
            past = p;
        }
        (past, crossed)
    }

    #[test]
    fn bit_mask_crossings_match_value_by_value_stepping() {
        let mut rng = Rng::new(23);
        for len in [0usize, 1, 31, 32, 33, 64, 95, 200] {
            let values: Vec<f32> =
                (0..len).map(|n| if n % 17 == 5 { f32::NAN } else { (rng.gaussian() * 0.3 + 0.1) as f32 }).collect();
            for start in [(false, 7u64), (true, 3)] {
                let t = 0.1f32;
                let reference = |up: bool| stepped(&values, t, up, start);
                assert_eq!(last_rising::<true>(&values, 1000, t, start), reference(true), "len {len}");
                assert_eq!(last_rising::<false>(&values, 1000, t, start), reference(false), "len {len}");
            }
        }
    }

    #[test]
    fn crossings_of_values_inside_a_band_match_value_by_value_stepping() {
        let mut rng = Rng::new(29);
        for (lo, hi) in [(0.2f32, 0.4f32), (-0.3, 0.05), (0.1, 0.1), (0.05, 0.3)] {
            for len in [0usize, 1, 5, 40] {
                let values: Vec<f32> = (0..len).map(|_| lo + (hi - lo) * rng.uniform() as f32).collect();
                for start in [(false, 7u64), (true, 3)] {
                    for t in [0.1f32, -0.5, 0.5, 0.2, 0.4] {
                        let reference = |up: bool| stepped(&values, t, up, start);
                        let got = rising_in_band::<true>(&values, 1000, t, (lo, hi), start);
                        assert_eq!(got, reference(true), "band {lo}..{hi}, t {t}, len {len}");
                        let got = rising_in_band::<false>(&values, 1000, t, (lo, hi), start);
                        assert_eq!(got, reference(false), "band {lo}..{hi}, t {t}, len {len}");
                    }
                }
            }
        }
    }
}
