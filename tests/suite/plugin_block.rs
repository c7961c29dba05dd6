//! The plugin path: a block kind defined here, outside the library, is
//! registered, used by name from a YAML graph, has its parameters validated
//! like the built-in ones, and runs.

use lobeflow::Session;
use lobeflow_blocks::{
    BlockError, BlockSpec, BuildContext, BuildError, ExtensionItem, FileStager, Item, ItemKind, ItemType, NoPorts,
    OutputFile, Outputs, ParamType, TypedBlock, Unit, block_ports, block_settings,
};
use std::io::Write;
use std::path::PathBuf;

block_settings! {
    /// Settings of `power_log`.
    struct PowerLogSettings {
        path: PathBuf { ty: ParamType::OutputPath, default: Some("power.txt"), doc: "where" },
        offset: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: -60.0, max: 60.0 },
            default: Some("0 dB"),
            doc: "added to every value",
        },
    }
}

block_ports! {
    inputs enum PowerLogIn { Samples = required("samples", ItemKind::Samples, "chunks") }
}

/// Writes the mean power of each chunk, in dB, to a text file.
struct PowerLog {
    file: Option<OutputFile>,
    files: FileStager,
    offset_db: f64,
}

impl TypedBlock for PowerLog {
    type Settings = PowerLogSettings;
    type In = PowerLogIn;
    type Out = NoPorts;

    fn build(s: PowerLogSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let file = OutputFile::create(&s.path).map_err(|source| BuildError::File { path: s.path, source })?;
        Ok(PowerLog { file: Some(file), files: ctx.files.clone(), offset_db: s.offset })
    }

    fn process(&mut self, port: PowerLogIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        if let (PowerLogIn::Samples, Item::Samples(c)) = (port, item) {
            let f = self.file.as_mut().ok_or_else(|| BlockError::new("already finished"))?;
            writeln!(f, "{} {:.3}", c.stamp.index, mean_power_db(&c.iq) + self.offset_db)?;
        }
        Ok(())
    }

    fn finish(&mut self, _: &mut Outputs) -> Result<(), BlockError> {
        if let Some(f) = self.file.take() {
            f.finish(&self.files)?;
        }
        Ok(())
    }
}

fn mean_power_db(iq: &[num_complex::Complex32]) -> f64 {
    let p: f64 = iq.iter().map(|x| x.norm_sqr() as f64).sum::<f64>() / iq.len().max(1) as f64;
    10.0 * p.log10()
}

const POWER_LOG: BlockSpec = BlockSpec::typed::<PowerLog>("power_log", "test plugin: mean power per chunk in dB");

/// A kind of item the blocks crate does not know: the strongest sample of a chunk.
static PEAK: ItemType = ItemType { name: "chunk peaks", doc: "the strongest sample of each chunk" };

/// The payload of a [`PEAK`] item.
struct Peak {
    at_sample: u64,
    power_db: f64,
}

block_ports! {
    inputs enum PeakIn { Samples = required("samples", ItemKind::Samples, "chunks") }
}

block_ports! {
    outputs enum PeakOut { Peaks = optional("peaks", ItemKind::Extension(&PEAK), "one peak per chunk") }
}

/// Finds the strongest sample of each chunk.
struct PeakFinder;

impl TypedBlock for PeakFinder {
    type Settings = ();
    type In = PeakIn;
    type Out = PeakOut;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        Ok(PeakFinder)
    }

    fn process(&mut self, port: PeakIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let (PeakIn::Samples, Item::Samples(c)) = (port, item) else { return Ok(()) };
        let Some((k, x)) = c.iq.iter().enumerate().max_by(|a, b| a.1.norm_sqr().total_cmp(&b.1.norm_sqr())) else {
            return Ok(());
        };
        let peak = Peak { at_sample: c.stamp.index + k as u64, power_db: 10.0 * (x.norm_sqr() as f64).log10() };
        out.push(PeakOut::Peaks, Item::Extension(ExtensionItem::new(&PEAK, c.stamp, peak)));
        Ok(())
    }
}

block_settings! {
    struct PeakLogSettings {
        path: PathBuf { ty: ParamType::OutputPath, default: Some("peaks.txt"), doc: "where" },
    }
}

block_ports! {
    inputs enum PeakLogIn { Peaks = required("peaks", ItemKind::Extension(&PEAK), "peaks to write") }
}

/// Writes each peak it receives as a line.
struct PeakLog {
    lines: String,
    path: PathBuf,
    files: FileStager,
}

