//! Property tests (stable, proptest) for the parsers a hostile file reaches
//! and for the time and unit conversions: whatever the input, no panic, and
//! every error says where (the file, the field or the parameter).

use lobeflow::blocks::{MAX_SAMPLE_RATE, ParamSpec, ParamType, Params, RawValue, Unit, Value};
use lobeflow::capture::DataType;
use lobeflow::capture::sigmf::parse_meta;
use lobeflow::capture::wav::read_header;
use lobeflow::config::Seg;
use lobeflow::graph::file::GraphFile;
use proptest::prelude::*;
use std::path::Path;

/// A RIFF/WAVE header made of plausible pieces, bent at random.
fn wav_bytes() -> impl Strategy<Value = Vec<u8>> {
    (
        prop::sample::select(vec![&b"RIFF"[..], b"RIFX", b"RF64", b"JUNK"]),
        any::<u32>(),
        prop::collection::vec(
            (
                prop::sample::select(vec![&b"fmt "[..], b"data", b"LIST", b"note"]),
                any::<u32>(),
                prop::collection::vec(any::<u8>(), 0..48),
            ),
            0..4,
        ),
        prop::collection::vec(any::<u8>(), 0..64),
    )
        .prop_map(|(magic, size, chunks, tail)| {
            let mut b = magic.to_vec();
            b.extend(size.to_le_bytes());
            b.extend(b"WAVE");
            for (id, len, body) in chunks {
                b.extend(id);
                b.extend(len.to_le_bytes());
                b.extend(body);
            }
            b.extend(tail);
            b
        })
}

fn time_spec() -> ParamSpec {
    ParamSpec { name: "guard", ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: true }, default: None, doc: "" }
}

