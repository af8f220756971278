//! What-if overrides from the command line: `--set KEY.PATH=VALUE` replaces (or adds) one value
//! of the plan before it is validated, so an override gets exactly the checks a value written
//! in the file gets.
//!
//! The key path is the one error messages use: keys joined by `.`, list items by `[index]`, and
//! a stage (or any list item with a `name`) also by `[name]`: `stages[1].emitter_resistance`,
//! `stages[degenerated].load_resistance`, `drive.frequencies`, `sizing.emitter_resistance.to`.
//! The value is read as YAML (`330`, `2.2k`, `[1 MHz, 10 MHz]`, `{from: 0, to: 3k}`); an empty
//! value removes an optional key.
//!
//! Nodes that come from an override carry a line number of [`SET_LINE_BASE`] plus the
//! override's index, so a later error about them is located at the `--set` argument rather
//! than at a line of the file.

use super::tree::{parse_tree, Node, NodeValue};
use crate::error::PlanError;

/// Line numbers from here up belong to `--set` arguments (override `k` is `SET_LINE_BASE + k`).
pub const SET_LINE_BASE: u64 = 1 << 40;

/// What an override path and value look like, for messages.
pub const OVERRIDE_FORM: &str = "KEY.PATH=VALUE with the plan's key path, e.g. \
     stages[1].emitter_resistance=330, stages[degenerated].load_resistance=4.7k or \
     drive.frequencies=[1MHz]";

/// One step of a key path.
#[derive(Debug, Clone, PartialEq)]
enum Step {
    /// A key of a mapping.
    Key(String),
    /// An item of a list, by position.
    Index(usize),
    /// An item of a list, by its `name`.
    Named(String),
}

/// One `--set` argument, parsed.
#[derive(Debug, Clone)]
pub struct Override {
    /// The argument as typed.
    pub argument: String,
    steps: Vec<Step>,
    value: Node,
}

/// The location text of override `index` (`--set stages[1].x=3`), or `None` for a line of the
/// file.
pub fn override_location(line: u64, overrides: &[Override]) -> Option<String> {
    let index = line.checked_sub(SET_LINE_BASE)?;
    overrides
        .get(index as usize)
        .map(|o| format!("--set `{}`", o.argument))
}

/// An error about the override itself, located at the argument.
fn error(
    argument: &str,
    key_path: &str,
    problem: impl Into<String>,
    accepted: impl Into<String>,
) -> PlanError {
    let mut err = PlanError::at(0, 0, key_path, problem, accepted);
    err.file = format!("--set `{argument}`");
    err
}

/// Key path text of the first `count` steps.
fn path_text(steps: &[Step]) -> String {
    let mut text = String::new();
    for step in steps {
        match step {
            Step::Key(key) => {
                if !text.is_empty() {
                    text.push('.');
                }
                text.push_str(key);
            }
            Step::Index(i) => text.push_str(&format!("[{i}]")),
            Step::Named(name) => text.push_str(&format!("[{name}]")),
        }
    }
    text
}

/// Parses `KEY.PATH=VALUE`; `index` is the override's position among the `--set` arguments.
pub fn parse_override(argument: &str, index: usize) -> Result<Override, PlanError> {
    let Some((path, value_text)) = argument.split_once('=') else {
        return Err(error(
            argument,
            "",
            "an override needs `=` between the key path and the value",
            OVERRIDE_FORM,
        ));
    };
    let steps =
        parse_path(path).map_err(|problem| error(argument, path.trim(), problem, OVERRIDE_FORM))?;
    let mut value = if value_text.trim().is_empty() {
        Node {
            value: NodeValue::Null,
            line: 0,
            column: 0,
        }
    } else {
        parse_tree(value_text).map_err(|(message, _, _)| {
            error(
                argument,
                &path_text(&steps),
                format!("the value cannot be read as YAML: {message}"),
                "a value as it would be written in the plan, e.g. 330, \"2.2k\", [1 MHz, 10 MHz]",
            )
        })?
    };
    let line = SET_LINE_BASE + index as u64;
    let offset = path.chars().count() as u64 + 1;
    relocate(&mut value, line, offset);
    Ok(Override {
        argument: argument.to_owned(),
        steps,
        value,
    })
}

