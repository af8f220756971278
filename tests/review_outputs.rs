//! What a reviewer checks before accepting the figures and tables, on a plan with process
//! corners, Monte Carlo, budget lines at several frequencies, an IM3 line and a limit in dBm:
//! every budget line appears in a figure with its limit, legends are distinguishable, every
//! axis is labelled at both ends, corners are named wherever records differ by corner, numbers
//! carry SI prefixes and metrics their trade names, and SVG and PNG name one font.
//!
//! The checks read the figures' prepared data (axes, legend entries, verdict rows), not pixels.

use linbudget::plots::{self, PlotKind};
use linbudget::report::Report;
use linbudget::run::{run, RunOptions, RunOutcome, DEFAULT_MAX_WORK};
use linbudget::{Stage, Transistor};
use std::collections::BTreeSet;
use std::fs;
use std::path::PathBuf;

/// A memoryless stage (frequency only labels the points, so budget lines at two frequencies
/// cost nothing extra) over two temperatures and three corners, with Monte Carlo, two tones,
/// a noise line, an IIP3 line in dBm and sizing.
const REVIEW_PLAN: &str = "name: review-plan
temperatures_c: [-40, 85]
reference_impedance: 50
stages:
  - name: pair
    tail_current: 400 uA
    load_resistance: 5k
    emitter_resistance: 150
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 120, base_resistance: 100}
    mismatch_sigma: {saturation_current: 1%, load_resistance: 0.5%}
corners:
  - {name: slow, saturation_current: -20%, beta: -30%, resistors: +15%}
  - {name: fast, saturation_current: +20%, beta: +30%, resistors: -15%}
drive:
  amplitudes: [2 mV, 10 mV, 30 mV]
  frequencies: [1 kHz, 100 kHz]
  two_tone_spacing: 100 Hz
