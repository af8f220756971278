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

/// Parses YAML text into a positioned tree. Errors carry the parser's line and column and
/// are worded for a plan's author (see [`plain_words`]).
pub fn parse_tree(text: &str) -> Result<Node, (String, u64, u64)> {
    // Non-finite floats pass through so `.inf` can mean "ideal" and `.nan` is rejected by
    // validation with its key path; repeated keys pass through so validation names them with
    // their key path; the default alias and nesting budgets stay in force.
    let mut options = serde_saphyr::Options::default();
    options.non_finite_float_policy = serde_saphyr::NonFiniteFloatPolicy::PassThrough;
    options.duplicate_keys = serde_saphyr::DuplicateKeyPolicy::PassThrough;
    serde_saphyr::from_str_with_options::<Node>(text, options).map_err(|err| {
        let (line, column) = err
            .location()
            .map(|loc| (loc.line(), loc.column()))
            .unwrap_or((0, 0));
        (
            plain_words(&err.without_snippet().to_string()),
            line,
            column,
        )
    })
}

/// The parser's message in the plan's words: its own position suffix dropped (the plan error
/// carries line and column), and messages that speak of the parser's API, options or Rust
/// types replaced by what they mean for a plan.
pub fn plain_words(raw: &str) -> String {
    let raw = strip_position(raw.trim());
    if raw.contains("budget breached") {
        let detail = raw
            .split("budget breached:")
            .nth(1)
            .unwrap_or("")
            .trim()
            .replace(['{', '}'], "")
            .to_lowercase();
        return format!(
            "the document is larger or more deeply nested than any plan needs (parser limit reached: {})",
            detail.split_whitespace().collect::<Vec<_>>().join(" ")
        );
    }
    if raw.contains("multiple YAML documents") {
        return "the file holds more than one YAML document (a second `---` starts another); a plan is one document".into();
    }
    if let Some(rest) = raw.strip_prefix("duplicate mapping key:") {
        let key = rest.split(',').next().unwrap_or("").trim();
        return format!("the key `{key}` is given twice in the same mapping");
    }
    if let Some(kind) = raw.strip_prefix("invalid ") {
        let kind = kind.trim();
        let integer = [
            "u8", "u16", "u32", "u64", "u128", "i8", "i16", "i32", "i64", "i128",
        ];
        if integer.contains(&kind) {
            return "a value tagged as a whole number (`!!int`) is not a whole number in range"
                .into();
        }
        if kind == "f32" || kind == "f64" || kind.starts_with("floating") {
            return "a value tagged as a number (`!!float`) is not a number".into();
        }
        if kind == "bool" || kind == "boolean" {
            return "a value tagged as a boolean (`!!bool`) is not true or false".into();
        }
    }
    // Anything else that names the parser's options or calls is internal: say it plainly.
    if raw.contains("Options") || raw.contains("from_str") || raw.contains("Policy") {
        return "the YAML uses a construct plans do not accept".into();
    }
    raw.to_owned()
}

/// `message at line 3, column 7` → `message`.
fn strip_position(message: &str) -> &str {
    if let Some(index) = message.rfind(" at line ") {
        let tail = &message[index + " at line ".len()..];
        let is_position = tail
            .chars()
            .all(|c| c.is_ascii_digit() || c == ',' || c == ' ' || c.is_ascii_alphabetic());
        if is_position && tail.contains("column") {
            return &message[..index];
        }
    }
    message
}

#[cfg(test)]
mod tests {
    use super::*;

    fn error_of(text: &str) -> String {
        parse_tree(text).unwrap_err().0
    }

    #[test]
    fn parser_internals_are_worded_for_the_plan() {
        let multiple = error_of("name: a\n---\nname: b\n");
        assert!(
            multiple.contains("more than one YAML document"),
            "{multiple}"
        );
        let tagged = error_of("runs: !!int -5x\n");
        for internal in ["u64", "i64", "Options", "from_str", "Policy", " at line "] {
            assert!(
                !multiple.contains(internal) && !tagged.contains(internal),
                "{multiple} / {tagged}"
            );
        }
        // Repeated keys reach validation, which names them with their key path.
        let tree = parse_tree("name: a\nname: b\n").unwrap();
        let NodeValue::Map(entries) = tree.value else {
            panic!("a mapping")
        };
        assert_eq!(entries.len(), 2);
    }
}