/// Moves a parsed value's positions onto the override's line, columns counted in the argument.
fn relocate(node: &mut Node, line: u64, offset: u64) {
    node.line = line;
    node.column = node.column.max(1) + offset;
    match &mut node.value {
        NodeValue::Seq(items) => items.iter_mut().for_each(|n| relocate(n, line, offset)),
        NodeValue::Map(entries) => entries.iter_mut().for_each(|(k, v)| {
            relocate(k, line, offset);
            relocate(v, line, offset);
        }),
        _ => {}
    }
}

fn parse_path(path: &str) -> Result<Vec<Step>, String> {
    let path = path.trim();
    if path.is_empty() {
        return Err("the key path is empty".into());
    }
    let mut steps = Vec::new();
    for part in path.split('.') {
        let (key, mut rest) = match part.find('[') {
            Some(at) => (&part[..at], &part[at..]),
            None => (part, ""),
        };
        if key.is_empty() && (steps.is_empty() || rest.is_empty()) {
            return Err(format!("`{path}` has an empty key"));
        }
        if !key.is_empty() {
            if !key.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                return Err(format!(
                    "`{key}` is not a key name (letters, digits and `_`)"
                ));
            }
            steps.push(Step::Key(key.to_owned()));
        }
        while !rest.is_empty() {
            let Some(close) = rest.find(']') else {
                return Err(format!("`{part}` opens `[` without closing it"));
            };
            let inside = rest[1..close].trim();
            if inside.is_empty() {
                return Err(format!("`{part}` has an empty `[]`"));
            }
            steps.push(match inside.parse::<usize>() {
                Ok(i) => Step::Index(i),
                Err(_) => Step::Named(inside.to_owned()),
            });
            rest = &rest[close + 1..];
            if !rest.is_empty() && !rest.starts_with('[') {
                return Err(format!("`{part}` has text after `]`"));
            }
        }
    }
    Ok(steps)
}

fn item_name(node: &Node) -> Option<&str> {
    let NodeValue::Map(entries) = &node.value else {
        return None;
    };
    entries
        .iter()
        .find_map(|(k, v)| match (&k.value, &v.value) {
            (NodeValue::Text(key), NodeValue::Text(name)) if key == "name" => Some(name.as_str()),
            _ => None,
        })
}

