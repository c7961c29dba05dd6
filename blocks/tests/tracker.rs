//! The tracker: smoothing against the alpha-beta filter's published variance
//! reduction, outlier gating, track restart, and pointing telemetry.

mod common;

use common::{build, estimates, run};
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::dsp::tracking::alpha_beta_variance_ratio;
use lobeflow_blocks::kinds::tracker::SPEC;
use lobeflow_blocks::{AngleEstimate, Flag, Item, Stamp};
use std::sync::Arc;

const RATE: f64 = 1000.0;

fn estimate(axis: &str, t: f64, error: f64, sigma: f64) -> AngleEstimate {
    AngleEstimate {
        stamp: Stamp::new((t * RATE).round() as u64, RATE),
        axis: Arc::from(axis),
        error_deg: Some(error),
        sigma_deg: sigma,
        snr_db: 20.0,
        ratio_db: 1.0,
        range_m: None,
        flag: Flag::Ok,
        tracked_deg: None,
        tracked_sigma_deg: None,
        absolute_deg: None,
    }
}

/// A target drifting at 0.02 deg/s seen at 20 Hz with 0.1 deg noise, on two axes.
fn drifting(seed: u64, seconds: f64) -> (Vec<Item>, Vec<f64>) {
    let mut rng = Rng::new(seed);
    let (mut items, mut truth) = (Vec::new(), Vec::new());
    let n = (seconds * 20.0) as usize;
    for k in 0..n {
        let t = k as f64 / 20.0;
        let th = 0.3 + 0.02 * t;
        truth.push(th);
        items.push(Item::Estimate(Arc::new(estimate("az", t, th + 0.1 * rng.gaussian(), 0.1))));
        items.push(Item::Estimate(Arc::new(estimate("el", t + 0.01, -th, 0.1))));
    }
    (items, truth)
}

fn axis_values(out: &[Item], axis: &str) -> Vec<AngleEstimate> {
    estimates(out).into_iter().filter(|e| &*e.axis == axis).collect()
}

