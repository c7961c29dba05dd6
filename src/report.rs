//! `report.html`: one page per run, written with the run's other outputs
//! (staged, committed all or nothing). It shows the graph, every setting's
//! value and where it came from, the notices, a per-axis summary of the
//! final angle estimates and every picture, linked by relative path. The
//! page is self-contained (inline style, no scripts) and every string that
//! comes from a file (titles, names, notices, paths) is escaped.

use crate::capture::Format;
use crate::capture::sigmf::{meta_path_for, read_meta};
use crate::capture::source::open_options;
use crate::graph::ResolvedGraph;
use crate::regress::report::overall;
use crate::regress::{Row, Verdict, sample_dir};
use crate::runtime::Ending;
use lobeflow_blocks::summary::{AxisSummary, EstimateSummary};
use lobeflow_blocks::{BlockError, BuildContext, BuildError, Item, ItemKind, NoPorts, Notice, Outputs, TypedBlock};
use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

/// File name of the page inside the output folder.
pub const PAGE_NAME: &str = "report.html";

/// Notices listed on the page; the rest are counted.
const NOTICES_LISTED: usize = 500;

/// Text made safe to place in HTML element content and quoted attributes.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// A relative link made safe for an attribute: each path segment
/// percent-encoded, so no name can leave the attribute or form a scheme.
pub fn link(path: &Path) -> String {
    let mut out = String::new();
    for (i, part) in path.iter().enumerate() {
        if i > 0 {
            out.push('/');
        }
        for b in part.to_string_lossy().bytes() {
            if b.is_ascii_alphanumeric() || b"-_.~".contains(&b) {
                out.push(b as char);
            } else {
                let _ = write!(out, "%{b:02X}");
            }
        }
    }
    out
}

/// Collects the estimates of the graph's final estimate outputs.
pub struct SummaryTap {
    pub summary: Arc<Mutex<EstimateSummary>>,
}

lobeflow_blocks::block_ports! {
    /// The tap's one input, wired by the run to each final estimate output.
    inputs pub enum SummaryTapIn { Estimates = required("estimates", ItemKind::Estimate, "final angle estimates") }
}

impl TypedBlock for SummaryTap {
    type Settings = ();
    type In = SummaryTapIn;
    type Out = NoPorts;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        crate::runtime::attached_by_run()
    }

    fn process(&mut self, port: SummaryTapIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let SummaryTapIn::Estimates = port;
        if let Item::Estimate(e) = item {
            self.summary.lock().unwrap_or_else(|e| e.into_inner()).add(&e);
        }
        Ok(())
    }
}

/// The estimate outputs whose estimates go on to no block that makes
/// estimates of its own (the tracker's, not the discriminator's it smooths).
pub fn final_estimate_ports(graph: &ResolvedGraph) -> Vec<(usize, usize)> {
    let makes_estimates = |b: usize| graph.blocks[b].spec.outputs.iter().any(|o| o.kind == ItemKind::Estimate);
    let mut ports = Vec::new();
    for (bi, b) in graph.blocks.iter().enumerate() {
        for (pi, o) in b.spec.outputs.iter().enumerate() {
            let refined = graph.wires.iter().any(|w| w.from == (bi, pi) && makes_estimates(w.to.0));
            if o.kind == ItemKind::Estimate && !refined {
                ports.push((bi, pi));
            }
        }
    }
    ports
}

/// What the page shows of a finished run.
pub struct RunFacts<'a> {
    pub graph: &'a ResolvedGraph,
    pub notices: &'a [Notice],
    pub remarks: &'a [String],
    pub ending: Ending,
    pub summary: &'a EstimateSummary,
    /// Every output of the run (final paths), the page's own excluded.
    pub files: &'a [PathBuf],
    pub out_dir: &'a Path,
}

const STYLE: &str = "body{font-family:sans-serif;margin:2em auto;max-width:1250px;color:#262a34;background:#ffffff}\
table{border-collapse:collapse;margin:0.5em 0}td,th{border:1px solid #ded8cc;padding:3px 8px;text-align:left}\
th{background:#eee9dc}td.n{text-align:right;font-variant-numeric:tabular-nums}img{max-width:100%;border:1px solid #ded8cc}\
.fail{color:#c43a28;font-weight:bold}.pass{color:#1a6870}pre{white-space:pre-wrap}";

/// The page's opening: doctype, title, style.
pub fn page_head(title: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src 'self' data: file:; style-src 'unsafe-inline'\">\
         <title>{}</title><style>{STYLE}</style></head><body>\n",
        escape(title)
    )
}

