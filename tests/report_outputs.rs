//! The figures and the datasheet report, produced by a real run of the demo plan (and of a
//! small sizing plan), read back the way a reviewer would: PNGs decode at the stated size,
//! the HTML is balanced and shows every figure, the Markdown tables agree with the JSON.

use linbudget::plots::{self, PlotKind, HEIGHT_PX, WIDTH_PX};
use linbudget::report::Report;
use linbudget::run::{run, RunOptions};
use std::collections::BTreeSet;
use std::fs;
use std::path::{Path, PathBuf};

fn run_plan(plan: &Path, out: &Path) -> (Report, PathBuf) {
    let options = RunOptions {
        plan: plan.to_owned(),
        out: out.to_owned(),
        json: false,
        quiet: true,
        max_work: linbudget::run::DEFAULT_MAX_WORK,
        figures: true,
        as_planned: false,
        overrides: Vec::new(),
    };
    let outcome = run(&options, &|_| {}).expect("the plan runs");
    (outcome.report, outcome.folder)
}

/// The demo plan's report, run once and shared by the tests that read it (each reads, none
/// writes), in the test target's scratch folder.
fn demo() -> ((), Report, PathBuf) {
    static DEMO: std::sync::OnceLock<(Report, PathBuf)> = std::sync::OnceLock::new();
    let (report, folder) = DEMO.get_or_init(|| {
        let out = Path::new(env!("CARGO_TARGET_TMPDIR")).join("report-outputs-demo");
        run_plan(Path::new("specs/sensor-front-end.yaml"), &out)
    });
    ((), report.clone(), folder.clone())
}

fn stems_with(folder: &Path, extension: &str) -> BTreeSet<String> {
    fs::read_dir(folder)
        .unwrap()
        .filter_map(|e| {
            let path = e.ok()?.path();
            if path.extension()? != extension {
                return None;
            }
            Some(path.file_stem()?.to_string_lossy().into_owned())
        })
        .collect()
}

/// Checks a PNG decodes, has the stated size and is not blank.
fn check_png(path: &Path) {
    let image = image::open(path)
        .unwrap_or_else(|e| panic!("{} does not decode: {e}", path.display()))
        .to_rgb8();
    assert_eq!(
        (image.width(), image.height()),
        (WIDTH_PX, HEIGHT_PX),
        "{}",
        path.display()
    );
    // The contract asks for at least 600×400; legible figures are at least 1200×800.
    assert!(image.width() >= 1200 && image.height() >= 800);
    let colours: BTreeSet<[u8; 3]> = image.pixels().step_by(7).map(|p| p.0).collect();
    assert!(
        colours.len() > 20,
        "{} looks blank ({} colours)",
        path.display(),
        colours.len()
    );
    let dark = image
        .pixels()
        .filter(|p| p.0.iter().all(|c| *c < 80))
        .count();
    assert!(dark > 2000, "{} has almost no text or axes", path.display());
}

#[test]
fn demo_plan_produces_every_figure_family_it_has_data_for() {
    let (_dir, _report, folder) = demo();
    let svgs = stems_with(&folder, "svg");
    let pngs = stems_with(&folder, "png");
    assert_eq!(svgs, pngs, "every figure is written as SVG and PNG");
    for stage in ["bare-pair", "degenerated"] {
        for family in ["transfer", "harmonics", "two-tone", "spectrum", "sizing"] {
            assert!(
                svgs.contains(&format!("{family}-{stage}")),
                "missing {family}-{stage}"
            );
        }
    }
    assert!(svgs.contains("stage-comparison"));
    // The demo plan has one frequency and no Monte Carlo: those figures are skipped.
    assert!(!svgs
        .iter()
        .any(|s| s.starts_with("frequency") || s.starts_with("monte-carlo")));
    assert!(
        svgs.len() >= 4,
        "the acceptance check wants at least four plots"
    );
    for stem in &pngs {
        check_png(&folder.join(format!("{stem}.png")));
        let svg = fs::read_to_string(folder.join(format!("{stem}.svg"))).unwrap();
        assert!(
            svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"),
            "{stem}.svg is a whole SVG document"
        );
        assert!(svg.contains("<text"), "{stem}.svg carries its text as text");
    }
}

