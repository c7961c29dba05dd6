//! The list of a batch: output folder names, the shard a job runs, and the
//! plan file that ties a batch folder to its list and shard.

use crate::error::Error;
use std::path::Path;

/// Share `index` of `count` (counted from 0): captures `i` with
/// `i % count == index`, so shards stay balanced on a list sorted by date or size.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl Shard {
    pub const WHOLE: Shard = Shard { index: 0, count: 1 };

    /// `K/N`, with K from 0 to N-1 (a job array's index as it comes).
    pub fn parse(text: &str) -> Result<Shard, Error> {
        let bad = |why: &str| Error::Usage(format!("--shard {text}: {why} (K/N, K from 0 to N-1, e.g. 0/4 .. 3/4)"));
        let (k, n) = text.split_once('/').ok_or_else(|| bad("no '/'"))?;
        let index: usize = k.trim().parse().map_err(|_| bad("K is not a whole number"))?;
        let count: usize = n.trim().parse().map_err(|_| bad("N is not a whole number"))?;
        if count == 0 {
            return Err(bad("N must be at least 1"));
        }
        if index >= count {
            return Err(bad("K must be below N"));
        }
        Ok(Shard { index, count })
    }

    pub fn owns(&self, i: usize) -> bool {
        i % self.count == self.index
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

/// Captures of a list file: one path per line; blank lines and lines
/// starting with `#` are skipped.
pub fn read_list(path: &Path) -> Result<Vec<String>, Error> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("cannot read capture list {}: {e}", path.display())))?;
    Ok(text.lines().map(str::trim).filter(|l| !l.is_empty() && !l.starts_with('#')).map(String::from).collect())
}

/// A batch's list, with each capture's output folder name, and the shard.
#[derive(Debug, PartialEq)]
pub struct Plan {
    pub graph: String,
    pub captures: Vec<String>,
    pub names: Vec<String>,
    pub shard: Shard,
}

impl Plan {
    pub fn new(graph: &Path, captures: &[String], shard: Shard) -> Result<Plan, Error> {
        if captures.is_empty() {
            return Err(Error::Usage("no captures: name them after the graph or give --list FILE".into()));
        }
        if let Some(i) = (1..captures.len()).find(|&i| captures[..i].contains(&captures[i])) {
            return Err(Error::Usage(format!(
                "capture {} is listed twice (entries {} and {})",
                captures[i],
                captures[..i].iter().position(|c| *c == captures[i]).unwrap_or(0) + 1,
                i + 1
            )));
        }
        Ok(Plan {
            graph: graph.to_string_lossy().into_owned(),
            captures: captures.to_vec(),
            names: output_names(captures),
            shard,
        })
    }

    /// Indices of the captures this shard runs, in list order.
    pub fn mine(&self) -> Vec<usize> {
        (0..self.captures.len()).filter(|&i| self.shard.owns(i)).collect()
    }

    pub fn to_json(&self) -> String {
        let v = serde_json::json!({
            "graph": self.graph,
            "captures": self.captures,
            "shard": self.shard.to_string(),
        });
        serde_json::to_string_pretty(&v).unwrap_or_default() + "\n"
    }

    /// Read the plan file of a batch folder.
    pub fn load(dir: &Path) -> Result<Plan, Error> {
        let path = dir.join(super::PLAN_FILE);
        let text = std::fs::read_to_string(&path).map_err(|e| {
            Error::Input(format!("{} is not a batch folder: cannot read {}: {e}", dir.display(), path.display()))
        })?;
        let bad = |why: &str| Error::Input(format!("{}: {why}", path.display()));
        let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| bad(&e.to_string()))?;
        let captures: Vec<String> = v["captures"]
            .as_array()
            .ok_or_else(|| bad("no captures list"))?
            .iter()
            .map(|c| c.as_str().map(String::from).ok_or_else(|| bad("a capture is not text")))
            .collect::<Result<_, _>>()?;
        let shard =
            Shard::parse(v["shard"].as_str().ok_or_else(|| bad("no shard"))?).map_err(|e| bad(&e.to_string()))?;
        let graph = v["graph"].as_str().ok_or_else(|| bad("no graph"))?;
        Plan::new(Path::new(graph), &captures, shard).map_err(|e| bad(&e.to_string()))
    }

    /// Record this plan in `dir`, or check that `dir` already holds it: a
    /// folder holds one list and one shard, so shards never mix summaries.
    pub fn claim(&self, dir: &Path) -> Result<(), Error> {
        if dir.join(super::PLAN_FILE).exists() {
            let held = Plan::load(dir)?;
            if held.captures != self.captures || held.shard != self.shard {
                return Err(Error::Usage(format!(
                    "{} holds shard {} of a list of {} captures; this run is shard {} of {}: \
                     give each shard (and each list) its own --out",
                    dir.display(),
                    held.shard,
                    held.captures.len(),
                    self.shard,
                    self.captures.len()
                )));
            }
            return Ok(());
        }
        crate::commands::write_output(&dir.join(super::PLAN_FILE), &self.to_json())
    }
}

/// Output folder names: each capture's file name without its extension
/// (`x.sigmf-meta` → `x`), made a plain name, repeats numbered `-2`, `-3`
/// in list order (the whole list decides, so every shard agrees).
pub fn output_names(captures: &[String]) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for c in captures {
        let file = Path::new(c).file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        let stem = match file.rsplit_once('.') {
            Some((stem, _)) if !stem.is_empty() => stem.to_string(),
            _ => file,
        };
        let base = if crate::regress::manifest::is_plain_name(&stem) && !stem.starts_with('.') {
            stem
        } else {
            format!("capture{}", stem.replace(['/', '\\', '\0'], "_"))
        };
        let mut name = base.clone();
        let mut n = 1;
        while names.contains(&name) {
            n += 1;
            name = format!("{base}-{n}");
        }
        names.push(name);
    }
    names
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_split_the_list_round_robin_and_cover_it_once() {
        let shards: Vec<Shard> = (0..4).map(|k| Shard::parse(&format!("{k}/4")).unwrap()).collect();
        for i in 0..23 {
            assert_eq!(shards.iter().filter(|s| s.owns(i)).count(), 1);
        }
        assert!(shards[1].owns(5) && !shards[1].owns(6));
        for bad in ["4/4", "1/0", "x/2", "3", "-1/2"] {
            assert!(matches!(Shard::parse(bad), Err(Error::Usage(_))), "{bad}");
        }
    }

    #[test]
    fn names_are_plain_and_unique_in_list_order() {
        let list: Vec<String> =
            ["a/x.wav", "b/x.wav", "x-2.wav", "y.sigmf-meta", "..wav", "/"].iter().map(|s| s.to_string()).collect();
        assert_eq!(output_names(&list), ["x", "x-2", "x-2-2", "y", "capture.", "capture"]);
    }
}
