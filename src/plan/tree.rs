//! The raw plan: a YAML document as a tree of nodes that remember their line and column.
//!
//! Parsing is done by `serde-saphyr` (pure Rust, with budgets against alias bombs and deep
//! nesting); this module only keeps each node's position so validation can point at it.

use serde::de::{self, Deserialize, Deserializer, MapAccess, SeqAccess, Visitor};
use serde_saphyr::Spanned;
use std::fmt;

/// One YAML node with the position where it was written (1-based line and column).
#[derive(Debug, Clone)]
pub struct Node {
    /// What the node holds.
    pub value: NodeValue,
    /// 1-based line of the node in the plan file (0 when unknown).
    pub line: u64,
    /// 1-based column of the node in the plan file (0 when unknown).
    pub column: u64,
}

/// The contents of a YAML node.
#[derive(Debug, Clone)]
pub enum NodeValue {
    /// `~`, `null` or an empty value.
    Null,
    /// `true` or `false`.
    Bool(bool),
    /// An integer scalar.
    Integer(i128),
    /// A floating-point scalar (including `.inf` and `.nan`).
    Float(f64),
    /// Any other scalar.
    Text(String),
    /// A sequence.
    Seq(Vec<Node>),
    /// A mapping, in the order written.
    Map(Vec<(Node, Node)>),
}

impl NodeValue {
    /// What kind of YAML value this is, for error messages.
    pub fn kind(&self) -> &'static str {
        match self {
            NodeValue::Null => "an empty value",
            NodeValue::Bool(_) => "a boolean",
            NodeValue::Integer(_) | NodeValue::Float(_) => "a number",
            NodeValue::Text(_) => "a string",
            NodeValue::Seq(_) => "a list",
            NodeValue::Map(_) => "a mapping",
        }
    }
}

impl<'de> Deserialize<'de> for Node {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        let spanned = Spanned::<NodeValue>::deserialize(deserializer)?;
        Ok(Node {
            value: spanned.value,
            line: spanned.referenced.line(),
            column: spanned.referenced.column(),
        })
    }
}

struct NodeVisitor;

impl<'de> Visitor<'de> for NodeVisitor {
    type Value = NodeValue;

    fn expecting(&self, formatter: &mut fmt::Formatter) -> fmt::Result {
        formatter.write_str("any YAML value")
    }
    fn visit_bool<E: de::Error>(self, value: bool) -> Result<NodeValue, E> {
        Ok(NodeValue::Bool(value))
    }
    fn visit_i64<E: de::Error>(self, value: i64) -> Result<NodeValue, E> {
        Ok(NodeValue::Integer(value.into()))
    }
    fn visit_u64<E: de::Error>(self, value: u64) -> Result<NodeValue, E> {
        Ok(NodeValue::Integer(value.into()))
    }
    fn visit_i128<E: de::Error>(self, value: i128) -> Result<NodeValue, E> {
        Ok(NodeValue::Integer(value))
    }
    fn visit_u128<E: de::Error>(self, value: u128) -> Result<NodeValue, E> {
        Ok(i128::try_from(value)
            .map(NodeValue::Integer)
            .unwrap_or(NodeValue::Float(value as f64)))
    }
    fn visit_f64<E: de::Error>(self, value: f64) -> Result<NodeValue, E> {
        Ok(NodeValue::Float(value))
    }
    fn visit_str<E: de::Error>(self, value: &str) -> Result<NodeValue, E> {
        Ok(NodeValue::Text(value.to_owned()))
    }
    fn visit_string<E: de::Error>(self, value: String) -> Result<NodeValue, E> {
        Ok(NodeValue::Text(value))
    }
    fn visit_unit<E: de::Error>(self) -> Result<NodeValue, E> {
        Ok(NodeValue::Null)
    }
    fn visit_none<E: de::Error>(self) -> Result<NodeValue, E> {
        Ok(NodeValue::Null)
    }
    fn visit_some<D: Deserializer<'de>>(self, deserializer: D) -> Result<NodeValue, D::Error> {
        deserializer.deserialize_any(NodeVisitor)
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<NodeValue, A::Error> {
        let mut items = Vec::new();
        while let Some(item) = seq.next_element::<Node>()? {
            items.push(item);
        }
        Ok(NodeValue::Seq(items))
    }
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<NodeValue, A::Error> {
        let mut entries = Vec::new();
        while let Some(key) = map.next_key::<Node>()? {
            let value = map.next_value::<Node>()?;
            entries.push((key, value));
        }
        Ok(NodeValue::Map(entries))
    }
}

impl<'de> Deserialize<'de> for NodeValue {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        deserializer.deserialize_any(NodeVisitor)
    }
}

/// Parses YAML text into a positioned tree. Errors carry the parser's line and column.
pub fn parse_tree(text: &str) -> Result<Node, (String, u64, u64)> {
    // Non-finite floats pass through so `.inf` can mean "ideal" and `.nan` is rejected by
    // validation with its key path; the default alias and nesting budgets stay in force.
    let mut options = serde_saphyr::Options::default();
    options.non_finite_float_policy = serde_saphyr::NonFiniteFloatPolicy::PassThrough;
    serde_saphyr::from_str_with_options::<Node>(text, options).map_err(|err| {
        let (line, column) = err
            .location()
            .map(|loc| (loc.line(), loc.column()))
            .unwrap_or((0, 0));
        let raw = err.without_snippet().to_string();
        // The parser's resource budgets speak in its own terms; say what they mean for a plan.
        let message = if raw.contains("budget breached") {
            let detail = raw
                .split("budget breached:")
                .nth(1)
                .unwrap_or("")
                .trim()
                .replace(['{', '}'], "")
                .to_lowercase();
            format!(
                "the document is larger or more deeply nested than any plan needs (parser limit reached: {})",
                detail.split_whitespace().collect::<Vec<_>>().join(" ")
            )
        } else {
            raw
        };
        (message, line, column)
    })
}
