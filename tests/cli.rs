//! End-to-end: the binary on fixture plans in temporary folders, JSON parsed back into the
//! report types, exit statuses per the contract, and nothing written on bad input.

use assert_cmd::Command;
use linbudget::report::Report;
use std::f64::consts::TAU;
use std::path::Path;

fn linbudget() -> Command {
    Command::cargo_bin("linbudget").unwrap()
}

fn write_plan(dir: &Path, text: &str) -> std::path::PathBuf {
    let path = dir.join("plan.yaml");
    std::fs::write(&path, text).unwrap();
    path
}

const GOOD: &str = "name: bench-check
temperatures_c: [27, 125]
stages:
  - name: plain
    tail_current: 1 mA
    load_resistance: 2k
  - name: degenerated
    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 200
drive:
  amplitudes: [1 mV, 10 mV]
  frequencies: [1 kHz]
  two_tone_spacing: 10 kHz
budget:
  - {metric: hd3, at: 1 mV, max: -100}
  - {metric: gain, min: 6}
";

#[test]
fn run_writes_a_report_that_parses_back_and_exits_one_when_the_budget_fails() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(dir.path(), GOOD);
    let out = dir.path().join("out");
    let assert = linbudget()
        .args([
            "run",
            plan.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--json",
        ])
        .assert()
        .code(1);
    let report: Report = serde_json::from_slice(&assert.get_output().stdout).unwrap();
    let on_disk: Report =
        serde_json::from_slice(&std::fs::read(out.join("bench-check/report.json")).unwrap())
            .unwrap();
    assert_eq!(report, on_disk);
    assert!(out.join("bench-check/points.csv").is_file());
    assert!(out.join("bench-check/summary.md").is_file());
    assert_eq!(report.points.len(), 2 * 2 * 2);

    // HD3 of the undegenerated pair at 1 mV: (1/48)(v/φT)² (Gray & Meyer, from memory), so
    // the margin against −100 dBc is −100 − HD3, checked to 0.05 dB.
    for line in report
        .budget
        .iter()
        .filter(|b| b.stage == "plain" && b.metric == "hd3")
    {
        let phi = 1.380649e-23 * (line.temperature_c + 273.15) / 1.602176634e-19;
        let hd3 = 20.0 * ((1e-3 / phi).powi(2) / 48.0).log10();
        assert!((line.margin.unwrap() - (-100.0 - hd3)).abs() < 0.05);
        assert!(!line.pass);
    }
    // Gain of the ideal pair: 20·log10(I·R_L/(2φT)) (common practice).
    for line in report
        .budget
        .iter()
        .filter(|b| b.stage == "plain" && b.metric == "gain")
    {
        let phi = 1.380649e-23 * (line.temperature_c + 273.15) / 1.602176634e-19;
        let gain = 20.0 * (1e-3 * 2e3 / (2.0 * phi)).log10();
        assert!((line.value.unwrap() - gain).abs() < 0.01);
        assert!(line.pass);
    }
}

#[test]
fn check_accepts_the_demo_plans() {
    for entry in std::fs::read_dir("specs").unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "yaml") {
            linbudget()
                .args(["check", path.to_str().unwrap()])
                .assert()
                .code(0);
        }
    }
}

/// Each malformed plan must exit 2, name the line and the key path, and write nothing.
#[test]
fn malformed_plans_exit_two_with_position_and_key_path_and_write_nothing() {
    let cases: &[(&str, &str, &str)] = &[
        (
            "negative load",
            "name: x\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: -2k\ndrive:\n  amplitudes: [1 mV]\n",
            "stages[0].load_resistance",
        ),
        (
            "misspelt key",
            "name: x\nstages:\n  - name: a\n    tail_curent: 1 mA\n    load_resistance: 2k\ndrive:\n  amplitudes: [1 mV]\n",
            "stages[0].tail_curent",
        ),
        (
            "wrong unit",
            "name: x\nstages:\n  - name: a\n    tail_current: 1 mV\n    load_resistance: 2k\ndrive:\n  amplitudes: [1 mV]\n",
            "stages[0].tail_current",
        ),
        (
            "zero amplitude",
            "name: x\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: 2k\ndrive:\n  amplitudes: [0, 1 mV]\n",
            "drive.amplitudes[0]",
        ),
        (
            "no stages",
            "name: x\nstages: []\ndrive:\n  amplitudes: [1 mV]\n",
            "stages",
        ),
        (
            "broken yaml",
            "name: x\nstages:\n  - name: a\n    tail_current: [1 mA\n",
            ":",
        ),
        (
            "escaping name",
            "name: ../evil\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: 2k\ndrive:\n  amplitudes: [1 mV]\n",
            "name",
        ),
        (
            "nan amplitude",
            "name: x\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: 2k\ndrive:\n  amplitudes: [.nan]\n",
            "drive.amplitudes[0]",
        ),
    ];
    for (what, text, key_path) in cases {
        let dir = tempfile::tempdir().unwrap();
        let plan = write_plan(dir.path(), text);
        let out = dir.path().join("out");
        let assert = linbudget()
            .args([
                "run",
                plan.to_str().unwrap(),
                "--out",
                out.to_str().unwrap(),
            ])
            .assert()
            .code(2);
        let stderr = String::from_utf8_lossy(&assert.get_output().stderr).to_string();
        assert!(stderr.contains("plan.yaml:"), "{what}: {stderr}");
        assert!(stderr.contains(key_path), "{what}: no key path in {stderr}");
        assert!(!out.exists(), "{what}: something was written");
        linbudget()
            .args(["check", plan.to_str().unwrap()])
            .assert()
            .code(2);
    }
}

