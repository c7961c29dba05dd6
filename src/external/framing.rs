//! The framing on an external program's standard input and output (see
//! `docs/external-blocks.md`): every item is one line holding a JSON object;
//! sample-carrying items (samples, sweeps, lobe segments) are followed by
//! their samples as raw little-endian float32, complex samples interleaved
//! (I, Q), then the sync and trigger channels when the header says so.

use lobeflow_blocks::{
    AngleEstimate, Cell, DwellRecord, Flag, Item, ItemKind, LobeSegment, LobeTag, Notice, SampleChunk, Severity, Span,
    Stamp, Sweep, TableRow,
};
use num_complex::Complex32;
use serde_json::{Map, Value, json};
use std::io::BufRead;
use std::sync::Arc;

/// Largest sample count one frame may announce (guards against a garbled
/// header asking for gigabytes).
pub const MAX_FRAME_SAMPLES: u64 = 1 << 26;

/// The frame kind name of an item kind (the `kind` field of every frame and
/// of the ports in a description).
pub fn kind_name(kind: ItemKind) -> &'static str {
    match kind {
        ItemKind::Samples => "samples",
        ItemKind::Sweep => "sweep",
        ItemKind::Segment => "segment",
        ItemKind::Dwell => "dwell",
        ItemKind::Estimate => "estimate",
        ItemKind::Row => "row",
        ItemKind::Notice => "notice",
        // Never declared by a program (`kind_from_name` knows only the
        // built-in kinds), so wiring keeps these items away from programs.
        ItemKind::Extension(t) => t.name,
    }
}

pub fn kind_from_name(name: &str) -> Option<ItemKind> {
    [
        ItemKind::Samples,
        ItemKind::Sweep,
        ItemKind::Segment,
        ItemKind::Dwell,
        ItemKind::Estimate,
        ItemKind::Row,
        ItemKind::Notice,
    ]
    .into_iter()
    .find(|k| kind_name(*k) == name)
}

/// JSON has no NaN or infinities: they travel as these strings.
fn num(x: f64) -> Value {
    if x.is_finite() {
        json!(x)
    } else if x.is_nan() {
        json!("NaN")
    } else if x > 0.0 {
        json!("Infinity")
    } else {
        json!("-Infinity")
    }
}

fn opt_num(x: Option<f64>) -> Value {
    x.map_or(Value::Null, num)
}

fn tag_json(t: &LobeTag) -> Value {
    json!({"lobe": t.lobe, "name": &*t.name, "dwell": t.dwell, "dwell_start": t.dwell_start})
}

/// The samples a frame carries after its header: I/Q, sync, trigger.
type Payload<'a> = (&'a [Complex32], Option<&'a [f32]>, Option<&'a [f32]>);