/// Applies one override to the plan's tree: replaces the value at the path, or adds it (and
/// any missing mappings on the way) when the plan does not give it.
pub fn apply(root: &mut Node, o: &Override, index: usize) -> Result<(), PlanError> {
    let line = SET_LINE_BASE + index as u64;
    let mut node = root;
    for (depth, step) in o.steps.iter().enumerate() {
        let here = path_text(&o.steps[..depth]);
        let shown = if here.is_empty() {
            "the plan".to_owned()
        } else {
            format!("`{here}`")
        };
        let last = depth + 1 == o.steps.len();
        let kind = node.value.kind();
        match step {
            Step::Key(key) => {
                if matches!(node.value, NodeValue::Null) {
                    node.value = NodeValue::Map(Vec::new());
                }
                let NodeValue::Map(entries) = &mut node.value else {
                    return Err(error(
                        &o.argument,
                        &path_text(&o.steps[..=depth]),
                        format!("{shown} is {kind}, so it has no key `{key}`"),
                        OVERRIDE_FORM,
                    ));
                };
                let position = entries
                    .iter()
                    .position(|(k, _)| matches!(&k.value, NodeValue::Text(name) if name == key));
                let position = match position {
                    Some(p) => p,
                    None => {
                        let key_node = Node {
                            value: NodeValue::Text(key.clone()),
                            line,
                            column: 1,
                        };
                        let empty = Node {
                            value: NodeValue::Null,
                            line,
                            column: 1,
                        };
                        entries.push((key_node, empty));
                        entries.len() - 1
                    }
                };
                node = &mut entries[position].1;
            }
            Step::Index(i) => {
                let NodeValue::Seq(items) = &mut node.value else {
                    return Err(error(
                        &o.argument,
                        &path_text(&o.steps[..=depth]),
                        format!("{shown} is {kind}, not a list"),
                        OVERRIDE_FORM,
                    ));
                };
                let count = items.len();
                let Some(item) = items.get_mut(*i) else {
                    let range = match count {
                        0 => "the list is empty".to_owned(),
                        1 => format!("{here}[0] only"),
                        n => format!("{here}[0] to {here}[{}]", n - 1),
                    };
                    return Err(error(
                        &o.argument,
                        &path_text(&o.steps[..=depth]),
                        format!("{shown} has {count} item(s), so there is no item {i}"),
                        range,
                    ));
                };
                node = item;
            }
            Step::Named(name) => {
                let NodeValue::Seq(items) = &mut node.value else {
                    return Err(error(
                        &o.argument,
                        &path_text(&o.steps[..=depth]),
                        format!("{shown} is {kind}, not a list"),
                        OVERRIDE_FORM,
                    ));
                };
                let names: Vec<String> = items
                    .iter()
                    .filter_map(|n| item_name(n).map(str::to_owned))
                    .collect();
                let Some(item) = items.iter_mut().find(|n| item_name(n) == Some(name)) else {
                    return Err(error(
                        &o.argument,
                        &path_text(&o.steps[..=depth]),
                        format!("{shown} has no item named `{name}`"),
                        if names.is_empty() {
                            "an index, e.g. [0]".to_owned()
                        } else {
                            format!("one of: {}", names.join(", "))
                        },
                    ));
                };
                node = item;
            }
        }
        if last {
            *node = o.value.clone();
            if node.line == 0 {
                node.line = line;
                node.column = 1;
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tree(text: &str) -> Node {
        parse_tree(text).unwrap()
    }

    fn get<'a>(node: &'a Node, key: &str) -> &'a Node {
        let NodeValue::Map(entries) = &node.value else {
            panic!("not a map")
        };
        &entries
            .iter()
            .find(|(k, _)| matches!(&k.value, NodeValue::Text(n) if n == key))
            .unwrap()
            .1
    }

    #[test]
    fn a_path_reads_keys_indices_and_names() {
        assert_eq!(
            parse_path("stages[1].emitter_resistance").unwrap(),
            vec![
                Step::Key("stages".into()),
                Step::Index(1),
                Step::Key("emitter_resistance".into())
            ]
        );
        assert_eq!(
            parse_path("stages[bare-pair].load_resistance").unwrap()[1],
            Step::Named("bare-pair".into())
        );
        assert!(parse_path("stages[1.x").is_err());
        assert!(parse_path("a..b").is_err());
        assert!(parse_path("").is_err());
    }

    #[test]
    fn an_override_replaces_a_value_and_adds_missing_keys() {
        let mut root = tree("name: p\nstages:\n  - {name: a, tail_current: 1 mA}\n  - {name: b, tail_current: 2 mA}\ndrive: {amplitudes: [1 mV]}\n");
        let o = parse_override("stages[b].tail_current=3 mA", 0).unwrap();
        apply(&mut root, &o, 0).unwrap();
        let NodeValue::Seq(stages) = &get(&root, "stages").value else {
            panic!()
        };
        let value = get(&stages[1], "tail_current");
        assert!(matches!(&value.value, NodeValue::Text(t) if t == "3 mA"));
        assert_eq!(value.line, SET_LINE_BASE);
        let o = parse_override("monte_carlo.runs=10", 1).unwrap();
        apply(&mut root, &o, 1).unwrap();
        let runs = get(get(&root, "monte_carlo"), "runs");
        assert!(matches!(runs.value, NodeValue::Integer(10)));
        assert_eq!(runs.line, SET_LINE_BASE + 1);
        let o = parse_override("drive.frequencies=[1MHz, 2MHz]", 2).unwrap();
        apply(&mut root, &o, 2).unwrap();
        assert!(
            matches!(&get(get(&root, "drive"), "frequencies").value, NodeValue::Seq(v) if v.len() == 2)
        );
    }

    #[test]
    fn an_index_beyond_the_list_names_the_items_there_are() {
        let mut root = tree("stages:\n  - {name: a}\n  - {name: b}\n");
        let o = parse_override("stages[5].tail_current=1mA", 0).unwrap();
        let err = apply(&mut root, &o, 0).unwrap_err();
        assert_eq!(err.key_path, "stages[5]");
        assert_eq!(err.file, "--set `stages[5].tail_current=1mA`");
        assert!(err.accepted.contains("stages[0] to stages[1]"), "{err}");
        let o = parse_override("stages[c].tail_current=1mA", 0).unwrap();
        let err = apply(&mut root, &o, 0).unwrap_err();
        assert!(err.accepted.contains("a, b"), "{err}");
        assert!(parse_override("stages[0].tail_current", 0).is_err());
    }
}