#[test]
fn sizing_and_frequency_figures_appear_when_the_plan_asks_for_them() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("sizing.yaml");
    fs::write(
        &plan,
        "name: sizing-check
temperatures_c: [27]
stages:
  - name: pair
    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 0
drive:
  amplitudes: [10 mV, 100 mV]
  frequencies: [1 kHz, 10 kHz]
budget:
  - {metric: hd3, at: 100 mV, max: -40}
  - {metric: gain, min: 6}
sizing:
  emitter_resistance: {from: 0, to: 1k}
",
    )
    .unwrap();
    let (report, folder) = run_plan(&plan, &dir.path().join("out"));
    let svgs = stems_with(&folder, "svg");
    for stem in [
        "sizing-pair",
        "frequency-pair",
        "harmonics-pair",
        "transfer-pair",
        "spectrum-pair",
    ] {
        assert!(svgs.contains(stem), "missing {stem} in {svgs:?}");
        check_png(&folder.join(format!("{stem}.png")));
    }
    // The recommended design is a derived stage with figures of its own, compared side by
    // side with the stage as planned; no two-tone spacing: no intercept figure.
    for stem in [
        "harmonics-pair-sized",
        "transfer-pair-sized",
        "stage-comparison",
    ] {
        assert!(svgs.contains(stem), "missing {stem} in {svgs:?}");
    }
    assert!(!svgs.contains("two-tone-pair") && !svgs.contains("sizing-pair-sized"));
    let markdown = fs::read_to_string(folder.join("report.md")).unwrap();
    let sizing = &report.sizing[0];
    let chosen = linbudget::report::text::si_short(sizing.emitter_resistance_ohm.unwrap(), "Ω");
    assert!(markdown.contains("## Degeneration sizing"));
    assert!(
        markdown
            .lines()
            .any(|l| l.starts_with("| pair | 27 | ") && l.contains(&chosen)),
        "sizing row shows R_E = {chosen}"
    );
}

#[test]
fn monte_carlo_figure_draws_when_the_report_carries_distributions() {
    let (_dir, report, _folder) = demo();
    assert!(report.monte_carlo.is_empty());
    assert!(plots::render_all(&report)
        .unwrap()
        .iter()
        .all(|f| f.kind != PlotKind::MonteCarlo));
    let dir = tempfile::tempdir().unwrap();
    let (report, _folder) = run_plan(Path::new("specs/strain-logger-corners.yaml"), dir.path());
    assert!(!report.monte_carlo.is_empty());
    let figures = plots::render_all(&report).unwrap();
    let mc: Vec<_> = figures
        .iter()
        .filter(|f| f.kind == PlotKind::MonteCarlo)
        .collect();
    assert!(!mc.is_empty());
    for figure in mc {
        let decoded = image::load_from_memory(&figure.png).unwrap();
        assert_eq!((decoded.width(), decoded.height()), (WIDTH_PX, HEIGHT_PX));
    }
}

/// Void elements of HTML that have no closing tag.
const VOID: &[&str] = &["meta", "br", "hr", "img", "link", "input"];

/// A small well-formedness check: every opened element is closed in order.
fn check_balanced(html: &str) {
    let mut stack: Vec<String> = Vec::new();
    let mut rest = html;
    while let Some(start) = rest.find('<') {
        rest = &rest[start + 1..];
        let end = rest.find('>').expect("every tag closes");
        let tag = &rest[..end];
        rest = &rest[end + 1..];
        if tag.starts_with('!') || tag.starts_with('?') {
            continue;
        }
        let self_closing = tag.ends_with('/');
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack
                .pop()
                .unwrap_or_else(|| panic!("</{name}> closes nothing"));
            assert_eq!(open, name.trim(), "mis-nested </{name}>");
            continue;
        }
        let name: String = tag
            .chars()
            .take_while(|c| c.is_ascii_alphanumeric())
            .collect();
        if style_or_script(&name) {
            let close = format!("</{name}>");
            let at = rest.find(&close).expect("style closes");
            rest = &rest[at + close.len()..];
            continue;
        }
        if !self_closing && !VOID.contains(&name.as_str()) {
            stack.push(name);
        }
    }
    assert!(stack.is_empty(), "unclosed elements: {stack:?}");
}

fn style_or_script(name: &str) -> bool {
    name == "style" || name == "script"
}

#[test]
fn html_is_balanced_self_contained_and_shows_every_figure() {
    let (_dir, _report, folder) = demo();
    let html = fs::read_to_string(folder.join("report.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    check_balanced(&html);
    // Self-contained: nothing fetched from the network, no external style sheet or script.
    assert!(
        !html.contains("http://")
            || html.matches("http://").count()
                == html.matches("xmlns=\"http://www.w3.org/2000/svg\"").count()
    );
    assert!(!html.contains("https://") && !html.contains("<script") && !html.contains("<link"));
    let stems = stems_with(&folder, "svg");
    assert_eq!(
        html.matches("<svg").count(),
        stems.len(),
        "each figure inline once"
    );
    for stem in &stems {
        assert!(
            html.contains(&format!("<figure id=\"{stem}\">")),
            "figure {stem} missing from the HTML"
        );
        assert!(html.contains(&format!("href=\"{stem}.svg\"")));
    }
    assert!(html.contains(linbudget::report::CAUTION));
    let markdown = fs::read_to_string(folder.join("report.md")).unwrap();
    for stem in &stems {
        assert!(
            markdown.contains(&format!("]({stem}.png)")),
            "report.md shows {stem}.png"
        );
    }
    assert!(markdown.contains(linbudget::report::CAUTION));
}

/// Cells of the Markdown table row that starts with `first` (after the leading pipe).
fn row_cells<'a>(section: &'a str, first: &str, third_contains: &str) -> Vec<&'a str> {
    section
        .lines()
        .filter(|l| l.starts_with('|'))
        .map(|l| {
            l.trim_matches('|')
                .split(" | ")
                .map(str::trim)
                .collect::<Vec<_>>()
        })
        .find(|cells| cells[0] == first && cells.get(6).is_some_and(|u| *u == third_contains))
        .unwrap_or_else(|| panic!("no row `{first}` in {third_contains}"))
}

