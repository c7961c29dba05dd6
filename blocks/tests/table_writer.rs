//! The table writer: exact bytes, determinism, JSON lines, rows, mixed-input
//! errors, and the atomic-file contract (nothing left behind without finish).

mod common;

use common::{dwell, params};
use lobeflow_blocks::dsp::tracking::Telemetry;
use lobeflow_blocks::kinds::table_writer::SPEC;
use lobeflow_blocks::{AngleEstimate, Block, BuildContext, Cell, FileStager, Flag, Item, Outputs, Stamp, TableRow};
use std::path::{Path, PathBuf};
use std::sync::Arc;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("lobeflow-table-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn writer(path: &Path, format: &str, stager: &FileStager) -> Box<dyn Block> {
    let p = params(&SPEC, &[("path", path.to_str().unwrap()), ("format", format)]);
    let ctx =
        BuildContext { name: "table".into(), out_dir: path.parent().unwrap().to_path_buf(), files: stager.clone() };
    (SPEC.build)(&p, &ctx).unwrap()
}

/// Write `items` and commit; returns the file's bytes and the notices.
fn write_all(path: &Path, format: &str, items: Vec<(usize, Item)>) -> (Vec<u8>, Vec<String>) {
    let stager = FileStager::default();
    let mut blk = writer(path, format, &stager);
    let mut out = Outputs::new(0);
    for (port, item) in items {
        blk.process(port, item, &mut out).unwrap();
    }
    blk.finish(&mut out).unwrap();
    let notices = out.drain_notices().map(|n| n.what).collect();
    assert!(!path.exists(), "final file must wait for the commit");
    stager.commit().unwrap();
    (std::fs::read(path).unwrap(), notices)
}

fn sample_estimates() -> Vec<(usize, Item)> {
    let a = AngleEstimate {
        stamp: Stamp::new(1_234_566, 2.0e6),
        axis: Arc::from("az"),
        error_deg: Some(0.123456789),
        sigma_deg: 0.0421,
        snr_db: 17.25,
        ratio_db: -1.5,
        range_m: Some(10_003.75),
        flag: Flag::Ok,
        tracked_deg: Some(0.1),
        tracked_sigma_deg: None,
        absolute_deg: Some(121.1),
    };
    let b = AngleEstimate {
        stamp: Stamp::new(1_300_000, 2.0e6),
        axis: Arc::from("el"),
        error_deg: None,
        sigma_deg: f64::NAN,
        snr_db: 3.0,
        ratio_db: 25.0,
        range_m: None,
        flag: Flag::OutOfRange,
        tracked_deg: None,
        tracked_sigma_deg: None,
        absolute_deg: None,
    };
    vec![(0, Item::Estimate(Arc::new(a))), (0, Item::Estimate(Arc::new(b)))]
}

