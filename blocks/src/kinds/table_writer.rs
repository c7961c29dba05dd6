//! `table_writer`: writes angle estimates, dwell records or free-form rows
//! as a CSV or JSON-lines table, atomically (the file appears only when the
//! whole run succeeds). Numbers have fixed formats, so equal input gives
//! byte-equal files.

use crate::block::{BlockError, BlockSpec, BuildContext, FileStager, Outputs};
use crate::error::{BuildError, ParamError};
use crate::item::{AngleEstimate, Cell, DwellRecord, Item, ItemKind, Stamp, TableRow};
use crate::output_file::OutputFile;
use crate::param::ParamType;
use crate::typed::{Choice, NoPorts, TypedBlock};
use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::io::Write as _;
use std::path::Path;
use std::sync::Arc;

pub const SPEC: BlockSpec = BlockSpec::typed::<TableWriter>(
    "table_writer",
    "Writes angle estimates, dwell records or table rows (wire exactly one input) to a CSV or \
     JSON-lines file with fixed number formats; the file appears only when the run succeeds.",
);

crate::block_ports! {
    inputs pub enum TableIn {
        Estimates = optional("estimates", ItemKind::Estimate, "angle estimates"),
        Dwells = optional("dwells", ItemKind::Dwell, "dwell records"),
        Rows = optional("rows", ItemKind::Row, "free-form rows (columns from the first row)"),
    }
}

crate::block_choice! {
    /// How table lines are written.
    pub enum TableFormat { Csv = "csv", Jsonl = "jsonl" }
}

crate::block_settings! {
    /// Settings of `table_writer`.
    pub struct TableWriterSettings {
        path: String { ty: ParamType::OutputPath, default: None, doc: "table file to write" },
        format: TableFormat {
            ty: ParamType::Choice(TableFormat::WORDS),
            default: Some("csv"),
            doc: "csv with a header line, or one JSON object per line",
        },
    }
}

impl TypedBlock for TableWriter {
    type Settings = TableWriterSettings;
    type In = TableIn;
    type Out = NoPorts;

    fn build(s: TableWriterSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let path = s.path.trim().to_string();
        if path.is_empty() {
            return Err(ParamError::invalid("path", "is empty").into());
        }
        let json = s.format == TableFormat::Jsonl;
        let policy = ctx.files.policy();
        let mut sinks = Vec::new();
        if path != STDOUT_PATH {
            let file = ctx
                .files
                .create(Path::new(&path))
                .map_err(|e| BuildError::failed(format!("cannot create table {path}"), e))?;
            sinks.push(Sink { target: Target::File(file), json });
        }
        if path == STDOUT_PATH || policy.echo_table.as_deref() == Some(ctx.name.as_str()) {
            let json = match policy.echo_format.as_deref() {
                Some(f) => TableFormat::from_word(f) == Some(TableFormat::Jsonl),
                None => json,
            };
            sinks.push(Sink { target: Target::Stdout, json });
        }
        Ok(TableWriter {
            sinks,
            files: ctx.files.clone(),
            path,
            line: LineBuilder { text: String::new(), json, first: true },
            kind: None,
            row_columns: Vec::new(),
            unknown_fields: BTreeSet::new(),
            last_stamp: None,
        })
    }

