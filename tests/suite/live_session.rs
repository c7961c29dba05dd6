//! The embedding API cannot hang: every early error comes back from
//! `stream()` or as the stream's last item within a second; several ports
//! at once; samples pushed from memory give the same estimates as the file;
//! no files unless an output folder is given; the report at the end.

use futures::StreamExt;
use lobeflow::blocks::Item;
use lobeflow::{Error, PushFormat, Session};
use std::path::PathBuf;
use std::sync::mpsc;
use std::time::Duration;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn beacon() -> Session {
    Session::open(root().join("graphs/two-lobe-beacon.yaml")).unwrap()
}

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-session-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Start `session` listening to `port` and drain the stream on a thread;
/// the outcome (error from stream(), or items then the last item's error)
/// must come back within a second.
fn outcome_within_a_second(session: Session, port: &'static str) -> Result<usize, Error> {
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        let result = session.stream(port).and_then(|mut stream| {
            futures::executor::block_on(async {
                let mut n = 0;
                while let Some(item) = stream.next().await {
                    item?;
                    n += 1;
                }
                Ok(n)
            })
        });
        let _ = tx.send(result);
    });
    rx.recv_timeout(Duration::from_secs(1)).expect("the stream answered within a second")
}

#[test]
fn a_missing_capture_is_an_error_from_stream() {
    let mut s = beacon();
    s.set("input", "/nonexistent/capture.sigmf-meta");
    let e = outcome_within_a_second(s, "track").unwrap_err();
    assert!(e.to_string().contains("/nonexistent/capture"), "{e}");
}

#[test]
fn a_misspelled_port_is_an_error_from_stream() {
    let e = outcome_within_a_second(beacon(), "track.estimatez").unwrap_err();
    assert!(e.to_string().contains("no output port 'estimatez'"), "{e}");
    let e = outcome_within_a_second(beacon(), "trak").unwrap_err();
    assert!(e.to_string().contains("no block named 'trak'"), "{e}");
}

#[test]
fn a_block_with_no_outputs_is_an_error_from_stream() {
    let e = outcome_within_a_second(beacon(), "angles").unwrap_err();
    assert!(e.to_string().contains("has no outputs"), "{e}");
}

