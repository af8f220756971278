//! Property tests of the plan reader (run in every `cargo test`): random and mutated plans
//! must give either a valid plan or a located `PlanError`, never a panic. The demo plan is
//! mutated by deleting, duplicating and replacing bytes and whole tokens, the mutations a
//! hand-edited file typically suffers. A `cargo fuzz` target (fuzz/) drives the same entry
//! point without these shape limits.

use linbudget::Plan;
use proptest::prelude::*;

const DEMO: &str = include_str!("../specs/sensor-front-end.yaml");

/// Tokens a plan is made of, used as replacements.
const TOKENS: &[&str] = &[
    ":",
    "-",
    "[",
    "]",
    "{",
    "}",
    ",",
    "&a",
    "*a",
    "!!str",
    ".inf",
    "-.inf",
    ".nan",
    "~",
    "0",
    "-1",
    "1e308",
    "1e-320",
    "\"1 mA\"",
    "k",
    "\n",
    "  ",
    "\t",
    "#",
    "'",
    "\"",
    "|",
    ">",
    "stages",
    "name",
    "drive",
    "amplitudes",
    "from",
    "to",
    "points",
    "runs",
    "monte_carlo",
    "budget",
    "metric",
    "hd0",
    "hd999",
    "sizing",
    "emitter_resistance",
    "9999999999999999999999",
];

#[derive(Debug, Clone)]
enum Mutation {
    Delete { at: usize, len: usize },
    Duplicate { at: usize, len: usize },
    ReplaceByte { at: usize, byte: u8 },
    InsertToken { at: usize, token: usize },
    ReplaceWord { word: usize, token: usize },
}

fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        (any::<usize>(), 1usize..40).prop_map(|(at, len)| Mutation::Delete { at, len }),
        (any::<usize>(), 1usize..200).prop_map(|(at, len)| Mutation::Duplicate { at, len }),
        (any::<usize>(), any::<u8>()).prop_map(|(at, byte)| Mutation::ReplaceByte { at, byte }),
        (any::<usize>(), any::<usize>())
            .prop_map(|(at, token)| Mutation::InsertToken { at, token }),
        (any::<usize>(), any::<usize>())
            .prop_map(|(word, token)| Mutation::ReplaceWord { word, token }),
    ]
}

fn apply(text: &mut Vec<u8>, mutation: &Mutation) {
    let n = text.len().max(1);
    match *mutation {
        Mutation::Delete { at, len } => {
            let start = at % n;
            let end = (start + len).min(text.len());
            text.drain(start.min(text.len())..end);
        }
        Mutation::Duplicate { at, len } => {
            let start = (at % n).min(text.len());
            let end = (start + len).min(text.len());
            let copy = text[start..end].to_vec();
            text.splice(end..end, copy);
        }
        Mutation::ReplaceByte { at, byte } => {
            if !text.is_empty() {
                let i = at % text.len();
                text[i] = byte;
            }
        }
        Mutation::InsertToken { at, token } => {
            let i = (at % n).min(text.len());
            text.splice(i..i, TOKENS[token % TOKENS.len()].bytes());
        }
        Mutation::ReplaceWord { word, token } => {
            let words: Vec<(usize, usize)> = word_spans(text);
            if let Some(&(start, end)) = words.get(word % words.len().max(1)) {
                text.splice(start..end, TOKENS[token % TOKENS.len()].bytes());
            }
        }
    }
}

fn word_spans(text: &[u8]) -> Vec<(usize, usize)> {
    let mut spans = Vec::new();
    let mut start = None;
    for (i, b) in text.iter().enumerate() {
        let in_word = b.is_ascii_alphanumeric() || *b == b'_' || *b == b'.';
        match (in_word, start) {
            (true, None) => start = Some(i),
            (false, Some(s)) => {
                spans.push((s, i));
                start = None;
            }
            _ => {}
        }
    }
    if let Some(s) = start {
        spans.push((s, text.len()));
    }
    spans
}

/// The property: Ok, or an error that names a line (or says the parser could not place it
/// while naming the whole document) and says what is wrong.
fn reads_cleanly(text: &str) -> Result<(), TestCaseError> {
    match Plan::from_yaml(text, "mutated.yaml") {
        Ok(plan) => {
            prop_assert!(!plan.stages.is_empty());
            prop_assert!(plan
                .drive
                .amplitudes
                .iter()
                .all(|a| a.is_finite() && *a > 0.0));
        }
        Err(err) => {
            prop_assert!(!err.problem.is_empty());
            prop_assert_eq!(err.file.as_str(), "mutated.yaml");
            let lines = text.lines().count() as u64 + 1;
            prop_assert!(
                err.line <= lines,
                "line {} beyond the text's {} lines",
                err.line,
                lines
            );
            prop_assert!(err.line > 0 || err.key_path.is_empty() || err.problem.contains("YAML"));
        }
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]

    #[test]
    fn mutated_demo_plans_never_panic(mutations in prop::collection::vec(mutation(), 1..6)) {
        let mut bytes = DEMO.as_bytes().to_vec();
        for m in &mutations {
            apply(&mut bytes, m);
        }
        let text = String::from_utf8_lossy(&bytes);
        reads_cleanly(&text)?;
    }

    #[test]
    fn random_token_soup_never_panics(tokens in prop::collection::vec(0usize..TOKENS.len(), 0..80)) {
        let text: String = tokens.iter().map(|t| TOKENS[*t]).collect::<Vec<_>>().join(" ");
        reads_cleanly(&text)?;
    }

    #[test]
    fn random_text_never_panics(text in "\\PC{0,300}") {
        reads_cleanly(&text)?;
    }
}

#[test]
fn the_demo_plan_itself_reads() {
    assert!(Plan::from_yaml(DEMO, "demo.yaml").is_ok());
}
