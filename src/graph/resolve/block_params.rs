//! One block instance: its kind's declaration (or the one it gives itself),
//! the parameters the graph sets, checked, and the defaults of the rest.

use super::knobs::substitute;
use super::{Builder, KnobValue, Local, ResolvedBlock};
use crate::config::{Seg, key};
use crate::graph::error::GraphError;
use crate::graph::file::{BlockDecl, Source};
use lobeflow_blocks::{BlockSpec, ParamType, Params, RawValue, Value};
use std::collections::BTreeMap;
use std::path::Path;

/// Add the block `decl` of kind `kind`, named `full`, with its parameters
/// checked against its declaration.
pub(super) fn add_block(
    src: &Source,
    decl: &BlockDecl,
    kind: &str,
    full: String,
    settings: &BTreeMap<String, KnobValue>,
    b: &mut Builder,
) -> Result<Local, GraphError> {
    let at = [key("blocks"), key(&decl.name)];
    let Some(spec) = b.registry.get(kind) else {
        return Err(src
            .error(&[key("blocks"), key(&decl.name), key("kind")], format!("unknown block kind '{kind}'"))
            .hint_closest(kind, b.registry.kinds().map(|s| s.kind), "`lobeflow blocks` lists the kinds"));
    };
    let mut spec = *spec;
    if let Some(describe) = b.registry.describer(kind) {
        // The instance declares itself from the parameters its kind
        // always has (a program and its arguments).
        let (launch, _, _) = set_params(&spec, decl, settings, src, true)?;
        spec = describe(&launch, &src.dir())
            .map_err(|m| src.error(&at, format!("block '{}' ({}): {m}", decl.name, spec.kind)))?;
    }
    let (mut params, mut sources, places) = set_params(&spec, decl, settings, src, false)?;
    fill_defaults(&spec, decl, &mut params, &mut sources, src, &at)?;
    let (line, column) = src.locate(&at);
    let (file, doc) = (src.path.clone(), decl.doc.clone());
    b.blocks.push(ResolvedBlock { name: full, spec, params, sources, places, file, line, column, doc });
    Ok(Local::Block(b.blocks.len() - 1))
}

/// Give every parameter the graph left unset its kind's default; one
/// without a default must be set.
fn fill_defaults(
    spec: &BlockSpec,
    decl: &BlockDecl,
    params: &mut Params,
    sources: &mut BTreeMap<String, String>,
    src: &Source,
    at: &[Seg],
) -> Result<(), GraphError> {
    for ps in spec.params {
        if params.get(ps.name).is_some() {
            continue;
        }
        let Some(d) = ps.default else {
            return Err(src
                .error(at, format!("block '{}' ({}) needs parameter '{}'", decl.name, spec.kind, ps.name))
                .with_hint(format!("'{}': {} — {}", ps.name, ps.ty.describe(), ps.doc)));
        };
        let v = ps.parse(&RawValue::from_text(d)).map_err(|m| {
            src.error(at, format!("built-in default of '{}' on kind '{}' is bad: {m}", ps.name, spec.kind))
        })?;
        params.insert_declared(ps, v);
        sources.insert(ps.name.to_string(), "block default".into());
    }
    Ok(())
}

/// A block's parameters, where each value came from, and where each set
/// one is written (line, column).
type SetParams = (Params, BTreeMap<String, String>, BTreeMap<String, (usize, usize)>);

/// Check the parameters a block declaration sets against `spec`, with where
/// each came from. With `declared_only`, names `spec` does not declare are
/// passed over instead of refused (a self-declaring kind reads its own first).
fn set_params(
    spec: &BlockSpec,
    decl: &BlockDecl,
    settings: &BTreeMap<String, KnobValue>,
    src: &Source,
    declared_only: bool,
) -> Result<SetParams, GraphError> {
    let mut params = Params::new();
    let mut sources = BTreeMap::new();
    let mut places = BTreeMap::new();
    for (pname, raw) in &decl.set {
        let pat = [key("blocks"), key(&decl.name), key("set"), key(pname)];
        let Some(ps) = spec.param(pname) else {
            if declared_only {
                continue;
            }
            let names: Vec<&str> = spec.params.iter().map(|p| p.name).collect();
            return Err(src
                .error(&pat, format!("block kind '{}' has no parameter '{pname}'", spec.kind))
                .hint_closest(pname, names.iter().copied(), &format!("its parameters: {}", names.join(", "))));
        };
        let (value, knob) = substitute(raw, Some(&ps.ty), settings, src, &pat)?;
        let base = knob.as_ref().map(|k| k.base.clone()).unwrap_or_else(|| src.dir());
        let mut parsed = ps.parse(&value).map_err(|m| {
            let via = knob.as_ref().map(|k| format!(" (from knob '{}', {})", k.name, k.origin)).unwrap_or_default();
            src.error(&pat, format!("parameter '{pname}' of block '{}': {m}{via}", decl.name))
                .with_hint(format!("'{pname}' takes {}", ps.ty.describe()))
        })?;
        if let (ParamType::InputPath, Value::Text(p)) = (&ps.ty, &parsed)
            && p != "-"
            && !p.is_empty()
            && Path::new(p).is_relative()
        {
            parsed = Value::Text(base.join(p).to_string_lossy().into_owned());
        }
        let place = src.locate(&pat);
        let from = match &knob {
            Some(k) => format!("knob {} ({})", k.name, k.origin),
            None => format!("graph {}:{}", src.path.display(), place.0),
        };
        sources.insert(pname.clone(), from);
        places.insert(pname.clone(), place);
        params.insert_declared(ps, parsed);
    }
    Ok((params, sources, places))
}