impl TypedBlock for PeakLog {
    type Settings = PeakLogSettings;
    type In = PeakLogIn;
    type Out = NoPorts;

    fn build(s: PeakLogSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        Ok(PeakLog { lines: String::new(), path: s.path, files: ctx.files.clone() })
    }

    fn process(&mut self, port: PeakLogIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        let (PeakLogIn::Peaks, Item::Extension(x)) = (port, item) else { return Ok(()) };
        let peak = x.get::<Peak>().ok_or_else(|| BlockError::new("a peak item without its payload"))?;
        self.lines += &format!("{} {:.1}\n", peak.at_sample, peak.power_db);
        Ok(())
    }

    fn finish(&mut self, _: &mut Outputs) -> Result<(), BlockError> {
        let mut f = OutputFile::create(&self.path)?;
        f.write_all(self.lines.as_bytes())?;
        f.finish(&self.files)?;
        Ok(())
    }
}

fn registry() -> lobeflow_blocks::Registry {
    let mut r = lobeflow::registry();
    r.register(POWER_LOG);
    r.register(BlockSpec::typed::<PeakFinder>("peak_finder", "test plugin: the strongest sample of each chunk"));
    r.register(BlockSpec::typed::<PeakLog>("peak_log", "test plugin: writes peaks"));
    r
}

#[test]
fn a_plugin_block_is_used_by_name_and_validated() {
    let d = std::env::temp_dir().join(format!("lobeflow-plugin-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    let g = d.join("g.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone, set: {samples: 8192, chunk: 4096}}\n  log: {kind: power_log, set: {offset: 3 dB}}\nwiring:\n  - tone -> log\n",
    )
    .unwrap();
    let mut s = Session::with_registry(&g, registry()).unwrap();
    s.out_dir(d.join("out")).threads(2);
    let report = s.run().unwrap();
    assert_eq!(report.written, vec![d.join("out/power.txt")]);
    // A unit tone has power 0 dB; plus the 3 dB offset.
    assert_eq!(std::fs::read_to_string(d.join("out/power.txt")).unwrap(), "0 3.000\n4096 3.000\n");

    // Its parameters are checked like the built-in ones.
    std::fs::write(&g, "blocks:\n  tone: {kind: test_tone}\n  log: {kind: power_log, set: {offset: 90 dB}}\nwiring:\n  - tone -> log\n").unwrap();
    let e = Session::with_registry(&g, registry()).err().expect("out of range");
    let msg = e.to_string();
    assert!(msg.contains("g.yaml:3:") && msg.contains("out of range") && msg.contains("-60 to 60"), "{msg}");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone}\n  log: {kind: power_log, set: {ofset: 1 dB}}\nwiring:\n  - tone -> log\n",
    )
    .unwrap();
    let msg = Session::with_registry(&g, registry()).err().expect("unknown").to_string();
    assert!(msg.contains("did you mean 'offset'"), "{msg}");
    // Without registering it, the kind is unknown.
    assert!(Session::open(&g).err().expect("unregistered").to_string().contains("unknown block kind 'power_log'"));
}

#[test]
fn a_plugin_kind_of_item_flows_between_plugin_blocks() {
    let d = std::env::temp_dir().join(format!("lobeflow-plugin-items-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    let g = d.join("g.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone, set: {samples: 8192, chunk: 4096}}\n  peaks: {kind: peak_finder}\n  log: {kind: peak_log}\nwiring:\n  - tone -> peaks -> log\n",
    )
    .unwrap();
    let mut s = Session::with_registry(&g, registry()).unwrap();
    s.out_dir(d.join("out")).threads(2);
    s.run().unwrap();
    // A unit tone: every sample has power 1 (0 dB), so each chunk's peak
    // lies within it at 0 dB.
    let text = std::fs::read_to_string(d.join("out/peaks.txt")).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 2, "{text}");
    for (line, chunk) in lines.iter().zip([0u64, 4096]) {
        let (at, db) = line.split_once(' ').unwrap();
        let at: u64 = at.parse().unwrap();
        assert!((chunk..chunk + 4096).contains(&at), "{line}");
        assert!(db.parse::<f64>().unwrap().abs() < 0.01, "{line}");
    }

    // Wiring checks compare the new kind like any other: samples cannot feed it.
    std::fs::write(&g, "blocks:\n  tone: {kind: test_tone}\n  log: {kind: peak_log}\nwiring:\n  - tone -> log\n")
        .unwrap();
    let msg = Session::with_registry(&g, registry()).err().expect("kinds differ").to_string();
    assert!(msg.contains("chunk peaks") && msg.contains("samples"), "{msg}");
}
