//! A stage name holding Markdown and HTML syntax (`|`, `*`, `<`, a backtick) is one cell in
//! every table of summary.md, report.md and report.html: the three documents share one table
//! model that escapes each cell once.

use assert_cmd::Command;
use std::fs;

const NAME: &str = "a|b*c<d`e";

const PLAN: &str = r#"name: awkward
stages:
  - {name: "a|b*c<d`e", tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100, mismatch_sigma: {saturation_current: 1%}}
  - {name: plain, tail_current: 1 mA, load_resistance: 2k}
drive: {amplitudes: [10 mV, 50 mV]}
monte_carlo: {runs: 20, seed: 3}
budget:
  - {metric: hd3, at: 50 mV, max: -40}
sizing:
  emitter_resistance: {from: 0, to: 500}
"#;

fn folder() -> (tempfile::TempDir, std::path::PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, PLAN).unwrap();
    let out = dir.path().join("out");
    let output = Command::cargo_bin("linbudget")
        .unwrap()
        .args(["run", plan.to_str().unwrap(), "--quiet", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(output.status.code().is_some_and(|c| c <= 1), "{output:?}");
    (dir, out.join("awkward"))
}

/// Cells of a GitHub-flavoured Markdown table row: split at every `|` not escaped by `\`.
fn markdown_cells(row: &str) -> Vec<String> {
    let mut cells = vec![String::new()];
    let mut escaped = false;
    for c in row.trim().chars() {
        match (c, escaped) {
            ('\\', false) => {
                escaped = true;
                cells.last_mut().unwrap().push(c);
                continue;
            }
            ('|', false) => cells.push(String::new()),
            _ => cells.last_mut().unwrap().push(c),
        }
        escaped = false;
    }
    // The leading and trailing pipes leave an empty first and last cell.
    cells[1..cells.len() - 1]
        .iter()
        .map(|c| c.trim().to_owned())
        .collect()
}

/// Every Markdown table: (header cells, body rows' cells).
fn markdown_tables(text: &str) -> Vec<(Vec<String>, Vec<Vec<String>>)> {
    let lines: Vec<&str> = text.lines().collect();
    let mut tables = Vec::new();
    let mut i = 0;
    while i + 1 < lines.len() {
        if lines[i].starts_with('|') && lines[i + 1].starts_with("|---") {
            let header = markdown_cells(lines[i]);
            let mut rows = Vec::new();
            let mut j = i + 2;
            while j < lines.len() && lines[j].starts_with('|') {
                rows.push(markdown_cells(lines[j]));
                j += 1;
            }
            tables.push((header, rows));
            i = j;
        } else {
            i += 1;
        }
    }
    tables
}

fn check_markdown(document: &str, text: &str) {
    let tables = markdown_tables(text);
    assert!(!tables.is_empty(), "{document} has tables");
    let escaped = r"a\|b\*c&lt;d\`e";
    let mut seen = 0;
    for (header, rows) in &tables {
        for row in rows {
            assert_eq!(
                row.len(),
                header.len(),
                "{document}: {row:?} under {header:?}"
            );
            if row.iter().any(|c| c == escaped) {
                seen += 1;
            }
        }
    }
    assert!(
        seen >= 2,
        "{document}: the stage appears as one escaped cell in its tables ({seen})"
    );
    // Wherever the name is written, it is written escaped, never raw.
    assert!(!text.contains(NAME), "{document} holds the raw name");
}

#[test]
fn an_awkward_stage_name_is_one_cell_in_every_markdown_table() {
    let (_dir, folder) = folder();
    for document in ["summary.md", "report.md"] {
        let text = fs::read_to_string(folder.join(document)).unwrap();
        check_markdown(document, &text);
    }
}

#[test]
fn an_awkward_stage_name_is_one_cell_in_every_html_table() {
    let (_dir, folder) = folder();
    let html = fs::read_to_string(folder.join("report.html")).unwrap();
    let escaped = "a|b*c&lt;d`e";
    let mut tables = 0;
    let mut seen = 0;
    for table in html.split("<table>").skip(1) {
        let table = &table[..table.find("</table>").unwrap()];
        tables += 1;
        let header = table.matches("</th>").count();
        for row in table.split("<tr>").skip(2) {
            let cells = row.matches("</td>").count();
            assert_eq!(cells, header, "row {row}");
            if row.contains(&format!(">{escaped}</td>")) {
                seen += 1;
            }
        }
    }
    assert!(tables >= 3, "{tables} tables");
    assert!(seen >= 2, "the stage is one cell in its rows ({seen})");
    assert!(!html.contains("c<d"), "the raw `<` never reaches the HTML");
}
