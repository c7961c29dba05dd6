//! A serde deserializer over the positioned tree: each error it or a
//! visitor raises is placed at the node being read, so serde's derived
//! structs report `LINE:COL` without knowing about positions.

use super::Error;
use super::tree::{Node, NodeValue, Pos};
use lobeflow_blocks::RawValue;
use serde::de::{self, DeserializeSeed, Deserializer, IntoDeserializer, MapAccess, SeqAccess, Visitor};
use serde::{Deserialize, forward_to_deserialize_any};
use std::fmt;
use std::ops::Deref;

/// Read `T` from a node of the tree.
pub fn from_node<'a, T: Deserialize<'a>>(node: &'a Node) -> Result<T, Error> {
    T::deserialize(NodeDe(node))
}

struct NodeDe<'a>(&'a Node);

/// The name under which [`Located`] asks the deserializer for a position.
const LOCATED: &str = "$lobeflow::config::Located";
const LOCATED_FIELDS: &[&str] = &["line", "column", "value"];

/// What a plain scalar means under YAML 1.2's core schema.
enum Plain {
    Null,
    Bool(bool),
    Int(i64),
    Float(f64),
    Text,
}

fn resolve_plain(text: &str) -> Plain {
    match text {
        "" | "~" | "null" | "Null" | "NULL" => return Plain::Null,
        "true" | "True" | "TRUE" => return Plain::Bool(true),
        "false" | "False" | "FALSE" => return Plain::Bool(false),
        ".inf" | ".Inf" | ".INF" | "+.inf" | "+.Inf" | "+.INF" => return Plain::Float(f64::INFINITY),
        "-.inf" | "-.Inf" | "-.INF" => return Plain::Float(f64::NEG_INFINITY),
        ".nan" | ".NaN" | ".NAN" => return Plain::Float(f64::NAN),
        _ => {}
    }
    let digits = text.strip_prefix(['-', '+']).unwrap_or(text);
    if !digits.starts_with(|c: char| c.is_ascii_digit() || c == '.') {
        return Plain::Text;
    }
    if digits.bytes().all(|b| b.is_ascii_digit())
        && let Ok(i) = text.parse::<i64>()
    {
        return Plain::Int(i);
    }
    // Rust's float grammar is YAML's, plus words (`inf`, `nan`) excluded above.
    if digits.bytes().all(|b| b.is_ascii_digit() || matches!(b, b'.' | b'e' | b'E' | b'-' | b'+'))
        && let Ok(f) = text.parse::<f64>()
    {
        return Plain::Float(f);
    }
    Plain::Text
}

impl<'a> NodeDe<'a> {
    fn place<T>(&self, r: Result<T, Error>) -> Result<T, Error> {
        r.map_err(|e| e.placed(self.0.at))
    }

    fn scalar_text(&self) -> Option<&'a str> {
        match &self.0.value {
            NodeValue::Scalar { text, .. } => Some(text),
            _ => None,
        }
    }
}

