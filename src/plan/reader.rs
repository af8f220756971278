//! Typed reading of the positioned YAML tree: key paths, unknown-key checks, quantities.

use super::tree::{Node, NodeValue};
use crate::error::PlanError;
use crate::units::{parse_quantity, short_number, Unit};

/// Where a node sits in the plan: its key path plus position, for error messages.
#[derive(Debug, Clone)]
pub struct At<'a> {
    /// The node itself.
    pub node: &'a Node,
    /// Key path such as `stages[1].load_resistance`.
    pub path: String,
}

impl<'a> At<'a> {
    /// The document root.
    pub fn root(node: &'a Node) -> Self {
        At {
            node,
            path: String::new(),
        }
    }

    /// Builds an error pointing at this node.
    pub fn error(&self, problem: impl Into<String>, accepted: impl Into<String>) -> PlanError {
        PlanError::at(
            self.node.line,
            self.node.column,
            &self.path,
            problem,
            accepted,
        )
    }

    /// The child at `index` of a sequence node.
    pub fn index(&self, index: usize, node: &'a Node) -> At<'a> {
        At {
            node,
            path: format!("{}[{index}]", self.path),
        }
    }

    /// Reads this node as a mapping with only the `allowed` keys.
    pub fn map(&self, allowed: &[&str]) -> Result<MapAt<'a>, PlanError> {
        let NodeValue::Map(entries) = &self.node.value else {
            return Err(self.error(
                format!(
                    "expected a mapping of keys, found {}",
                    self.node.value.kind()
                ),
                format!("a mapping with keys: {}", allowed.join(", ")),
            ));
        };
        let mut seen: Vec<&str> = Vec::new();
        for (key, _) in entries {
            let key_at = At {
                node: key,
                path: self.path.clone(),
            };
            let NodeValue::Text(name) = &key.value else {
                return Err(key_at.error(
                    format!("a key must be text, found {}", key.value.kind()),
                    format!("one of: {}", allowed.join(", ")),
                ));
            };
            let child_path = join(&self.path, name);
            if !allowed.contains(&name.as_str()) {
                let hint = closest(name, allowed)
                    .map(|near| format!(" (did you mean `{near}`?)"))
                    .unwrap_or_default();
                return Err(PlanError::at(
                    key.line,
                    key.column,
                    &child_path,
                    format!("unknown key `{name}`{hint}"),
                    format!("keys here: {}", allowed.join(", ")),
                ));
            }
            if seen.contains(&name.as_str()) {
                return Err(PlanError::at(
                    key.line,
                    key.column,
                    &child_path,
                    format!("key `{name}` is given twice"),
                    "each key once",
                ));
            }
            seen.push(name);
        }
        Ok(MapAt {
            at: self.clone(),
            entries,
        })
    }