monte_carlo: {runs: 60, seed: 3}
budget:
  - {metric: hd3, at: 30 mV, max: -50}
  - {metric: hd2, at: 30 mV, max: -70}
  - {metric: thd, at: 10 mV, frequency: 100 kHz, max: -60}
  - {metric: im3, at: 10 mV, frequency: 100 kHz, max: -55}
  - {metric: iip3, min: \"-15 dBm\"}
  - {metric: gain, min: 15}
  - {metric: input_noise, max: 12 nV}
sizing:
  emitter_resistance: {from: 0, to: 1k}
";

fn review() -> (tempfile::TempDir, Report, PathBuf) {
    run_text(REVIEW_PLAN)
}

/// Runs the plan at `plan` into `dir/out` (figures written when asked), quietly, with the
/// default work limit; panics naming `what` if the run fails.
fn run_plan(plan: PathBuf, dir: &tempfile::TempDir, figures: bool, what: &str) -> RunOutcome {
    let options = RunOptions {
        plan,
        out: dir.path().join("out"),
        json: false,
        quiet: true,
        max_work: DEFAULT_MAX_WORK,
        figures,
        as_planned: false,
        overrides: Vec::new(),
    };
    run(&options, &|_| {}).unwrap_or_else(|e| panic!("{what} runs: {e}"))
}

/// Runs a demo plan of `specs/` without writing figures.
fn run_demo(demo: &str) -> (tempfile::TempDir, RunOutcome) {
    let dir = tempfile::tempdir().unwrap();
    let plan = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(format!("specs/{demo}.yaml"));
    let outcome = run_plan(plan, &dir, false, demo);
    (dir, outcome)
}

#[test]
fn every_budget_line_appears_in_a_figure_with_its_limit() {
    let (_dir, report, _folder) = review();
    let sketches = plots::sketches(&report);
    let rows = |kind: PlotKind| -> Vec<String> {
        sketches
            .iter()
            .filter(|s| s.kind() == kind)
            .flat_map(|s| s.key().verdicts.iter().map(|v| v.line.clone()))
            .collect()
    };
    // The margins figure holds every line, whatever its metric and frequency.
    let margins = rows(PlotKind::Margins);
    for wanted in [
        "HD3 ≤ −50 dBc at 30 mV, 1 kHz",
        "HD2 ≤ −70 dBc at 30 mV, 1 kHz",
        "THD ≤ −60 dBc at 10 mV, 100 kHz",
        "IM3 ≤ −55 dBc at 10 mV, 100 kHz",
        "gain ≥ 15 dB, 1 kHz",
        "input noise ≤ 12 nV/√Hz, 1 kHz",
    ] {
        assert!(
            margins.iter().any(|r| r == wanted),
            "{wanted} in {margins:?}"
        );
    }
    // The IIP3 limit is shown in dBm with its voltage: 10^(−1.5)·1 mW into 50 Ω is
    // sqrt(2·50·3.162e-5) = 56.2 mV peak (P = V²/2R, common practice).
    assert!(
        margins
            .iter()
            .any(|r| r == "IIP3 ≥ −15 dBm (56.2 mV), 1 kHz"),
        "{margins:?}"
    );
    // Distortion lines are masks in the harmonics figure at their own frequency: the
    // 100 kHz lines get a figure of their own.
    let stems: BTreeSet<&str> = sketches.iter().map(|s| s.stem()).collect();
    assert!(stems.contains("harmonics-pair") && stems.contains("harmonics-pair-100kHz"));
    let at_100k = sketches
        .iter()
        .find(|s| s.stem() == "harmonics-pair-100kHz")
        .unwrap();
    let lines: Vec<&str> = at_100k
        .key()
        .verdicts
        .iter()
        .map(|v| v.line.as_str())
        .collect();
    assert_eq!(lines, ["THD ≤ −60 dBc at 10 mV", "IM3 ≤ −55 dBc at 10 mV"]);
    // The IM3 line is drawn on the two-tone figure at its frequency.
    let two_tone = sketches
        .iter()
        .find(|s| s.stem() == "two-tone-pair-100kHz")
        .expect("a two-tone figure at the IM3 line's frequency");
    assert!(two_tone
        .key()
        .verdicts
        .iter()
        .any(|v| v.line == "IM3 ≤ −55 dBc at 10 mV"));
    // The distortion lines at the Monte Carlo frequency are drawn on its figure.
    let mc = sketches
        .iter()
        .find(|s| s.kind() == PlotKind::MonteCarlo)
        .unwrap();
    let mc_lines: Vec<&str> = mc.key().verdicts.iter().map(|v| v.line.as_str()).collect();
    assert!(mc_lines.contains(&"HD2 ≤ −70 dBc at 30 mV"), "{mc_lines:?}");
    // The versus-frequency figure carries the lines at their frequencies.
    let frequency = sketches
        .iter()
        .find(|s| s.kind() == PlotKind::Frequency)
        .unwrap();
    assert!(frequency
        .key()
        .verdicts
        .iter()
        .any(|v| v.line == "THD ≤ −60 dBc at 10 mV, 100 kHz"));
}

#[test]
fn verdicts_and_legends_name_corners_and_read_as_the_trade_writes() {
    let (_dir, report, _folder) = review();
    let sketches = plots::sketches(&report);
    for sketch in &sketches {
        let key = sketch.key();
        assert!(
            key.look_alike().is_empty(),
            "{}: legend entries {:?} look alike",
            sketch.stem(),
            key.look_alike()
                .iter()
                .map(|(a, b)| (&key.legend[*a].label, &key.legend[*b].label))
                .collect::<Vec<_>>()
        );
        let words: Vec<&str> = key
            .legend
            .iter()
            .map(|e| e.label.as_str())
            .chain(
                key.verdicts
                    .iter()
                    .flat_map(|v| [v.line.as_str(), v.detail.as_str()]),
            )
            .chain(key.notes.iter().map(String::as_str))
            .collect();
        for text in &words {
            assert!(
                !text.contains("INPUT_NOISE")
                    && !text.contains("GAIN")
                    && !text.contains("measured"),
                "{}: {text}",
                sketch.stem()
            );
        }
        // A figure without budget lines says nothing about shading.
        if key.verdicts.is_empty() {
            assert!(
                !sketch.caption().contains("forbidden"),
                "{}: {}",
                sketch.stem(),
                sketch.caption()
            );
        }
    }
    // A verdict that rests on a corner names it.
    let harmonics = sketches
        .iter()
        .find(|s| s.stem() == "harmonics-pair")
        .unwrap();
    for row in &harmonics.key().verdicts {
        assert!(
            ["typical corner", "slow corner", "fast corner"]
                .iter()
                .any(|c| row.detail.contains(c)),
            "{}",
            row.detail
        );
    }
    // The sizing legend gives the noise limit as written (12 nV/√Hz), never rounded to 0.
    let sizing = sketches
        .iter()
        .find(|s| s.kind() == PlotKind::Sizing)
        .unwrap();
    assert!(
        sizing
            .key()
            .legend
            .iter()
            .any(|e| e.label == "input noise margin (≤ 12 nV/√Hz)"),
        "{:?}",
        sizing.key().legend
    );
}

#[test]
fn every_axis_is_labelled_at_both_ends() {
    let (_dir, report, _folder) = review();
    for sketch in plots::sketches(&report) {
        for axis in sketch.axes() {
            let labels = axis.labels();
            assert_eq!(axis.ticks.first(), Some(&axis.low), "{}", sketch.stem());
            assert_eq!(axis.ticks.last(), Some(&axis.high), "{}", sketch.stem());
            assert!(
                !labels[0].is_empty() && !labels[labels.len() - 1].is_empty(),
                "{}: {labels:?}",
                sketch.stem()
            );
        }
    }
    // The lowest drive amplitude carries its own label on the amplitude axes.
    let sketches = plots::sketches(&report);
    let harmonics = sketches
        .iter()
        .find(|s| s.stem() == "harmonics-pair")
        .unwrap();
    assert!(harmonics.axes()[0].labels().contains(&"2 mV".to_owned()));
}

#[test]
fn tables_name_corners_and_use_si_prefixes_and_trade_names() {
    let (_dir, report, folder) = review();
    // points.csv: one row per (stage, corner, temperature, frequency, amplitude).
    let mut reader = csv::Reader::from_path(folder.join("points.csv")).unwrap();
    assert_eq!(&reader.headers().unwrap()[1], "corner");
    let mut keys = BTreeSet::new();
    let mut rows = 0;
    for record in reader.records() {
        let record = record.unwrap();
        keys.insert((0..5).map(|i| record[i].to_owned()).collect::<Vec<_>>());
        rows += 1;
    }
    assert_eq!(rows, report.points.len());
    assert_eq!(keys.len(), rows, "a (stage, corner, T, f, A) key repeats");
    // The planned stage and its recommended design (`pair@sized`), each over 3 corners,
    // 2 temperatures, 2 frequencies and 3 amplitudes.
    assert_eq!(rows, 2 * 3 * 2 * 2 * 3);

    let summary = fs::read_to_string(folder.join("summary.md")).unwrap();
    let header = summary
        .lines()
        .find(|l| l.starts_with("| corner | T (°C) | f | amplitude"))
        .expect("the drive-point table has a corner column");
    assert!(header.contains("HD3"));
    assert!(
        summary.contains("| slow | −40 | 100 kHz | 10 mV |"),
        "SI-prefixed frequency and amplitude"
    );
    assert!(!summary.contains("100000") && !summary.contains("1000.0"));
    assert!(summary.contains("| input noise |") && !summary.contains("input_noise |"));
    assert!(!summary.contains("| hd3 |") && summary.contains("| HD3 |"));

    let html = fs::read_to_string(folder.join("report.html")).unwrap();
    assert!(!html.contains('`'), "report.html shows a literal backtick");
    assert!(html.contains("<th>corner</th>"));
    let markdown = fs::read_to_string(folder.join("report.md")).unwrap();
    assert!(
        markdown.contains("≥ −15 dBm (56.2 mV)"),
        "the dBm line in the budget table"
    );
}

#[test]
fn svg_and_png_name_one_font_family() {
    let (_dir, _report, folder) = review();
    let svg = fs::read_to_string(folder.join("harmonics-pair.svg")).unwrap();
    let families: BTreeSet<&str> = svg
        .split("font-family=\"")
        .skip(1)
        .map(|rest| &rest[..rest.find('"').unwrap()])
        .collect();
    assert_eq!(
        families.into_iter().collect::<Vec<_>>(),
        [linbudget::plots::style_family()],
        "one family in the SVG"
    );
    assert!(linbudget::plots::style_family().starts_with("DejaVu Sans"));
}

/// The white input noise of the strain-logger stage at 27 °C against the formula worked by
/// hand in specs/README.md (standard bipolar noise analysis, from memory; CODATA 2018 k and
/// q): 6.5935 nV/√Hz.
#[test]
fn input_noise_matches_the_worked_example_of_the_plan_reference() -> Result<(), linbudget::Error> {
    let stage = Stage::new("bridge", 200e-6, 10e3)
        .emitter_resistance(560.0)
        .source_resistance(350.0)
        .supply(5.0)
        .input_common_mode(2.5)
        .transistor(
            Transistor::default()
                .saturation_current(2e-17)
                .beta(150.0)
                .base_resistance(200.0),
        );
    let noise = stage.at(27.0)?.input_noise_v_rthz();
    let (k, q) = (1.380649e-23, 1.602176634e-19);
    let kt = k * 300.15;
    let collector = 150.0 / 151.0 * 100e-6;
    let gm = collector / (kt / q);
    let g = gm / (1.0 + gm * 560.0);
    let per_side = 4.0 * kt * (550.0 + 560.0)
        + 2.0 * kt / gm
        + 2.0 * q * (collector / 150.0) * 550.0f64.powi(2)
        + 4.0 * kt / (g * g * 10e3);
    let expected = (2.0 * per_side).sqrt();
    assert!((expected - 6.5935e-9).abs() < 1e-12, "{expected}");
    assert!(
        (noise / expected - 1.0).abs() < 1e-6,
        "{noise} vs {expected}"
    );
    Ok(())
}

/// A stage near saturation with a collector-base margin line (volts) and a yield line (a
/// fraction): neither margin is in dB.
const MIXED_UNITS_PLAN: &str = "name: mixed-units
temperatures_c: [27]
stages:
  - name: pair
    tail_current: 1 mA
    load_resistance: 2.2k
    emitter_resistance: 0
    supply: 3.3 V
    input_common_mode: 1.45 V
    transistor: {beta: 110, base_resistance: 150}
    mismatch_sigma: {saturation_current: 5%}
drive:
  amplitudes: [10 mV, 100 mV]
  frequencies: [10 kHz]
monte_carlo: {runs: 40, seed: 5}
budget:
  - {metric: hd2, at: 10 mV, max: -80}
  - {metric: collector_base_margin, at: 100 mV, min: 200 mV}
  - {metric: yield, min: 99%}
  - {metric: gain, min: 10}
";

#[test]
fn margins_name_their_own_unit_in_the_report_and_the_figure_key() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("mixed.yaml");
    fs::write(&plan, MIXED_UNITS_PLAN).unwrap();
    let report = run_plan(plan, &dir, false, "the mixed-units plan").report;
    let unit_of = |metric: &str| -> Vec<String> {
        report
            .budget
            .iter()
            .filter(|b| b.metric == metric)
            .map(|b| b.margin_unit.clone())
            .collect()
    };
    assert_eq!(unit_of("collector_base_margin"), ["V"]);
    assert_eq!(unit_of("yield"), ["fraction"]);
    assert_eq!(unit_of("gain"), ["dB"]);
    let margins = plots::sketches(&report)
        .into_iter()
        .find(|s| s.kind() == PlotKind::Margins)
        .expect("a margins figure");
    let detail = |starts: &str| -> String {
        margins
            .key()
            .verdicts
            .iter()
            .find(|v| v.line.starts_with(starts))
            .unwrap_or_else(|| panic!("a verdict row for {starts}"))
            .detail
            .clone()
    };
    // Each row's margin carries the record's unit, never dB for volts or a yield.
    let volts = detail("collector base margin");
    let volts_margin = volts
        .split(" · ")
        .find(|part| part.starts_with("margin "))
        .unwrap_or_default();
    assert!(volts_margin.ends_with('V'), "{volts}");
    assert!(!volts.contains(" dB"), "{volts}");
    let yield_row = detail("yield");
    assert!(yield_row.contains("%-points"), "{yield_row}");
    assert!(!yield_row.contains(" dB"), "{yield_row}");
    assert!(detail("gain").contains(" dB"));
    // The yield margin in the key is the record's fraction in percentage points.
    let record = report.budget.iter().find(|b| b.metric == "yield").unwrap();
    let points = format!("{:.1}", 100.0 * record.margin.unwrap()).replace('-', "\u{2212}");
    assert!(
        yield_row.contains(&format!("margin {points} %-points")),
        "{yield_row}"
    );
}

