//! A composite (`use: FILE`): its file loaded once per use, its knobs set
//! by the using block, its blocks added under the using block's name, and
//! the ports it exposes.

use super::knobs::{settle_knobs, substitute};
use super::wiring::{input_end, output_end};
use super::{Builder, KnobValue, Local, MAX_USE_DEPTH, Origin, canonical, expand};
use crate::config::key;
use crate::graph::error::GraphError;
use crate::graph::file::{BlockDecl, GraphFile, Source};
use lobeflow_blocks::RawValue;
use std::collections::BTreeMap;
use std::path::PathBuf;

/// Expand the composite `decl` uses (`rel`, relative to the using file)
/// under the name `full`.
pub(super) fn expand_composite(
    src: &Source,
    decl: &BlockDecl,
    rel: &str,
    full: &str,
    settings: &BTreeMap<String, KnobValue>,
    b: &mut Builder,
) -> Result<Local, GraphError> {
    let (child, canon) = load(src, decl, rel, b)?;
    let child_knobs = knobs_set_by_user(src, decl, rel, &child, settings)?;
    b.stack.push(canon);
    let child_scope = expand(&child, &format!("{full}/"), &child_knobs, b)?;
    b.stack.pop();
    let csrc = &child.source;
    let mut inputs = Vec::new();
    for (pname, target) in &child.exposes.inputs {
        let pat = [key("exposes"), key("inputs"), key(pname)];
        inputs.push((pname.clone(), input_end(&child_scope, target, None, csrc, &pat, b)?));
    }
    let mut outputs = Vec::new();
    for (pname, target) in &child.exposes.outputs {
        let pat = [key("exposes"), key("outputs"), key(pname)];
        outputs.push((pname.clone(), output_end(&child_scope, target, csrc, &pat, b)?));
    }
    Ok(Local::Composite { inputs, outputs })
}

/// Load the composite's file, refusing one that includes itself or nests
/// too deep; returns it with its canonical path.
fn load(src: &Source, decl: &BlockDecl, rel: &str, b: &Builder) -> Result<(GraphFile, PathBuf), GraphError> {
    let at_use = [key("blocks"), key(&decl.name), key("use")];
    let child_path = src.dir().join(rel);
    let canon = canonical(&child_path);
    if b.stack.contains(&canon) {
        return Err(src.error(&at_use, format!("'{rel}' includes itself (directly or through other files)")));
    }
    if b.stack.len() >= MAX_USE_DEPTH {
        return Err(src.error(
            &at_use,
            format!(
                "'{rel}' would be composite number {} in a chain of 'use:' files; at most {MAX_USE_DEPTH} may nest",
                b.stack.len() + 1
            ),
        ));
    }
    let child = GraphFile::load(&child_path)
        .map_err(|e| if e.line == 0 { src.error(&at_use, e.message.clone()) } else { e })?;
    Ok((child, canon))
}

/// The composite's knobs: its own defaults, then what the using block sets;
/// every knob must end with a value.
fn knobs_set_by_user(
    src: &Source,
    decl: &BlockDecl,
    rel: &str,
    child: &GraphFile,
    settings: &BTreeMap<String, KnobValue>,
) -> Result<BTreeMap<String, KnobValue>, GraphError> {
    let mut given = BTreeMap::new();
    for (kname, raw) in &decl.set {
        let pat = [key("blocks"), key(&decl.name), key("set"), key(kname)];
        let Some(cd) = child.settings.iter().find(|k| &k.name == kname) else {
            let names: Vec<&str> = child.settings.iter().map(|k| k.name.as_str()).collect();
            return Err(src.error(&pat, format!("'{rel}' has no knob '{kname}'")).hint_closest(
                kname,
                names.iter().copied(),
                &format!("its settings: {}", names.join(", ")),
            ));
        };
        let (value, knob) = substitute(raw, None, settings, src, &pat)?;
        let base = knob.as_ref().map(|k| k.base.clone()).unwrap_or_else(|| src.dir());
        given.insert(
            kname.clone(),
            KnobValue {
                name: kname.clone(),
                value,
                unit: None,
                doc: cd.doc.clone(),
                origin: Origin::Parent { file: src.path.clone(), line: src.locate(&pat).0 },
                base,
            },
        );
    }
    let child_knobs = settle_knobs(child, given, false)?;
    for cd in &child.settings {
        if matches!(child_knobs[&cd.name].value, RawValue::List(ref l) if l.is_empty()) {
            return Err(src
                .error(
                    &[key("blocks"), key(&decl.name)],
                    format!("composite '{}' needs knob '{}' set", decl.name, cd.name),
                )
                .with_hint(cd.doc.clone()));
        }
    }
    Ok(child_knobs)
}