/// Append one item as a frame for input port `port` to `buf`.
pub fn encode(port: &str, item: &Item, buf: &mut Vec<u8>) {
    let stamp = item.stamp();
    let mut head = Map::new();
    head.insert("kind".into(), json!(kind_name(item.kind())));
    head.insert("port".into(), json!(port));
    head.insert("index".into(), json!(stamp.index));
    head.insert("rate".into(), num(stamp.rate));
    let mut payload: Option<Payload> = None;
    match item {
        Item::Samples(c) => {
            payload = Some((&c.iq, c.sync.as_deref(), c.trigger.as_deref()));
        }
        Item::Sweep(s) => {
            head.insert("pulse".into(), json!(s.pulse));
            head.insert("blanked".into(), json!(s.blanked));
            head.insert("predicted".into(), json!(s.predicted));
            head.insert("tag".into(), s.lobe.as_ref().map_or(Value::Null, tag_json));
            payload = Some((&s.iq, s.sync.as_deref(), None));
        }
        Item::Segment(s) => {
            head.insert("tag".into(), tag_json(&s.tag));
            head.insert("dwell_end".into(), json!(s.dwell_end));
            payload = Some((&s.chunk.iq, s.chunk.sync.as_deref(), s.chunk.trigger.as_deref()));
        }
        Item::Dwell(d) => {
            head.insert("tag".into(), tag_json(&d.tag));
            head.insert("amplitude".into(), num(d.amplitude));
            head.insert("noise_power".into(), num(d.noise_power));
            head.insert("snr".into(), num(d.snr));
            head.insert("var_ln_amp".into(), num(d.var_ln_amp));
            head.insert("range_m".into(), opt_num(d.range_m));
            head.insert("used".into(), json!(d.used));
        }
        Item::Estimate(e) => {
            head.insert("axis".into(), json!(&*e.axis));
            head.insert("error_deg".into(), opt_num(e.error_deg));
            head.insert("sigma_deg".into(), num(e.sigma_deg));
            head.insert("snr_db".into(), num(e.snr_db));
            head.insert("ratio_db".into(), num(e.ratio_db));
            head.insert("range_m".into(), opt_num(e.range_m));
            head.insert("flag".into(), json!(e.flag.as_str()));
            head.insert("tracked_deg".into(), opt_num(e.tracked_deg));
            head.insert("tracked_sigma_deg".into(), opt_num(e.tracked_sigma_deg));
            head.insert("absolute_deg".into(), opt_num(e.absolute_deg));
        }
        Item::Row(r) => {
            let fields: Vec<Value> = r.fields.iter().map(|(name, cell)| json!([&**name, cell_json(cell)])).collect();
            head.insert("fields".into(), Value::Array(fields));
        }
        Item::Notice(n) => {
            head.insert("block".into(), json!(&*n.block));
            head.insert("what".into(), json!(n.what));
            head.insert("severity".into(), json!(n.severity.name()));
        }
        // Only the stamp travels: programs have no port of such a kind.
        Item::Extension(_) => {}
    }
    if let Some((iq, sync, trigger)) = payload {
        head.insert("count".into(), json!(iq.len()));
        head.insert("sync".into(), json!(sync.is_some()));
        head.insert("trigger".into(), json!(trigger.is_some()));
    }
    // Writing a map of plain values cannot fail.
    let _ = serde_json::to_writer(&mut *buf, &Value::Object(head));
    buf.push(b'\n');
    if let Some((iq, sync, trigger)) = payload {
        buf.reserve(iq.len() * 16);
        for x in iq.iter() {
            buf.extend_from_slice(&x.re.to_le_bytes());
            buf.extend_from_slice(&x.im.to_le_bytes());
        }
        for ch in [sync, trigger].into_iter().flatten() {
            for x in ch {
                buf.extend_from_slice(&x.to_le_bytes());
            }
        }
    }
}

fn cell_json(c: &Cell) -> Value {
    match c {
        Cell::Num(x) if x.is_finite() => json!(x),
        Cell::Num(x) => json!({"num": num(*x)}),
        Cell::Int(i) => json!(i),
        Cell::Text(t) => json!(&**t),
        Cell::Empty => Value::Null,
    }
}

/// The fields of one frame header, with what went wrong named by field.
struct Head<'a>(&'a Map<String, Value>);

impl Head<'_> {
    fn value(&self, field: &str) -> Result<&Value, String> {
        self.0.get(field).ok_or_else(|| format!("field '{field}' is missing"))
    }
    fn f64(&self, field: &str) -> Result<f64, String> {
        to_f64(self.value(field)?).ok_or_else(|| format!("field '{field}' is not a number"))
    }
    fn opt_f64(&self, field: &str) -> Result<Option<f64>, String> {
        match self.0.get(field) {
            None | Some(Value::Null) => Ok(None),
            Some(v) => to_f64(v).map(Some).ok_or_else(|| format!("field '{field}' is not a number or null")),
        }
    }
    fn u64(&self, field: &str) -> Result<u64, String> {
        self.value(field)?.as_u64().ok_or_else(|| format!("field '{field}' is not a whole number >= 0"))
    }
    fn text(&self, field: &str) -> Result<&str, String> {
        self.value(field)?.as_str().ok_or_else(|| format!("field '{field}' is not text"))
    }
    fn flag(&self, field: &str) -> Result<bool, String> {
        match self.0.get(field) {
            None | Some(Value::Null) => Ok(false),
            Some(v) => v.as_bool().ok_or_else(|| format!("field '{field}' is not true or false")),
        }
    }
    fn stamp(&self) -> Result<Stamp, String> {
        let rate = self.f64("rate")?;
        if !(rate.is_finite() && rate > 0.0) {
            return Err(format!("field 'rate' is {rate}; a sample rate must be positive"));
        }
        Ok(Stamp::new(self.u64("index")?, rate))
    }
    fn tag(&self, field: &str) -> Result<LobeTag, String> {
        let v = self.value(field)?;
        let m = v.as_object().ok_or_else(|| format!("field '{field}' is not an object"))?;
        let t = Head(m);
        let wrap = |e: String| format!("{field}: {e}");
        Ok(LobeTag {
            lobe: t.u64("lobe").map_err(wrap)? as usize,
            name: Arc::from(t.text("name").map_err(wrap)?),
            dwell: t.u64("dwell").map_err(wrap)?,
            dwell_start: t.u64("dwell_start").map_err(wrap)?,
        })
    }
}