/// A stage whose budget has a line with a long name (a collector-base margin at an amplitude)
/// and two temperatures, for the checks of what a figure draws near its edges.
const LONG_LABEL_PLAN: &str = "name: long-label
temperatures_c: [-10, 70]
stages:
  - name: low-supply
    tail_current: 1 mA
    load_resistance: 2.2k
    emitter_resistance: 47
    supply: 3 V
    input_common_mode: 1.2 V
    transistor: {beta: 100}
drive:
  amplitudes: [20 mV, 120 mV]
  frequencies: [10 kHz]
budget:
  - {metric: hd3, at: 120 mV, max: -40}
  - {metric: collector_base_margin, at: 120 mV, min: 200 mV}
";

fn run_text(plan_text: &str) -> (tempfile::TempDir, Report, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, plan_text).unwrap();
    let outcome = run_plan(plan, &dir, true, "the plan");
    (dir, outcome.report, outcome.folder)
}

/// Columns of a PNG (from its left edge when `left`) holding anything but the white paper.
fn inked_columns(png: &std::path::Path, strip: u32, left: bool) -> Vec<u32> {
    let image = image::open(png).unwrap().to_rgb8();
    let (width, height) = image.dimensions();
    let columns: Vec<u32> = if left {
        (0..strip).collect()
    } else {
        (width - strip..width).collect()
    };
    columns
        .into_iter()
        .filter(|&x| (0..height).any(|y| image.get_pixel(x, y).0 != [255, 255, 255]))
        .collect()
}

