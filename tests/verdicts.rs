//! Verdicts on two designs, sizing windows and guard band, impossible lines, plausibility and
//! `--set` overrides: the binary on small plans, JSON parsed back, figures checked against
//! independent computations of the exact model.

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

/// Runs `plan` with `extra` arguments, expects `status`, returns the report and standard error.
fn run(text: &str, extra: &[&str], status: i32) -> (Report, String) {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(dir.path(), text);
    let out = dir.path().join("o");
    let mut args = vec![
        "run",
        plan.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--json",
        "--no-figures",
    ];
    args.extend_from_slice(extra);
    let assert = linbudget().args(&args).assert().code(status);
    let output = assert.get_output();
    (
        serde_json::from_slice(&output.stdout).unwrap(),
        String::from_utf8_lossy(&output.stderr).into_owned(),
    )
}

/// Runs `plan` expecting exit status 2 and nothing written; returns standard error.
fn refused(text: &str, extra: &[&str]) -> String {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(dir.path(), text);
    let out = dir.path().join("o");
    let mut args = vec![
        "run",
        plan.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    let assert = linbudget().args(&args).assert().code(2);
    assert!(!out.exists(), "something was written");
    String::from_utf8_lossy(&assert.get_output().stderr).into_owned()
}

/// Thermal voltage kT/q at 27 °C (CODATA 2018 k and q).
fn phi_27() -> f64 {
    1.380649e-23 * 300.15 / 1.602176634e-19
}

/// HD3 at amplitude `a` of the ideal degenerated pair, from the exact implicit transfer
/// v = 2φT·atanh(x) + I·R_E·x (KVL with the exponential law) solved by plain bisection and a
/// direct DFT sum — no project code involved.
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

/// The least R_E whose HD3 at `a` is at most `limit`, by bisection on the independent solve.
fn independent_least_emitter(a: f64, limit: f64, high: f64) -> f64 {
    let (mut low, mut high) = (0.0, high);
    while high - low > 1e-3 {
        let mid = 0.5 * (low + high);
        if independent_hd3_dbc(a, 1e-3, mid, phi_27()) <= limit {
            high = mid;
        } else {
            low = mid;
        }
    }
    high
}

/// The stages of these plans are biased so that no drive forward-biases a collector-base
/// junction (collectors at least 7 V above the bases): the independent reference is the
/// exponential law, which is the transistor's only there.
const GUARDED: &str = "name: guarded
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 5k, supply: 12 V, input_common_mode: 2.5 V}
drive:
  amplitudes: [10 mV, 100 mV]
budget:
  - {metric: hd3, at: 100 mV, max: -60}
sizing:
  emitter_resistance: {from: 0, to: 2k}
  guard_band_db: 2
";

/// As planned (no degeneration) HD3 fails; the recommended design meets it: exit 0 with
/// `verdict.as_planned.met` false, and `--as-planned` judges the design as written: exit 1.
/// The recommended stage's HD3 at the budget amplitude agrees with an independent solve at the
/// reported R_E and sits the guard band below the limit.
#[test]
fn the_recommended_design_meets_the_line_by_the_guard_band_while_the_plan_as_written_fails() {
    let (report, stderr) = run(GUARDED, &[], 0);
    let verdict = &report.verdict;
    assert!(verdict.met && report.met);
    assert_eq!(verdict.judged, "recommended");
    assert!(!verdict.as_planned.met);
    assert_eq!(verdict.as_planned.failing.len(), 1);
    assert_eq!(verdict.as_planned.failing[0].stage, "pair");
    let recommended = verdict.recommended.as_ref().unwrap();
    assert!(recommended.met && recommended.failing.is_empty());
    let stage = &recommended.stages[0];
    assert_eq!(stage.evaluated_as, "pair@sized");
    assert!(stage.found);
    let r_e = stage.emitter_resistance_ohm;
    assert!(
        stderr.contains("met with R_E =") && stderr.contains("as planned: 1 of 1 checks fail"),
        "{stderr}"
    );

    // The derived stage is evaluated like any other: its own points, intercepts and budget.
    let point = report
        .points
        .iter()
        .find(|p| p.stage == "pair@sized" && p.amplitude_v == 0.1)
        .expect("the recommended design's drive point");
    let hd3 = point.harmonic(3).unwrap();
    let independent = independent_hd3_dbc(0.1, 1e-3, r_e, phi_27());
    assert!(
        (hd3 - independent).abs() < 0.05,
        "HD3 {hd3} vs independent {independent} at R_E = {r_e}"
    );
    assert!(
        (hd3 - (-62.0)).abs() < 0.05,
        "HD3 {hd3}, limit −60 less 2 dB"
    );
    let line = report
        .budget
        .iter()
        .find(|b| b.stage == "pair@sized")
        .unwrap();
    assert!(line.pass && (line.margin.unwrap() - 2.0).abs() < 0.05);
    assert!(report.intercepts.iter().any(|i| i.stage == "pair@sized"));
    let record = report
        .stages
        .iter()
        .find(|s| s.stage == "pair@sized")
        .unwrap();
    assert_eq!(record.derived_from.as_deref(), Some("pair"));
    assert_eq!(record.emitter_resistance_ohm, r_e);

    // The least R_E holding the line by 2 dB, found independently.
    let least = independent_least_emitter(0.1, -62.0, 2000.0);
    assert!(
        (r_e / least - 1.0).abs() < 2e-3,
        "{r_e} vs independent {least}"
    );

    let (as_planned, stderr) = run(GUARDED, &["--as-planned"], 1);
    assert!(!as_planned.met && as_planned.verdict.judged == "as_planned");
    assert!(as_planned.verdict.recommended.unwrap().met);
    assert!(stderr.contains("NOT met as planned"), "{stderr}");
}

