//! The plugin path: a block kind defined here, outside the library, is
//! registered, used by name from a YAML graph, has its parameters validated
//! like the built-in ones, and runs.

use lobeflow::Session;
use lobeflow_blocks::{
    Block, BlockError, BlockSpec, BuildContext, FileStager, Item, ItemKind, OutputFile, Outputs, ParamSpec, ParamType,
    Params, PortSpec, Unit,
};
use std::io::Write;

/// Writes the mean power of each chunk, in dB, to a text file.
struct PowerLog {
    file: Option<OutputFile>,
    files: FileStager,
    offset_db: f64,
}

const POWER_LOG: BlockSpec = BlockSpec {
    kind: "power_log",
    doc: "test plugin: mean power per chunk in dB",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "chunks")],
    outputs: &[],
    params: &[
        ParamSpec { name: "path", ty: ParamType::OutputPath, default: Some("power.txt"), doc: "where" },
        ParamSpec {
            name: "offset",
            ty: ParamType::Number { unit: Unit::Decibels, min: -60.0, max: 60.0 },
            default: Some("0 dB"),
            doc: "added to every value",
        },
    ],
    build,
};

fn build(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, String> {
    let file = OutputFile::create(std::path::Path::new(p.text("path")?)).map_err(|e| e.to_string())?;
    Ok(Box::new(PowerLog { file: Some(file), files: ctx.files.clone(), offset_db: p.num("offset")? }))
}

impl Block for PowerLog {
    fn process(&mut self, _: usize, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        if let Item::Samples(c) = item {
            let p: f64 = c.iq.iter().map(|x| x.norm_sqr() as f64).sum::<f64>() / c.len().max(1) as f64;
            let f = self.file.as_mut().ok_or_else(|| BlockError::new("already finished"))?;
            writeln!(f, "{} {:.3}", c.stamp.index, 10.0 * p.log10() + self.offset_db)?;
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

fn registry() -> lobeflow_blocks::Registry {
    let mut r = lobeflow::registry();
    r.register(POWER_LOG);
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