fn to_f64(v: &Value) -> Option<f64> {
    match v {
        Value::Number(n) => n.as_f64(),
        Value::String(s) => match s.as_str() {
            "NaN" => Some(f64::NAN),
            "Infinity" => Some(f64::INFINITY),
            "-Infinity" => Some(f64::NEG_INFINITY),
            _ => None,
        },
        _ => None,
    }
}

fn cell_from(v: &Value) -> Result<Cell, String> {
    Ok(match v {
        Value::Null => Cell::Empty,
        Value::String(s) => Cell::Text(Arc::from(s.as_str())),
        Value::Number(n) if n.is_i64() => Cell::Int(n.as_i64().unwrap_or_default()),
        Value::Number(n) => Cell::Num(n.as_f64().ok_or("a number out of range")?),
        Value::Object(m) if m.len() == 1 && m.contains_key("num") => {
            Cell::Num(to_f64(&m["num"]).ok_or("{\"num\": ...} holds no number")?)
        }
        other => return Err(format!("cell {other} is not a number, text, null or {{\"num\": ...}}")),
    })
}

/// What the header of one output frame says, before its samples are read.
pub struct Header {
    pub port: usize,
    head: Map<String, Value>,
    kind: ItemKind,
    /// Samples that follow the header line, and whether sync and trigger do.
    pub samples: Option<(usize, bool, bool)>,
}

/// Parse one header line written by the program; `outputs` are the block's
/// output ports (name and kind) in declaration order.
pub fn parse_header(line: &[u8], outputs: &[(String, ItemKind)]) -> Result<Header, String> {
    let v: Value = serde_json::from_slice(line).map_err(|e| format!("not a JSON object ({e})"))?;
    let Value::Object(head) = v else { return Err("not a JSON object".into()) };
    let h = Head(&head);
    let port = match head.get("port") {
        None if outputs.len() == 1 => 0,
        None => return Err("field 'port' is missing (the block has several outputs)".into()),
        Some(p) => {
            let p = p.as_str().ok_or("field 'port' is not text")?;
            outputs.iter().position(|(n, _)| n == p).ok_or_else(|| {
                let names: Vec<&str> = outputs.iter().map(|(n, _)| n.as_str()).collect();
                format!("no output port '{p}' (declared: {})", names.join(", "))
            })?
        }
    };
    let kind_text = h.text("kind")?;
    let kind = kind_from_name(kind_text).ok_or_else(|| format!("unknown kind '{kind_text}'"))?;
    let want = outputs[port].1;
    if kind != want {
        return Err(format!("port '{}' carries {} frames, not '{kind_text}'", outputs[port].0, kind_name(want)));
    }
    let samples = match kind {
        ItemKind::Samples | ItemKind::Sweep | ItemKind::Segment => {
            let n = h.u64("count")?;
            if n > MAX_FRAME_SAMPLES {
                return Err(format!("field 'count' is {n}, more than {MAX_FRAME_SAMPLES} samples in one frame"));
            }
            let trigger = h.flag("trigger")?;
            if trigger && kind == ItemKind::Sweep {
                return Err("a sweep carries no trigger channel".into());
            }
            Some((n as usize, h.flag("sync")?, trigger))
        }
        _ => None,
    };
    Ok(Header { port, head, kind, samples })
}

/// Read the samples a header announced from `input`.
pub fn read_samples(input: &mut impl BufRead, count: usize) -> std::io::Result<Vec<Complex32>> {
    let mut raw = vec![0u8; count * 8];
    input.read_exact(&mut raw)?;
    Ok(raw
        .chunks_exact(8)
        .map(|b| {
            Complex32::new(f32::from_le_bytes([b[0], b[1], b[2], b[3]]), f32::from_le_bytes([b[4], b[5], b[6], b[7]]))
        })
        .collect())
}

/// Read a real channel of `count` samples.
pub fn read_channel(input: &mut impl BufRead, count: usize) -> std::io::Result<Vec<f32>> {
    let mut raw = vec![0u8; count * 4];
    input.read_exact(&mut raw)?;
    Ok(raw.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect())
}

