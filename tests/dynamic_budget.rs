//! Budget figures of a stage with load capacitance only. The collector currents are then those
//! of the memoryless stage and the loads are linear filters R_L‖C_L (linear circuit theory), so:
//! the small-signal gain at f is the static gain times |H(jω)| = 1/√(1 + (ωR_LC_L)²), and the
//! 1 dB compression point does not move with frequency (every fundamental is scaled alike).

use assert_cmd::Command;
use linbudget::report::Report;

#[test]
fn gain_follows_the_load_pole_and_p1db_stays_put() {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    std::fs::write(
        &plan,
        "name: pole
stages:
  - {name: pair, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100, load_capacitance: 2 pF}
drive:
  amplitudes: [10 mV]
  frequencies: [1 kHz, 20 MHz, 60 MHz]
budget:
  - {metric: gain, frequency: 60 MHz, min: 0}
",
    )
    .unwrap();
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
        .code(0);
    let report: Report = serde_json::from_slice(&assert.get_output().stdout).unwrap();
    let low = &report.intercepts[0];
    assert_eq!(low.frequency_hz, 1e3);
    for record in &report.intercepts[1..] {
        let omega_rc = std::f64::consts::TAU * record.frequency_hz * 2e3 * 2e-12;
        let pole_db = -10.0 * (1.0 + omega_rc * omega_rc).log10();
        let low_pole_db = -10.0 * (1.0 + (std::f64::consts::TAU * 1e3 * 4e-9f64).powi(2)).log10();
        assert!(
            (record.small_signal_gain_db - (low.small_signal_gain_db - low_pole_db + pole_db))
                .abs()
                < 0.01,
            "gain at {} Hz",
            record.frequency_hz
        );
        let p1db_shift = 20.0 * (record.p1db_v.unwrap() / low.p1db_v.unwrap()).log10();
        assert!(
            p1db_shift.abs() < 0.01,
            "P1dB moved by {p1db_shift} dB at {} Hz",
            record.frequency_hz
        );
    }
    let line = &report.budget[0];
    let omega_rc = std::f64::consts::TAU * 60e6 * 4e-9;
    let expected =
        report.intercepts[0].small_signal_gain_db - 10.0 * (1.0 + omega_rc * omega_rc).log10();
    assert!((line.value.unwrap() - expected).abs() < 0.01);
}
