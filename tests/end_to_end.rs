//! The whole job on synthesized captures with known truth: the reference
//! graphs must reproduce the truth within the spread each estimate carries.
//!
//! Outside references: the expected spread sigma_theta is the first-order
//! formula of the field notes (section 4: var(ln A) = (G/E^2 + 2/E)/(4N) for
//! noncoherent gates, 1/(2 N s) for coherent tones; sigma = BW^2/(8 n ln2 SQ)
//! times sqrt(var ln A + var ln B) for Gaussian beams, Skolnik, Introduction to
//! Radar Systems, tracking-radar chapter, from memory), which holds where the
//! per-dwell energy over noise is above about 10; every capture here keeps
//! both lobes above that. The range bin is c/(2 fs) (SI value of c).

use lobeflow::Session;
use lobeflow::synth::scenario::ScenarioFile;
use lobeflow::synth::synthesize;
use std::path::{Path, PathBuf};

fn repo(p: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(p)
}

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-e2e-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Synthesize `scenario` (YAML text) and run `graph` on it with `settings`.
fn synth_and_run(
    name: &str,
    scenario: &str,
    capture_suffix: &str,
    graph: &str,
    settings: &[(&str, &str)],
) -> (Table, Table) {
    let d = dir(name);
    let sc = d.join("scenario.yaml");
    std::fs::write(&sc, scenario).unwrap();
    let file = ScenarioFile::load(&sc).unwrap();
    synthesize(&file, &d.join("cap")).unwrap();
    let mut s = Session::open(repo(graph)).unwrap();
    s.set("input", d.join(format!("cap{capture_suffix}")).to_str().unwrap());
    for (k, v) in settings {
        s.set(k, v);
    }
    s.out_dir(d.join("out")).threads(2);
    s.run().unwrap();
    let angles = Table::read(&d.join("out/angles.csv"));
    let truth = Table::read(&d.join("cap.truth.csv"));
    let _ = std::fs::remove_dir_all(&d);
    (angles, truth)
}

struct Table {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
}

impl Table {
    fn read(p: &Path) -> Table {
        let text = std::fs::read_to_string(p).unwrap();
        let mut lines = text.lines();
        let header = lines.next().unwrap().split(',').map(String::from).collect();
        Table { header, rows: lines.map(|l| l.split(',').map(String::from).collect()).collect() }
    }
    fn col(&self, name: &str) -> usize {
        self.header.iter().position(|h| h == name).unwrap_or_else(|| panic!("no column {name}"))
    }
    fn num(&self, row: usize, name: &str) -> Option<f64> {
        self.rows[row][self.col(name)].parse().ok()
    }
    /// Linear interpolation of a truth column at time t.
    fn at(&self, name: &str, t: f64) -> f64 {
        let (tc, vc) = (self.col("time_s"), self.col(name));
        let pts: Vec<(f64, f64)> = self.rows.iter().map(|r| (r[tc].parse().unwrap(), r[vc].parse().unwrap())).collect();
        let i = pts.partition_point(|p| p.0 < t).clamp(1, pts.len() - 1);
        let ((t0, v0), (t1, v1)) = (pts[i - 1], pts[i]);
        v0 + (v1 - v0) * (t - t0) / (t1 - t0)
    }
}

/// Per axis: (ok count, RMS error, mean error, RMS predicted sigma,
/// RMS tracked error, RMS range error in m).
#[derive(Debug)]
struct Scores {
    n: usize,
    rms: f64,
    bias: f64,
    sigma: f64,
    tracked_rms: f64,
    range_rms: f64,
    flagged: usize,
}