impl<'de> Deserializer<'de> for NodeDe<'de> {
    type Error = Error;

    fn deserialize_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        let r = match &self.0.value {
            NodeValue::Scalar { text, plain: false } => visitor.visit_borrowed_str(text),
            NodeValue::Scalar { text, plain: true } => match resolve_plain(text) {
                Plain::Null => visitor.visit_unit(),
                Plain::Bool(b) => visitor.visit_bool(b),
                Plain::Int(i) => visitor.visit_i64(i),
                Plain::Float(f) => visitor.visit_f64(f),
                Plain::Text => visitor.visit_borrowed_str(text),
            },
            NodeValue::Seq(items) => visitor.visit_seq(Items { items: items.iter() }),
            NodeValue::Map(entries) => visitor.visit_map(MapEntries { entries: entries.iter(), value: None }),
        };
        self.place(r)
    }

    /// Text fields take any scalar as written (`title: 12` is the text "12").
    fn deserialize_str<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        match self.scalar_text() {
            Some(text) if !self.0.is_null() => {
                let r = visitor.visit_borrowed_str(text);
                self.place(r)
            }
            _ => self.deserialize_any(visitor),
        }
    }

    fn deserialize_string<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        self.deserialize_str(visitor)
    }

    fn deserialize_identifier<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        self.deserialize_str(visitor)
    }

    fn deserialize_option<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        let r = if self.0.is_null() { visitor.visit_none() } else { visitor.visit_some(NodeDe(self.0)) };
        self.place(r)
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(self, _: &'static str, visitor: V) -> Result<V::Value, Error> {
        let r = visitor.visit_newtype_struct(NodeDe(self.0));
        self.place(r)
    }

    fn deserialize_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, Error> {
        if name == LOCATED {
            let r = visitor.visit_map(LocatedAccess { node: self.0, step: 0 });
            return self.place(r);
        }
        if !matches!(self.0.value, NodeValue::Map(_)) {
            let found = self.describe();
            let keys = fields.join(", ");
            return Err(Error::at(self.0.at, format!("expected a mapping (keys: {keys}), found {found}")));
        }
        self.deserialize_any(visitor)
    }

    fn deserialize_enum<V: Visitor<'de>>(
        self,
        _: &'static str,
        _: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, Error> {
        let r = match &self.0.value {
            NodeValue::Scalar { .. } => visitor.visit_enum(Variant { name: self.0, body: None }),
            NodeValue::Map(entries) if entries.len() == 1 => {
                visitor.visit_enum(Variant { name: &entries[0].0, body: Some(&entries[0].1) })
            }
            _ => Err(Error::at(self.0.at, "expected a word, or a mapping with one key naming the choice")),
        };
        self.place(r)
    }

    fn deserialize_ignored_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Error> {
        visitor.visit_unit()
    }

    forward_to_deserialize_any! {
        bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char bytes byte_buf unit unit_struct seq tuple
        tuple_struct map
    }
}

impl NodeDe<'_> {
    fn describe(&self) -> String {
        match &self.0.value {
            NodeValue::Scalar { text, .. } => format!("'{text}'"),
            NodeValue::Seq(_) => "a list".into(),
            NodeValue::Map(_) => "a mapping".into(),
        }
    }
}

struct Items<'a> {
    items: std::slice::Iter<'a, Node>,
}

impl<'de> SeqAccess<'de> for Items<'de> {
    type Error = Error;
    fn next_element_seed<T: DeserializeSeed<'de>>(&mut self, seed: T) -> Result<Option<T::Value>, Error> {
        match self.items.next() {
            Some(node) => seed.deserialize(NodeDe(node)).map(Some),
            None => Ok(None),
        }
    }
    fn size_hint(&self) -> Option<usize> {
        Some(self.items.len())
    }
}

struct MapEntries<'a> {
    entries: std::slice::Iter<'a, (Node, Node)>,
    value: Option<&'a Node>,
}

impl<'de> MapAccess<'de> for MapEntries<'de> {
    type Error = Error;
    fn next_key_seed<K: DeserializeSeed<'de>>(&mut self, seed: K) -> Result<Option<K::Value>, Error> {
        match self.entries.next() {
            Some((k, v)) => {
                self.value = Some(v);
                seed.deserialize(NodeDe(k)).map_err(|e| e.placed(k.at)).map(Some)
            }
            None => Ok(None),
        }
    }
    fn next_value_seed<V: DeserializeSeed<'de>>(&mut self, seed: V) -> Result<V::Value, Error> {
        let node = self.value.take().ok_or_else(|| <Error as de::Error>::custom("a value without its key"))?;
        seed.deserialize(NodeDe(node)).map_err(|e| e.placed(node.at))
    }
    fn size_hint(&self) -> Option<usize> {
        Some(self.entries.len())
    }
}

/// The choice of an enum: a word, or a one-key mapping with its body.
struct Variant<'a> {
    name: &'a Node,
    body: Option<&'a Node>,
}

impl<'de> de::EnumAccess<'de> for Variant<'de> {
    type Error = Error;
    type Variant = Self;
    fn variant_seed<V: DeserializeSeed<'de>>(self, seed: V) -> Result<(V::Value, Self), Error> {
        let v = seed.deserialize(NodeDe(self.name)).map_err(|e| e.placed(self.name.at))?;
        Ok((v, self))
    }
}

