//! Stages whose tail node settles over many periods reach their periodic steady state, or
//! fail naming the time constant and what to change.

use assert_cmd::Command;
use linbudget::Plan;

fn stage(tail_capacitance: &str, load: &str) -> String {
    format!(
        "  - name: slow
    tail_current: 1 mA
    load_resistance: {load}
    tail_resistance: 20k
    tail_capacitance: {tail_capacitance}
    supply: 30 V
    input_common_mode: 2.5 V
    transistor: {{beta: 100, early_voltage: 40 V}}
"
    )
}

/// A tail capacitor of 1 µF to 100 µF against 20 kΩ at 1 kHz (tail time constants of tens of
/// microseconds to milliseconds, up to several periods): the steady state is found. For the
/// differential signal of a matched pair the tail node is a virtual ground (linear circuit
/// theory), so at a small drive the gain is the memoryless stage's without the capacitor.
#[test]
fn a_large_tail_capacitor_at_a_low_frequency_settles() {
    for (capacitance, load) in [("1 uF", "2k"), ("100 uF", "20k"), ("10 mF", "2k")] {
        let text = format!(
            "name: slow\nstages:\n{}drive: {{amplitudes: [1 mV, 100 mV], frequencies: [1 kHz]}}\n",
            stage(capacitance, load)
        );
        let report = Plan::from_yaml(&text, "slow.yaml").unwrap().evaluate();
        let report = report.unwrap_or_else(|e| panic!("{capacitance}, {load}: {e}"));
        let memoryless = Plan::from_yaml(&text.replace(capacitance, "0"), "flat.yaml")
            .unwrap()
            .evaluate()
            .unwrap();
        let (slow, flat) = (report.points[0].gain_db, memoryless.points[0].gain_db);
        assert!(
            (slow - flat).abs() < 2e-3,
            "{capacitance}, {load}: {slow} dB against {flat} dB"
        );
    }
}

/// 10 mF against a 20 kΩ load at 1 kHz driven with 1 V: a tail time constant of hundreds of
/// periods that the strong drive charges to a rectified level. If the solve cannot settle it,
/// the failure names the slow node, its time constant in periods and what to change — never
/// only the solver's own words.
#[test]
fn a_stage_too_slow_for_its_period_is_answered_or_named() {
    let text = format!(
        "name: slower\nstages:\n{}drive: {{amplitudes: [1 V], frequencies: [1 kHz]}}\n",
        stage("10 mF", "20k")
    );
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("slower.yaml");
    std::fs::write(&path, text).unwrap();
    let output = Command::cargo_bin("linbudget")
        .unwrap()
        .args(["run", path.to_str().unwrap(), "--no-figures", "--out"])
        .arg(dir.path().join("out"))
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&output.stderr);
    match output.status.code() {
        Some(0 | 1) => {}
        Some(2) => {
            assert!(stderr.contains("time constant"), "{stderr}");
            assert!(stderr.contains("periods of the drive"), "{stderr}");
            assert!(stderr.contains("lower the capacitance or raise the frequency"));
            assert!(!dir.path().join("out").exists());
        }
        other => panic!("{other:?}: {stderr}"),
    }
}