/// The run's page.
pub fn run_page(f: &RunFacts) -> String {
    let g = f.graph;
    let title = if g.title.is_empty() { "lobeflow run".to_string() } else { g.title.clone() };
    let mut s = page_head(&title);
    let _ = writeln!(s, "<h1>{}</h1>", escape(&title));
    let _ = writeln!(s, "<p>graph <code>{}</code></p>", escape(&g.path.display().to_string()));
    if !g.about.is_empty() {
        let _ = writeln!(s, "<p>{}</p>", escape(&g.about));
    }
    let ending = match f.ending {
        Ending::Complete => "the capture was read to its end".to_string(),
        Ending::InputClosed { at_sample, .. } => format!("the live input ended at sample {at_sample}"),
        Ending::CutShort { at_sample, .. } => format!("the run was cut short at sample {at_sample}"),
    };
    let _ = writeln!(s, "<p>{}</p>", escape(&ending));
    s.push_str(&capture_section(g));
    s.push_str(&summary_section(f.summary));
    s.push_str(&notices_section(f.notices, f.remarks));
    s.push_str(&pictures_section(f.files, f.out_dir, ""));
    s.push_str(&settings_section(g));
    s.push_str(&files_section(f.files, f.out_dir, ""));
    s.push_str("</body></html>\n");
    s
}

/// Each capture the graph reads: its file and, for a SigMF recording, the
/// recording's description and the annotation labels it carries (how many
/// of each), as the metadata file says them.
fn capture_section(g: &ResolvedGraph) -> String {
    let mut s = String::from("<h2>Capture</h2>\n");
    for b in g.blocks.iter().filter(|b| b.spec.kind == "capture_reader") {
        let Ok(path) = b.params.text("path") else { continue };
        let _ = writeln!(s, "<p><code>{}</code> read by {}</p>", escape(path), escape(&b.name));
        let sigmf = match open_options(&b.params).map(|o| o.format) {
            Ok(Format::Sigmf) => true,
            Ok(Format::Auto) => path.ends_with(".sigmf-meta") || path.ends_with(".sigmf-data"),
            _ => false,
        };
        if !sigmf {
            continue;
        }
        let meta = match read_meta(&meta_path_for(path)) {
            Ok(m) => m,
            Err(e) => {
                let _ = writeln!(s, "<p class=fail>{}</p>", escape(&e.to_string()));
                continue;
            }
        };
        if let Some(d) = meta.global.description.as_deref().filter(|d| !d.trim().is_empty()) {
            let _ = writeln!(s, "<p>description: {}</p>", escape(d));
        }
        let mut labels: Vec<(&str, usize)> = Vec::new();
        for label in meta.annotations.iter().filter_map(|a| a.label.as_deref()) {
            match labels.iter_mut().find(|(l, _)| *l == label) {
                Some((_, n)) => *n += 1,
                None => labels.push((label, 1)),
            }
        }
        if labels.is_empty() {
            s.push_str("<p>no annotation labels</p>\n");
            continue;
        }
        s.push_str("<table><tr><th>annotation label</th><th>annotations</th></tr>\n");
        for (label, n) in labels {
            let _ = writeln!(s, "<tr><td>{}</td><td class=n>{n}</td></tr>", escape(label));
        }
        s.push_str("</table>\n");
    }
    s
}

/// Per axis: count, mean, RMS, standard deviation, median σ and the flags.
pub fn summary_section(summary: &EstimateSummary) -> String {
    let mut s = String::from("<h2>Angle estimates</h2>\n");
    if summary.axes.is_empty() {
        s.push_str("<p>no angle estimates</p>\n");
        return s;
    }
    s.push_str(
        "<table><tr><th>axis</th><th>estimates</th><th>ok</th><th>mean (deg)</th><th>RMS (deg)</th>\
         <th>std dev (deg)</th><th>median σ (deg)</th><th>out of range</th><th>no signal</th><th>outliers</th>\
         <th>echo leading edge (m, mean)</th></tr>\n",
    );
    for a in &summary.axes {
        let _ = writeln!(
            s,
            "<tr><td>{}</td><td class=n>{}</td><td class=n>{}</td><td class=n>{}</td><td class=n>{}</td>\
             <td class=n>{}</td><td class=n>{}</td><td class=n>{}</td><td class=n>{}</td><td class=n>{}</td>\
             <td class=n>{}</td></tr>",
            escape(&a.axis),
            a.count(),
            a.ok,
            AxisSummary::figure(a.mean()),
            AxisSummary::figure(a.rms()),
            AxisSummary::figure(a.std_dev()),
            AxisSummary::figure(a.median_sigma()),
            a.out_of_range,
            a.no_signal,
            a.outliers,
            a.mean_range_m().map_or_else(|| "–".to_string(), |r| format!("{r:.1}"))
        );
    }
    s.push_str("</table>\n<p>mean, RMS and standard deviation over the estimates flagged ok (angle off boresight); median σ: the median of their predicted spread; range: the echo's leading edge (its first sample after the transmit instant, the tables' range_m).</p>\n");
    s
}

