//! Knob values: defaults, values set by a parent composite, `auto` values
//! measured from the capture, and `$knob` references in parameters.

use super::{KnobValue, Origin};
use crate::config::{Seg, key};
use crate::graph::error::GraphError;
use crate::graph::file::{GraphFile, Source};
use lobeflow_blocks::{ParamType, RawValue};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Settings given as `auto` are measured from the start of the graph's
/// capture (src/inspect/params.rs); the error names the first such setting.
pub(super) fn settle_auto(settings: &mut BTreeMap<String, KnobValue>) -> Result<(), GraphError> {
    let given: Vec<(&str, &RawValue, &Path)> =
        settings.values().map(|k| (k.name.as_str(), &k.value, k.base.as_path())).collect();
    match crate::inspect::settle_auto(&given) {
        Ok(found) => {
            for (name, value, how) in found {
                if let Some(k) = settings.get_mut(&name) {
                    k.value = RawValue::Text(value);
                    k.origin = Origin::Measured(how);
                }
            }
            Ok(())
        }
        Err((name, message)) => {
            let (file, line) = match &settings[&name].origin {
                Origin::ParamsFile { file, line } | Origin::Default { file, line } => (file.clone(), *line),
                _ => (PathBuf::from("--set"), 0),
            };
            Err(GraphError { file, line, column: 1, message, hint: None })
        }
    }
}

/// Knob values from the file's defaults, then from `given` (a parent's set).
/// A knob with no value yet holds an empty list, caught by the caller.
/// `top` is false for a composite's file.
pub(super) fn settle_knobs(
    file: &GraphFile,
    mut given: BTreeMap<String, KnobValue>,
    top: bool,
) -> Result<BTreeMap<String, KnobValue>, GraphError> {
    let src = &file.source;
    let mut out = BTreeMap::new();
    for d in &file.settings {
        let (line, _) = src.locate(&[key("settings"), key(&d.name)]);
        let file = src.path.clone();
        let default_unit = match &d.default {
            Some(RawValue::Text(t)) => lobeflow_blocks::param::unit_word(t).map(str::to_string),
            _ => None,
        };
        let mut v = KnobValue {
            name: d.name.clone(),
            value: d.default.clone().unwrap_or(RawValue::List(Vec::new())),
            unit: d.unit.clone().filter(|u| !u.is_empty()).or(default_unit),
            doc: d.doc.clone(),
            origin: if top { Origin::Default { file, line } } else { Origin::CompositeDefault { file, line } },
            base: src.dir(),
        };
        if let Some(g) = given.remove(&d.name) {
            v.value = g.value;
            v.unit = v.unit.or(g.unit);
            v.origin = g.origin;
            v.base = g.base;
        }
        out.insert(d.name.clone(), v);
    }
    Ok(out)
}

/// Replace a `$knob` reference by the knob's value; bare numbers take the
/// knob's unit so the parameter's own unit check applies.
pub(super) fn substitute(
    raw: &RawValue,
    ty: Option<&ParamType>,
    settings: &BTreeMap<String, KnobValue>,
    src: &Source,
    at: &[Seg],
) -> Result<(RawValue, Option<KnobValue>), GraphError> {
    let RawValue::Text(t) = raw else { return Ok((raw.clone(), None)) };
    let Some(name) = t.strip_prefix('$') else { return Ok((raw.clone(), None)) };
    let Some(k) = settings.get(name) else {
        return Err(src.error(at, format!("knob '{name}' is referenced but not defined")).hint_closest(
            name,
            settings.keys().map(String::as_str),
            "declare it under 'settings:'",
        ));
    };
    if matches!(k.value, RawValue::List(ref l) if l.is_empty()) {
        return Err(src
            .error(at, format!("knob '{name}' has no value"))
            .with_hint(format!("set it: --set {name}=VALUE")));
    }
    let takes_unit =
        matches!(ty, Some(ParamType::Number { .. } | ParamType::Time { .. } | ParamType::Distance { .. }) | None);
    let value = match &k.value {
        RawValue::Number(_) if takes_unit => RawValue::from_text(&k.value_text()),
        v => v.clone(),
    };
    Ok((value, Some(k.clone())))
}
