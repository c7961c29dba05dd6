//! The ratio discriminator against outside references: docs/derivations.md's
//! Gaussian check values, Monte Carlo of the noncoherent estimator against
//! the first-order spread formula, and numpy/scipy fixtures
//! (`tests/fixtures/make_discriminator_fixtures.py`).

mod common;

use common::{RATE, build, dwell, estimates, run};
use lobeflow_blocks::dsp::discriminator::ErrorSignal;
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::kinds::ratio_discriminator::SPEC;
use lobeflow_blocks::{DwellRecord, Flag, Item};
use std::f64::consts::LN_2;
use std::path::PathBuf;

fn fixture(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(name)
}

/// Gaussian one-way voltage, written out here from docs/derivations.md §2.
fn gaussian(x: f64, bw: f64) -> f64 {
    (-2.0 * LN_2 * x * x / (bw * bw)).exp()
}

fn pair_items(a: f64, b: f64, var: f64) -> Vec<Item> {
    vec![Item::Dwell(dwell("right", 0, 1000, a, var, 20.0)), Item::Dwell(dwell("left", 1, 2000, b, var, 20.0))]
}

// (a) docs/derivations.md §3, computed from the Gaussian formula (Skolnik,
// Introduction to Radar Systems, from memory).
#[test]
fn derivation_check_values_come_through() {
    let cases = [
        ("10 deg", "5 deg", "one", 10.0, 5.0, 1, 1.0, 2.4082, 0.137748),
        ("6 deg", "2.4 deg", "two", 6.0, 2.4, 2, 0.5, 3.2110, 0.182763),
    ];
    for (bw_t, sq_t, way_t, bw, sq, n, theta, ratio_db, diff_sum) in cases {
        for (sign, signal) in [(1.0, "log_ratio"), (-1.0, "log_ratio"), (1.0, "diff_sum"), (-1.0, "diff_sum")] {
            let th = sign * theta;
            let a = gaussian(th - sq, bw).powi(n);
            let b = gaussian(th + sq, bw).powi(n);
            let var = 0.001;
            let mut blk =
                build(&SPEC, &[("beamwidth", bw_t), ("squint", sq_t), ("way", way_t), ("signal", signal)]).unwrap();
            let (out, _) = run(blk.as_mut(), pair_items(a, b, var));
            let e = &estimates(&out)[0];
            assert_eq!(e.flag, Flag::Ok);
            assert!((e.error_deg.unwrap() - th).abs() < 1e-9, "{signal} {th}: {:?}", e.error_deg);
            assert!((e.ratio_db - sign * ratio_db).abs() < 1e-4, "{}", e.ratio_db);
            // sigma = BW^2/(8 n ln2 SQ) sqrt(var A + var B), docs/derivations.md §3.
            let want = bw * bw / (8.0 * n as f64 * LN_2 * sq) * (2.0 * var).sqrt();
            assert!((e.sigma_deg - want).abs() < 1e-12, "{} vs {want}", e.sigma_deg);
            let d = ErrorSignal::DiffSum.measure(a, b);
            assert!((d - sign * diff_sum).abs() < 1e-6, "{d}");
        }
    }
}

/// Per-dwell noncoherent power estimate: `pulses` pulses of a `gate`-sample
/// gate holding echo energy `energy` (over unit noise power); amplitude
/// sqrt((sum |x|^2 - G N) / N), NaN when not positive.
fn simulated_amplitude(rng: &mut Rng, energy: f64, pulses: usize, gate: usize) -> f64 {
    let echo = (energy / gate as f64).sqrt();
    let mut power = 0.0;
    for _ in 0..pulses {
        let phase = 2.0 * std::f64::consts::PI * rng.uniform();
        let (s, c) = phase.sin_cos();
        for _ in 0..gate {
            let n = rng.complex_gaussian(1.0);
            let (re, im) = (echo * c + n.re as f64, echo * s + n.im as f64);
            power += re * re + im * im;
        }
    }
    let p = power - (gate * pulses) as f64;
    if p > 0.0 { (p / pulses as f64).sqrt() } else { f64::NAN }
}

/// First-order var(ln A) of docs/derivations.md §4.
fn first_order_var(energy: f64, pulses: usize, gate: usize) -> f64 {
    (gate as f64 / (energy * energy) + 2.0 / energy) / (4.0 * pulses as f64)
}

