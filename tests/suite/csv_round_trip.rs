//! Tables written by `table_writer` read back field for field, text fields
//! with commas, quotes and line breaks included (the regress and batch
//! readers use the same CSV reader).

use lobeflow::Session;
use lobeflow::regress::Table;
use lobeflow_blocks::Cell;
use lobeflow_blocks::prelude::*;
use std::sync::Arc;

/// Text cells a hand-made `split(',')` reader would cut or mangle.
const NOTES: [&str; 3] = ["plain", "north, then east", "said \"hold\",\nthen moved"];

/// Turns each sample chunk into one row: its index and a note.
struct Labeller {
    rows: usize,
}

const LABELLER: BlockSpec =
    BlockSpec::typed::<Labeller>("labeller", "test: one row per chunk with an awkward text field");

block_ports! { inputs enum LabellerIn { Samples = required("samples", ItemKind::Samples, "chunks") } }
block_ports! { outputs enum LabellerOut { Rows = optional("rows", ItemKind::Row, "rows") } }

impl TypedBlock for Labeller {
    type Settings = ();
    type In = LabellerIn;
    type Out = LabellerOut;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        Ok(Labeller { rows: 0 })
    }

    fn process(&mut self, _: LabellerIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        if let Item::Samples(c) = item {
            let note = NOTES[self.rows % NOTES.len()];
            self.rows += 1;
            let fields = vec![
                (Arc::from("chunk"), Cell::Int(c.stamp.index as i64)),
                (Arc::from("note"), Cell::Text(Arc::from(note))),
            ];
            out.push(LabellerOut::Rows, Item::Row(TableRow { stamp: c.stamp, fields: fields.into() }));
        }
        Ok(())
    }
}

#[test]
fn text_fields_with_commas_and_quotes_round_trip() {
    let d = std::env::temp_dir().join(format!("lobeflow-csv-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    let g = d.join("g.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone, set: {samples: 3072, chunk: 1024}}\n  label: {kind: labeller}\n  \
         table: {kind: table_writer, set: {path: notes.csv}}\nwiring:\n  - tone -> label -> table.rows\n",
    )
    .unwrap();
    let mut r = lobeflow::registry();
    r.register(LABELLER);
    let mut s = Session::with_registry(&g, r).unwrap();
    s.out_dir(d.join("out")).threads(1);
    s.run().unwrap();
    let t = Table::read(&d.join("out/notes.csv")).unwrap();
    assert_eq!(t.header, ["chunk", "note"]);
    let notes: Vec<&str> = t.rows.iter().map(|r| r[1].as_str()).collect();
    assert_eq!(notes, NOTES);
    let chunks: Vec<&str> = t.rows.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(chunks, ["0", "1024", "2048"]);
    // The writer's one-line form reads back the same way.
    let line = Table::line(&["a,b", "c\"d", ""]);
    assert_eq!(line, "\"a,b\",\"c\"\"d\",\n");
    assert_eq!(Table::parse(&format!("x,y,z\n{line}")).unwrap().rows, [["a,b", "c\"d", ""]]);
}