impl<'de> de::VariantAccess<'de> for Variant<'de> {
    type Error = Error;
    fn unit_variant(self) -> Result<(), Error> {
        match self.body {
            None => Ok(()),
            Some(b) if b.is_null() => Ok(()),
            Some(b) => Err(Error::at(b.at, "this choice takes no settings")),
        }
    }
    fn newtype_variant_seed<T: DeserializeSeed<'de>>(self, seed: T) -> Result<T::Value, Error> {
        match self.body {
            Some(b) => seed.deserialize(NodeDe(b)),
            None => Err(Error::at(self.name.at, "this choice needs its settings (choice: {...})")),
        }
    }
    fn tuple_variant<V: Visitor<'de>>(self, _: usize, visitor: V) -> Result<V::Value, Error> {
        match self.body {
            Some(b) => NodeDe(b).deserialize_seq(visitor),
            None => Err(Error::at(self.name.at, "this choice needs a list")),
        }
    }
    fn struct_variant<V: Visitor<'de>>(self, fields: &'static [&'static str], visitor: V) -> Result<V::Value, Error> {
        match self.body {
            Some(b) => NodeDe(b).deserialize_struct("", fields, visitor),
            None => Err(Error::at(self.name.at, "this choice needs its settings (choice: {...})")),
        }
    }
}

/// Hands a [`Located`] its node's line, column and value.
struct LocatedAccess<'a> {
    node: &'a Node,
    step: usize,
}

impl<'de> MapAccess<'de> for LocatedAccess<'de> {
    type Error = Error;
    fn next_key_seed<K: DeserializeSeed<'de>>(&mut self, seed: K) -> Result<Option<K::Value>, Error> {
        match LOCATED_FIELDS.get(self.step) {
            Some(name) => seed.deserialize(de::value::BorrowedStrDeserializer::new(name)).map(Some),
            None => Ok(None),
        }
    }
    fn next_value_seed<V: DeserializeSeed<'de>>(&mut self, seed: V) -> Result<V::Value, Error> {
        self.step += 1;
        match self.step {
            1 => seed.deserialize((self.node.at.line as u64).into_deserializer()),
            2 => seed.deserialize((self.node.at.column as u64).into_deserializer()),
            _ => seed.deserialize(NodeDe(self.node)),
        }
    }
}

/// A value with the line and column it was written at, for checks made
/// after reading (a block parameter, a wire, a setting) to point at it.
/// Only this module's deserializer knows positions; read through others
/// it fails.
#[derive(Clone, Debug, PartialEq)]
pub struct Located<T> {
    pub value: T,
    pub at: Pos,
}

impl<T> Deref for Located<T> {
    type Target = T;
    fn deref(&self) -> &T {
        &self.value
    }
}

impl<'de, T: Deserialize<'de>> Deserialize<'de> for Located<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V<T>(std::marker::PhantomData<T>);
        impl<'de, T: Deserialize<'de>> Visitor<'de> for V<T> {
            type Value = Located<T>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a value read by lobeflow's configuration reader")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Located<T>, A::Error> {
                let mut at = Pos::default();
                let mut value = None;
                while let Some(k) = map.next_key::<&str>()? {
                    match k {
                        "line" => at.line = map.next_value::<u64>()? as usize,
                        "column" => at.column = map.next_value::<u64>()? as usize,
                        _ => value = Some(map.next_value::<T>()?),
                    }
                }
                let value = value.ok_or_else(|| de::Error::missing_field("value"))?;
                Ok(Located { value, at })
            }
        }
        d.deserialize_struct(LOCATED, LOCATED_FIELDS, V(std::marker::PhantomData))
    }
}

/// A mapping read in file order, as (key, value) pairs.
#[derive(Clone, Debug, PartialEq)]
pub struct Entries<K, V>(pub Vec<(K, V)>);

impl<K, V> Default for Entries<K, V> {
    fn default() -> Self {
        Entries(Vec::new())
    }
}