struct Trial {
    errors: Vec<f64>,
    sigmas: Vec<f64>,
    no_signal: usize,
}

/// Simulate `pairs` right/left dwell pairs of a target at `theta` (BW 6, SQ 2.4,
/// two-way) where the weaker lobe gets `weak_energy`, and run them through.
fn monte_carlo(seed: u64, theta: f64, weak_energy: f64, pulses: usize, gate: usize, pairs: usize) -> Trial {
    let (bw, sq) = (6.0, 2.4);
    let (a, b) = (gaussian(theta - sq, bw).powi(2), gaussian(theta + sq, bw).powi(2));
    let scale = weak_energy / a.min(b).powi(2);
    let (ea, eb) = (scale * a * a, scale * b * b);
    let mut rng = Rng::new(seed);
    let mut dwells: Vec<Item> = Vec::with_capacity(2 * pairs);
    for k in 0..pairs as u64 {
        let mut right = dwell(
            "right",
            2 * k,
            4000 * k + 1000,
            simulated_amplitude(&mut rng, ea, pulses, gate),
            first_order_var(ea, pulses, gate),
            ea,
        );
        right.used = pulses as u64;
        let mut left = dwell(
            "left",
            2 * k + 1,
            4000 * k + 3000,
            simulated_amplitude(&mut rng, eb, pulses, gate),
            first_order_var(eb, pulses, gate),
            eb,
        );
        left.used = pulses as u64;
        dwells.push(Item::Dwell(right));
        dwells.push(Item::Dwell(left));
    }
    let mut blk = build(&SPEC, &[("beamwidth", "6 deg"), ("squint", "2.4 deg"), ("way", "two")]).unwrap();
    let (out, _) = run(blk.as_mut(), dwells);
    let est = estimates(&out);
    assert_eq!(est.len(), pairs);
    let mut t = Trial { errors: Vec::new(), sigmas: Vec::new(), no_signal: 0 };
    for e in est {
        match e.flag {
            Flag::Ok => {
                t.errors.push(e.error_deg.unwrap() - theta);
                t.sigmas.push(e.sigma_deg);
            }
            Flag::NoSignal => {
                assert!(e.error_deg.is_none());
                t.no_signal += 1;
            }
            other => panic!("unexpected flag {other:?}"),
        }
    }
    t
}

fn rms(v: &[f64]) -> f64 {
    (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt()
}

// (b) At E >= 12 per pulse the first-order formula holds (docs/derivations.md §4).
#[test]
fn monte_carlo_spread_matches_first_order_sigma() {
    let (pulses, gate) = (16, 4);
    for (seed, weak_energy) in [(11, 12.0), (12, 40.0)] {
        let t = monte_carlo(seed, 0.5, weak_energy, pulses, gate, 5000);
        assert_eq!(t.no_signal, 0);
        // Every estimate carries the predicted sigma (Gaussian closed form).
        let (a, b) = (gaussian(0.5 - 2.4, 6.0).powi(2), gaussian(0.5 + 2.4, 6.0).powi(2));
        let scale = weak_energy / b.powi(2);
        let var = first_order_var(scale * a * a, pulses, gate) + first_order_var(weak_energy, pulses, gate);
        let predicted = 36.0 / (8.0 * 2.0 * LN_2 * 2.4) * var.sqrt();
        assert!(t.sigmas.iter().all(|s| (s - predicted).abs() < 1e-12 * predicted));
        let r = rms(&t.errors);
        let bias = t.errors.iter().sum::<f64>() / t.errors.len() as f64;
        eprintln!(
            "E {weak_energy}: rms {r:.5} predicted {predicted:.5} ratio {:.3} bias/sigma {:.3}",
            r / predicted,
            bias / predicted
        );
        assert!(r <= 1.10 * predicted, "rms {r} vs predicted {predicted}");
        assert!(r >= 0.90 * predicted, "rms {r} implausibly below predicted {predicted}");
        assert!(bias.abs() <= 0.1 * predicted, "bias {bias} vs sigma {predicted}");
    }
}

/// One row of `lowsnr_spread.csv` (numpy Monte Carlo of the same estimator).
fn low_snr_reference() -> Vec<(f64, usize, usize, f64, f64)> {
    let text = std::fs::read_to_string(fixture("lowsnr_spread.csv")).unwrap();
    text.lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (
                f[0].parse().unwrap(),
                f[1].parse().unwrap(),
                f[2].parse().unwrap(),
                f[4].parse().unwrap(),
                f[5].parse().unwrap(),
            )
        })
        .collect()
}

