//! Reading plans: bounded reads from regular files only, the first bad byte located, parser
//! internals in the plan's words, and every "accepted" example inside its own range.

use assert_cmd::Command;
use linbudget::{Plan, PlanError};
use predicates::prelude::*;
use std::time::Duration;

/// Long enough for any check, short enough that a read that blocks fails the test.
const HANG_GUARD: Duration = Duration::from_secs(60);

fn check(path: &std::path::Path) -> assert_cmd::assert::Assert {
    Command::cargo_bin("linbudget")
        .unwrap()
        .arg("check")
        .arg(path)
        .timeout(HANG_GUARD)
        .assert()
}

#[cfg(unix)]
#[test]
fn a_device_is_refused_without_reading_it() {
    check(std::path::Path::new("/dev/zero"))
        .code(2)
        .stderr(predicate::str::contains("a device"))
        .stderr(predicate::str::contains("regular file"));
}

#[cfg(unix)]
#[test]
fn a_pipe_with_no_writer_is_refused_without_blocking() {
    let dir = tempfile::tempdir().unwrap();
    let fifo = dir.path().join("plan.yaml");
    let made = std::process::Command::new("mkfifo").arg(&fifo).status();
    if !made.is_ok_and(|s| s.success()) {
        return; // no mkfifo on this system: nothing to test
    }
    check(&fifo)
        .code(2)
        .stderr(predicate::str::contains("named pipe"));
}

#[test]
fn a_folder_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    check(dir.path())
        .code(2)
        .stderr(predicate::str::contains("a folder"));
}

#[test]
fn a_file_over_the_cap_is_refused_after_reading_only_the_cap() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("big.yaml");
    let mut text = String::from("name: big\n");
    while text.len() <= 4 * 1024 * 1024 {
        text.push_str("# padding padding padding padding padding padding padding padding\n");
    }
    std::fs::write(&path, text).unwrap();
    check(&path)
        .code(2)
        .stderr(predicate::str::contains("more than 4194304 bytes"));
}

fn refused(text: &str) -> PlanError {
    match Plan::from_yaml(text, "p.yaml") {
        Ok(_) => panic!("accepted:\n{text}"),
        Err(err) => err,
    }
}

#[test]
fn a_byte_that_is_not_utf8_is_located_by_line_and_column() {
    // 0xB5 is µ in Latin-1 and never a first byte in UTF-8 (RFC 3629).
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("latin1.yaml");
    std::fs::write(
        &path,
        b"name: p\nstages:\n  - {name: a, tail_current: 800 \xb5A, load_resistance: 2k}\n",
    )
    .unwrap();
    check(&path)
        .code(2)
        .stderr(predicate::str::contains("latin1.yaml:3:33:"))
        .stderr(predicate::str::contains("0xB5"))
        .stderr(predicate::str::contains("accepted: UTF-8"));
}

#[test]
fn cr_only_line_ends_keep_the_source_snippet() {
    let err = refused("name: p\rstages:\r  - {name: a, tail_current: 1 mA, load_resistance: -2k}\rdrive: {amplitudes: [1 mV]}\r");
    assert_eq!(err.line, 3);
    assert_eq!(
        err.source_line.as_deref(),
        Some("  - {name: a, tail_current: 1 mA, load_resistance: -2k}")
    );
}

/// Messages that name the parser's API, its options or Rust integer types mean nothing to
/// a plan's author: each is worded for the plan instead.
#[test]
fn parser_internals_are_worded_for_the_plan() {
    let cases = [
        ("name: a\nname: b\nstages: []\n", "given twice"),
        ("name: a\n---\nname: b\n", "more than one YAML document"),
        (
            "name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k}\ndrive: {amplitudes: [1 mV]}\nmonte_carlo: {runs: !!int -5}\n",
            "whole number",
        ),
    ];
    for (text, says) in cases {
        let shown = refused(text).to_string();
        assert!(shown.contains(says), "{shown}");
        for internal in ["DuplicateKeyPolicy", "Options", "from_str", "u64", "i64"] {
            assert!(!shown.contains(internal), "{shown}");
        }
    }
    let repeated = refused("name: a\nname: b\nstages: []\n");
    assert_eq!((repeated.key_path.as_str(), repeated.line), ("name", 2));
}

#[test]
fn a_metric_with_a_sign_is_not_a_harmonic() {
    let err = refused("name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k}\ndrive: {amplitudes: [1 mV]}\nbudget:\n  - {metric: hd+3, max: -60}\n");
    assert_eq!(err.key_path, "budget[0].metric");
}

