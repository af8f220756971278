//! The hold-gain sizing mode: the load is rescaled so the small-signal gain stays put, and
//! the collector-base margin at the largest budget amplitude becomes a constraint.

use assert_cmd::Command;
use linbudget::report::Report;

fn run(plan_text: &str, expected_status: i32) -> Report {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    std::fs::write(&plan, plan_text).unwrap();
    let assert = Command::cargo_bin("linbudget")
        .unwrap()
        .args([
            "run",
            plan.to_str().unwrap(),
            "--out",
            dir.path().join("o").to_str().unwrap(),
            "--json",
        ])
        .assert()
        .code(expected_status);
    serde_json::from_slice(&assert.get_output().stdout).unwrap()
}

const PLAN: &str = "name: hold
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 2k, supply: SUPPLY, input_common_mode: 2 V}
drive:
  amplitudes: [100 mV]
budget:
  - {metric: hd3, at: 100 mV, max: -60}
sizing:
  emitter_resistance: {from: 0, to: 3k}
  hold_gain: true
";

/// With an ideal pair the gain is R_L/(R_E + 1/g_m), g_m = I/(2φT) (common practice), so
/// holding it needs R_L' = R_L·(1 + g_m·R_E) exactly.
#[test]
fn hold_gain_scales_the_load_by_one_plus_gm_re() {
    let report = run(&PLAN.replace("SUPPLY", "15 V"), 0);
    let sized = &report.sizing[0];
    assert!(sized.met && !sized.headroom_binds);
    let r_e = sized.emitter_resistance_ohm.unwrap();
    let phi = 1.380649e-23 * 300.15 / 1.602176634e-19;
    let gm = 1e-3 / (2.0 * phi);
    let expected_load = 2e3 * (1.0 + gm * r_e);
    assert!((sized.load_resistance_ohm.unwrap() / expected_load - 1.0).abs() < 1e-9);
    assert!(sized.gain_cost_db.unwrap().abs() < 1e-9);
    assert!(sized.best_headroom_v.unwrap() > 0.0);
}

/// On a 3.3 V supply the larger load drives the collectors below their bases at 100 mV: the
/// distortion lines can be met but the collector-base margin cannot, and the report says so.
#[test]
fn a_low_supply_makes_headroom_bind() {
    let report = run(
        &PLAN
            .replace("SUPPLY", "3.3 V")
            .replace("input_common_mode: 2 V", "input_common_mode: 1.5 V"),
        1,
    );
    let sized = &report.sizing[0];
    assert!(!sized.met);
    assert!(sized.headroom_binds);
    assert_eq!(sized.binding_metric, "collector_base_margin");
    assert!(sized.best_headroom_v.unwrap() < 0.0);
}