// (b) Below about E = 10 the first-order sigma is too small: compare the
// spread with a numpy Monte Carlo of the same estimator instead.
#[test]
fn low_energy_spread_matches_numpy_monte_carlo() {
    let k = 36.0 / (8.0 * 2.0 * LN_2 * 2.4); // deg per unit of ln(A/B), Gaussian BW 6, SQ 2.4, two-way
    for (i, (energy, pulses, gate, mc_var, first_var)) in low_snr_reference().into_iter().enumerate() {
        let t = monte_carlo(100 + i as u64, 0.0, energy, pulses, gate, 8000);
        let r = rms(&t.errors);
        let reference = k * mc_var.sqrt();
        eprintln!(
            "E {energy} N {pulses} G {gate}: rms {r:.4} numpy {reference:.4} first-order {:.4} no-signal {}",
            t.sigmas[0], t.no_signal
        );
        assert!((r / reference - 1.0).abs() < 0.06, "rms {r} vs numpy Monte Carlo {reference}");
        assert!((t.sigmas[0] / (k * first_var.sqrt()) - 1.0).abs() < 1e-5);
        assert!(t.sigmas[0] < 0.92 * r, "first-order sigma should understate the spread here");
    }
}

fn read_fixture_rows(name: &str) -> (String, Vec<Vec<f64>>) {
    let text = std::fs::read_to_string(fixture(name)).unwrap();
    let mut lines = text.lines();
    let comment = lines.next().unwrap().to_string();
    let rows = lines.skip(1).map(|l| l.split(',').map(|v| v.parse().unwrap()).collect()).collect();
    (comment, rows)
}

// (c) Uniform aperture: angles inside the monotonic region match numpy's sinc
// pair; ratios beyond the region's end are flagged, never numbers.
#[test]
fn uniform_aperture_inside_and_beyond_its_monotonic_region() {
    let (comment, rows) = read_fixture_rows("uniform_pair.csv");
    let limit: f64 = comment.split("limit_deg=").nth(1).unwrap().trim().parse().unwrap();
    // The whole monotonic region: no gain floor, no edge margin.
    let set = [
        ("beam", "uniform"),
        ("beamwidth", "6 deg"),
        ("squint", "2.4 deg"),
        ("way", "two"),
        ("floor", "-120 dB"),
        ("edge_sigmas", "0"),
    ];
    for row in &rows {
        let mut blk = build(&SPEC, &set).unwrap();
        let (out, _) = run(blk.as_mut(), pair_items(row[1], row[2], 1e-4));
        let e = &estimates(&out)[0];
        assert_eq!(e.flag, Flag::Ok, "theta {}", row[0]);
        assert!((e.error_deg.unwrap() - row[0]).abs() < 1e-6, "{} vs {:?}", row[0], e.error_deg);
    }
    // Past the far lobe's null the pair ratio no longer identifies the angle.
    let model = lobeflow_blocks::dsp::beam::PairModel::new(
        lobeflow_blocks::dsp::beam::Beam::new(lobeflow_blocks::dsp::beam::BeamShape::Uniform, 6.0).unwrap(),
        2.4,
        2,
    )
    .unwrap();
    assert!((model.limit_deg - limit).abs() < 0.01, "limit {} vs numpy {limit}", model.limit_deg);
    // Just beyond the null a target's ratio mirrors one just inside it (the
    // ratio alone cannot tell them apart); ratios beyond every ratio of the
    // region are flagged, and no number ever lies outside the region.
    let mut flagged = 0;
    for step in -20..=20 {
        let theta = limit + step as f64 * 0.0002;
        for sign in [1.0, -1.0] {
            let (a, b) = model.amplitudes(sign * theta);
            let mut blk = build(&SPEC, &set).unwrap();
            let (out, _) = run(blk.as_mut(), pair_items(a, b, 1e-4));
            let e = &estimates(&out)[0];
            match e.flag {
                Flag::OutOfRange => {
                    assert!(e.error_deg.is_none() && e.sigma_deg.is_nan());
                    assert!(e.ratio_db.is_finite() && e.ratio_db.signum() == sign);
                    flagged += 1;
                }
                Flag::Ok => {
                    let err = e.error_deg.unwrap();
                    assert!(err.abs() <= model.limit_deg, "estimate {err} for target {theta}");
                    if theta <= model.limit_deg {
                        assert!((err - sign * theta).abs() < 1e-6, "{err} vs {theta}");
                    }
                }
                other => panic!("{other:?}"),
            }
        }
    }
    assert!(flagged >= 4, "only {flagged} flagged near the null");
    // A vanishing minus lobe is far outside the region, in either signal form.
    for signal in ["log_ratio", "diff_sum"] {
        let mut blk = build(&SPEC, &[set[0], set[1], set[2], set[3], ("signal", signal)]).unwrap();
        let (out, _) = run(blk.as_mut(), pair_items(0.8, 1e-12, 1e-4));
        assert_eq!(estimates(&out)[0].flag, Flag::OutOfRange, "{signal}");
    }
}