/// Every numeric key of the plan with a valid value, so one at a time can be spoilt.
const KEYS: &[(&str, &str)] = &[
    ("temperatures_c[0]", "27"),
    ("stages[0].tail_current", "1 mA"),
    ("stages[0].load_resistance", "2k"),
    ("stages[0].emitter_resistance", "100"),
    ("stages[0].source_resistance", "50"),
    ("stages[0].tail_resistance", "100k"),
    ("stages[0].load_capacitance", "0"),
    ("stages[0].tail_capacitance", "0"),
    ("stages[0].supply", "5 V"),
    ("stages[0].input_common_mode", "2.5 V"),
    ("stages[0].tail_compliance", "0.2 V"),
    ("stages[0].transistor.saturation_current", "1e-16"),
    ("stages[0].transistor.beta", "100"),
    ("stages[0].transistor.early_voltage", "60 V"),
    ("stages[0].transistor.base_resistance", "100"),
    ("stages[0].transistor.transit_time", "0"),
    ("stages[0].transistor.emitter_junction_capacitance", "0"),
    ("stages[0].transistor.collector_junction_capacitance", "0"),
    ("stages[0].transistor.emitter_junction_potential", "0.75"),
    ("stages[0].transistor.emitter_grading", "0.33"),
    ("stages[0].transistor.collector_junction_potential", "0.75"),
    ("stages[0].transistor.collector_grading", "0.33"),
    ("stages[0].transistor.nominal_temperature_c", "27"),
    ("stages[0].transistor.bandgap_ev", "1.11"),
    ("stages[0].transistor.saturation_current_exponent", "3"),
    ("stages[0].transistor.flicker_coefficient", "1e-15"),
    ("stages[0].transistor.flicker_exponent", "1"),
    ("stages[0].mismatch.saturation_current", "0.1%"),
    ("stages[0].mismatch.emitter_resistance", "0.1%"),
    ("stages[0].mismatch.load_resistance", "0.1%"),
    ("stages[0].mismatch.base_resistance", "0.1%"),
    ("stages[0].mismatch.beta", "0.1%"),
    ("stages[0].mismatch_sigma.saturation_current", "1%"),
    ("stages[0].mismatch_sigma.emitter_resistance", "1%"),
    ("stages[0].mismatch_sigma.load_resistance", "1%"),
    ("stages[0].mismatch_sigma.base_resistance", "1%"),
    ("stages[0].mismatch_sigma.beta", "1%"),
    ("stages[0].tail_current_law.temperature_coefficient", "0.1%"),
    ("corners[0].saturation_current", "10%"),
    ("corners[0].beta", "10%"),
    ("corners[0].early_voltage", "10%"),
    ("corners[0].tail_current", "10%"),
    ("corners[0].resistors", "10%"),
    ("corners[0].load_resistance", "10%"),
    ("corners[0].emitter_resistance", "10%"),
    ("corners[0].base_resistance", "10%"),
    ("drive.amplitudes[0]", "10 mV"),
    ("drive.frequencies[0]", "1 kHz"),
    ("drive.two_tone_spacing", "100 Hz"),
    ("noise_band.from", "1 Hz"),
    ("noise_band.to", "1 kHz"),
    ("reference_impedance", "50"),
    ("budget[0].at", "10 mV"),
    ("budget[0].max", "-60"),
    ("budget[1].min", "100 mV"),
    ("sizing.emitter_resistance.from", "0"),
    ("sizing.emitter_resistance.to", "1k"),
];