/// No label runs off a figure: the house frame keeps 28 px of paper at the left (where the
/// margins figure's row labels once started outside the picture, "tor base margin ≥ …") and
/// 14 px at the right of the key panel, so those strips must stay blank in every PNG.
#[test]
fn no_figure_text_runs_off_an_edge() {
    let (_dir, _report, folder) = run_text(LONG_LABEL_PLAN);
    let (_review_dir, _review, review_folder) = review();
    let mut seen = 0;
    for folder in [folder, review_folder] {
        for entry in fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            if path.extension().is_some_and(|e| e == "png") {
                seen += 1;
                assert!(
                    inked_columns(&path, 20, true).is_empty(),
                    "{}: ink in the left margin",
                    path.display()
                );
                assert!(
                    inked_columns(&path, 8, false).is_empty(),
                    "{}: ink in the right margin",
                    path.display()
                );
            }
        }
    }
    assert!(seen > 10, "{seen} figures checked");
}

/// The fill colour of the key swatch drawn just before the key label that starts with
/// `label` in an SVG figure (the key panel is the rightmost part of the figure).
fn key_colour(svg: &str, label: &str) -> Option<String> {
    let mut last_fill: Option<String> = None;
    for element in svg.split('<').skip(1) {
        let tag = &element[..element.find('>').unwrap_or(element.len())];
        if tag.starts_with("text") {
            let x: f64 = tag
                .split("x=\"")
                .nth(1)
                .and_then(|r| r.split('"').next())
                .and_then(|v| v.parse().ok())
                .unwrap_or(0.0);
            let content = element[element.find('>').map_or(0, |i| i + 1)..].trim();
            let in_key = x >= f64::from(plots::WIDTH_PX - plots::key::KEY_PX);
            if in_key && content.starts_with(label) {
                return last_fill;
            }
        } else if let Some(fill) = tag
            .split("fill=\"")
            .nth(1)
            .and_then(|r| r.split('"').next())
        {
            if fill.starts_with('#') && fill != "#FFFFFF" {
                last_fill = Some(fill.to_owned());
            }
        }
    }
    None
}

