//! Counting the notices of a run, for `notices` checks and batch summaries.

use crate::graph::ResolvedGraph;
use lobeflow_blocks::{Notice, Severity};

/// How many notices one report entry stands for: a switch gate reports the
/// first few of each irregularity and then one line "N more notices of ...
/// not shown" (see `NoticeLimiter::summary`), which stands for N.
fn weight(notice: &Notice) -> u64 {
    notice
        .what
        .split_once(" more notices of ")
        .filter(|(_, rest)| rest.ends_with(" not shown"))
        .and_then(|(n, _)| n.parse().ok())
        .unwrap_or(1)
}

/// Notices of the run from blocks matching `block` (a kind or an instance
/// name; every block when None).
pub fn count(notices: &[Notice], graph: &ResolvedGraph, block: Option<&str>) -> u64 {
    count_at_least(notices, graph, block, Severity::Information)
}

/// Warnings of the run from blocks matching `block`, as [`count`] counts notices.
pub fn count_warnings(notices: &[Notice], graph: &ResolvedGraph, block: Option<&str>) -> u64 {
    count_at_least(notices, graph, block, Severity::Warning)
}

fn count_at_least(notices: &[Notice], graph: &ResolvedGraph, block: Option<&str>, least: Severity) -> u64 {
    let matches = |n: &Notice| {
        n.severity >= least
            && block.is_none_or(|want| {
                let name: &str = &n.block;
                name == want || graph.blocks.iter().any(|b| b.name == name && b.spec.kind == want)
            })
    };
    notices.iter().filter(|n| matches(n)).map(weight).sum()
}

#[cfg(test)]
mod tests {
    use super::*;
    use lobeflow_blocks::Stamp;
    use lobeflow_blocks::dsp::switch_sync::{Irregularity, NoticeLimiter};
    use std::sync::Arc;

    #[test]
    fn a_held_back_summary_counts_for_the_notices_it_stands_for() {
        let mut limiter = NoticeLimiter::default();
        let shown = (0..30).filter(|_| limiter.admit(Irregularity::DwellLength)).count() as u64;
        let lines = limiter.summary();
        assert_eq!(lines.len(), 1);
        let notice = |what: &str| Notice::new(Stamp::new(0, 1.0), Arc::from("gate"), what);
        assert_eq!(weight(&notice(&lines[0])) + shown, 30);
        assert_eq!(weight(&notice("3 dwell(s) found no partner dwell and gave no estimate")), 1);
    }
}