fn score(angles: &Table, truth: &Table, axis: &str) -> Scores {
    let truth_col = format!("{axis}_deg");
    let (mut e2, mut e, mut s2, mut t2, mut nt, mut r2, mut nr, mut n, mut flagged) =
        (0.0, 0.0, 0.0, 0.0, 0, 0.0, 0, 0, 0);
    let (ac, fc) = (angles.col("axis"), angles.col("flag"));
    let has_range =
        truth.header.iter().any(|h| h == "range_m") && truth.rows.iter().all(|r| !r[truth.col("range_m")].is_empty());
    for i in 0..angles.rows.len() {
        if angles.rows[i][ac] != axis {
            continue;
        }
        if angles.rows[i][fc] != "ok" {
            flagged += 1;
            continue;
        }
        let t = angles.num(i, "time_s").unwrap();
        let want = truth.at(&truth_col, t);
        let err = angles.num(i, "error_deg").unwrap() - want;
        e2 += err * err;
        e += err;
        s2 += angles.num(i, "sigma_deg").unwrap().powi(2);
        n += 1;
        if let Some(tr) = angles.num(i, "tracked_deg") {
            t2 += (tr - want).powi(2);
            nt += 1;
        }
        if has_range && let Some(r) = angles.num(i, "range_m") {
            r2 += (r - truth.at("range_m", t)).powi(2);
            nr += 1;
        }
    }
    let nf = n.max(1) as f64;
    Scores {
        n,
        rms: (e2 / nf).sqrt(),
        bias: e / nf,
        sigma: (s2 / nf).sqrt(),
        tracked_rms: (t2 / nt.max(1) as f64).sqrt(),
        range_rms: (r2 / nr.max(1) as f64).sqrt(),
        flagged,
    }
}

fn pulsed_scenario(snr_db: f64, seed: u64, az: &str, el: &str) -> String {
    format!(
        "name: e2e pulsed\nseed: {seed}\ncapture: {{sample_rate: 1 MS/s, duration: 4 s, format: wav_f32, sync: channel}}\n\
antenna: {{beam: gaussian, beamwidth: 6 deg, squint: 2.4 deg, way: two_way}}\n\
lobes:\n  - {{name: right, toward: right}}\n  - {{name: up, toward: up}}\n  - {{name: left, toward: left}}\n  - {{name: down, toward: down}}\n\
signal:\n  pulsed: {{prf: 4 kHz, pulse_length: 3 us, pulses_per_dwell: 4, first_transmit: 0.1 ms, switch_lead: 40 us, snr: {snr_db} dB, leakage: 40 dB, fluctuation: none, phase: per_pulse}}\n\
switch_transient: {{level: 20 dB, length: 10 us}}\n\
target:\n  az: {az}\n  el: {el}\n  range: {{at: 9 km, per_second: -20 m}}\n"
    )
}

#[test]
fn four_lobe_pulsed_chain_meets_its_predicted_spread_at_two_snrs() {
    let bin = lobeflow_blocks::range_bin_m(1e6);
    for (snr, seed) in [(12.0, 11), (20.0, 12)] {
        let sc = pulsed_scenario(snr, seed, "{at: 0.4 deg}", "{at: -0.3 deg}");
        let (angles, truth) = synth_and_run(&format!("pulsed{snr}"), &sc, ".wav", "graphs/four-lobe-pulsed.yaml", &[]);
        for axis in ["az", "el"] {
            let s = score(&angles, &truth, axis);
            assert!(s.n >= 950, "snr {snr} {axis}: only {} estimates ({} flagged)", s.n, s.flagged);
            assert!(s.rms <= 1.10 * s.sigma, "snr {snr} {axis}: RMS {:.4} deg vs predicted {:.4} deg", s.rms, s.sigma);
            assert!(s.bias.abs() <= 0.1 * s.sigma, "snr {snr} {axis}: bias {:.4} deg vs sigma {:.4}", s.bias, s.sigma);
            assert!(
                s.range_rms <= 0.15 * bin,
                "snr {snr} {axis}: range RMS {:.2} m = {:.3} bin",
                s.range_rms,
                s.range_rms / bin
            );
            eprintln!("pulsed snr {snr} dB {axis}: {s:?}");
        }
    }
}