// (d) A leading '-' swaps the pair's lobes; lobe gains are removed before the ratio.
#[test]
fn sign_flip_and_gain_offsets() {
    let (a, b) = (gaussian(0.7 - 2.4, 6.0).powi(2), gaussian(0.7 + 2.4, 6.0).powi(2));
    let mut plain = build(&SPEC, &[]).unwrap();
    let mut flipped = build(&SPEC, &[("pairs", "az=-right/left, el=up/down")]).unwrap();
    let e0 = estimates(&run(plain.as_mut(), pair_items(a, b, 1e-4)).0)[0].clone();
    let e1 = estimates(&run(flipped.as_mut(), pair_items(a, b, 1e-4)).0)[0].clone();
    assert!((e0.error_deg.unwrap() - 0.7).abs() < 1e-9);
    assert!((e1.error_deg.unwrap() + 0.7).abs() < 1e-9);
    assert!((e0.ratio_db + e1.ratio_db).abs() < 1e-12);
    // The right path has 0.4 dB more gain and the left 0.2 dB less than nominal.
    let (ga, gb) = (10f64.powf(0.4 / 20.0), 10f64.powf(-0.2 / 20.0));
    let mut raw = build(&SPEC, &[]).unwrap();
    let e = estimates(&run(raw.as_mut(), pair_items(a * ga, b * gb, 1e-4)).0)[0].clone();
    assert!((e.ratio_db - (e0.ratio_db + 0.6)).abs() < 1e-9, "uncorrected ratio {}", e.ratio_db);
    let mut corrected = build(&SPEC, &[("lobe_gain_db", "right=0.4, left=-0.2")]).unwrap();
    let e = estimates(&run(corrected.as_mut(), pair_items(a * ga, b * gb, 1e-4)).0)[0].clone();
    assert!((e.error_deg.unwrap() - 0.7).abs() < 1e-9);
    assert!((e.ratio_db - e0.ratio_db).abs() < 1e-9);
    // A gain that is not a number is refused where the graph is read; a lobe
    // the pairs do not name, when the block is built.
    let gains = SPEC.param("lobe_gain_db").unwrap();
    for bad in ["right=loud", "right"] {
        let err = gains.parse(&lobeflow_blocks::RawValue::from_text(bad)).expect_err(bad);
        assert!(err.contains("dB") || err.contains("lobe"), "{bad}: {err}");
    }
    let err = build(&SPEC, &[("lobe_gain_db", "middle=1")]).err().expect("middle=1").to_string();
    assert!(err.contains("lobe_gain_db"), "{err}");
}