/// One temperature, one colour: the margins figure (bars by temperature) and the spectrum
/// (stems by temperature) give each temperature the same colour, and different temperatures
/// different colours.
#[test]
fn a_temperature_has_one_colour_in_every_figure_kind() {
    let (_dir, _report, folder) = run_text(LONG_LABEL_PLAN);
    let margins = fs::read_to_string(folder.join("margins-low-supply.svg")).unwrap();
    let spectrum = fs::read_to_string(folder.join("spectrum-low-supply.svg")).unwrap();
    let mut colours = Vec::new();
    for t in ["−10 °C", "70 °C"] {
        let in_margins = key_colour(&margins, t);
        let in_spectrum = key_colour(&spectrum, t);
        assert!(in_margins.is_some(), "{t} in the margins key");
        assert_eq!(in_margins, in_spectrum, "{t}: margins and spectrum");
        colours.push(in_margins);
    }
    assert_ne!(colours[0], colours[1], "two temperatures, two colours");
}

/// Every metric drawn as bench markers is named in the figure's key, even when the model's
/// own line for it is absent (the tide logger's bench HD2, from a mismatch the nominal stage
/// lacks, once had no key entry).
#[test]
fn every_bench_metric_in_a_harmonics_figure_is_in_its_key() {
    let report = run_demo("tide-logger-bench-fit").1.report;
    let sketches = plots::sketches(&report);
    for (stem, stage) in [
        ("harmonics-input-pair", "input-pair"),
        ("harmonics-input-pair-fitted", "input-pair@fitted"),
    ] {
        let sketch = sketches.iter().find(|s| s.stem() == stem).unwrap();
        let legend: Vec<String> = sketch
            .key()
            .legend
            .iter()
            .map(|e| e.label.clone())
            .collect();
        let measured: BTreeSet<&str> = report
            .residuals
            .iter()
            .filter(|r| r.stage == stage && r.metric.starts_with("hd"))
            .map(|r| r.metric.as_str())
            .collect();
        assert!(measured.contains("hd2"), "{stem}: the bench has HD2");
        for metric in measured {
            let name = metric.to_uppercase();
            assert!(
                legend.iter().any(|l| l.starts_with(&name)),
                "{stem}: bench {name} drawn with no key entry: {legend:?}"
            );
        }
    }
}

