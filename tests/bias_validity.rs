//! Bias points that cannot exist are refused when the plan is read (so `check` finds them),
//! at the key to blame, with line, column and what is accepted; extreme but possible values
//! are answered. The rest point is worked out by hand here with KVL round the input loop and
//! the exponential law (common practice).

use assert_cmd::Command;
use linbudget::{Plan, PlanError};

/// CODATA 2018 k and q (exact by the 2019 SI definition), at 27 °C.
const PHI_T: f64 = 1.380649e-23 * 300.15 / 1.602176634e-19;

fn plan(stage_keys: &str, rest: &str) -> String {
    format!(
        "name: bias\nstages:\n  - name: pair\n    tail_current: 1 mA\n    load_resistance: 2k\n{stage_keys}drive: {{amplitudes: [10 mV]}}\n{rest}"
    )
}

fn refused(text: &str) -> PlanError {
    match Plan::from_yaml(text, "bias.yaml") {
        Ok(_) => panic!("accepted a stage that cannot bias:\n{text}"),
        Err(err) => err,
    }
}

/// 1e7 Ω per side with 1 mA puts the tail node near −5 kV: refused at the emitter resistance,
/// naming the stage, with the largest R_E that would bias (V_CM − V_BE − 0.2 V over I_E).
#[test]
fn a_ten_megohm_emitter_resistor_is_refused_with_the_largest_that_biases() {
    let err = refused(&plan("    emitter_resistance: 1e7\n", ""));
    assert_eq!(err.key_path, "stages[0].emitter_resistance");
    assert_eq!((err.line, err.column), (6, 25));
    assert!(err.problem.contains("stage `pair` cannot bias"), "{err}");
    assert!(err.problem.contains("tail node"), "{err}");
    let vbe = PHI_T * (0.5e-3f64 / 1e-16).ln();
    let largest = (2.5 - vbe - 0.2) / 0.5e-3;
    let shown = format!("{}", (largest * 1e3).round() / 1e3);
    let digits: String = shown.chars().take(5).collect();
    assert!(
        err.accepted.contains(&digits),
        "{err} (expected about {largest} Ω)"
    );
}

/// The tail node must stay above the tail source's compliance, 0.2 V by default; a plan that
/// states a smaller compliance is taken at its word.
#[test]
fn the_tail_compliance_is_the_plans_to_set() {
    // V_CM 0.9 V − V_BE ≈ 0.775 V leaves the node near 0.125 V.
    let low = plan("    input_common_mode: 0.9 V\n", "");
    let err = refused(&low);
    assert_eq!(err.key_path, "stages[0].input_common_mode");
    assert!(err.accepted.contains("tail_compliance"), "{err}");
    let allowed = plan(
        "    input_common_mode: 0.9 V\n    tail_compliance: 0.1 V\n",
        "",
    );
    assert!(Plan::from_yaml(&allowed, "bias.yaml").is_ok());
    let stricter = plan("    tail_compliance: 1.8 V\n", "");
    assert!(refused(&stricter).problem.contains("compliance of 1.8 V"));
}

#[test]
fn a_tail_node_below_ground_is_refused_naming_the_stage() {
    let err = refused(&plan("    input_common_mode: -1 V\n", ""));
    assert_eq!(err.key_path, "stages[0].input_common_mode");
    assert!(err.problem.contains("stage `pair`"), "{err}");
    assert!(err.problem.contains("outside the supply"), "{err}");
    let err = refused(&plan("    emitter_resistance: 50k\n", ""));
    assert!(
        err.problem.contains("stage `pair`") && err.problem.contains("-2"),
        "{err}"
    );
}

/// V_BE = φT·ln(I_C/I_S) outside 0.2…1.2 V: a current of 1e-30 A, or a saturation current of
/// 1 A, cannot be a forward-active junction.
#[test]
fn junctions_outside_the_exponential_law_are_refused() {
    // 1e-30 A is outside any tail current a plan may name; 5 pA against a saturation
    // current of 1e-12 A needs a negative V_BE.
    let absurd = "name: bias\nstages:\n  - {name: pair, tail_current: 1e-30, load_resistance: 2k}\ndrive: {amplitudes: [10 mV]}\n";
    assert_eq!(refused(absurd).key_path, "stages[0].tail_current");
    let starved = "name: bias\nstages:\n  - {name: pair, tail_current: 5 pA, load_resistance: 2k, transistor: {saturation_current: 1e-12}}\ndrive: {amplitudes: [10 mV]}\n";
    let err = refused(starved);
    assert_eq!(err.key_path, "stages[0].tail_current");
    assert!(err.problem.contains("V_BE"), "{err}");
    let leaky = plan("    transistor: {saturation_current: 1}\n", "");
    assert!(refused(&leaky).problem.contains("V_BE"));
}