fn distance_spec() -> ParamSpec {
    ParamSpec { name: "gate", ty: ParamType::Distance { min_m: 0.0, max_m: 1e6 }, default: None, doc: "" }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 512, ..ProptestConfig::default() })]

    #[test]
    fn wav_headers_never_panic_and_errors_name_the_file(bytes in wav_bytes()) {
        let len = bytes.len() as u64;
        match read_header(&mut bytes.as_slice(), "hostile.wav", Some(len)) {
            Ok(h) => {
                prop_assert!(h.channels > 0 && h.rate > 0);
                if let Err(e) = h.encoding("hostile.wav") {
                    prop_assert!(e.path() == "hostile.wav" && e.to_string().contains("hostile.wav"), "{}", e);
                }
            }
            Err(e) => prop_assert!(e.path() == "hostile.wav" && e.to_string().contains("hostile.wav"), "{}", e),
        }
    }

    #[test]
    fn arbitrary_bytes_as_a_wav_header(bytes in prop::collection::vec(any::<u8>(), 0..200)) {
        if let Err(e) = read_header(&mut bytes.as_slice(), "hostile.wav", None) {
            prop_assert!(e.path() == "hostile.wav" && e.to_string().contains("hostile.wav"), "{}", e);
        }
    }

    #[test]
    fn sigmf_metadata_never_panics(
        datatype in "[cr]?[fiu]?(8|16|32|64)?(_le|_be)?",
        rate in prop::num::f64::ANY,
        channels in any::<u64>(),
        start in any::<u64>(),
        junk in "[ -~]{0,40}",
    ) {
        let text = format!(
            "{{\"global\": {{\"core:datatype\": \"{datatype}\", \"core:version\": \"1.2.0\", \"core:sample_rate\": {rate}, \"core:num_channels\": {channels}, \"x\": \"{}\"}}, \"captures\": [{{\"core:sample_start\": {start}}}], \"annotations\": []}}",
            junk.replace(['"', '\\'], "")
        );
        if let Err(e) = parse_meta("hostile.sigmf-meta", &text) {
            prop_assert!(e.path() == "hostile.sigmf-meta" && e.to_string().contains("hostile.sigmf-meta"), "{}", e);
        }
    }

    #[test]
    fn sigmf_metadata_from_any_text(text in "\\PC{0,200}") {
        if let Err(e) = parse_meta("hostile.sigmf-meta", &text) {
            prop_assert!(e.path() == "hostile.sigmf-meta" && e.to_string().contains("hostile.sigmf-meta"), "{}", e);
        }
    }

    #[test]
    fn datatypes_parse_and_decode_whole_components(name in "\\PC{0,12}", bytes in prop::collection::vec(any::<u8>(), 0..64)) {
        if let Ok(dt) = DataType::parse(&name) {
            let mut out = Vec::new();
            dt.decode(&bytes, &mut out);
            prop_assert_eq!(out.len(), bytes.len() / dt.component_bytes());
        }
    }

    #[test]
    fn times_parse_within_bounds(n in prop::num::f64::ANY, unit in prop::sample::select(vec!["", "s", "ms", "us", "ns", "samples", "pulses", "km", "bins"])) {
        let spec = time_spec();
        match spec.parse(&RawValue::Text(format!("{n} {unit}"))) {
            Ok(Value::Seconds(s)) => prop_assert!((0.0..=1.0).contains(&s)),
            Ok(Value::Samples(c)) => prop_assert!(c.is_finite() && (0.0..=MAX_SAMPLE_RATE).contains(&c)),
            Ok(Value::Pulses(c)) => prop_assert!(c.is_finite() && (0.0..=1e8).contains(&c)),
            Ok(other) => prop_assert!(false, "unexpected {:?}", other),
            Err(e) => prop_assert!(!e.is_empty()),
        }
    }

    #[test]
    fn counts_convert_within_their_seconds_bounds(count in 0.0..1e12f64, rate in 1.0..1e11f64, pri in 1.0..1e7f64) {
        let spec = time_spec();
        let mut p = Params::new();
        if let Ok(v) = spec.parse(&RawValue::Text(format!("{count} samples"))) {
            p.insert_declared(&spec, v);
            match p.samples_at("guard", rate, Some(pri)) {
                Ok(n) => prop_assert!(n / rate <= 1.0 + 1e-12),
                Err(e) => prop_assert!(e.to_string().contains("'guard'") && e.to_string().contains("out of range"), "{}", e),
            }
        }
        if let Ok(v) = spec.parse(&RawValue::Text(format!("{} pulses", count / 1e4))) {
            p.insert_declared(&spec, v);
            match p.samples_at("guard", rate, Some(pri)) {
                Ok(n) => prop_assert!(n / rate <= 1.0 + 1e-12),
                Err(e) => prop_assert!(e.to_string().contains("'guard'"), "{}", e),
            }
        }
        let d = distance_spec();
        if let Ok(v) = d.parse(&RawValue::Text(format!("{count} bins"))) {
            p.insert_declared(&d, v);
            match p.bins_at("gate", rate) {
                Ok(b) => prop_assert!(b * lobeflow::blocks::range_bin_m(rate) <= 1e6 * (1.0 + 1e-12)),
                Err(e) => prop_assert!(e.to_string().contains("'gate'"), "{}", e),
            }
        }
    }

    #[test]
    fn numbers_with_units_never_panic(text in "\\PC{0,24}") {
        let spec = ParamSpec { name: "f", ty: ParamType::Number { unit: Unit::Hertz, min: -1e9, max: 1e9 }, default: None, doc: "" };
        if let Ok(Value::Number(x)) = spec.parse(&RawValue::Text(text.clone())) {
            prop_assert!(x.is_finite() && x.abs() <= 1e9);
        }
        let _ = time_spec().parse(&RawValue::from_text(&text));
        let _ = distance_spec().parse(&RawValue::from_text(&text));
    }

    #[test]
    fn graph_text_errors_carry_file_and_line(text in "(blocks:|settings:|wiring:|  [a-z]{1,3}: |\\{|\\}|\\[|\\]|-|>|\\$|kind|use|set|pass|[a-z0-9 ,.:]){0,40}(\n(  |    )?(blocks:|[a-z]{1,3}: ?\\{?[a-z: ,]*\\}?|- [a-z]+ -> [a-z.]+)){0,8}") {
        match GraphFile::parse(Path::new("hostile.yaml"), text.clone()) {
            Ok(_) => {}
            Err(e) => {
                prop_assert_eq!(e.file.to_string_lossy(), "hostile.yaml");
                prop_assert!(e.line >= 1, "{}", e);
            }
        }
        if let Ok(root) = lobeflow::config::parse(&text) {
            let at = root.locate(&[Seg::Key("blocks".into()), Seg::Key("a".into()), Seg::Key("set".into())]);
            prop_assert!(at.line >= 1 && at.column >= 1);
        }
    }
}