fn notices_section(notices: &[Notice], remarks: &[String]) -> String {
    let mut s = format!("<h2>Notices and warnings ({})</h2>\n", notices.len());
    for r in remarks {
        let _ = writeln!(s, "<p class=fail>{}</p>", escape(r));
    }
    if notices.is_empty() {
        s.push_str("<p>no notices</p>\n");
        return s;
    }
    s.push_str("<table><tr><th>block</th><th>sample</th><th>time (s)</th><th>what</th></tr>\n");
    for n in notices.iter().take(NOTICES_LISTED) {
        let _ = writeln!(
            s,
            "<tr><td>{}</td><td class=n>{}</td><td class=n>{:.6}</td><td>{}</td></tr>",
            escape(&n.block),
            n.stamp.index,
            n.stamp.seconds(),
            escape(&n.what)
        );
    }
    s.push_str("</table>\n");
    if notices.len() > NOTICES_LISTED {
        let _ = writeln!(s, "<p>… and {} more</p>", notices.len() - NOTICES_LISTED);
    }
    s
}

/// The pictures among `files` a page shows: each SVG, and a PNG where no
/// SVG of the same name was written (a picture block set to `formats: png`).
fn shown_pictures(files: &[PathBuf]) -> Vec<&PathBuf> {
    let is = |p: &Path, ext: &str| p.extension().is_some_and(|e| e == ext);
    files
        .iter()
        .filter(|p| {
            is(p, "svg")
                || (is(p, "png") && !files.iter().any(|q| is(q, "svg") && q.with_extension("") == p.with_extension("")))
        })
        .collect()
}

/// Every picture among `files` ([`shown_pictures`]), linked relative to
/// `base`, under `prefix` (a sample's folder on the regression page).
pub fn pictures_section(files: &[PathBuf], base: &Path, prefix: &str) -> String {
    let mut s = String::from("<h2>Pictures</h2>\n");
    let mut pictures = shown_pictures(files);
    // By name: blocks finish in whatever order the threads ran them.
    pictures.sort();
    if pictures.is_empty() {
        s.push_str("<p>no pictures</p>\n");
    }
    for p in pictures {
        let rel = Path::new(prefix).join(p.strip_prefix(base).unwrap_or(p));
        let name = escape(&rel.display().to_string());
        let _ =
            writeln!(s, "<figure><img src=\"{}\" alt=\"{name}\"><figcaption>{name}</figcaption></figure>", link(&rel));
    }
    s
}

fn settings_section(g: &ResolvedGraph) -> String {
    let mut s = String::from(
        "<h2>Settings</h2>\n<table><tr><th>setting</th><th>value</th><th>unit</th><th>from</th><th>meaning</th></tr>\n",
    );
    for k in &g.settings {
        let _ = writeln!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&k.name),
            escape(&k.value.to_string()),
            escape(k.unit.as_deref().unwrap_or("")),
            escape(&k.origin.to_string()),
            escape(&k.doc)
        );
    }
    s.push_str("</table>\n<h2>Blocks</h2>\n<table><tr><th>block</th><th>kind</th></tr>\n");
    for b in &g.blocks {
        let _ = writeln!(s, "<tr><td>{}</td><td>{}</td></tr>", escape(&b.name), escape(b.spec.kind));
    }
    s.push_str("</table>\n<h2>Wiring</h2>\n<pre>");
    for w in &g.wires {
        let (f, t) = (&g.blocks[w.from.0], &g.blocks[w.to.0]);
        let line = format!("{}.{} -> {}.{}", f.name, f.spec.outputs[w.from.1].name, t.name, t.spec.inputs[w.to.1].name);
        let _ = writeln!(s, "{}", escape(&line));
    }
    s.push_str("</pre>\n");
    s
}

/// The run's files, linked.
pub fn files_section(files: &[PathBuf], base: &Path, prefix: &str) -> String {
    format!("<h2>Files</h2>\n{}", link_list(files, base, prefix))
}