#[test]
fn estimates_csv_bytes_are_exact_and_repeatable() {
    let dir = scratch("csv");
    let path = dir.join("angles.csv");
    let (bytes, _) = write_all(&path, "csv", sample_estimates());
    let want = "time_s,axis,error_deg,sigma_deg,snr_db,range_m,flag,ratio_db,tracked_deg,tracked_sigma_deg,absolute_deg\n\
                0.617283,az,0.12346,0.04210,17.250,10003.750,ok,-1.5000,0.10000,,121.10000\n\
                0.650000,el,,,3.000,,out_of_range,25.0000,,,\n";
    assert_eq!(String::from_utf8(bytes.clone()).unwrap(), want);
    std::fs::remove_file(&path).unwrap();
    let (again, _) = write_all(&path, "csv", sample_estimates());
    assert_eq!(bytes, again);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn json_lines_carry_the_same_keys_with_nulls() {
    let dir = scratch("jsonl");
    let path = dir.join("angles.jsonl");
    let (bytes, _) = write_all(&path, "jsonl", sample_estimates());
    let text = String::from_utf8(bytes).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 2);
    assert_eq!(
        lines[1],
        r#"{"time_s":0.650000,"axis":"el","error_deg":null,"sigma_deg":null,"snr_db":3.000,"range_m":null,"flag":"out_of_range","ratio_db":25.0000,"tracked_deg":null,"tracked_sigma_deg":null,"absolute_deg":null}"#
    );
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn dwells_and_rows() {
    let dir = scratch("rows");
    let path = dir.join("dwells.csv");
    let mut d = dwell("left", 7, 500_000, 0.03125, 1e-3, 100.0);
    d.range_m = Some(7_500.0);
    let (bytes, _) = write_all(&path, "csv", vec![(1, Item::Dwell(d))]);
    assert_eq!(
        String::from_utf8(bytes).unwrap(),
        "time_s,lobe,dwell,amplitude,noise_power,snr_db,range_m,used\n0.500000,left,7,3.125000e-2,1.000000e0,20.000,7500.000,16\n"
    );
    let path = dir.join("rows.jsonl");
    let row = |fields: Vec<(&str, Cell)>| {
        Item::Row(TableRow {
            stamp: Stamp::new(0, 1.0),
            fields: fields.into_iter().map(|(k, v)| (Arc::from(k), v)).collect(),
        })
    };
    let items = vec![
        (
            2,
            row(vec![
                ("site", Cell::Text("north, \"hill\"".into())),
                ("level", Cell::Num(0.1)),
                ("count", Cell::Int(-3)),
            ]),
        ),
        (2, row(vec![("count", Cell::Int(4)), ("extra", Cell::Num(1.0)), ("level", Cell::Empty)])),
    ];
    let (bytes, notices) = write_all(&path, "jsonl", items.clone());
    assert_eq!(
        String::from_utf8(bytes).unwrap(),
        "{\"site\":\"north, \\\"hill\\\"\",\"level\":0.1,\"count\":-3}\n{\"site\":null,\"level\":null,\"count\":4}\n"
    );
    assert!(notices.iter().any(|n| n.contains("'extra'")), "{notices:?}");
    let path = dir.join("rows.csv");
    let (bytes, _) = write_all(&path, "csv", items);
    assert_eq!(String::from_utf8(bytes).unwrap(), "site,level,count\n\"north, \"\"hill\"\"\",0.1,-3\n,,4\n");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn two_kinds_of_input_are_refused() {
    let dir = scratch("mixed");
    let path = dir.join("mixed.csv");
    let stager = FileStager::default();
    let mut blk = writer(&path, "csv", &stager);
    let mut out = Outputs::new(0);
    let mut items = sample_estimates();
    blk.process(0, items.remove(0).1, &mut out).unwrap();
    let err = blk.process(1, Item::Dwell(dwell("left", 0, 10, 1.0, 0.0, 1.0)), &mut out).unwrap_err();
    assert!(err.message.contains("angle estimates") && err.message.contains("dwell records"), "{err}");
    assert_eq!(err.at_sample, Some(10));
    drop(blk);
    assert!(!FileStager::temp_path(&path).exists());
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn dropped_without_finish_leaves_nothing() {
    let dir = scratch("drop");
    let path = dir.join("angles.csv");
    let stager = FileStager::default();
    let mut blk = writer(&path, "csv", &stager);
    let temp = FileStager::temp_path(&path);
    assert!(temp.exists(), "writes go to a temporary file");
    let mut out = Outputs::new(0);
    for (port, item) in sample_estimates() {
        blk.process(port, item, &mut out).unwrap();
    }
    drop(blk);
    assert!(!temp.exists() && !path.exists());
    assert!(stager.commit().unwrap().is_empty());
    // No items at all: an empty table, with a notice.
    let (bytes, notices) = write_all(&path, "csv", Vec::new());
    assert!(bytes.is_empty());
    assert!(notices.iter().any(|n| n.contains("no items")), "{notices:?}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn quoted_column_names_read_back_as_telemetry() {
    // What table_writer quotes, the settings readers (csv crate) unquote.
    let dir = scratch("telemetry");
    let path = dir.join("pointing.csv");
    let az = "az \"true\", deg";
    let rows = (0..3)
        .map(|k| {
            let t = f64::from(k);
            let fields = vec![(Arc::from("time_s"), Cell::Num(t)), (Arc::from(az), Cell::Num(10.0 + 2.0 * t))];
            (2, Item::Row(TableRow { stamp: Stamp::new(k as u64, 1.0), fields: fields.into() }))
        })
        .collect();
    let (bytes, _) = write_all(&path, "csv", rows);
    let text = String::from_utf8(bytes).unwrap();
    assert!(text.starts_with("time_s,\"az \"\"true\"\", deg\"\n"), "{text}");
    let t = Telemetry::parse(&text, "pointing.csv").unwrap();
    let col = t.column(az).expect("the column name unquoted");
    assert_eq!(t.at(col, 1.5), Some(13.0));
    let _ = std::fs::remove_dir_all(&dir);
}