/// A `--set` override is validated like the file's own value and changes the evaluation: with
/// no guard band the recommended HD3 sits on the limit.
#[test]
fn a_set_override_replaces_a_plan_value() {
    let (report, _) = run(GUARDED, &["--set", "sizing.guard_band_db=0"], 0);
    let r_e = report.verdict.recommended.unwrap().stages[0].emitter_resistance_ohm;
    let least = independent_least_emitter(0.1, -60.0, 2000.0);
    assert!(
        (r_e / least - 1.0).abs() < 2e-3,
        "{r_e} vs independent {least}"
    );
    let (report, _) = run(
        GUARDED,
        &[
            "--set",
            "stages[pair].emitter_resistance=1k",
            "--set",
            "drive.amplitudes=[100 mV]",
        ],
        0,
    );
    assert!(report.verdict.as_planned.met);
    assert_eq!(
        report.points.iter().filter(|p| p.stage == "pair").count(),
        1
    );
}

/// The usable window: HD3 bounds R_E from below, the gain line from above. For the ideal pair
/// the gain is R_L/(R_E + 2φT/I) (common practice), so the upper edge is R_L/10^(G/20) − 2φT/I
/// exactly; the lower edge is the independent HD3 search.
#[test]
fn the_usable_window_has_the_edges_of_an_independent_calculation() {
    let text = "name: window
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 5k, supply: 12 V, input_common_mode: 2.5 V}
drive:
  amplitudes: [100 mV]
budget:
  - {metric: hd3, at: 100 mV, max: -60}
  - {metric: gain, min: 20}
sizing:
  emitter_resistance: {from: 0, to: 1k}
";
    let (report, _) = run(text, &[], 0);
    let sizing = &report.sizing[0];
    assert_eq!(sizing.window_ohm.len(), 1, "{:?}", sizing.window_ohm);
    let [low, high] = sizing.window_ohm[0];
    let upper = 5e3 / 10.0 - 2.0 * phi_27() / 1e-3;
    let lower = independent_least_emitter(0.1, -60.0, 1000.0);
    assert!(
        (low / lower - 1.0).abs() < 2e-3,
        "low edge {low} vs {lower}"
    );
    assert!(
        (high / upper - 1.0).abs() < 2e-3,
        "high edge {high} vs {upper}"
    );
    let stage = &report.verdict.recommended.as_ref().unwrap().stages[0];
    assert_eq!(stage.window_ohm, vec![[low, high]]);
    assert_eq!(stage.emitter_resistance_ohm, low);
}

/// A line no R_E in the range can meet is named with its best value and where it occurs: the
/// gain of the ideal pair is greatest with no degeneration, I·R_L/(2φT) (common practice).
#[test]
fn an_impossible_line_is_named_with_its_best_value_and_where() {
    let text = "name: impossible
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 2k}
drive:
  amplitudes: [100 mV]
budget:
  - {metric: hd3, at: 100 mV, max: -60}
  - {metric: gain, min: 40}
sizing:
  emitter_resistance: {from: 0, to: 2k}
";
    let (report, stderr) = run(text, &[], 1);
    let sizing = &report.sizing[0];
    assert!(!sizing.met && sizing.window_ohm.is_empty());
    assert_eq!(sizing.binding_metric, "gain");
    assert_eq!(sizing.unreachable.len(), 1);
    let gain = &sizing.unreachable[0];
    assert_eq!(gain.metric, "gain");
    let most = 20.0 * (1e-3 * 2e3 / (2.0 * phi_27())).log10();
    assert!((gain.best_value.unwrap() - most).abs() < 0.01);
    assert_eq!(gain.at_emitter_resistance_ohm, 0.0);
    assert!(
        gain.text.contains("cannot be met at any R_E"),
        "{}",
        gain.text
    );
    assert!(stderr.contains("gain ≥ 40.00 dB cannot be met"), "{stderr}");
    let recommended = report.verdict.recommended.unwrap();
    assert!(!recommended.met);
    // The other line can be met: the design evaluated meets it and fails only the gain.
    assert!(recommended.failing.iter().all(|f| f.metric == "gain"));
    assert_eq!(recommended.stages[0].unreachable[0].metric, "gain");
}

/// A positive dBc maximum is a mistake, refused with the line and the key path.
#[test]
fn a_positive_dbc_maximum_exits_two_with_line_and_key_path() {
    let stderr = refused(&GUARDED.replace("max: -60", "max: 40"), &[]);
    assert!(stderr.contains("plan.yaml:7:"), "{stderr}");
    assert!(stderr.contains("budget[0].max"), "{stderr}");
    assert!(stderr.contains("a negative dBc figure"), "{stderr}");
}

/// A `--set` with a key path the plan does not have is refused, naming the argument and path.
#[test]
fn a_set_override_with_a_bad_key_path_exits_two_naming_it() {
    let stderr = refused(GUARDED, &["--set", "stages[0].emiter_resistance=100"]);
    assert!(
        stderr.contains("--set `stages[0].emiter_resistance=100`")
            && stderr.contains("did you mean `emitter_resistance`"),
        "{stderr}"
    );
    let stderr = refused(GUARDED, &["--set", "stages[3].emitter_resistance=100"]);
    assert!(
        stderr.contains("stages[3]") && stderr.contains("stages[0] only"),
        "{stderr}"
    );
    let stderr = refused(GUARDED, &["--set", "stages[0].emitter_resistance=-5"]);
    assert!(
        stderr.contains("stages[0].emitter_resistance: -5 Ω is out of range"),
        "{stderr}"
    );
    linbudget()
        .args([
            "check",
            "specs/sensor-front-end.yaml",
            "--set",
            "budget[9].max=-3",
        ])
        .assert()
        .code(2);
}