/// `files` as a list of links relative to `base`, under `prefix`.
fn link_list(files: &[PathBuf], base: &Path, prefix: &str) -> String {
    let mut s = String::from("<ul>\n");
    let mut files: Vec<&PathBuf> = files.iter().collect();
    files.sort();
    for p in files {
        let rel = Path::new(prefix).join(p.strip_prefix(base).unwrap_or(p));
        let _ = writeln!(s, "<li><a href=\"{}\">{}</a></li>", link(&rel), escape(&rel.display().to_string()));
    }
    s.push_str("</ul>\n");
    s
}

/// How bad a verdict is, for putting failures first.
fn severity(v: Verdict) -> u8 {
    match v {
        Verdict::Error => 0,
        Verdict::Fail => 1,
        Verdict::Pass => 2,
    }
}

/// `regress`'s page: totals, then a section per sample (errored samples
/// first, then failed, then passed; manifest order within each), each with
/// its check rows and links to the sample's run page and pictures in `out`.
pub fn regress_page(rows: &[Row], out: &Path) -> String {
    let verdict = overall(rows);
    let mut s = page_head("lobeflow regression");
    let n = |v| rows.iter().filter(|r| r.verdict == v).count();
    let _ = writeln!(
        s,
        "<h1>lobeflow regression: <span class={}>{}</span></h1>\n<p>{} rows, {} passed, {} failed, {} errors</p>",
        if verdict == Verdict::Pass { "pass" } else { "fail" },
        verdict.name(),
        rows.len(),
        n(Verdict::Pass),
        n(Verdict::Fail),
        n(Verdict::Error)
    );
    let mut samples: Vec<(&str, Vec<&Row>)> = Vec::new();
    for r in rows {
        match samples.iter_mut().find(|(name, _)| *name == r.sample) {
            Some((_, mine)) => mine.push(r),
            None => samples.push((&r.sample, vec![r])),
        }
    }
    samples.sort_by_key(|(_, mine)| mine.iter().map(|r| severity(r.verdict)).min().unwrap_or(2));
    for (name, mine) in samples {
        s.push_str(&sample_section(name, &mine, out));
    }
    s.push_str("</body></html>\n");
    s
}

fn sample_section(name: &str, rows: &[&Row], out: &Path) -> String {
    let worst = rows.iter().map(|r| r.verdict).min_by_key(|v| severity(*v)).unwrap_or(Verdict::Pass);
    let class = if worst == Verdict::Pass { "pass" } else { "fail" };
    let mut s = format!("<section>\n<h2>{} <span class={class}>{}</span></h2>\n", escape(name), worst.name());
    s.push_str(
        "<table><tr><th>check</th><th>measure</th><th>axis</th><th>measured</th><th>bound</th><th>verdict</th>\
         <th>time (s)</th><th>message</th></tr>\n",
    );
    for r in rows {
        let class = if r.verdict == Verdict::Pass { "pass" } else { "fail" };
        let _ = writeln!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td class=n>{}</td><td>{}</td><td class={class}>{}</td>\
             <td class=n>{:.2}</td><td>{}</td></tr>",
            escape(&r.check),
            escape(&r.measure),
            escape(r.axis.as_deref().unwrap_or("")),
            escape(&r.measured_text()),
            escape(&r.bound_text()),
            r.verdict.name(),
            r.seconds,
            escape(r.message.as_deref().unwrap_or(""))
        );
    }
    s.push_str("</table>\n");
    // Only a plain sample name has a folder of its own (an errored manifest may not).
    if let Ok(dir) = sample_dir(out, name) {
        let mut files: Vec<PathBuf> =
            std::fs::read_dir(&dir).map(|d| d.filter_map(|e| e.ok().map(|e| e.path())).collect()).unwrap_or_default();
        let pictures: Vec<PathBuf> = shown_pictures(&files).into_iter().cloned().collect();
        files.retain(|p| p.file_name().is_some_and(|n| n == PAGE_NAME) || pictures.contains(p));
        files.sort();
        if !files.is_empty() {
            s.push_str("<p>run page and pictures</p>\n");
            s.push_str(&link_list(&files, &dir, name));
        }
    }
    s.push_str("</section>\n");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markup_is_escaped_and_links_are_encoded() {
        let hostile = "<script>alert(1)</script>\"' onload=x &amp;";
        let e = escape(hostile);
        assert!(!e.contains('<') && !e.contains('>') && !e.contains('"') && !e.contains('\''));
        assert_eq!(e, "&lt;script&gt;alert(1)&lt;/script&gt;&quot;&#39; onload=x &amp;amp;");
        let l = link(Path::new("a b/\"><script>.svg"));
        assert_eq!(l, "a%20b/%22%3E%3Cscript%3E.svg");
        assert!(link(Path::new("javascript:alert(1)")).starts_with("javascript%3A"));
    }
}