#[test]
fn temperatures_outside_the_models_range_are_refused_with_the_range() {
    for t in ["-273", "-260", "-255", "450"] {
        let err = refused(&format!("temperatures_c: [27, {t}]\n{}", plan("", "")));
        assert_eq!(err.key_path, "temperatures_c[1]");
        assert!(
            err.accepted.contains("-200") && err.accepted.contains("400"),
            "{err}"
        );
    }
    assert!(Plan::from_yaml(
        &format!("temperatures_c: [-55, 150]\n{}", plan("", "")),
        "b.yaml"
    )
    .is_ok());
}

/// A corner that moves a resistor far enough to lose the bias is named.
#[test]
fn a_corner_that_cannot_bias_is_named() {
    let text = plan(
        "    emitter_resistance: 3k\n",
        "corners:\n  - {name: high_r, resistors: 30%}\n",
    );
    let err = refused(&text);
    assert!(err.problem.contains("`high_r` corner"), "{err}");
}

/// Extreme values that do bias are answered: 10 MΩ emitter and load resistors with 100 nA.
#[test]
fn megohm_resistors_at_nanoamperes_are_answered() {
    let text = "name: high
stages:
  - name: s
    tail_current: 100 nA
    load_resistance: 10M
    emitter_resistance: 10M
    tail_resistance: 1G
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 100, early_voltage: 60 V, base_resistance: 1k}
    mismatch: {saturation_current: 1%}
drive: {amplitudes: [1 mV, 100 mV]}
";
    let report = Plan::from_yaml(text, "high.yaml")
        .unwrap()
        .evaluate()
        .unwrap();
    // Gain of a heavily degenerated pair: R_L/(R_E + r_e) within the base-current and tail
    // corrections (half circuit, common practice).
    let gain = 20.0 * (1e7f64 / (1e7 + PHI_T / 50e-9)).log10();
    assert!(
        (report.points[0].gain_db - gain).abs() < 0.2,
        "{}",
        report.points[0].gain_db
    );
}

/// Holding the gain while sizing scales the load until the collectors would sit below their
/// bases: such trial values are solved with the whole transistor model and fail (headroom or the
/// gain they cannot hold binds) — the answer to a plan that used to fail inside the solver.
#[test]
fn hold_gain_sizing_stops_at_saturated_collectors_instead_of_failing() {
    let text = "name: held
temperatures_c: [0, 60]
stages:
  - name: held
    tail_current: 1.2 mA
    load_resistance: 3k
    source_resistance: 100
    tail_resistance: 200k
    supply: 5 V
    input_common_mode: 2.2 V
    transistor: {beta: 80, early_voltage: 45 V, base_resistance: 150}
    mismatch: {saturation_current: 0.3%, beta: 2%}
drive:
  amplitudes: [2 mV, 20 mV, 80 mV]
budget:
  - {metric: hd3, at: 80 mV, max: -50}
  - {metric: gain, min: 10}
sizing:
  emitter_resistance: {from: 0, to: 1.5k}
  hold_gain: true
";
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("held.yaml");
    std::fs::write(&path, text).unwrap();
    let output = Command::cargo_bin("linbudget")
        .unwrap()
        .args(["run", path.to_str().unwrap(), "--json", "--out"])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(matches!(output.status.code(), Some(0 | 1)), "{stderr}");
    assert!(
        !stderr.contains("solve failed") && !stderr.contains("not finite"),
        "{stderr}"
    );
    let report: linbudget::Report = serde_json::from_slice(&output.stdout).unwrap();
    for sizing in &report.sizing {
        // A rescaled load that saturates the stage at rest stops the scaling: that trial is
        // solved with the whole model and fails its collector-base margin, and the gain it
        // could not hold.
        assert!(
            sizing.met
                || ["collector_base_margin", "gain"].contains(&sizing.binding_metric.as_str()),
            "{} °C binds on {}",
            sizing.temperature_c,
            sizing.binding_metric
        );
        // Values too large to bias carry no solved gain in the scan.
        assert!(sizing.scan.iter().any(|t| t.gain_db.is_some()));
    }
}
