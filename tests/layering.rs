//! The layering rule of DEVELOPERS.md, checked on the source: modules import one way
//! (model → solve → measure → study → report → plots → run, with the plan reader beside the
//! model) and no two files import each other, directly or through others.
//!
//! An import is any `crate::…` path in a file (in `use` lines or written inline, tests
//! included), and `super::…` resolved against the file's own module; comments are skipped.

use std::collections::{BTreeMap, BTreeSet};
use std::fs;
use std::path::{Path, PathBuf};

/// The layers a layer may import from; every layer may also import itself.
fn allowed(layer: &str) -> &'static [&'static str] {
    match layer {
        "units" | "error" => &[],
        "model" => &["units", "error"],
        "plan" => &["units", "error", "model"],
        "solve" => &["units", "error", "model"],
        "measure" => &["units", "error", "model", "solve"],
        "study" => &["units", "error", "model", "solve", "measure"],
        "report" => &["units", "error", "model", "solve", "measure", "study"],
        "plots" => &["units", "error", "model", "report"],
        "run" => &[
            "units", "error", "model", "plan", "solve", "measure", "study", "report", "plots",
        ],
        "lib" => &[
            "units", "error", "model", "plan", "solve", "measure", "study", "report", "plots",
            "run",
        ],
        other => panic!("file in an unknown layer `{other}`: add it to the layering rule"),
    }
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The module path of a source file: `src/solve/dynamic/pair.rs` → `solve::dynamic::pair`.
fn module_of(src: &Path, file: &Path) -> Vec<String> {
    let relative = file.strip_prefix(src).unwrap().with_extension("");
    let mut parts: Vec<String> = relative
        .components()
        .map(|c| c.as_os_str().to_string_lossy().into_owned())
        .collect();
    if parts.last().is_some_and(|p| p == "mod") {
        parts.pop();
    }
    if parts == ["lib"] || parts == ["main"] {
        parts.clear();
    }
    parts
}

fn layer_of(module: &[String]) -> String {
    module.first().cloned().unwrap_or_else(|| "lib".into())
}

/// The modules a file names: `crate::a::b` and `super::…` paths anywhere in its code, and
/// `use child::…` of its own submodules (re-exports in `lib.rs` and `mod.rs`). A path counts
/// down to the deepest module it names. `use super::*` (a test module reaching its own file)
/// is not an import.
fn imports(
    module: &[String],
    text: &str,
    modules: &BTreeSet<Vec<String>>,
) -> BTreeSet<Vec<String>> {
    let deepest = |mut base: Vec<String>, segments: &[&str]| -> Vec<String> {
        for segment in segments {
            base.push((*segment).to_owned());
            if !modules.contains(&base) {
                base.pop();
                break;
            }
        }
        base
    };
    let mut found = BTreeSet::new();
    for line in text.lines() {
        let code = line.trim_start();
        if code.starts_with("//") || code.starts_with("use super::*") {
            continue;
        }
        let mut starts: Vec<usize> = code
            .match_indices("crate::")
            .chain(code.match_indices("super::"))
            .map(|(start, _)| start)
            .collect();
        let relative_use = ["use ", "pub use ", "pub(crate) use "]
            .iter()
            .find(|prefix| code.starts_with(**prefix))
            .map(|prefix| prefix.len());
        starts.extend(relative_use);
        for start in starts {
            if start > 0 && Some(start) != relative_use {
                let before = code.as_bytes()[start - 1];
                if before.is_ascii_alphanumeric() || before == b'_' || before == b':' {
                    continue;
                }
            }
            let path: String = code[start..]
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_' || *c == ':')
                .collect();
            let mut segments: Vec<&str> = path.split("::").filter(|s| !s.is_empty()).collect();
            let base = match segments.first().copied() {
                None => continue,
                Some("crate") => {
                    segments.remove(0);
                    Vec::new()
                }
                Some("super") => {
                    let mut base = module.to_vec();
                    while segments.first() == Some(&"super") {
                        segments.remove(0);
                        base.pop();
                    }
                    base
                }
                // `use child::…`: counts only when `child` is a submodule of this one.
                Some(_) => module.to_vec(),
            };
            let target = deepest(base, &segments);
            if !target.is_empty() && target != module {
                found.insert(target);
            }
        }
    }
    found
}

struct Graph {
    edges: BTreeMap<Vec<String>, BTreeSet<Vec<String>>>,
}

fn graph() -> Graph {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    let modules: BTreeSet<Vec<String>> = files.iter().map(|f| module_of(&src, f)).collect();
    let mut edges = BTreeMap::new();
    for file in &files {
        if file.ends_with("main.rs") {
            continue; // the binary is a crate of its own
        }
        let module = module_of(&src, file);
        let text = fs::read_to_string(file).unwrap();
        edges.insert(module.clone(), imports(&module, &text, &modules));
    }
    Graph { edges }
}

fn name(module: &[String]) -> String {
    if module.is_empty() {
        "lib".into()
    } else {
        module.join("::")
    }
}

#[test]
fn every_import_points_down_the_layers() {
    let graph = graph();
    let mut upward = Vec::new();
    for (from, targets) in &graph.edges {
        let layer = layer_of(from);
        for to in targets {
            let target_layer = layer_of(to);
            if target_layer != layer && !allowed(&layer).contains(&target_layer.as_str()) {
                upward.push(format!("{} → {}", name(from), name(to)));
            }
        }
    }
    assert!(
        upward.is_empty(),
        "imports against the layering: {upward:#?}"
    );
}

#[test]
fn no_two_files_import_each_other_even_through_others() {
    let graph = graph();
    // Only edges between files count: a parent `mod.rs` declaring its children is not an
    // import, and a re-export in `mod.rs` of a child points down.
    let mut cycles = Vec::new();
    for start in graph.edges.keys() {
        // Depth-first search for a path back to `start`.
        let mut stack: Vec<(Vec<String>, Vec<String>)> = graph.edges[start]
            .iter()
            .map(|t| (t.clone(), vec![name(start), name(t)]))
            .collect();
        let mut seen = BTreeSet::new();
        while let Some((node, path)) = stack.pop() {
            if &node == start {
                cycles.push(path.join(" → "));
                break;
            }
            if !seen.insert(node.clone()) {
                continue;
            }
            if let Some(next) = graph.edges.get(&node) {
                for t in next {
                    let mut p = path.clone();
                    p.push(name(t));
                    stack.push((t.clone(), p));
                }
            }
        }
    }
    assert!(cycles.is_empty(), "import circles: {cycles:#?}");
}

#[test]
fn the_graph_sees_the_imports_it_should() {
    // A check of the checker: known edges of the code base are found.
    let graph = graph();
    let edges = |from: &str| {
        let key: Vec<String> = from.split("::").map(String::from).collect();
        graph.edges[&key]
            .iter()
            .map(|m| name(m))
            .collect::<Vec<_>>()
    };
    assert!(edges("solve::transfer").contains(&"model::circuit".to_owned()));
    assert!(edges("solve::dynamic::pair").contains(&"solve::dynamic::trapezoid".to_owned()));
    assert!(edges("report::build").contains(&"study::evaluate".to_owned()));
}
