//! Bench files and fit settings through the binary: a bad file is refused like a bad plan —
//! exit status 2, a message naming the file, the row and the column and what is accepted,
//! no panic, nothing written (the contract of the command line).

use assert_cmd::Command;
use predicates::prelude::*;
use std::fs;
use std::time::Duration;

/// Hang guard only (not a timing assertion).
const HANG_GUARD: Duration = Duration::from_secs(60);

const PLAN: &str = "name: bench-check
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100}
drive: {amplitudes: [10 mV, 50 mV]}
measurements:
  - {stage: pair, file: bench.csv}
";

const FIT: &str = "fit:
  parameters: {emitter_resistance: {from: 0, to: 1k}}
  metrics: [hd3, gain]
";

const GOOD_CSV: &str = "temperature_c,frequency_hz,amplitude_v,gain_db,hd3_dbc
27,1 kHz,10 mV,22.1,-70.2
27,1 kHz,50 mV,21.9,-43.0
";

/// Runs `linbudget run` on a plan and a bench file in a fresh folder.
fn run(plan: &str, csv: &str) -> (tempfile::TempDir, assert_cmd::assert::Assert) {
    let dir = tempfile::tempdir().unwrap();
    fs::write(dir.path().join("plan.yaml"), plan).unwrap();
    fs::write(dir.path().join("bench.csv"), csv).unwrap();
    let assert = Command::cargo_bin("linbudget")
        .unwrap()
        .arg("run")
        .arg(dir.path().join("plan.yaml"))
        .arg("--out")
        .arg(dir.path().join("out"))
        .arg("--quiet")
        .timeout(HANG_GUARD)
        .assert();
    (dir, assert)
}

/// Refused with exit 2, naming every piece of `expected`, and nothing written.
fn refused(plan: &str, csv: &str, expected: &[&str]) {
    let (dir, assert) = run(plan, csv);
    let mut assert = assert
        .code(2)
        .stderr(predicate::str::contains("panicked").not());
    for piece in expected {
        assert = assert.stderr(predicate::str::contains(*piece));
    }
    assert!(!dir.path().join("out").exists(), "written for {expected:?}");
}

#[test]
fn a_cell_with_a_unit_that_does_not_fit_its_column_names_row_and_column() {
    let csv = GOOD_CSV.replace("50 mV", "50 mA");
    refused(
        PLAN,
        &csv,
        &[
            "bench.csv:3:",
            "row 3 (data row 2), column amplitude_v",
            "\"mA\" does not fit",
            "a voltage in volts",
        ],
    );
}

#[test]
fn a_missing_required_column_is_named() {
    let csv = "temperature_c,frequency_hz,gain_db\n27,1000,22\n";
    refused(
        PLAN,
        csv,
        &[
            "bench.csv:1:",
            "row 1 (header)",
            "required column amplitude_v is missing",
        ],
    );
}

#[test]
fn an_unknown_column_is_refused_with_the_nearest_name() {
    let csv = GOOD_CSV.replace("hd3_dbc", "hd3_db");
    refused(
        PLAN,
        &csv,
        &[
            "column hd3_db",
            "did you mean `hd3_dbc`?",
            "columns: temperature_c",
        ],
    );
}

#[test]
fn a_short_row_an_empty_required_cell_and_a_foreign_corner_are_located() {
    refused(
        PLAN,
        "temperature_c,frequency_hz,amplitude_v,gain_db\n27,1000,0.01\n",
        &["row 2", "has 3 cells where the header has 4"],
    );
    refused(
        PLAN,
        "temperature_c,frequency_hz,amplitude_v,gain_db\n27,,0.01,22\n",
        &[
            "row 2 (data row 1), column frequency_hz",
            "the cell is empty",
        ],
    );
    refused(
        PLAN,
        "temperature_c,frequency_hz,amplitude_v,gain_db,corner\n27,1000,0.01,22,slow\n",
        &[
            "column corner",
            "`slow` is not a process corner of the plan",
        ],
    );
    refused(
        PLAN,
        "temperature_c,frequency_hz,amplitude_v,gain_db\n-300,1000,0.01,22\n",
        &["column temperature_c", "out of range"],
    );
}

#[test]
fn a_missing_file_or_an_unknown_stage_is_a_plan_error_at_its_key() {
    refused(
        &PLAN.replace("bench.csv", "nowhere.csv"),
        GOOD_CSV,
        &[
            "plan.yaml:6:",
            "measurements[0].file",
            "cannot read bench file",
        ],
    );
    refused(
        &PLAN.replace("{stage: pair", "{stage: pear"),
        GOOD_CSV,
        &["measurements[0].stage", "no stage is named `pear`", "pair"],
    );
}

#[test]
fn fit_settings_are_checked_against_the_stage_keys_and_the_bench_columns() {
    refused(
        &format!(
            "{PLAN}{}",
            FIT.replace("emitter_resistance:", "emiter_resistance:")
        ),
        GOOD_CSV,
        &[
            "fit.parameters.emiter_resistance",
            "did you mean `emitter_resistance`?",
        ],
    );
    refused(
        &format!("{PLAN}{}", FIT.replace("to: 1k", "to: 1 mA")),
        GOOD_CSV,
        &["fit.parameters.emitter_resistance.to", "resistance in ohms"],
    );
    refused(
        &format!("{PLAN}{}", FIT.replace("[hd3, gain]", "[hd2]")),
        GOOD_CSV,
        &[
            "fit.metrics",
            "0 measured value(s) of these metrics for 1 parameter(s)",
        ],
    );
    refused(
        &format!(
            "{}{FIT}",
            PLAN.replace("measurements:\n  - {stage: pair, file: bench.csv}\n", "")
        ),
        GOOD_CSV,
        &["fit", "a fit needs bench data"],
    );
}

#[test]
fn a_good_file_with_prefixed_cells_and_comments_runs_and_records_residuals() {
    let csv = format!("# bench A7, lab 2\n{GOOD_CSV}27,1000,0.1,,\n");
    let (dir, assert) = run(&format!("{PLAN}{FIT}"), &csv);
    assert.code(predicate::in_iter([0, 1]));
    let text = fs::read_to_string(dir.path().join("out/bench-check/report.json")).unwrap();
    let report: serde_json::Value = serde_json::from_str(&text).unwrap();
    let residuals = report["residuals"].as_array().unwrap();
    // Two rows × two figures, for the plan's stage and its fitted twin; the empty cells of
    // the last row are not measured.
    assert_eq!(residuals.len(), 8);
    assert_eq!(residuals[0]["row"], 3);
    assert_eq!(residuals[0]["amplitude_v"], 0.01);
    assert_eq!(report["fit"][0]["parameter"], "emitter_resistance");
    assert_eq!(report["fit"][0]["fitted_stage"], "pair@fitted");
}