    /// Reads this node as a list (a single scalar is not accepted).
    pub fn seq(&self, what: &str) -> Result<Vec<At<'a>>, PlanError> {
        match &self.node.value {
            NodeValue::Seq(items) => Ok(items
                .iter()
                .enumerate()
                .map(|(i, item)| self.index(i, item))
                .collect()),
            other => Err(self.error(
                format!("expected a list, found {}", other.kind()),
                format!("a list of {what}, e.g. [a, b]"),
            )),
        }
    }

    /// Reads a quantity in `unit`; `.inf` is returned as infinity (callers decide if allowed).
    pub fn quantity(&self, unit: Unit) -> Result<f64, PlanError> {
        let value = match &self.node.value {
            NodeValue::Integer(i) => *i as f64,
            NodeValue::Float(f) => *f,
            NodeValue::Text(text) => {
                parse_quantity(text, unit).map_err(|why| self.error(why, unit.describe()))?
            }
            other => {
                return Err(self.error(
                    format!("expected a quantity, found {}", other.kind()),
                    unit.describe(),
                ))
            }
        };
        if value.is_nan() {
            return Err(self.error("NaN is not a value", unit.describe()));
        }
        Ok(value)
    }

    /// A finite quantity satisfying `check`, which names the accepted range.
    pub fn quantity_where(&self, unit: Unit, range: Range) -> Result<f64, PlanError> {
        // Whatever is wrong (not a number, NaN, out of range), the examples offered are ones
        // the key accepts.
        let value = self.quantity(unit).map_err(|mut err| {
            err.accepted = accepted_phrase(unit, range);
            err
        })?;
        range.check(value).map_err(|why| {
            self.error(
                format!("{} {}", describe_value(value, unit), why),
                accepted_phrase(unit, range),
            )
        })?;
        Ok(value)
    }

    /// Reads a text scalar.
    pub fn text(&self, accepted: &str) -> Result<&'a str, PlanError> {
        match &self.node.value {
            NodeValue::Text(text) => Ok(text),
            other => Err(self.error(format!("expected text, found {}", other.kind()), accepted)),
        }
    }

    /// Reads a whole number within `min..=max`.
    pub fn count(&self, min: u64, max: u64) -> Result<u64, PlanError> {
        let accepted = format!(
            "a whole number from {} to {}",
            whole_number(min),
            whole_number(max)
        );
        match &self.node.value {
            NodeValue::Integer(i) if *i >= min as i128 && *i <= max as i128 => Ok(*i as u64),
            NodeValue::Integer(i) => Err(self.error(
                format!("{} is out of range", short_number(*i as f64)),
                accepted,
            )),
            NodeValue::Float(f) if f.fract() == 0.0 && *f >= min as f64 && *f <= max as f64 => {
                Ok(*f as u64)
            }
            NodeValue::Float(f) if f.is_finite() && f.fract() == 0.0 => {
                Err(self.error(format!("{} is out of range", short_number(*f)), accepted))
            }
            NodeValue::Float(f) if f.is_finite() => Err(self.error(
                format!("{} is not a whole number", short_number(*f)),
                accepted,
            )),
            other => Err(self.error(
                format!("expected a whole number, found {}", other.kind()),
                accepted,
            )),
        }
    }

    /// Reads a boolean.
    pub fn boolean(&self) -> Result<bool, PlanError> {
        match &self.node.value {
            NodeValue::Bool(b) => Ok(*b),
            other => Err(self.error(
                format!("expected true or false, found {}", other.kind()),
                "true or false",
            )),
        }
    }
}

/// "a resistance in ohms greater than zero and finite, e.g. 2000, "2k"…": the range sits
/// between the kind of quantity and its examples, and only examples inside the range are
/// shown (one is made up from the range when none of the unit's own fits).
pub fn accepted_phrase(unit: Unit, range: Range) -> String {
    let description = unit.describe();
    let (kind, examples) = description
        .split_once(", e.g. ")
        .unwrap_or((description, ""));
    let fitting: Vec<&str> = examples
        .split(", ")
        .filter(|example| {
            let text = example.trim_matches('"');
            !text.is_empty()
                && parse_quantity(text, unit).is_ok_and(|value| range.check(value).is_ok())
        })
        .collect();
    let examples = if fitting.is_empty() {
        range.example()
    } else {
        fitting.join(", ")
    };
    format!("{kind} {}, e.g. {examples}", range.phrase(unit))
}

fn describe_value(value: f64, unit: Unit) -> String {
    if unit.symbol().is_empty() {
        short_number(value)
    } else {
        format!("{} {}", short_number(value), unit.symbol())
    }
}

/// The accepted range of a quantity.
#[derive(Debug, Clone, Copy)]
pub enum Range {
    /// Finite and strictly positive.
    Positive,
    /// Strictly positive; `.inf` allowed (meaning ideal).
    PositiveOrInfinite,
    /// Finite and zero or more.
    NonNegative,
    /// Any finite value.
    Finite,
    /// Finite, strictly between the bounds.
    Between(f64, f64),
    /// Finite, at least the first bound and below the second.
    FromUpTo(f64, f64),
    /// Finite, from the first bound to the second, both included (bounds shown with SI
    /// prefixes in the unit of the key).
    Within(f64, f64),
}

impl Range {
    /// Whether `value` is in the range.
    pub(crate) fn accepts(self, value: f64) -> bool {
        self.check(value).is_ok()
    }

