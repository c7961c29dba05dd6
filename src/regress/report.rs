//! Reports of a regression run for machines: JSON with numbers as numbers,
//! and JUnit XML (the common schema CI systems read: a `testsuite` per
//! sample inside `testsuites`, a `testcase` per row).

use super::{Row, Verdict};
use std::fmt::Write;
use std::time::SystemTime;

fn count(rows: &[Row], v: Verdict) -> usize {
    rows.iter().filter(|r| r.verdict == v).count()
}

/// The whole run's verdict: error if any row errored, else fail if any failed.
pub fn overall(rows: &[Row]) -> Verdict {
    if count(rows, Verdict::Error) > 0 {
        Verdict::Error
    } else if count(rows, Verdict::Fail) > 0 {
        Verdict::Fail
    } else {
        Verdict::Pass
    }
}

/// The JSON report: totals, then every row with its numbers as numbers.
pub fn json(rows: &[Row]) -> String {
    let json = serde_json::json!({
        "verdict": overall(rows).name(),
        "passed": count(rows, Verdict::Pass),
        "failed": count(rows, Verdict::Fail),
        "errors": count(rows, Verdict::Error),
        "rows": rows.iter().map(|r| serde_json::json!({
            "sample": r.sample,
            "check": r.check,
            "measure": r.measure,
            "axis": r.axis,
            "flag": r.flag,
            "block": r.block,
            "output": r.output,
            "measured": r.measured,
            "bound": {"min": r.min, "max": r.max},
            "unit": r.unit,
            "verdict": r.verdict.name(),
            "seconds": r.seconds,
            "message": r.message,
        })).collect::<Vec<_>>(),
    });
    serde_json::to_string_pretty(&json).unwrap_or_default() + "\n"
}

/// The JUnit XML report, stamped with `when` and `host`.
pub fn junit(rows: &[Row], when: SystemTime, host: &str) -> String {
    let timestamp = iso8601(when);
    let host = if host.trim().is_empty() { "localhost" } else { host.trim() };
    let mut s = String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<testsuites>\n");
    let mut samples: Vec<&str> = Vec::new();
    for r in rows {
        if !samples.contains(&r.sample.as_str()) {
            samples.push(&r.sample);
        }
    }
    for (id, sample) in samples.iter().enumerate() {
        let mine: Vec<&Row> = rows.iter().filter(|r| r.sample == *sample).collect();
        let of = |v| mine.iter().filter(|r| r.verdict == v).count();
        let _ = writeln!(
            s,
            "  <testsuite name=\"{}\" package=\"lobeflow.regress\" id=\"{id}\" timestamp=\"{timestamp}\" hostname=\"{}\" \
             tests=\"{}\" failures=\"{}\" errors=\"{}\" time=\"{:.3}\">",
            escape(sample),
            escape(host),
            mine.len(),
            of(Verdict::Fail),
            of(Verdict::Error),
            mine.iter().map(|r| r.seconds).sum::<f64>()
        );
        s.push_str("    <properties/>\n");
        for r in &mine {
            testcase(&mut s, r);
        }
        s.push_str("    <system-out/>\n    <system-err/>\n  </testsuite>\n");
    }
    s.push_str("</testsuites>\n");
    s
}

fn testcase(s: &mut String, r: &Row) {
    let _ = write!(
        s,
        "    <testcase name=\"{}\" classname=\"regress.{}\" time=\"{:.3}\"",
        escape(&r.check),
        escape(&r.sample),
        r.seconds
    );
    let (tag, kind, message) = match r.verdict {
        Verdict::Pass => {
            s.push_str("/>\n");
            return;
        }
        Verdict::Fail => {
            let mut m = format!("measured {}, bound {}", r.measured_text(), r.bound_text());
            if let Some(why) = &r.message {
                m.push_str(&format!(": {why}"));
            }
            ("failure", "bound", m)
        }
        Verdict::Error => ("error", "error", r.message.clone().unwrap_or_default()),
    };
    let _ = write!(
        s,
        ">\n      <{tag} message=\"{}\" type=\"{kind}\">{}</{tag}>\n    </testcase>\n",
        escape(&message),
        escape(&message)
    );
}

/// Text for an XML attribute or element: markup escaped, characters XML 1.0
/// cannot carry replaced.
fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\n' => out.push_str("&#10;"),
            '\t' => out.push_str("&#9;"),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
    out
}

/// `YYYY-MM-DDTHH:MM:SS` in UTC (the schema's timestamp has no zone).
pub fn iso8601(when: SystemTime) -> String {
    let secs = when.duration_since(SystemTime::UNIX_EPOCH).map(|d| d.as_secs()).unwrap_or(0);
    let (days, rest) = ((secs / 86_400) as i64, secs % 86_400);
    // Civil date from days since 1970-01-01 (H. Hinnant's days_from_civil inverse).
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!("{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}", rest / 3600, rest / 60 % 60, rest % 60)
}

/// The machine's name for reports ('localhost' when it cannot be read).
pub fn hostname() -> String {
    ["/proc/sys/kernel/hostname", "/etc/hostname"]
        .iter()
        .find_map(|p| std::fs::read_to_string(p).ok().map(|h| h.trim().to_string()).filter(|h| !h.is_empty()))
        .or_else(|| std::env::var("HOSTNAME").ok().filter(|h| !h.trim().is_empty()))
        .unwrap_or_else(|| "localhost".into())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    #[test]
    fn timestamps_are_civil_utc_dates() {
        // 2000-03-01 00:00:00 is 951868800 s after the epoch; 2024-02-29 12:34:56 is 1709210096.
        assert_eq!(iso8601(SystemTime::UNIX_EPOCH + Duration::from_secs(951_868_800)), "2000-03-01T00:00:00");
        assert_eq!(iso8601(SystemTime::UNIX_EPOCH + Duration::from_secs(1_709_210_096)), "2024-02-29T12:34:56");
        assert_eq!(iso8601(SystemTime::UNIX_EPOCH), "1970-01-01T00:00:00");
    }

    #[test]
    fn escaping_keeps_markup_and_control_characters_out() {
        assert_eq!(escape("a<b & \"c\"\n\u{1}"), "a&lt;b &amp; &quot;c&quot;&#10;\u{FFFD}");
    }
}