#[test]
fn a_capture_that_is_not_whole_frames_is_an_error_from_stream() {
    let d = scratch("odd");
    let raw = d.join("odd.cu8");
    std::fs::write(&raw, vec![128u8; 1001]).unwrap();
    let mut s = beacon();
    s.set("input", raw.to_str().unwrap()).set("sample_rate", "250 kS/s");
    let e = outcome_within_a_second(s, "track").unwrap_err();
    assert!(e.to_string().contains("not a whole number of frames"), "{e}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn an_error_during_the_run_is_the_last_item_and_the_stream_ends() {
    let d = scratch("nan");
    let raw = d.join("nan.cf32_le");
    let mut bytes: Vec<u8> = (0..200_000).flat_map(|k| (((k % 7) as f32) * 0.01).to_le_bytes()).collect();
    bytes[400_000..400_004].copy_from_slice(&f32::NAN.to_le_bytes());
    std::fs::write(&raw, bytes).unwrap();
    let mut s = beacon();
    s.set("input", raw.to_str().unwrap()).set("sample_rate", "250 kS/s");
    let e = outcome_within_a_second(s, "gate").unwrap_err();
    assert!(e.to_string().contains("at sample 50000"), "{e}");
    let _ = std::fs::remove_dir_all(&d);
}

/// Estimates of the beacon graph as text, from a stream on `track`.
fn estimates(session: &Session) -> Vec<String> {
    let mut stream = session.stream("track").unwrap();
    let got = futures::executor::block_on(async {
        let mut v = Vec::new();
        while let Some(item) = stream.next().await {
            if let Item::Estimate(e) = item.unwrap() {
                v.push(format!("{e:?}"));
            }
        }
        v
    });
    assert!(stream.report().is_some(), "a report once the stream ended");
    got
}

#[test]
fn samples_pushed_from_memory_give_the_same_estimates_as_the_file() {
    // Pushed samples are live input, tracked by the causal filter; the file
    // run is told to use the same one (on a recording it would smooth).
    let from_file = estimates(beacon().set("tracking", "alpha_beta"));
    assert!(from_file.len() > 100);
    let mut s = beacon();
    let feeder = s.push_input("read", PushFormat { rate: 250e3, datatype: "cu8".into(), channels: 1 }).unwrap();
    let bytes = std::fs::read(root().join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    let pusher = std::thread::spawn(move || {
        // Uneven pieces, frames split across pushes.
        for piece in bytes.chunks(7_777) {
            feeder.push_bytes(piece.to_vec()).unwrap();
        }
    });
    let pushed = estimates(&s);
    pusher.join().unwrap();
    assert_eq!(pushed, from_file);
    // Complex floats pushed as such give the same too.
    let mut s = beacon();
    let feeder = s.push_input("read", PushFormat::iq(250e3)).unwrap();
    let bytes = std::fs::read(root().join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    let pusher = std::thread::spawn(move || {
        let iq: Vec<num_complex::Complex32> = bytes
            .chunks(2)
            .map(|b| num_complex::Complex32::new((b[0] as f32 - 128.0) / 128.0, (b[1] as f32 - 128.0) / 128.0))
            .collect();
        for piece in iq.chunks(10_000) {
            feeder.push_iq(piece).unwrap();
        }
    });
    assert_eq!(estimates(&s), from_file);
    pusher.join().unwrap();
}

#[test]
fn several_ports_at_once_and_a_report_with_notices_and_no_files() {
    let before: Vec<_> = std::fs::read_dir(".").unwrap().flatten().map(|e| e.file_name()).collect();
    let mut stream = beacon().listen(&["track", "integrate", "gate.notices"]).unwrap();
    let counts = futures::executor::block_on(async {
        let mut counts = [0usize; 3];
        while let Some(item) = stream.next().await {
            let (port, item) = item.unwrap();
            counts[port] += 1;
            match port {
                0 => assert!(matches!(item, Item::Estimate(_))),
                1 => assert!(matches!(item, Item::Dwell(_))),
                _ => {}
            }
        }
        counts
    });
    assert!(counts[0] > 100 && counts[1] > 2 * counts[0] - 5, "{counts:?}");
    let report = stream.report().expect("a report");
    assert!(report.written.is_empty(), "no out_dir, no files: {:?}", report.written);
    assert!(!report.notices.is_empty());
    let after: Vec<_> = std::fs::read_dir(".").unwrap().flatten().map(|e| e.file_name()).collect();
    assert_eq!(before.len(), after.len(), "nothing was written in the current folder");
    // With an output folder the files are written and listed.
    let d = scratch("files");
    let report = beacon().out_dir(&d).run().unwrap();
    // Two tables and four pictures (PNG and SVG each).
    assert_eq!(report.written.len(), 10);
    assert!(d.join("angles.csv").is_file());
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_pushed_input_stopped_by_the_application_keeps_what_was_done() {
    let d = scratch("stop");
    let mut s = beacon();
    s.out_dir(&d);
    let feeder = s.push_input("read", PushFormat { rate: 250e3, datatype: "cu8".into(), channels: 1 }).unwrap();
    let bytes = std::fs::read(root().join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    feeder.push_bytes(bytes[..1_000_000].to_vec()).unwrap();
    let mut stream = s.stream("track").unwrap();
    let (n, report) = futures::executor::block_on(async {
        let mut n = 0;
        while let Some(item) = stream.next().await {
            item.unwrap();
            n += 1;
            if n == 20 {
                // The feeder stays open: only the stop request ends the input.
                stream.end_input();
            }
        }
        (n, stream.report().map(|r| (r.ending, r.written.len())))
    });
    drop(feeder);
    assert!((20..=50).contains(&n), "{n}");
    let (ending, written) = report.expect("report");
    // Stopped somewhere in what was pushed, after the 20 pairs seen.
    let lobeflow::runtime::Ending::CutShort { at_sample, rate } = ending else { panic!("{ending:?}") };
    assert!((200_000..=500_000).contains(&at_sample) && rate == 250e3, "{ending:?}");
    // Two tables and four pictures (PNG and SVG each).
    assert_eq!(written, 10);
    let _ = std::fs::remove_dir_all(&d);
}
