//! The library calls of the contract's "Library" section give the same figures as the command
//! line for the same stage (the CLI is a client of the same calls), and their errors work with
//! `?` in a function returning `Box<dyn std::error::Error>`.

use assert_cmd::Command;
use linbudget::{Plan, Report, Stage, Transistor};
use std::fs;

const PLAN: &str = "name: library-check
stages:
  - name: degenerated
    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 100
    transistor: {beta: 100, early_voltage: 50 V}
  - name: loaded
    tail_current: 2 mA
    load_resistance: 1k
    emitter_resistance: 50
    load_capacitance: 2 pF
    transistor: {beta: 100}
drive:
  amplitudes: [10 mV, 100 mV]
  frequencies: [1 MHz]
  two_tone_spacing: 100 kHz
";

fn cli_report() -> Report {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("plan.yaml");
    fs::write(&path, PLAN).unwrap();
    let output = Command::cargo_bin("linbudget")
        .unwrap()
        .args([
            "run",
            path.to_str().unwrap(),
            "--json",
            "--no-figures",
            "--out",
        ])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    assert!(output.status.success(), "{output:?}");
    serde_json::from_slice(&output.stdout).unwrap()
}

fn stages() -> [Stage; 2] {
    [
        Stage::new("degenerated", 1e-3, 2e3)
            .emitter_resistance(100.0)
            .transistor(Transistor::default().beta(100.0).early_voltage(50.0)),
        Stage::new("loaded", 2e-3, 1e3)
            .emitter_resistance(50.0)
            .load_capacitance(2e-12)
            .transistor(Transistor::default().beta(100.0)),
    ]
}

fn close(what: &str, library: Option<f64>, cli: Option<f64>) {
    match (library, cli) {
        (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-9, "{what}: library {a} vs CLI {b}"),
        (a, b) => assert_eq!(a, b, "{what}"),
    }
}

#[test]
fn library_figures_equal_the_cli_figures() -> Result<(), Box<dyn std::error::Error>> {
    let report = cli_report();
    for stage in stages() {
        let solved = stage.at(27.0)?.two_tone_spacing(1e5);
        for point in report.points.iter().filter(|p| p.stage == stage.name) {
            let tone = solved.tone(point.amplitude_v, point.frequency_hz)?;
            let what = format!("{} at {} V", stage.name, point.amplitude_v);
            close(&format!("{what} HD3"), tone.hd_dbc(3), point.harmonic(3));
            close(&format!("{what} HD5"), tone.hd_dbc(5), point.harmonic(5));
            close(&format!("{what} THD"), tone.thd_dbc(), point.thd_dbc);
            close(
                &format!("{what} gain"),
                Some(tone.gain_db()),
                Some(point.gain_db),
            );
            let two = solved.two_tone(point.amplitude_v, point.frequency_hz, 1e5)?;
            close(
                &format!("{what} IM3"),
                two.im3_dbc(),
                point.im3_dbc.flatten(),
            );
        }
        let intercept = report
            .intercepts
            .iter()
            .find(|i| i.stage == stage.name)
            .unwrap();
        let f = intercept.frequency_hz;
        close(
            "IIP3 (dBV)",
            Some(20.0 * solved.iip3_v(f)?.log10()),
            intercept.iip3_dbv,
        );
        close(
            "P1dB (dB of volts)",
            Some(20.0 * solved.p1db_v(f)?.log10()),
            intercept.p1db_v.map(|v| 20.0 * v.log10()),
        );
        close(
            "steering range",
            Some(solved.steering_range_v()),
            Some(intercept.steering_range_v),
        );
        close(
            "input noise",
            Some(solved.input_noise_v_rthz()),
            Some(intercept.input_noise_v_rthz),
        );
    }
    Ok(())
}

#[test]
fn a_plan_evaluated_by_the_library_is_the_cli_report() -> Result<(), Box<dyn std::error::Error>> {
    let dir = tempfile::tempdir()?;
    let path = dir.path().join("plan.yaml");
    fs::write(&path, PLAN)?;
    let plan = Plan::from_file(&path)?;
    let report = plan.evaluate()?;
    assert!(report.met());
    let mut differences = Vec::new();
    differing_paths(
        "",
        &serde_json::to_value(&report)?,
        &serde_json::to_value(cli_report())?,
        &mut differences,
    );
    assert!(
        differences.is_empty(),
        "library and CLI differ at {differences:?}"
    );
    Ok(())
}

/// The JSON paths where two documents differ (at most ten).
fn differing_paths(at: &str, a: &serde_json::Value, b: &serde_json::Value, out: &mut Vec<String>) {
    use serde_json::Value;
    if out.len() >= 10 {
        return;
    }
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            for key in x.keys().chain(y.keys().filter(|k| !x.contains_key(*k))) {
                let (p, q) = (
                    x.get(key).unwrap_or(&Value::Null),
                    y.get(key).unwrap_or(&Value::Null),
                );
                differing_paths(&format!("{at}.{key}"), p, q, out);
            }
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => {
            for (i, (p, q)) in x.iter().zip(y).enumerate() {
                differing_paths(&format!("{at}[{i}]"), p, q, out);
            }
        }
        _ if a != b => out.push(format!("{at}: {a} vs {b}")),
        _ => {}
    }
}

#[test]
fn library_errors_work_with_the_question_mark() {
    fn bad_stage() -> Result<f64, Box<dyn std::error::Error>> {
        Ok(Stage::new("broken", -1e-3, 2e3)
            .at(27.0)?
            .steering_range_v())
    }
    let err = bad_stage().unwrap_err();
    assert!(err.to_string().contains("tail_current"), "{err}");

    fn bad_file() -> Result<Plan, Box<dyn std::error::Error>> {
        let dir = tempfile::tempdir()?;
        let path = dir.path().join("bad.yaml");
        fs::write(
            &path,
            "name: b\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: -2k}\ndrive: {amplitudes: [1 mV]}\n",
        )?;
        Ok(Plan::from_file(&path)?)
    }
    let err = bad_file().unwrap_err().to_string();
    assert!(err.contains("bad.yaml:3:"), "{err}");
    assert!(err.contains("stages[0].load_resistance"), "{err}");
    assert!(err.contains("accepted:"), "{err}");

    fn bad_amplitude() -> Result<(), Box<dyn std::error::Error>> {
        Stage::new("pair", 1e-3, 2e3).at(27.0)?.tone(-0.1, 1e3)?;
        Ok(())
    }
    assert!(bad_amplitude()
        .unwrap_err()
        .to_string()
        .contains("amplitude_v"));
}