    /// Whether `value` is inside, or why not.
    pub fn check(self, value: f64) -> Result<(), &'static str> {
        let ok = match self {
            Range::Positive => value.is_finite() && value > 0.0,
            Range::PositiveOrInfinite => value > 0.0,
            Range::NonNegative => value.is_finite() && value >= 0.0,
            Range::Finite => value.is_finite(),
            Range::Between(low, high) => value.is_finite() && value > low && value < high,
            Range::FromUpTo(low, high) => value.is_finite() && value >= low && value < high,
            Range::Within(low, high) => value.is_finite() && value >= low && value <= high,
        };
        if ok {
            Ok(())
        } else if !value.is_finite() {
            Err("is not finite")
        } else {
            Err("is out of range")
        }
    }

    /// The range in words, numbers with at most six significant digits.
    pub fn phrase(self, unit: Unit) -> String {
        match self {
            Range::Within(low, high) => format!(
                "from {} to {}",
                crate::units::format_si(low, unit.symbol()),
                crate::units::format_si(high, unit.symbol())
            ),
            Range::Positive => "greater than zero and finite".into(),
            Range::PositiveOrInfinite => "greater than zero (.inf means ideal)".into(),
            Range::NonNegative => "zero or more, finite".into(),
            Range::Finite => "finite".into(),
            Range::Between(low, high) => format!(
                "strictly between {} and {}",
                short_number(low),
                short_number(high)
            ),
            Range::FromUpTo(low, high) => format!(
                "from {} up to (not including) {}",
                short_number(low),
                short_number(high)
            ),
        }
    }

    /// A plain number inside the range, for an example when none of the unit's fits.
    fn example(self) -> String {
        let inside = |value: f64| self.check(value).is_ok();
        let value = match self {
            Range::Positive | Range::PositiveOrInfinite => 1.0,
            Range::NonNegative | Range::Finite => 0.0,
            Range::FromUpTo(low, _) => low,
            Range::Between(low, high) | Range::Within(low, high) => {
                let middle = 0.5 * (low + high);
                // The middle rounded to one, then two, … significant digits, while inside.
                (0..6)
                    .map(|digits| {
                        let scale = 10f64.powi(middle.abs().log10().floor() as i32 - digits);
                        (middle / scale).round() * scale
                    })
                    .find(|candidate| inside(*candidate))
                    .unwrap_or(middle)
            }
        };
        short_number(value)
    }
}

/// A mapping whose keys have been checked against the accepted set.
pub struct MapAt<'a> {
    at: At<'a>,
    entries: &'a [(Node, Node)],
}

impl<'a> MapAt<'a> {
    /// The value under `key`, if present and not null.
    pub fn get(&self, key: &str) -> Option<At<'a>> {
        self.entries
            .iter()
            .find_map(|(k, v)| match (&k.value, &v.value) {
                (NodeValue::Text(name), value)
                    if name == key && !matches!(value, NodeValue::Null) =>
                {
                    Some(At {
                        node: v,
                        path: join(&self.at.path, key),
                    })
                }
                _ => None,
            })
    }

    /// The value under `key`, or an error saying it is required.
    pub fn required(&self, key: &str, accepted: &str) -> Result<At<'a>, PlanError> {
        self.get(key).ok_or_else(|| {
            PlanError::at(
                self.at.node.line,
                self.at.node.column,
                &join(&self.at.path, key),
                format!("required key `{key}` is missing"),
                accepted,
            )
        })
    }

    /// An optional quantity with a default.
    pub fn quantity_or(
        &self,
        key: &str,
        unit: Unit,
        range: Range,
        default: f64,
    ) -> Result<f64, PlanError> {
        match self.get(key) {
            Some(at) => at.quantity_where(unit, range),
            None => Ok(default),
        }
    }

    /// A required quantity.
    pub fn quantity(&self, key: &str, unit: Unit, range: Range) -> Result<f64, PlanError> {
        self.required(key, &accepted_phrase(unit, range))?
            .quantity_where(unit, range)
    }
}

/// A whole number for a message: exact up to six digits, else six significant digits.
fn whole_number(value: u64) -> String {
    if value < 1_000_000 {
        value.to_string()
    } else {
        short_number(value as f64)
    }
}

fn join(path: &str, key: &str) -> String {
    if path.is_empty() {
        key.to_owned()
    } else {
        format!("{path}.{key}")
    }
}

/// The accepted name closest to a misspelt one (edit distance at most 3).
pub(crate) fn closest<'b>(name: &str, allowed: &[&'b str]) -> Option<&'b str> {
    allowed
        .iter()
        .map(|candidate| (edit_distance(name, candidate), *candidate))
        .filter(|(distance, _)| *distance <= 3)
        .min_by_key(|(distance, _)| *distance)
        .map(|(_, candidate)| candidate)
}

fn edit_distance(a: &str, b: &str) -> usize {
    let b_chars: Vec<char> = b.chars().collect();
    let mut previous: Vec<usize> = (0..=b_chars.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut current = vec![i + 1];
        for (j, cb) in b_chars.iter().enumerate() {
            let substitution = previous[j] + usize::from(ca != *cb);
            current.push(substitution.min(previous[j + 1] + 1).min(current[j] + 1));
        }
        previous = current;
    }
    previous[b_chars.len()]
}