fn section<'a>(markdown: &'a str, heading: &str) -> &'a str {
    let start = markdown
        .find(heading)
        .unwrap_or_else(|| panic!("no section {heading}"));
    let rest = &markdown[start + heading.len()..];
    &rest[..rest.find("\n## ").unwrap_or(rest.len())]
}

#[test]
fn markdown_datasheet_and_budget_tables_match_the_json() {
    let (_dir, _report, folder) = demo();
    let report: Report =
        serde_json::from_str(&fs::read_to_string(folder.join("report.json")).unwrap()).unwrap();
    let markdown = fs::read_to_string(folder.join("report.md")).unwrap();
    for stage in ["bare-pair", "degenerated"] {
        let sheet = section(&markdown, &format!("## Datasheet — {stage}"));
        let intercepts: Vec<_> = report
            .intercepts
            .iter()
            .filter(|i| i.stage == stage)
            .collect();
        let typical = intercepts.iter().find(|i| i.temperature_c == 27.0).unwrap();
        let gains: Vec<f64> = intercepts.iter().map(|i| i.small_signal_gain_db).collect();
        let cells = row_cells(sheet, "small-signal differential gain", "dB");
        assert_eq!(
            cells[3],
            format!("{:.2}", gains.iter().copied().fold(f64::INFINITY, f64::min))
        );
        assert_eq!(cells[4], format!("{:.2}", typical.small_signal_gain_db));
        assert_eq!(
            cells[5],
            format!(
                "{:.2}",
                gains.iter().copied().fold(f64::NEG_INFINITY, f64::max)
            )
        );
        let cells = row_cells(sheet, "input third-order intercept", "dBV");
        assert_eq!(cells[4], format!("{:.2}", typical.iip3_dbv.unwrap()));
        let hd3: Vec<f64> = report
            .points
            .iter()
            .filter(|p| p.stage == stage && p.amplitude_v == 0.1)
            .filter_map(|p| p.harmonic(3))
            .collect();
        let cells = row_cells(sheet, "third harmonic", "dBc");
        assert_eq!(cells[2], "v_d = 100 mV peak, f = 1 kHz");
        assert_eq!(
            cells[3],
            format!("{:.2}", hd3.iter().copied().fold(f64::INFINITY, f64::min))
        );
        assert_eq!(
            cells[5],
            format!(
                "{:.2}",
                hd3.iter().copied().fold(f64::NEG_INFINITY, f64::max)
            )
        );
    }

    // The bare pair's steering range follows the tanh law of the emitter-coupled pair:
    // (I_P − I_M)/I_tail = tanh(v_d / 2φT), so 95 % on one side is v_d = φT·ln 19
    // (Gray, Hurst, Lewis & Meyer, "Analysis and Design of Analog ICs", §4.3.2; from memory).
    // Finite β and Early voltage move it slightly: 2 % tolerance.
    let sheet = section(&markdown, "## Datasheet — bare-pair");
    let cells = row_cells(sheet, "steering range", "mV");
    let phi_t = 1.380649e-23 * 300.15 / 1.602176634e-19;
    let expected_mv = phi_t * 19f64.ln() * 1e3;
    let typ: f64 = cells[4].parse().unwrap();
    assert!(
        (typ / expected_mv - 1.0).abs() < 0.02,
        "steering {typ} mV vs φT·ln19 = {expected_mv} mV"
    );
    // IIP3 of the ideal pair is 4φT per tone, peak (cubic term of tanh; same reference).
    let cells = row_cells(sheet, "input third-order intercept", "mV");
    let typ: f64 = cells[4].parse().unwrap();
    assert!(
        (typ / (4.0 * phi_t * 1e3) - 1.0).abs() < 0.05,
        "IIP3 {typ} mV vs 4φT"
    );

    // Budget table: same rows, same order, same verdicts and margins as the JSON.
    let budget = section(&markdown, "## Budget verdict");
    let header = budget.lines().find(|l| l.starts_with("| stage")).unwrap();
    assert_eq!(
        header,
        "| stage | T (°C) | metric | at | f | limit | value | margin (dB) | verdict | operating region |"
    );
    let rows: Vec<Vec<&str>> = budget
        .lines()
        .filter(|l| l.starts_with("| ") && !l.starts_with("| stage"))
        .map(|l| l.trim_matches('|').split(" | ").map(str::trim).collect())
        .collect();
    assert_eq!(rows.len(), report.budget.len());
    for (row, line) in rows.iter().zip(&report.budget) {
        assert_eq!(row[0], line.stage);
        assert_eq!(row[2], linbudget::report::text::metric_label(&line.metric));
        assert_eq!(row[7], format!("{:.2}", line.margin.unwrap()));
        assert_eq!(row[8], if line.pass { "pass" } else { "**FAIL**" });
    }
    let passed = report.budget.iter().filter(|b| b.pass).count();
    assert!(budget.contains(&format!("{passed} of {} checks pass", report.budget.len())));
}