    fn process(&mut self, port: TableIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let stamp = item.stamp();
        self.last_stamp = Some(stamp);
        self.one_input(port, stamp, &item, out)?;
        match (port, &item) {
            (TableIn::Estimates, Item::Estimate(e)) => self.estimate(e, out),
            (TableIn::Dwells, Item::Dwell(d)) => self.dwell(d, out),
            (TableIn::Rows, Item::Row(r)) => self.row(r, out),
            (TableIn::Estimates | TableIn::Dwells | TableIn::Rows, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if self.kind.is_none() {
            out.warn(
                self.last_stamp.unwrap_or(Stamp::new(0, 1.0)),
                format!("no items arrived; table {} is empty", self.path),
            );
        }
        for sink in self.sinks.drain(..) {
            if let Target::File(file) = sink.target {
                file.finish(&self.files)
                    .map_err(|e| BlockError::new(format!("cannot finish table {}: {e}", self.path)))?;
            }
        }
        Ok(())
    }
}

const ESTIMATE_COLUMNS: &[&str] = &[
    "time_s",
    "axis",
    "error_deg",
    "sigma_deg",
    "snr_db",
    "range_m",
    "flag",
    "ratio_db",
    "tracked_deg",
    "tracked_sigma_deg",
    "absolute_deg",
];
const DWELL_COLUMNS: &[&str] = &["time_s", "lobe", "dwell", "amplitude", "noise_power", "snr_db", "range_m", "used"];

/// A table path that means standard output.
pub const STDOUT_PATH: &str = "-";

/// Where a table's lines go.
enum Target {
    /// Staged, committed with the run's other outputs.
    File(OutputFile),
    /// Printed as they come; `Closed` once the reader went away.
    Stdout,
    Closed,
}

struct Sink {
    target: Target,
    json: bool,
}

/// How a number is written.
#[derive(Clone, Copy)]
enum NumStyle {
    /// Fixed decimals.
    Fixed(usize),
    /// Scientific notation with this many decimals.
    Sci(usize),
    /// The shortest text that reads back to the same f64.
    Shortest,
}

/// Builds one output line (CSV record or JSON object) in a reused buffer.
struct LineBuilder {
    text: String,
    json: bool,
    first: bool,
}

impl LineBuilder {
    fn begin(&mut self) {
        self.text.clear();
        self.first = true;
        if self.json {
            self.text.push('{');
        }
    }

    fn key(&mut self, key: &str) {
        if !self.first {
            self.text.push(',');
        }
        self.first = false;
        if self.json {
            push_json_string(&mut self.text, key);
            self.text.push(':');
        }
    }

    fn empty(&mut self, key: &str) {
        self.key(key);
        if self.json {
            self.text.push_str("null");
        }
    }

    fn num(&mut self, key: &str, v: Option<f64>, style: NumStyle) {
        let Some(v) = v.filter(|v| v.is_finite()) else {
            return self.empty(key);
        };
        self.key(key);
        match style {
            NumStyle::Fixed(d) => crate::decimal::push_fixed(&mut self.text, v, d),
            NumStyle::Sci(d) => crate::decimal::push_sci(&mut self.text, v, d),
            NumStyle::Shortest => {
                let _ = write!(self.text, "{v}");
            }
        }
    }

    fn int(&mut self, key: &str, v: i128) {
        self.key(key);
        crate::decimal::push_int(&mut self.text, v);
    }

    fn text(&mut self, key: &str, v: &str) {
        self.key(key);
        if self.json {
            push_json_string(&mut self.text, v);
        } else {
            push_csv_field(&mut self.text, v);
        }
    }

    fn end(&mut self) {
        if self.json {
            self.text.push('}');
        }
        self.text.push('\n');
    }
}

/// RFC 4180 quoting where needed.
fn push_csv_field(out: &mut String, v: &str) {
    if v.contains([',', '"', '\n', '\r']) {
        out.push('"');
        out.push_str(&v.replace('"', "\"\""));
        out.push('"');
    } else {
        out.push_str(v);
    }
}

fn push_json_string(out: &mut String, v: &str) {
    out.push('"');
    for c in v.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if (c as u32) < 0x20 => {
                let _ = write!(out, "\\u{:04x}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
}

/// Most unknown row field names reported (each once).
const UNKNOWN_FIELDS_REPORTED: usize = 16;

pub struct TableWriter {
    /// The file (until `finish` hands it to the stager) and standard output.
    sinks: Vec<Sink>,
    files: FileStager,
    path: String,
    line: LineBuilder,
    kind: Option<ItemKind>,
    row_columns: Vec<Arc<str>>,
    unknown_fields: BTreeSet<Arc<str>>,
    last_stamp: Option<Stamp>,
}

impl TableWriter {
    /// Build one record with `fill` in each sink's format and write it.
    fn record(&mut self, fill: &dyn Fn(&mut LineBuilder), stamp: Stamp, out: &mut Outputs) -> Result<(), BlockError> {
        let live = self.files.policy().live;
        for i in 0..self.sinks.len() {
            self.line.json = self.sinks[i].json;
            fill(&mut self.line);
            let text = self.line.text.as_bytes();
            match &mut self.sinks[i].target {
                Target::File(file) => {
                    let written = file.write_all(text).and_then(|_| if live { file.flush() } else { Ok(()) });
                    written.map_err(|e| BlockError::new(format!("cannot write table {}: {e}", self.path)))?;
                }
                Target::Stdout => {
                    let mut stdout = std::io::stdout().lock();
                    if let Err(e) = stdout.write_all(text).and_then(|_| stdout.flush()) {
                        // The reader went away (`| head`): stop printing, and
                        // let a live input end as if it had closed.
                        self.sinks[i].target = Target::Closed;
                        self.files.policy().end_input.store(true, std::sync::atomic::Ordering::SeqCst);
                        out.inform(
                            stamp,
                            format!("standard output closed ({e}); rows of table {} no longer printed", self.path),
                        );
                    }
                }
                Target::Closed => {}
            }
        }
        Ok(())
    }

    fn header(&mut self, columns: &[&str], stamp: Stamp, out: &mut Outputs) -> Result<(), BlockError> {
        if self.sinks.iter().all(|s| s.json) {
            return Ok(());
        }
        let fill = |l: &mut LineBuilder| {
            l.text.clear();
            if l.json {
                return;
            }
            for (i, c) in columns.iter().enumerate() {
                if i > 0 {
                    l.text.push(',');
                }
                push_csv_field(&mut l.text, c);
            }
            l.text.push('\n');
        };
        self.record(&fill, stamp, out)
    }

    fn estimate(&mut self, e: &AngleEstimate, out: &mut Outputs) -> Result<(), BlockError> {
        let fill = |l: &mut LineBuilder| {
            l.begin();
            l.num("time_s", Some(e.stamp.seconds()), NumStyle::Fixed(6));
            l.text("axis", &e.axis);
            l.num("error_deg", e.error_deg, NumStyle::Fixed(5));
            l.num("sigma_deg", Some(e.sigma_deg), NumStyle::Fixed(5));
            l.num("snr_db", Some(e.snr_db), NumStyle::Fixed(3));
            l.num("range_m", e.range_m, NumStyle::Fixed(3));
            l.text("flag", e.flag.as_str());
            l.num("ratio_db", Some(e.ratio_db), NumStyle::Fixed(4));
            l.num("tracked_deg", e.tracked_deg, NumStyle::Fixed(5));
            l.num("tracked_sigma_deg", e.tracked_sigma_deg, NumStyle::Fixed(5));
            l.num("absolute_deg", e.absolute_deg, NumStyle::Fixed(5));
            l.end();
        };
        self.record(&fill, e.stamp, out)
    }

    fn dwell(&mut self, d: &DwellRecord, out: &mut Outputs) -> Result<(), BlockError> {
        let fill = |l: &mut LineBuilder| {
            l.begin();
            l.num("time_s", Some(d.mid.seconds()), NumStyle::Fixed(6));
            l.text("lobe", &d.tag.name);
            l.int("dwell", d.tag.dwell.into());
            l.num("amplitude", Some(d.amplitude), NumStyle::Sci(6));
            l.num("noise_power", Some(d.noise_power), NumStyle::Sci(6));
            l.num("snr_db", Some(10.0 * d.snr.log10()), NumStyle::Fixed(3));
            l.num("range_m", d.range_m, NumStyle::Fixed(3));
            l.int("used", d.used.into());
            l.end();
        };
        self.record(&fill, d.mid, out)
    }

    fn row(&mut self, r: &TableRow, out: &mut Outputs) -> Result<(), BlockError> {
        for (name, _) in r.fields.iter() {
            if !self.row_columns.contains(name)
                && self.unknown_fields.len() < UNKNOWN_FIELDS_REPORTED
                && self.unknown_fields.insert(name.clone())
            {
                out.warn(
                    r.stamp,
                    format!("row field '{name}' is not among the table's columns (from the first row); left out"),
                );
            }
        }
        let columns = std::mem::take(&mut self.row_columns);
        let fill = |l: &mut LineBuilder| {
            l.begin();
            for column in &columns {
                match r.cell(column) {
                    Some(Cell::Num(v)) => l.num(column, Some(*v), NumStyle::Shortest),
                    Some(Cell::Int(i)) => l.int(column, (*i).into()),
                    Some(Cell::Text(t)) => l.text(column, t),
                    Some(Cell::Empty) | None => l.empty(column),
                }
            }
            l.end();
        };
        let written = self.record(&fill, r.stamp, out);
        self.row_columns = columns;
        written
    }
}

impl TableWriter {
    /// The first item fixes the table's input and writes its header; an
    /// item on another input is an error.
    fn one_input(&mut self, port: TableIn, stamp: Stamp, item: &Item, out: &mut Outputs) -> Result<(), BlockError> {
        let kind = match port {
            TableIn::Estimates => ItemKind::Estimate,
            TableIn::Dwells => ItemKind::Dwell,
            TableIn::Rows => ItemKind::Row,
        };
        match self.kind {
            Some(k) if k != kind => Err(BlockError::at(
                format!(
                    "table {} received both {} and {}; wire only one input of the table writer",
                    self.path,
                    k.name(),
                    kind.name()
                ),
                stamp.index,
            )),
            Some(_) => Ok(()),
            None => {
                self.kind = Some(kind);
                match (port, item) {
                    (TableIn::Estimates, _) => self.header(ESTIMATE_COLUMNS, stamp, out),
                    (TableIn::Dwells, _) => self.header(DWELL_COLUMNS, stamp, out),
                    (TableIn::Rows, Item::Row(r)) => {
                        for (name, _) in r.fields.iter() {
                            if !self.row_columns.contains(name) {
                                self.row_columns.push(name.clone());
                            }
                        }
                        let columns = self.row_columns.clone();
                        let names: Vec<&str> = columns.iter().map(|c| &**c).collect();
                        self.header(&names, stamp, out)
                    }
                    (TableIn::Rows, _) => Ok(()),
                }
            }
        }
    }
}
