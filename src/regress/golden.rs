//! Golden tables: how a run's table differs from its golden copy, and what
//! moved when `--update` rewrites one.

use super::Table;
use std::collections::BTreeMap;
use std::fmt::Write;

/// How a produced table differs from its golden copy. Rows are matched by
/// their key (`time_s` and `axis` when the table has them, else the first
/// column, with repeated keys taken in order), so an inserted row shows as
/// one row added rather than every later row changed.
#[derive(Debug, Default)]
pub struct GoldenDiff {
    /// Set when the columns differ: `produced` vs `golden` headers.
    pub columns: Option<(String, String)>,
    pub added: usize,
    pub removed: usize,
    /// Matched rows with a numeric change beyond the tolerance or a text change.
    pub changed_rows: usize,
    /// Per column: the largest numeric |change| of matched rows.
    pub largest: BTreeMap<String, f64>,
    /// Per column: matched cells whose text changed (non-numeric cells).
    pub text_changes: BTreeMap<String, usize>,
}

impl GoldenDiff {
    pub fn between(produced: &Table, golden: &Table, tolerance: f64) -> GoldenDiff {
        let mut d = GoldenDiff::default();
        if produced.header != golden.header {
            d.columns = Some((produced.header.join(","), golden.header.join(",")));
            return d;
        }
        let (new, old) = (keyed(produced), keyed(golden));
        d.added = new.keys().filter(|k| !old.contains_key(*k)).count();
        d.removed = old.keys().filter(|k| !new.contains_key(*k)).count();
        for (k, a) in &new {
            let Some(b) = old.get(k) else { continue };
            let mut row_changed = false;
            for (i, name) in produced.header.iter().enumerate() {
                let (ca, cb) = (a.get(i).map(String::as_str).unwrap_or(""), b.get(i).map(String::as_str).unwrap_or(""));
                match (super::num(ca), super::num(cb)) {
                    (Some(x), Some(y)) => {
                        let change = (x - y).abs();
                        let worst = d.largest.entry(name.clone()).or_default();
                        *worst = worst.max(change);
                        row_changed |= change > tolerance;
                    }
                    _ if ca != cb => {
                        *d.text_changes.entry(name.clone()).or_default() += 1;
                        row_changed = true;
                    }
                    _ => {}
                }
            }
            d.changed_rows += usize::from(row_changed);
        }
        d
    }

    /// True when the tables agree within the tolerance.
    pub fn matches(&self) -> bool {
        self.columns.is_none() && self.added == 0 && self.removed == 0 && self.changed_rows == 0
    }

    /// Largest numeric change in any column (None when the columns differ).
    pub fn largest_change(&self) -> Option<f64> {
        self.columns.is_none().then(|| self.largest.values().copied().fold(0.0, f64::max))
    }

    /// One line: what differs.
    pub fn summary(&self) -> String {
        if let Some((a, b)) = &self.columns {
            return format!("columns differ: {a} vs golden {b}");
        }
        let mut parts = Vec::new();
        if self.changed_rows > 0 {
            parts.push(format!("{} rows differ", self.changed_rows));
        }
        if self.added > 0 {
            parts.push(format!("{} rows added", self.added));
        }
        if self.removed > 0 {
            parts.push(format!("{} rows removed", self.removed));
        }
        if parts.is_empty() {
            parts.push("matches".into());
        }
        parts.join(", ")
    }

    /// Several lines: rows added/removed and the largest change per column.
    pub fn moved(&self) -> String {
        let mut s = String::new();
        if let Some((a, b)) = &self.columns {
            let _ = writeln!(s, "  columns were {b}, now {a}");
            return s;
        }
        let _ = writeln!(s, "  rows added {}, removed {}, changed {}", self.added, self.removed, self.changed_rows);
        for (col, worst) in self.largest.iter().filter(|(_, w)| **w > 0.0) {
            let _ = writeln!(s, "  {col}: largest change {worst:.6e}");
        }
        for (col, n) in &self.text_changes {
            let _ = writeln!(s, "  {col}: {n} cells changed");
        }
        s
    }
}

type Keyed<'t> = BTreeMap<(Vec<&'t str>, usize), &'t Vec<String>>;

/// Rows by key, the n-th row of a repeated key as (key, n).
fn keyed(t: &Table) -> Keyed<'_> {
    let key_cols = key_columns(&t.header);
    let mut seen: BTreeMap<Vec<&str>, usize> = BTreeMap::new();
    let mut out = BTreeMap::new();
    for row in &t.rows {
        let key: Vec<&str> = key_cols.iter().map(|&c| row.get(c).map(String::as_str).unwrap_or("")).collect();
        let nth = seen.entry(key.clone()).or_default();
        out.insert((key, *nth), row);
        *nth += 1;
    }
    out
}

/// Columns that identify a row: `time_s` and `axis` when present, else the first.
fn key_columns(header: &[String]) -> Vec<usize> {
    let named: Vec<usize> = ["time_s", "axis"].iter().filter_map(|k| header.iter().position(|h| h == k)).collect();
    if named.is_empty() { vec![0] } else { named }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(text: &str) -> Table {
        Table::parse(text).unwrap()
    }

    #[test]
    fn an_inserted_row_is_one_row_added_and_changes_are_per_column() {
        let golden = table("time_s,axis,error_deg,flag\n0.1,az,0.50,ok\n0.2,az,0.40,ok\n0.3,az,0.30,ok");
        let produced =
            table("time_s,axis,error_deg,flag\n0.1,az,0.50,ok\n0.15,az,9,ok\n0.2,az,0.41,outlier\n0.3,az,0.30,ok");
        let d = GoldenDiff::between(&produced, &golden, 1e-3);
        assert_eq!((d.added, d.removed, d.changed_rows), (1, 0, 1));
        assert!((d.largest["error_deg"] - 0.01).abs() < 1e-12, "{d:?}");
        assert_eq!(d.text_changes["flag"], 1);
        assert!(!d.matches());
        assert!(d.moved().contains("rows added 1, removed 0, changed 1"), "{}", d.moved());
        let within = GoldenDiff::between(&golden, &golden, 0.0);
        assert!(within.matches() && within.largest_change() == Some(0.0));
    }
}