/// The item a header describes, with the samples that followed it.
pub fn build_item(
    header: Header,
    iq: Vec<Complex32>,
    sync: Option<Vec<f32>>,
    trigger: Option<Vec<f32>>,
) -> Result<Item, String> {
    let h = Head(&header.head);
    let stamp = h.stamp()?;
    let chunk =
        |stamp| SampleChunk { stamp, iq: Span::new(iq), sync: sync.map(Span::new), trigger: trigger.map(Span::new) };
    Ok(match header.kind {
        ItemKind::Samples => Item::Samples(chunk(stamp)),
        ItemKind::Sweep => Item::Sweep(sweep_from(&h, chunk(stamp))?),
        ItemKind::Segment => Item::Segment(Box::new(LobeSegment {
            tag: h.tag("tag")?,
            chunk: chunk(stamp),
            dwell_end: h.flag("dwell_end")?,
        })),
        ItemKind::Dwell => Item::Dwell(DwellRecord {
            tag: h.tag("tag")?,
            mid: stamp,
            amplitude: h.f64("amplitude")?,
            noise_power: h.f64("noise_power")?,
            snr: h.f64("snr")?,
            var_ln_amp: h.f64("var_ln_amp")?,
            range_m: h.opt_f64("range_m")?,
            used: h.u64("used")?,
        }),
        ItemKind::Estimate => Item::Estimate(Arc::new(estimate_from(&h, stamp)?)),
        ItemKind::Row => Item::Row(TableRow { stamp, fields: fields_from(&h)?.into() }),
        ItemKind::Notice => Item::Notice(notice_from(&h, stamp)?),
        ItemKind::Extension(t) => return Err(format!("a program cannot send '{}' items", t.name)),
    })
}

/// A sweep: its samples, pulse number, blanking and lobe tag (if any).
fn sweep_from(h: &Head, c: SampleChunk) -> Result<Sweep, String> {
    let tag = match h.0.get("tag") {
        None | Some(Value::Null) => None,
        Some(_) => Some(h.tag("tag")?),
    };
    let blanked = h.0.get("blanked").map_or(Ok(0), |_| h.u64("blanked"))?;
    Ok(Sweep {
        stamp: c.stamp,
        pulse: h.u64("pulse")?,
        iq: c.iq,
        sync: c.sync,
        blanked: u32::try_from(blanked).map_err(|_| "field 'blanked' is too large".to_string())?,
        predicted: h.flag("predicted")?,
        lobe: tag,
    })
}

fn estimate_from(h: &Head, stamp: Stamp) -> Result<AngleEstimate, String> {
    let flag = match h.text("flag")? {
        "ok" => Flag::Ok,
        "out_of_range" => Flag::OutOfRange,
        "no_signal" => Flag::NoSignal,
        "outlier" => Flag::Outlier,
        other => return Err(format!("flag '{other}' is not ok, out_of_range, no_signal or outlier")),
    };
    Ok(AngleEstimate {
        stamp,
        axis: Arc::from(h.text("axis")?),
        error_deg: h.opt_f64("error_deg")?,
        sigma_deg: h.opt_f64("sigma_deg")?.unwrap_or(f64::NAN),
        snr_db: h.f64("snr_db")?,
        ratio_db: h.opt_f64("ratio_db")?.unwrap_or(f64::NAN),
        range_m: h.opt_f64("range_m")?,
        flag,
        tracked_deg: h.opt_f64("tracked_deg")?,
        tracked_sigma_deg: h.opt_f64("tracked_sigma_deg")?,
        absolute_deg: h.opt_f64("absolute_deg")?,
    })
}

/// A table row's `fields`: a list of [name, value] pairs.
fn fields_from(h: &Head) -> Result<Vec<(Arc<str>, Cell)>, String> {
    let fields = h.value("fields")?.as_array().ok_or("field 'fields' is not a list")?;
    let mut out = Vec::with_capacity(fields.len());
    for (i, f) in fields.iter().enumerate() {
        let pair = f.as_array().filter(|p| p.len() == 2);
        let (Some(name), Some(cell)) = (pair.and_then(|p| p[0].as_str()), pair.map(|p| &p[1])) else {
            return Err(format!("fields[{i}] is not a [name, value] pair"));
        };
        out.push((Arc::from(name), cell_from(cell).map_err(|e| format!("fields[{i}]: {e}"))?));
    }
    Ok(out)
}

