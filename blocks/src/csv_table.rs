//! The small CSV tables blocks take as settings (antenna patterns, pointing
//! telemetry, filter taps), read through the `csv` crate so that quoted
//! fields, as `table_writer` and spreadsheet or Python tools write them,
//! read back. Lines starting with `#` and blank lines are skipped; every
//! row keeps its line number for messages.

use std::fmt;

/// One row of a table: its fields, trimmed, and the line it starts on.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CsvRow {
    /// 1-based line number in the file.
    pub line: u64,
    pub fields: Vec<String>,
}

/// A table that could not be read, or a row a reader refused: the file,
/// the line and what was wrong.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CsvError {
    pub file: String,
    /// 1-based line, when the problem has one.
    pub line: Option<u64>,
    pub problem: String,
}

impl CsvError {
    /// A problem with the row at `line` of `file`.
    pub fn at(file: &str, line: u64, problem: impl Into<String>) -> CsvError {
        CsvError { file: file.to_string(), line: Some(line), problem: problem.into() }
    }

    /// A problem with the table as a whole.
    pub fn whole(file: &str, problem: impl Into<String>) -> CsvError {
        CsvError { file: file.to_string(), line: None, problem: problem.into() }
    }
}

impl fmt::Display for CsvError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (self.file.is_empty(), self.line) {
            (false, Some(line)) => write!(f, "{} line {line}: {}", self.file, self.problem),
            (false, None) => write!(f, "{}: {}", self.file, self.problem),
            // The caller names the file.
            (true, Some(line)) => write!(f, "line {line}: {}", self.problem),
            (true, None) => write!(f, "{}", self.problem),
        }
    }
}

impl std::error::Error for CsvError {}

/// Readers of settings files report text; the error reads the same.
impl From<CsvError> for String {
    fn from(e: CsvError) -> String {
        e.to_string()
    }
}

/// The rows of CSV `text` from `file` (named in errors; empty when the
/// caller names it). Rows may have different field counts; the caller
/// checks its own shape.
pub fn read_rows(text: &str, file: &str) -> Result<Vec<CsvRow>, CsvError> {
    // Comment lines become blank lines here rather than through the csv
    // reader's own comment option, whose positions point at the comment
    // before a row instead of at the row.
    let uncommented: String =
        text.lines().flat_map(|l| [if l.trim_start().starts_with('#') { "" } else { l }, "\n"]).collect();
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(uncommented.as_bytes());
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| CsvError {
            file: file.to_string(),
            line: e.position().map(|p| p.line()),
            problem: e.to_string(),
        })?;
        let line = record.position().map_or(0, |p| row_line(&uncommented, p));
        let fields: Vec<String> = record.iter().map(str::to_string).collect();
        // Whitespace-only lines.
        if fields.iter().all(String::is_empty) {
            continue;
        }
        rows.push(CsvRow { line, fields });
    }
    Ok(rows)
}

/// The line a row starts on. The csv reader gives the position where it
/// began looking, before the blank lines it skips; count those too.
fn row_line(text: &str, p: &csv::Position) -> u64 {
    let skipped = text.as_bytes().get(p.byte() as usize..).unwrap_or_default();
    let blank = skipped.iter().take_while(|&&b| b == b'\n' || b == b'\r').filter(|&&b| b == b'\n').count();
    p.line() + blank as u64
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoted_fields_comments_and_lines() {
        let text = "# made by hand\n\"time_s\",\"az, deg\"\n\n  # indented note\n0,\"1.5\"\n\"2\",\"say \"\"hi\"\"\"\n";
        let rows = read_rows(text, "t.csv").unwrap();
        let got: Vec<(u64, Vec<&str>)> =
            rows.iter().map(|r| (r.line, r.fields.iter().map(String::as_str).collect())).collect();
        assert_eq!(
            got,
            [(2, vec!["time_s", "az, deg"]), (5, vec!["0", "1.5"]), (6, vec!["2", "say \"hi\""])],
            "{rows:?}"
        );
    }

    #[test]
    fn lines_count_across_windows_line_ends() {
        let rows = read_rows("a,b\r\n\r\n# note\r\n1,2\r\n", "t.csv").unwrap();
        assert_eq!(rows.iter().map(|r| r.line).collect::<Vec<_>>(), [1, 4]);
    }

    #[test]
    fn errors_name_file_and_line() {
        assert_eq!(CsvError::at("t.csv", 4, "expected a number").to_string(), "t.csv line 4: expected a number");
        assert_eq!(CsvError::whole("t.csv", "no rows").to_string(), "t.csv: no rows");
    }
}