impl<'de, K: Deserialize<'de>, V: Deserialize<'de>> Deserialize<'de> for Entries<K, V> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct Vis<K, V>(std::marker::PhantomData<(K, V)>);
        impl<'de, K: Deserialize<'de>, V: Deserialize<'de>> Visitor<'de> for Vis<K, V> {
            type Value = Entries<K, V>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a mapping (name: value)")
            }
            fn visit_unit<E: de::Error>(self) -> Result<Self::Value, E> {
                Ok(Entries(Vec::new()))
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Self::Value, A::Error> {
                let mut out = Vec::with_capacity(map.size_hint().unwrap_or(0));
                while let Some(entry) = map.next_entry()? {
                    out.push(entry);
                }
                Ok(Entries(out))
            }
        }
        d.deserialize_map(Vis(std::marker::PhantomData))
    }
}

/// A parameter or setting value as every parameter parser takes it: a
/// number, text, true/false or a list of those.
#[derive(Clone, Debug, PartialEq)]
pub struct ParamValue(pub RawValue);

impl<'de> Deserialize<'de> for ParamValue {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = ParamValue;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number, text, true/false or a list")
            }
            fn visit_bool<E: de::Error>(self, v: bool) -> Result<ParamValue, E> {
                Ok(ParamValue(RawValue::Bool(v)))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<ParamValue, E> {
                Ok(ParamValue(RawValue::Number(v as f64)))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<ParamValue, E> {
                Ok(ParamValue(RawValue::Number(v as f64)))
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<ParamValue, E> {
                Ok(ParamValue(RawValue::Number(v)))
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<ParamValue, E> {
                Ok(ParamValue(RawValue::Text(v.to_string())))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<ParamValue, A::Error> {
                let mut items = Vec::new();
                while let Some(ParamValue(v)) = seq.next_element()? {
                    items.push(v);
                }
                Ok(ParamValue(RawValue::List(items)))
            }
        }
        d.deserialize_any(V)
    }
}

#[cfg(test)]
mod tests {
    use super::super::{Pos, parse};
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    struct Gate {
        guard: Located<f64>,
        #[serde(default)]
        lobes: Vec<String>,
        mode: Option<Mode>,
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(rename_all = "snake_case")]
    enum Mode {
        Sync,
        Leakage,
    }

    fn read<T: for<'a> Deserialize<'a>>(text: &str) -> Result<T, Error> {
        from_node(&parse(text).unwrap())
    }

    #[test]
    fn values_keep_their_place() {
        let g: Gate = read("lobes: [a, b]\nguard:   2.5\nmode: sync\n").unwrap();
        assert_eq!((*g.guard, g.guard.at), (2.5, Pos { line: 2, column: 10 }));
        assert_eq!(g.lobes, ["a", "b"]);
        assert_eq!(g.mode, Some(Mode::Sync));
    }

    #[test]
    fn errors_point_at_the_value_and_hint() {
        let e = read::<Gate>("guard: 1\ngaurd: 2\n").unwrap_err();
        assert_eq!((e.at, e.message.as_str()), (Pos { line: 2, column: 1 }, "unknown key 'gaurd'"));
        assert_eq!(e.hint.as_deref(), Some("did you mean 'guard'?"));
        let e = read::<Gate>("guard: 1\nmode: sink\n").unwrap_err();
        assert_eq!((e.at.line, e.hint.as_deref()), (2, Some("did you mean 'sync'?")));
        let e = read::<Gate>("guard: wide\n").unwrap_err();
        assert_eq!(e.at, Pos { line: 1, column: 8 });
        let e = read::<Gate>("lobes: [a]\n").unwrap_err();
        assert_eq!((e.at.line, e.message.as_str()), (1, "missing key 'guard'"));
    }

    #[test]
    fn scalars_follow_the_core_schema() {
        let v: Vec<ParamValue> = read("[1, -2.5e3, true, '7', x y, .inf]").unwrap();
        let raw: Vec<RawValue> = v.into_iter().map(|p| p.0).collect();
        assert_eq!(
            raw[..5],
            [
                RawValue::Number(1.0),
                RawValue::Number(-2500.0),
                RawValue::Bool(true),
                RawValue::Text("7".into()),
                RawValue::Text("x y".into()),
            ]
        );
        assert_eq!(raw[5], RawValue::Number(f64::INFINITY));
        let e: Entries<String, String> = read("b: 1\na: 2\n").unwrap();
        assert_eq!(e.0, [("b".to_string(), "1".to_string()), ("a".to_string(), "2".to_string())]);
    }
}