/// The HTML outside its inline figures (the SVGs carry their own text layout).
fn html_prose(html: &str) -> String {
    let mut prose = String::new();
    let mut rest = html;
    while let Some(start) = rest.find("<svg") {
        prose.push_str(&rest[..start]);
        rest = rest[start..]
            .find("</svg>")
            .map_or("", |end| &rest[start + end + 6..]);
    }
    prose.push_str(rest);
    prose
}

/// The HTML report reads as a datasheet: a number keeps its unit on its line (no ordinary
/// space between `27` and `°C` or `20` and `mV`, common practice in typesetting), the budget
/// table's operating-region column names the region only (the collector-base detail is one
/// note under the table), and no metric or topology appears in code case.
#[test]
fn html_tables_keep_units_with_numbers_and_cells_short() {
    let (_dir, report, folder) = review();
    let html = fs::read_to_string(folder.join("report.html")).unwrap();
    let prose = html_prose(&html);
    for unit in [" °C", " mV", " kHz", " dBc", " dB ", " nV/"] {
        for (at, _) in prose.match_indices(unit) {
            let before = prose[..at].chars().last().unwrap();
            assert!(
                !before.is_ascii_digit(),
                "a breakable space before{unit}: …{}…",
                &prose[at.saturating_sub(40)..at + 10]
            );
        }
    }
    assert!(
        !prose.contains("nV/√Hz"),
        "a noise unit may break after its slash"
    );
    let budget = prose
        .split("<table>")
        .find(|t| t.contains("<th>operating region</th>"))
        .expect("the budget table");
    let rows = budget.matches("<tr>").count() - 1;
    assert_eq!(rows, report.budget.len());
    let last_cells: Vec<&str> = budget
        .split("</tr>")
        .filter(|row| row.contains("<td"))
        .filter_map(|row| row.rsplit("<td").next())
        .filter_map(|cell| cell.split('>').nth(1))
        .map(|cell| cell.trim_end_matches("</td"))
        .collect();
    assert_eq!(last_cells.len(), report.budget.len());
    for (cell, record) in last_cells.iter().zip(&report.budget) {
        assert_eq!(*cell, record.region.name(), "region name only");
    }
    assert!(prose.contains("The least collector-base reverse bias over these checks is"));
    // A region name never breaks at its hyphen ("forward-" / "active").
    assert!(prose.contains("td.num, td.unbroken { white-space: nowrap; }"));
    assert_eq!(
        budget.matches("unbroken\">").count(),
        report.budget.len(),
        "every region cell is kept on one line"
    );
    for code_case in ["input_noise", "emitter_resistors", "collector_base_margin<"] {
        assert!(!prose.contains(code_case), "{code_case} in the HTML");
    }
}