// (e) Measured-pattern table: angles agree with scipy's root of the same
// linear-in-dB interpolation; a bad CSV line is reported with file and line.
#[test]
fn measured_pattern_table_and_its_errors() {
    let table = fixture("pattern_table.csv");
    let path = table.to_str().unwrap();
    let set = [("beam", "table"), ("pattern", path), ("squint", "2 deg"), ("way", "one")];
    let (_, rows) = read_fixture_rows("pattern_pair.csv");
    assert_eq!(rows.len(), 7);
    for row in rows {
        let mut blk = build(&SPEC, &set).unwrap();
        let (out, _) = run(blk.as_mut(), pair_items(row[0], row[1], 1e-4));
        let e = &estimates(&out)[0];
        assert!((e.error_deg.unwrap() - row[2]).abs() < 1e-6, "{:?} vs scipy {}", e.error_deg, row[2]);
        assert!(e.sigma_deg.is_finite() && e.sigma_deg > 0.0);
    }
    let dir = std::env::temp_dir().join(format!("lobeflow-disc-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let bad = dir.join("bad_pattern.csv");
    std::fs::write(&bad, "angle_deg,gain_db\n-2,-6\n-1,-1.5\n0,0\n1,-1.5 dB\n2,-6\n").unwrap();
    let bad_path = bad.to_str().unwrap();
    let err = build(&SPEC, &[("beam", "table"), ("pattern", bad_path)]).err().unwrap().to_string();
    assert!(err.contains(bad_path) && err.contains("line 5"), "{err}");
    let missing = dir.join("none.csv");
    let err = build(&SPEC, &[("beam", "table"), ("pattern", missing.to_str().unwrap())]).err().unwrap().to_string();
    assert!(err.contains("none.csv"), "{err}");
    assert!(build(&SPEC, &[("beam", "table")]).err().unwrap().to_string().contains("pattern"));
    assert!(build(&SPEC, &[("pattern", path)]).err().unwrap().to_string().contains("not 'table'"));
    let _ = std::fs::remove_dir_all(&dir);
}

fn with_range(mut d: DwellRecord, r: Option<f64>) -> Item {
    d.range_m = r;
    Item::Dwell(d)
}

// Pairing: nearest unused partner, each dwell once; stamps, SNR and range of the pair.
#[test]
fn pairing_and_bookkeeping() {
    let (a, b) = (gaussian(0.2 - 2.4, 6.0).powi(2), gaussian(0.2 + 2.4, 6.0).powi(2));
    let items = vec![
        with_range(dwell("right", 0, 1000, a, 1e-3, 30.0), Some(10_000.0)),
        with_range(dwell("right", 1, 2000, a, 1e-3, 40.0), Some(10_010.0)), // replaces the first
        with_range(dwell("left", 2, 3001, b, 1e-3, 20.0), Some(10_030.0)),  // pairs with dwell 1
        with_range(dwell("up", 3, 4000, 0.5, 1e-3, 20.0), None),
        with_range(dwell("mystery", 4, 4500, 0.5, 1e-3, 20.0), None),
        with_range(dwell("mystery", 5, 4600, 0.5, 1e-3, 20.0), None),
        with_range(dwell("left", 6, 5000, b, 1e-3, 20.0), None),
        with_range(dwell("right", 7, 6000, f64::NAN, 1e-3, 20.0), None),
    ];
    let mut blk = build(&SPEC, &[]).unwrap();
    let (out, notices) = run(blk.as_mut(), items);
    let est = estimates(&out);
    assert_eq!(est.len(), 2);
    assert_eq!(est[0].stamp.index, 2500);
    assert_eq!(est[0].stamp.rate, RATE);
    assert_eq!(&*est[0].axis, "az");
    assert!((est[0].snr_db - 10.0 * 20f64.log10()).abs() < 1e-12);
    assert_eq!(est[0].range_m, Some(10_020.0));
    assert!((est[0].error_deg.unwrap() - 0.2).abs() < 1e-9);
    assert_eq!(est[1].flag, Flag::NoSignal);
    assert_eq!(est[1].error_deg, None);
    assert_eq!(est[1].range_m, None);
    let text: Vec<&str> = notices.iter().map(|n| n.what.as_str()).collect();
    assert_eq!(text.iter().filter(|t| t.contains("'mystery'")).count(), 1, "{text:?}");
    assert!(text.iter().any(|t| t.contains("'down'") && t.contains("never")), "{text:?}");
    assert!(text.iter().any(|t| t.starts_with("2 dwell(s)")), "{text:?}");
    // max_gap: too old a partner is not used.
    let mut blk = build(&SPEC, &[("max_gap", "500 samples")]).unwrap();
    let (out, _) = run(
        blk.as_mut(),
        vec![Item::Dwell(dwell("right", 0, 1000, a, 1e-3, 30.0)), Item::Dwell(dwell("left", 1, 1600, b, 1e-3, 30.0))],
    );
    assert!(estimates(&out).is_empty());
}