fn notice_from(h: &Head, stamp: Stamp) -> Result<Notice, String> {
    let block = Arc::from(h.0.get("block").and_then(Value::as_str).unwrap_or(""));
    let mut notice = Notice::new(stamp, block, h.text("what")?);
    // Optional: without it the severity is told from the text.
    if let Some(name) = h.0.get("severity").and_then(Value::as_str) {
        notice.severity = Severity::from_name(name)
            .ok_or_else(|| format!("severity '{name}' is neither 'information' nor 'warning'"))?;
    }
    Ok(notice)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn round_trip(item: Item) -> Item {
        let mut buf = Vec::new();
        encode("out", &item, &mut buf);
        let mut input = std::io::Cursor::new(buf);
        let mut line = Vec::new();
        input.read_until(b'\n', &mut line).unwrap();
        let header = parse_header(&line, &[("out".into(), item.kind())]).unwrap();
        let (iq, sync, trigger) = match header.samples {
            Some((n, s, t)) => {
                let iq = read_samples(&mut input, n).unwrap();
                let sync = s.then(|| read_channel(&mut input, n).unwrap());
                let trigger = t.then(|| read_channel(&mut input, n).unwrap());
                (iq, sync, trigger)
            }
            None => (Vec::new(), None, None),
        };
        assert_eq!(input.position() as usize, input.get_ref().len(), "every byte read");
        build_item(header, iq, sync, trigger).unwrap()
    }

    #[test]
    fn every_kind_survives_the_trip_exactly() {
        let tag = LobeTag { lobe: 2, name: Arc::from("left"), dwell: 7, dwell_start: 1234 };
        let dwell = DwellRecord {
            tag: tag.clone(),
            mid: Stamp::new(99, 2.5e6),
            amplitude: f64::NAN,
            noise_power: 1.0 / 3.0,
            snr: f64::INFINITY,
            var_ln_amp: 1e-300,
            range_m: Some(1234.5),
            used: 4,
        };
        match round_trip(Item::Dwell(dwell.clone())) {
            Item::Dwell(d) => {
                assert!(d.amplitude.is_nan());
                assert_eq!(DwellRecord { amplitude: 0.0, ..d }, DwellRecord { amplitude: 0.0, ..dwell });
            }
            other => panic!("{other:?}"),
        }
        let est = AngleEstimate {
            stamp: Stamp::new(u64::MAX / 3, 48000.0),
            axis: Arc::from("az"),
            error_deg: Some(-0.123456789012345),
            sigma_deg: 0.1,
            snr_db: 20.0,
            ratio_db: -1.5,
            range_m: None,
            flag: Flag::Outlier,
            tracked_deg: None,
            tracked_sigma_deg: None,
            absolute_deg: Some(3.0),
        };
        match round_trip(Item::Estimate(Arc::new(est.clone()))) {
            Item::Estimate(e) => assert_eq!(*e, est),
            other => panic!("{other:?}"),
        }
        let row = TableRow {
            stamp: Stamp::new(5, 10.0),
            fields: vec![
                (Arc::from("a"), Cell::Num(1.0)),
                (Arc::from("b"), Cell::Int(-3)),
                (Arc::from("c"), Cell::Text(Arc::from("NaN"))),
                (Arc::from("d"), Cell::Empty),
                (Arc::from("e"), Cell::Num(f64::NEG_INFINITY)),
            ]
            .into(),
        };
        match round_trip(Item::Row(row.clone())) {
            Item::Row(r) => assert_eq!(r, row),
            other => panic!("{other:?}"),
        }
        let iq: Vec<Complex32> = (0..5).map(|i| Complex32::new(i as f32 * 0.1, -(i as f32))).collect();
        let chunk = SampleChunk {
            stamp: Stamp::new(16384, 1e6),
            iq: Span::new(iq.clone()),
            sync: Some(Span::new(vec![0.5; 5])),
            trigger: None,
        };
        let seg = LobeSegment { tag, chunk, dwell_end: true };
        match round_trip(Item::Segment(Box::new(seg))) {
            Item::Segment(s) => {
                assert_eq!(&s.chunk.iq[..], &iq[..]);
                assert_eq!(s.chunk.sync.as_deref(), Some(&[0.5f32; 5][..]));
                assert!(s.chunk.trigger.is_none() && s.dwell_end && s.tag.name.as_ref() == "left");
                assert_eq!(s.chunk.stamp, Stamp::new(16384, 1e6));
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn bad_headers_say_what_is_wrong() {
        let outs = [("estimates".to_string(), ItemKind::Estimate), ("rows".to_string(), ItemKind::Row)];
        let err = |line: &str| parse_header(line.as_bytes(), &outs).err().unwrap();
        assert!(err("angle 3.2").contains("not a JSON object"));
        assert!(err(r#"{"kind": "estimate"}"#).contains("'port' is missing"));
        assert!(err(r#"{"kind": "estimate", "port": "x"}"#).contains("no output port 'x'"));
        assert!(err(r#"{"kind": "dwell", "port": "rows"}"#).contains("carries row frames"));
        let h = parse_header(br#"{"kind": "row", "port": "rows", "index": 1, "rate": 0, "fields": []}"#, &outs);
        let e = build_item(h.ok().unwrap(), Vec::new(), None, None).err().unwrap();
        assert!(e.contains("rate"), "{e}");
    }
}