/// A long sweep is summarised in the conditions (count, ends, spacing) while report.json keeps
/// every amplitude.
#[test]
fn a_long_sweep_is_summarised_in_the_html_and_kept_whole_in_the_json() {
    let plan = "name: long-sweep
temperatures_c: [27]
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100, supply: 5 V,
     input_common_mode: 2 V, transistor: {beta: 100}}
drive:
  amplitudes: {from: 1 mV, to: 1 V, points: 13, spacing: log}
  frequencies: [10 kHz]
";
    let (_dir, report, folder) = run_text(plan);
    let html = fs::read_to_string(folder.join("report.html")).unwrap();
    assert!(
        html.contains("13 amplitudes, 1&nbsp;mV … 1&nbsp;V, log-spaced"),
        "{}",
        html.lines()
            .find(|l| l.contains("Drive amplitudes"))
            .unwrap_or("")
    );
    let mut amplitudes: Vec<f64> = report.points.iter().map(|p| p.amplitude_v).collect();
    amplitudes.sort_by(f64::total_cmp);
    amplitudes.dedup();
    assert_eq!(amplitudes.len(), 13, "report.json keeps every amplitude");
}

/// The datasheet gives a quantity in volts with the prefix that suits it: a row whose values
/// reach 1 V reads in V (the schemes demo's resistor stages have IIP3 above 1 V, once printed
/// as 1251.1 mV).
#[test]
fn datasheet_rows_in_millivolts_stay_below_a_volt() {
    let (_dir, outcome) = run_demo("sediment-sonar-schemes");
    assert!(
        outcome
            .report
            .intercepts
            .iter()
            .any(|i| i.iip3_v.is_some_and(|v| v > 1.0)),
        "the demo has an IIP3 above 1 V"
    );
    let markdown = fs::read_to_string(outcome.folder.join("report.md")).unwrap();
    let mut volts_rows = 0;
    for line in markdown.lines().filter(|l| l.contains(" IIP3 |")) {
        let cells: Vec<&str> = line.split('|').map(str::trim).collect();
        // | parameter | symbol | conditions | min | typ | max | unit | min / max at |
        let unit = cells[7];
        let values: Vec<f64> = cells[4..7]
            .iter()
            .filter_map(|c| c.replace('−', "-").parse().ok())
            .collect();
        if unit == "mV" {
            assert!(values.iter().all(|v| v.abs() < 1000.0), "{line}");
        }
        if unit == "V" {
            volts_rows += 1;
        }
    }
    assert!(volts_rows > 0, "IIP3 above 1 V reads in V");
}

/// Legend entries stay apart in the demo whose stages saturate and stop biasing within the
/// swept R_E (the transfer figure's saturation band beside the steering range, the sizing
/// figure's cannot-bias band beside the usable one): the same rule as for the review plan.
#[test]
fn saturation_and_bias_bands_are_told_apart_from_the_windows() {
    let mut checked = BTreeSet::new();
    for demo in ["battery-headroom", "sonar-vga-sizing"] {
        checked.extend(demo_legends_are_distinct(demo));
    }
    assert_eq!(checked.len(), 2, "both bands drawn somewhere: {checked:?}");
}

/// Runs a demo plan (no figures written) and checks every figure's legend for look-alike
/// entries; returns which of the saturation and bias bands it met.
fn demo_legends_are_distinct(demo: &str) -> BTreeSet<&'static str> {
    let report = run_demo(demo).1.report;
    let sketches = plots::sketches(&report);
    let mut checked = BTreeSet::new();
    for sketch in &sketches {
        let key = sketch.key();
        let labels: Vec<&str> = key.legend.iter().map(|e| e.label.as_str()).collect();
        if labels.iter().any(|l| l.contains("saturates")) {
            checked.insert("saturation");
        }
        if labels.iter().any(|l| l.contains("can bias")) {
            checked.insert("bias");
        }
        assert!(
            key.look_alike().is_empty(),
            "{demo} {}: legend entries {:?} look alike",
            sketch.stem(),
            key.look_alike()
                .iter()
                .map(|(a, b)| (labels[*a], labels[*b]))
                .collect::<Vec<_>>()
        );
    }
    checked
}