#[test]
fn tracking_a_slow_target_beats_the_per_dwell_spread() {
    let sc = pulsed_scenario(
        14.0,
        21,
        "{at: -0.5 deg, per_second: 0.25 deg}",
        "{at: 0.2 deg, swing: {amplitude: 0.1 deg, period: 3 s}}",
    )
    .replace("duration: 4 s", "duration: 2 s");
    let (angles, truth) = synth_and_run("track", &sc, ".wav", "graphs/four-lobe-pulsed.yaml", &[]);
    for axis in ["az", "el"] {
        let s = score(&angles, &truth, axis);
        assert!(s.tracked_rms < 0.7 * s.rms, "{axis}: tracked {:.4} vs per-dwell {:.4}", s.tracked_rms, s.rms);
    }
}

#[test]
fn two_lobe_beacon_chain_meets_its_predicted_spread_at_two_snrs() {
    for (snr, seed) in [(0.0, 31), (6.0, 32)] {
        let sc = format!(
            "name: e2e beacon\nseed: {seed}\ncapture: {{sample_rate: 50 kS/s, duration: 8 s, start: 1 ms, format: sigmf_cf32_le, sync: schedule}}\n\
antenna: {{beam: cosine, beamwidth: 12 deg, squint: 5 deg, way: one_way}}\n\
lobes:\n  - {{name: left, toward: left}}\n  - {{name: right, toward: right}}\n\
signal:\n  beacon: {{tone: 5 kHz, snr: {snr} dB, dwell: 4 ms, first_lobe_start: 0 ms}}\n\
target:\n  az: {{at: 1.5 deg}}\n  el: {{at: 0 deg}}\n"
        );
        let settings = [("dwell", "4 ms"), ("first_start", "-1 ms"), ("guard", "0.2 ms"), ("tone", "5 kHz")];
        let (angles, truth) =
            synth_and_run(&format!("beacon{snr}"), &sc, ".sigmf-meta", "graphs/two-lobe-beacon.yaml", &settings);
        let s = score(&angles, &truth, "az");
        assert!(s.n >= 950, "snr {snr}: only {} estimates", s.n);
        assert!(s.rms <= 1.10 * s.sigma, "snr {snr}: RMS {:.4} deg vs predicted {:.4} deg", s.rms, s.sigma);
        assert!(s.bias.abs() <= 0.1 * s.sigma, "snr {snr}: bias {:.4} deg vs sigma {:.4}", s.bias, s.sigma);
        eprintln!("beacon snr {snr} dB: {s:?}");
    }
}

#[test]
fn targets_outside_the_usable_region_are_flagged_not_reported() {
    // Uniform aperture, 8 deg, squint 3.5 deg, two-way: the far lobe is 20 dB
    // down at about 4.4 deg and nulls at 5.56 deg off boresight.
    let base = pulsed_scenario(30.0, 41, "{at: 5.0 deg}", "{at: 0 deg}")
        .replace("duration: 4 s", "duration: 0.3 s")
        .replace(
            "beam: gaussian, beamwidth: 6 deg, squint: 2.4 deg",
            "beam: uniform, beamwidth: 8 deg, squint: 3.5 deg",
        )
        .replace("  - {name: up, toward: up}\n", "")
        .replace("  - {name: down, toward: down}\n", "");
    let settings = [
        ("lobe_order", "right,left"),
        ("pairs", "az=right/left"),
        ("beam", "uniform"),
        ("beamwidth", "8 deg"),
        ("squint", "3.5 deg"),
        ("detect", "4"),
    ];
    let (angles, truth) = synth_and_run("outside", &base, ".wav", "graphs/four-lobe-pulsed.yaml", &settings);
    let s = score(&angles, &truth, "az");
    assert_eq!(s.n, 0, "a target 5 deg off must give no numbers: {s:?}");
    assert!(s.flagged >= 60, "{s:?}");
    // The same rig with the target inside its region reads it.
    let inside = base.replace("az: {at: 5.0 deg}", "az: {at: 3.0 deg}");
    let (angles, truth) = synth_and_run("inside", &inside, ".wav", "graphs/four-lobe-pulsed.yaml", &settings);
    let s = score(&angles, &truth, "az");
    assert!(s.n >= 60 && s.rms <= 1.5 * s.sigma + 0.01, "{s:?}");
}