#[test]
fn out_pointing_at_a_file_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(dir.path(), GOOD);
    let file = dir.path().join("not-a-folder");
    std::fs::write(&file, "x").unwrap();
    linbudget()
        .args([
            "run",
            plan.to_str().unwrap(),
            "--out",
            file.to_str().unwrap(),
        ])
        .assert()
        .code(2);
    assert_eq!(std::fs::read_to_string(&file).unwrap(), "x");
}

/// HD3 at amplitude `a` of the ideal degenerated pair, from the exact implicit transfer
/// v = 2φT·atanh(x) + I·R_E·x solved here by plain bisection and a direct DFT sum — no
/// project code involved.
fn independent_hd3_dbc(a: f64, tail: f64, emitter: f64, phi: f64) -> f64 {
    let n = 512;
    let x_of = |v: f64| {
        let (mut low, mut high) = (-1.0f64, 1.0f64);
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            let f = 2.0 * phi * mid.atanh() + tail * emitter * mid - v;
            if f.is_nan() || f > 0.0 {
                high = mid;
            } else {
                low = mid;
            }
            if high - low < 1e-17 {
                break;
            }
        }
        0.5 * (low + high)
    };
    let xs: Vec<f64> = (0..n)
        .map(|i| x_of(a * (TAU * i as f64 / n as f64).cos()))
        .collect();
    let harmonic = |k: usize| {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, x) in xs.iter().enumerate() {
            let t = TAU * (k * i) as f64 / n as f64;
            re += x * t.cos();
            im += x * t.sin();
        }
        (re * re + im * im).sqrt()
    };
    20.0 * (harmonic(3) / harmonic(1)).log10()
}

/// The sized R_E for an HD3 budget against an independent search on the exact model (the
/// acceptance tolerance is 1 %; the sizer refines to 0.1 %). The bias keeps both
/// collector-base junctions reverse-biased (collectors at least 7 V above the 2.6 V bases),
/// where the exponential law of the reference is the transistor's.
#[test]
fn sizing_finds_the_least_emitter_resistance_of_an_independent_search() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(
        dir.path(),
        "name: sizing-check
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 5k, supply: 12 V, input_common_mode: 2.5 V}
drive:
  amplitudes: [100 mV]
budget:
  - {metric: hd3, at: 100 mV, max: -60}
sizing:
  emitter_resistance: {from: 0, to: 2k}
",
    );
    let assert = linbudget()
        .args([
            "run",
            plan.to_str().unwrap(),
            "--out",
            dir.path().join("o").to_str().unwrap(),
            "--json",
        ])
        .assert()
        .code(0);
    let report: Report = serde_json::from_slice(&assert.get_output().stdout).unwrap();
    let sized = report.sizing[0].emitter_resistance_ohm.unwrap();
    assert!(report.sizing[0].met);
    assert_eq!(report.sizing[0].binding_metric, "hd3");

    let phi = 1.380649e-23 * 300.15 / 1.602176634e-19;
    let (mut low, mut high) = (0.0, 2000.0);
    while high - low > 0.01 {
        let mid = 0.5 * (low + high);
        if independent_hd3_dbc(0.1, 1e-3, mid, phi) <= -60.0 {
            high = mid;
        } else {
            low = mid;
        }
    }
    assert!(
        (sized / high - 1.0).abs() < 2e-3,
        "sized {sized} vs independent {high}"
    );
}