/// The plan with every key at its valid value except `spoilt`, which gets `value`.
fn plan_with(spoilt: &str, value: &str) -> String {
    let v = |key: &str| -> String {
        if key == spoilt {
            value.to_owned()
        } else {
            KEYS.iter()
                .find(|(k, _)| *k == key)
                .map(|(_, v)| v.to_string())
                .unwrap()
        }
    };
    let stage = |k: &str| v(&format!("stages[0].{k}"));
    let transistor: Vec<String> = KEYS
        .iter()
        .filter_map(|(k, _)| k.strip_prefix("stages[0].transistor."))
        .map(|k| format!("{k}: {}", stage(&format!("transistor.{k}"))))
        .collect();
    let mismatch = |group: &str| -> String {
        KEYS.iter()
            .filter_map(|(k, _)| k.strip_prefix(&format!("stages[0].{group}.")))
            .map(|k| format!("{k}: {}", stage(&format!("{group}.{k}"))))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let corner: Vec<String> = KEYS
        .iter()
        .filter_map(|(k, _)| k.strip_prefix("corners[0]."))
        .map(|k| format!("{k}: {}", v(&format!("corners[0].{k}"))))
        .collect();
    format!(
        "name: keys
temperatures_c: [{}]
stages:
  - name: s
    tail_current: {}
    load_resistance: {}
    emitter_resistance: {}
    source_resistance: {}
    tail_resistance: {}
    load_capacitance: {}
    tail_capacitance: {}
    supply: {}
    input_common_mode: {}
    tail_compliance: {}
    transistor: {{{}}}
    mismatch: {{{}}}
    mismatch_sigma: {{{}}}
    tail_current_law: {{temperature_coefficient: {}}}
corners:
  - {{name: c, {}}}
drive: {{amplitudes: [{}], frequencies: [{}], two_tone_spacing: {}}}
noise_band: {{from: {}, to: {}}}
reference_impedance: {}
budget:
  - {{metric: hd3, at: {}, max: {}}}
  - {{metric: iip3, min: {}}}
sizing: {{emitter_resistance: {{from: {}, to: {}}}}}
",
        v("temperatures_c[0]"),
        stage("tail_current"),
        stage("load_resistance"),
        stage("emitter_resistance"),
        stage("source_resistance"),
        stage("tail_resistance"),
        stage("load_capacitance"),
        stage("tail_capacitance"),
        stage("supply"),
        stage("input_common_mode"),
        stage("tail_compliance"),
        transistor.join(", "),
        mismatch("mismatch"),
        mismatch("mismatch_sigma"),
        stage("tail_current_law.temperature_coefficient"),
        corner.join(", "),
        v("drive.amplitudes[0]"),
        v("drive.frequencies[0]"),
        v("drive.two_tone_spacing"),
        v("noise_band.from"),
        v("noise_band.to"),
        v("reference_impedance"),
        v("budget[0].at"),
        v("budget[0].max"),
        v("budget[1].min"),
        v("sizing.emitter_resistance.from"),
        v("sizing.emitter_resistance.to"),
    )
}

/// The examples after "e.g." in an accepted text.
fn examples(accepted: &str) -> Vec<String> {
    let Some(list) = accepted.split("e.g. ").nth(1) else {
        return Vec::new();
    };
    list.split(", ")
        .map(|e| e.trim().trim_matches('"').to_owned())
        .filter(|e| !e.is_empty())
        .collect()
}

/// Significant digits of every number in a message (line and column numbers included, which
/// are small).
fn significant_digits(text: &str) -> usize {
    let mut most = 0;
    let mut digits = String::new();
    let mut in_exponent = false;
    let flush = |digits: &mut String, most: &mut usize| {
        let significant = digits.trim_start_matches('0').len();
        *most = (*most).max(significant);
        digits.clear();
    };
    for c in text.chars() {
        if c.is_ascii_digit() {
            if !in_exponent {
                digits.push(c);
            }
        } else if c == '.' && !digits.is_empty() {
        } else if (c == 'e') && !digits.is_empty() {
            in_exponent = true;
        } else {
            if !(in_exponent && (c == '-' || c == '+')) {
                in_exponent = false;
                flush(&mut digits, &mut most);
            }
        }
    }
    flush(&mut digits, &mut most);
    most
}

/// Every key, spoilt with a value that is no quantity: the error names the key, its numbers
/// carry at most six significant digits, and each example offered is accepted by that key.
#[test]
fn every_accepted_example_is_inside_its_own_range() {
    assert!(
        Plan::from_yaml(&plan_with("", ""), "keys.yaml").is_ok(),
        "{:?}",
        Plan::from_yaml(&plan_with("", ""), "keys.yaml").err()
    );
    for (key, _) in KEYS {
        for bad in ["abc", "-1e300", "1e300"] {
            let Err(err) = Plan::from_yaml(&plan_with(key, bad), "keys.yaml") else {
                continue;
            };
            if err.key_path != *key {
                continue;
            }
            let shown = err.to_string();
            assert!(
                significant_digits(&shown.replace(bad, "")) <= 6,
                "more than six digits: {shown}"
            );
            for example in examples(&err.accepted) {
                let quoted = if example.contains(' ') || example.ends_with('%') {
                    format!("\"{example}\"")
                } else {
                    example.clone()
                };
                if let Err(again) = Plan::from_yaml(&plan_with(key, &quoted), "keys.yaml") {
                    assert!(
                        again.key_path != *key
                            || !(again.problem.contains("out of range")
                                || again.problem.contains("not finite")
                                || again.problem.contains("not a number")),
                        "{key}: example {example} is refused: {again}"
                    );
                }
            }
        }
    }
}