#[test]
fn tracked_error_is_well_below_the_estimate_spread() {
    let (items, truth) = drifting(5, 200.0);
    let settle = 200; // 10 s
    // Alpha-beta: the spread falls as the closed-form variance ratio says
    // (Benedict and Bordner; Brookner, Tracking and Kalman Filtering Made Easy, from memory).
    let (alpha, beta) = (0.2, 0.02);
    let mut blk = build(&SPEC, &[("alpha", "0.2"), ("beta", "0.02")]).unwrap();
    let (out, _) = run(blk.as_mut(), items.clone());
    let az = axis_values(&out, "az");
    assert_eq!(az.len(), truth.len());
    let raw: Vec<f64> = az.iter().zip(&truth).skip(settle).map(|(e, t)| e.error_deg.unwrap() - t).collect();
    let tracked: Vec<f64> = az.iter().zip(&truth).skip(settle).map(|(e, t)| e.tracked_deg.unwrap() - t).collect();
    let rms = |v: &[f64]| (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt();
    let (raw_rms, ab_rms) = (rms(&raw), rms(&tracked));
    let want = alpha_beta_variance_ratio(alpha, beta).sqrt();
    eprintln!("alpha-beta: raw {raw_rms:.4} tracked {ab_rms:.4} ratio {:.3} closed form {want:.3}", ab_rms / raw_rms);
    assert!((ab_rms / raw_rms / want - 1.0).abs() < 0.12, "ratio {} vs {want}", ab_rms / raw_rms);
    let outliers = az.iter().filter(|e| e.flag == Flag::Outlier).count();
    eprintln!("alpha-beta outliers in clean data: {outliers}");
    assert!(outliers <= 2, "{outliers} outliers in 4000 clean estimates (4-sigma gate)");
    // The noise-free elevation axis is followed exactly once started.
    let el = axis_values(&out, "el");
    assert!(el.iter().skip(2).all(|e| (e.tracked_deg.unwrap() - e.error_deg.unwrap()).abs() < 1e-9));

    let mut blk = build(&SPEC, &[("method", "kalman"), ("process_noise", "0.001")]).unwrap();
    let (out, _) = run(blk.as_mut(), items);
    let az = axis_values(&out, "az");
    let tracked: Vec<f64> = az.iter().zip(&truth).skip(settle).map(|(e, t)| e.tracked_deg.unwrap() - t).collect();
    let k_rms = rms(&tracked);
    eprintln!("kalman: tracked {k_rms:.4}");
    assert!(k_rms < 0.3 * raw_rms, "kalman rms {k_rms} vs raw {raw_rms}");
}

#[test]
fn outliers_are_flagged_kept_and_not_used() {
    let (mut items, truth) = drifting(9, 20.0);
    let k = 2 * 300; // an az estimate at t = 15 s
    let Item::Estimate(e) = &mut items[k] else { panic!() };
    let bad = truth[300] + 1.5;
    Arc::make_mut(e).error_deg = Some(bad);
    // Flagged estimates from the discriminator pass through untouched.
    let mut out_of_range = estimate("az", 15.02, 0.0, 0.3);
    out_of_range.error_deg = None;
    out_of_range.flag = Flag::OutOfRange;
    items.insert(k + 1, Item::Estimate(Arc::new(out_of_range.clone())));
    for method in ["alpha_beta", "kalman"] {
        let mut blk = build(&SPEC, &[("method", method)]).unwrap();
        let (out, _) = run(blk.as_mut(), items.clone());
        let az = axis_values(&out, "az");
        let hit = az.iter().find(|e| e.error_deg == Some(bad)).unwrap();
        assert_eq!(hit.flag, Flag::Outlier, "{method}");
        assert!((hit.tracked_deg.unwrap() - truth[300]).abs() < 0.2, "{method}: {:?}", hit.tracked_deg);
        let passed = az.iter().find(|e| e.flag == Flag::OutOfRange).unwrap();
        assert_eq!(passed, &out_of_range);
        assert_eq!(az.iter().filter(|e| e.flag == Flag::Outlier).count(), 1, "{method}");
    }
}

#[test]
fn track_restarts_after_repeated_outliers() {
    let mut items = Vec::new();
    for k in 0..100 {
        let t = k as f64 * 0.05;
        let th = if k < 50 { 0.1 } else { 2.0 }; // re-acquired on another target
        items.push(Item::Estimate(Arc::new(estimate("az", t, th, 0.05))));
    }
    let mut blk = build(&SPEC, &[("reset_after", "3")]).unwrap();
    let (out, _) = run(blk.as_mut(), items);
    let az = axis_values(&out, "az");
    let outliers: Vec<usize> = az.iter().enumerate().filter(|(_, e)| e.flag == Flag::Outlier).map(|(i, _)| i).collect();
    assert_eq!(outliers, vec![50, 51, 52]);
    assert!((az[99].tracked_deg.unwrap() - 2.0).abs() < 1e-3, "{:?}", az[99].tracked_deg);
}

#[test]
fn telemetry_gives_absolute_angles() {
    let dir = std::env::temp_dir().join(format!("lobeflow-tracker-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let pointing = dir.join("pointing.csv");
    // Invented rig: the mount slews from 120 to 121 deg azimuth over 10 s.
    std::fs::write(&pointing, "time_s,az_deg,el_deg,mast_deg\n0,120,15,7\n10,121,14.5,7\n").unwrap();
    let path = pointing.to_str().unwrap();
    let items: Vec<Item> = (0..24)
        .map(|k| {
            let t = k as f64 * 0.5;
            let axis = ["az", "el", "h"][k % 3];
            Item::Estimate(Arc::new(estimate(axis, t, 0.25, 0.05)))
        })
        .collect();
    let mut blk = build(&SPEC, &[("pointing", path), ("axis_columns", "az=az_deg, el=el_deg")]).unwrap();
    let (out, notices) = run(blk.as_mut(), items.clone());
    let est = estimates(&out);
    for e in &est {
        let t = e.stamp.seconds();
        let want = match &*e.axis {
            "az" if t <= 10.0 => Some(120.0 + 0.1 * t + e.tracked_deg.unwrap()),
            "el" if t <= 10.0 => Some(15.0 - 0.05 * t + e.tracked_deg.unwrap()),
            _ => None,
        };
        match (want, e.absolute_deg) {
            (Some(w), Some(got)) => {
                assert!((w - got).abs() < 1e-9, "{} at {t}: {got} vs {w}", e.axis)
            }
            (None, None) => {}
            other => panic!("{} at {t}: {other:?}", e.axis),
        }
    }
    let text: Vec<&str> = notices.iter().map(|n| n.what.as_str()).collect();
    assert!(text.iter().any(|t| t.contains("'h'") && t.contains("no pointing column")), "{text:?}");
    assert!(text.iter().any(|t| t.contains("outside the pointing table")), "{text:?}");
    // Other pair names map to any column.
    let mut blk = build(&SPEC, &[("pointing", path), ("axis_columns", "h=mast_deg")]).unwrap();
    let (out, _) = run(blk.as_mut(), items);
    let h = axis_values(&out, "h");
    assert!(h.iter().all(|e| e.stamp.seconds() > 10.0 || e.absolute_deg == Some(7.0 + e.tracked_deg.unwrap())));
    // Errors name the file (and the line).
    let err = build(&SPEC, &[("pointing", path), ("axis_columns", "az=azimuth")]).err().unwrap().to_string();
    assert!(err.contains(path) && err.contains("'azimuth'"), "{err}");
    let bad = dir.join("bad.csv");
    std::fs::write(&bad, "time_s,az_deg,el_deg\n0,1,2\n1,2\n").unwrap();
    let err = build(&SPEC, &[("pointing", bad.to_str().unwrap())]).err().unwrap().to_string();
    assert!(err.contains("bad.csv line 3"), "{err}");
    assert!(build(&SPEC, &[("alpha", "1"), ("beta", "2")]).is_err());
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn auto_smooths_recordings_at_the_end_and_filters_live_input_as_it_comes() {
    let (items, truth) = drifting(9, 30.0);
    let first = |capture: &str| {
        let mut blk = build(&SPEC, &[("method", "auto"), ("capture", capture)]).unwrap();
        let mut out = lobeflow_blocks::Outputs::new(1);
        blk.process(0, items[0].clone(), &mut out).unwrap();
        let early = out.drain().count();
        let (rest, _) = run(blk.as_mut(), items[1..].to_vec());
        (early, rest)
    };
    // Live (standard input): the causal filter answers at once.
    let (early, _) = first("-");
    assert_eq!(early, 1);
    // A recording: held to the end, then every estimate in its order,
    // smoothed, with a sigma of its own.
    let (early, out) = first("capture.wav");
    assert_eq!(early, 0);
    let az = axis_values(&out, "az");
    assert_eq!(az.len(), truth.len(), "the first, held before the run, comes out too");
    let stamps: Vec<u64> = estimates(&out).iter().map(|e| e.stamp.index).collect();
    assert!(stamps.windows(2).all(|w| w[0] <= w[1]), "order kept");
    let (mut e2, mut s2) = (0.0, 0.0);
    for (e, t) in az.iter().zip(&truth) {
        e2 += (e.tracked_deg.unwrap() - t).powi(2);
        s2 += e.tracked_sigma_deg.unwrap().powi(2);
    }
    let (rms, sigma) = ((e2 / az.len() as f64).sqrt(), (s2 / az.len() as f64).sqrt());
    eprintln!("smoothed drift: RMS {rms:.4} (raw 0.1), own sigma {sigma:.4}");
    assert!(rms < 0.03 && rms < 1.5 * sigma, "RMS {rms} sigma {sigma}");
}

/// The tracker's piece length (`MAX_HELD` in the block): a longer run is
/// smoothed piece by piece, each piece with a search of its own.
const PIECE: usize = 100_000;

#[test]
fn smoothing_in_pieces_gives_each_piece_the_batch_search_to_the_bit() {
    use lobeflow_blocks::dsp::smoother::{Measurement, Model, smooth};
    let mut rng = Rng::new(21);
    let mut items = Vec::new();
    for k in 0..PIECE + 4_321 {
        // Axes interleaved irregularly; el has no usable angle for its first
        // stretch, then steps without one, estimates without a sigma and
        // outliers come among the rest.
        let axis = if rng.uniform() < 0.6 { "az" } else { "el" };
        let t = k as f64 * 0.005;
        let truth = 0.5 * (t / 40.0).sin();
        let mut e = estimate(axis, t, truth + 0.05 * rng.gaussian(), 0.05);
        match rng.uniform() {
            _ if axis == "el" && k < 300 => e.error_deg = None,
            u if u < 0.03 => e.flag = Flag::OutOfRange,
            u if u < 0.05 => e.sigma_deg = 0.0,
            u if u < 0.07 => e.error_deg = Some(truth + 5.0 * rng.gaussian()),
            _ => {}
        }
        items.push(e);
    }
    for model in ["constant_velocity", "constant_acceleration"] {
        let mut blk = build(&SPEC, &[("method", "smoother"), ("model", model)]).unwrap();
        let (out, notices) = run(blk.as_mut(), items.iter().cloned().map(|e| Item::Estimate(Arc::new(e))));
        let out = estimates(&out);
        assert_eq!(out.len(), items.len());
        let model = if model == "constant_velocity" { Model::ConstantVelocity } else { Model::ConstantAcceleration };
        // Each piece and axis on its own, through the batch search.
        let mut chosen = Vec::new();
        for (piece, start) in (0..items.len()).step_by(PIECE).enumerate() {
            let end = (start + PIECE).min(items.len());
            for axis in ["az", "el"] {
                let rows: Vec<usize> = (start..end).filter(|&i| &*items[i].axis == axis).collect();
                let data: Vec<Measurement> = rows
                    .iter()
                    .map(|&i| {
                        let e = &items[i];
                        let z = e.error_deg.filter(|_| e.flag == Flag::Ok);
                        let sigma = if e.sigma_deg > 0.0 { e.sigma_deg } else { 0.1 };
                        Measurement { t: e.stamp.seconds(), z, r: if z.is_some() { sigma * sigma } else { 1.0 } }
                    })
                    .collect();
                let (smoothed, q) = smooth(&data, model, None, 4.0);
                chosen.push(format!("smoother for axis '{axis}': process noise {q:.3e} (most likely for the data)"));
                for (&i, s) in rows.iter().zip(&smoothed) {
                    let got = &out[i];
                    assert_eq!(got.tracked_deg.map(f64::to_bits), Some(s.angle.to_bits()), "piece {piece} row {i}");
                    assert_eq!(got.tracked_sigma_deg.map(f64::to_bits), Some(s.variance.sqrt().to_bits()));
                    assert_eq!(got.flag == Flag::Outlier, s.outlier, "row {i}");
                }
            }
        }
        let told: Vec<&str> =
            notices.iter().map(|n| n.what.as_str()).filter(|w| w.starts_with("smoother for")).collect();
        assert_eq!(told, chosen.iter().map(String::as_str).collect::<Vec<_>>());
        assert!(notices.iter().any(|n| n.what.starts_with("smoothed in 2 pieces")), "{notices:?}");
        assert!(out.iter().filter(|e| e.flag == Flag::Outlier).count() > 1000, "outliers gated");
    }
}

#[test]
fn the_smoother_gives_its_notices_at_the_estimates_that_call_for_them_and_in_order() {
    let dir = std::env::temp_dir().join(format!("lobeflow-tracker-notices-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let pointing = dir.join("pointing.csv");
    std::fs::write(&pointing, "time_s,az_deg,el_deg\n0,120,15\n100,121,14.5\n").unwrap();
    // Axis 'h' (no pointing column) first comes at t = 0.2 s, the first
    // estimate without a sigma at 0.5 s (el's), el's first angle at 0.3 s.
    let mut items = Vec::new();
    for k in 0..60 {
        let t = k as f64 * 0.1;
        let axis = ["az", "el", "h"][k % 3];
        let mut e = estimate(axis, t, 0.01 * k as f64, if k == 5 { 0.0 } else { 0.05 });
        if axis == "el" && k < 4 {
            e.error_deg = None;
        }
        items.push(Item::Estimate(Arc::new(e)));
    }
    let set = [("method", "smoother"), ("pointing", pointing.to_str().unwrap())];
    let mut blk = build(&SPEC, &set).unwrap();
    let (out, notices) = run(blk.as_mut(), items.clone());
    assert_eq!(estimates(&out).len(), 60);
    let told: Vec<(u64, &str)> = notices.iter().map(|n| (n.stamp.index, n.what.split(':').next().unwrap())).collect();
    let want: Vec<(u64, &str)> = vec![
        (200, "axis 'h' has no pointing column (see axis_columns); no absolute angles"),
        (500, "estimates without a usable sigma (first at sample 500); assuming 0.1 deg"),
        (0, "smoother for axis 'az'"),
        (100, "smoother for axis 'el'"),
        (200, "smoother for axis 'h'"),
    ];
    assert_eq!(told, want);
    // More than 64 axes: the error names the first axis too many and its sample.
    let many: Vec<Item> =
        (0..70).map(|k| Item::Estimate(Arc::new(estimate(&format!("a{k}"), k as f64 * 0.01, 0.1, 0.05)))).collect();
    let mut blk = build(&SPEC, &[("method", "smoother")]).unwrap();
    let mut out = lobeflow_blocks::Outputs::new(1);
    for item in many {
        blk.process(0, item, &mut out).unwrap();
    }
    let err = blk.finish(&mut out).expect_err("too many axes").to_string();
    assert_eq!(err, "more than 64 axes (new axis 'a64') (at sample 640)");
    let _ = std::fs::remove_dir_all(&dir);
}
