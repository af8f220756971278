//! Sizing a multi-tanh cell's emitter-area ratio, alone and with the tail current, against a
//! brute-force grid of outside references: the doublet's sum-of-tanh law (Gilbert, "The
//! multi-tanh principle: a tutorial overview", IEEE JSSC 33(1), 1998 — from memory) analysed by
//! a direct DFT written here, and its small-signal gain `R_L·I/(2φT)·4A/(1 + A)²` (the
//! derivative of that law at zero input: `sech²(ln A/2) = 4A/(1 + A)²`); and the plan key's
//! refusals through the binary.

use assert_cmd::Command;
use linbudget::units::thermal_voltage;
use linbudget::{BudgetLine, Drive, Limit, Metric, MultiTanh, Plan, SizingSettings, Stage};
use std::f64::consts::TAU;

const T: f64 = 27.0;
const LOAD_OHM: f64 = 1e3;
const AMPLITUDE_V: f64 = 0.03;

/// HD3 of the ideal doublet of area ratio `a` at `amplitude` (independent of the current), dBc,
/// by a direct DFT of `tanh((v + V_o)/2φT) + tanh((v − V_o)/2φT)`, `V_o = φT·ln A`.
fn doublet_hd3_dbc(a: f64, amplitude: f64) -> f64 {
    let phi = thermal_voltage(T);
    let offset = phi * a.ln();
    let n = 2048;
    let coefficient = |k: usize| -> f64 {
        let (mut re, mut im) = (0.0, 0.0);
        for i in 0..n {
            let theta = TAU * i as f64 / n as f64;
            let v = amplitude * theta.cos();
            let y = ((v + offset) / (2.0 * phi)).tanh() + ((v - offset) / (2.0 * phi)).tanh();
            re += y * (k as f64 * theta).cos();
            im += y * (k as f64 * theta).sin();
        }
        (re * re + im * im).sqrt()
    };
    20.0 * (coefficient(3) / coefficient(1)).log10()
}

/// Least area ratio in `from..=to` on a grid of 0.05 % steps whose HD3 is at most `limit`.
fn least_ratio_on_grid(from: f64, to: f64, limit: f64) -> f64 {
    let steps = ((to / from).ln() / 5e-4_f64.ln_1p()).ceil() as usize;
    (0..=steps)
        .map(|k| from * (to / from).powf(k as f64 / steps as f64))
        .find(|&a| doublet_hd3_dbc(a, AMPLITUDE_V) <= limit)
        .expect("some ratio in the range meets the line")
}

/// An ideal doublet (no base current, no Early effect) biased well clear of saturation.
fn doublet(tail_current: f64) -> Stage {
    Stage::new("cell", tail_current, LOAD_OHM)
        .supply(12.0)
        .input_common_mode(2.5)
        .multi_tanh(MultiTanh::doublet(2.0))
}

fn plan(stage: Stage, hd3_max: f64) -> Plan {
    Plan::new(
        "area-ratio",
        vec![stage],
        Drive::new(vec![0.005, AMPLITUDE_V]),
    )
    .temperatures_c(vec![T])
    .budget_line(BudgetLine::new(Metric::Harmonic(3), Limit::Max(hd3_max)).at(AMPLITUDE_V))
}

#[test]
fn the_least_area_ratio_meeting_an_hd3_line_matches_a_brute_force_grid_of_the_sum_of_tanh() {
    // HD3 falls from the bare pair's (A = 1) towards the cubic null near 2 + √3: the least
    // ratio meeting −62 dBc with a 1 dB guard band is where the sum-of-tanh HD3 crosses
    // −63 dBc. Tolerance 1 % (the grid is 0.05 %).
    let (hd3_max, guard) = (-62.0, 1.0);
    let report = plan(doublet(2e-3), hd3_max)
        .sizing(SizingSettings::area_ratio_only(1.2, 6.0).guard_band_db(guard))
        .evaluate()
        .unwrap();
    let design = &report.verdict.recommended.as_ref().unwrap().stages[0];
    let tool = design.area_ratio.expect("sizing chose the area ratio");
    let grid = least_ratio_on_grid(1.2, 6.0, hd3_max - guard);
    eprintln!("least area ratio: tool {tool:.5}, grid {grid:.5}");
    assert!(
        (tool / grid - 1.0).abs() < 0.01,
        "least area ratio: tool {tool}, brute-force grid {grid}"
    );
    // The derived design carries it, and meets the line by the guard band.
    assert!(report.met());
    let line = report
        .budget
        .iter()
        .find(|b| b.stage == design.evaluated_as)
        .unwrap();
    assert!(line.margin.unwrap() >= guard - 1e-6, "{line:?}");
}

#[test]
fn the_least_current_with_the_area_ratio_free_matches_the_grid_and_the_gain_formula() {
    // HD3 of the ideal doublet does not depend on the current, and its gain
    // R_L·I/(2φT)·4A/(1 + A)² falls as A rises above 1: the least current meeting both lines
    // uses the least ratio meeting HD3 (the grid above), and there the gain line sets the
    // current by the formula. Tolerance 1 %.
    let (hd3_max, gain_min, guard) = (-62.0, 20.0, 0.5);
    let report = plan(doublet(2e-3), hd3_max)
        .budget_line(BudgetLine::new(Metric::Gain, Limit::Min(gain_min)))
        .sizing(
            SizingSettings::area_ratio_only(1.2, 6.0)
                .tail_current(0.2e-3, 8e-3)
                .guard_band_db(guard),
        )
        .evaluate()
        .unwrap();
    let design = &report.verdict.recommended.as_ref().unwrap().stages[0];
    let a = least_ratio_on_grid(1.2, 6.0, hd3_max - guard);
    let gain = 10f64.powf((gain_min + guard) / 20.0);
    let current = gain * 2.0 * thermal_voltage(T) / (LOAD_OHM * 4.0 * a / (1.0 + a).powi(2));
    eprintln!(
        "least current: tool {:.6e} A at A = {:?}; reference {current:.6e} A at A = {a:.5}",
        design.tail_current_a, design.area_ratio
    );
    assert!(
        (design.tail_current_a / current - 1.0).abs() < 0.01,
        "least current: tool {} A at A = {:?}, reference {current} A at A = {a}",
        design.tail_current_a,
        design.area_ratio
    );
    assert!(
        (design.area_ratio.unwrap() / a - 1.0).abs() < 0.01,
        "area ratio at the least current: tool {:?}, reference {a}",
        design.area_ratio
    );
    assert!(report.met());
}

fn refused(text: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("plan.yaml");
    std::fs::write(&path, text).unwrap();
    let out = Command::cargo_bin("linbudget")
        .unwrap()
        .args(["check", path.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{out:?}");
    String::from_utf8(out.stderr).unwrap()
}

#[test]
fn the_area_ratio_is_refused_for_a_stage_without_one_naming_the_key() {
    let budget = "drive: {amplitudes: [10 mV]}\nbudget:\n  - {metric: hd3, at: 10 mV, max: -60}\n";
    // A plain pair has no area ratio.
    let err = refused(&format!(
        "name: p\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k}}\n{budget}sizing:\n  area_ratio: {{from: 2, to: 6}}\n"
    ));
    assert!(err.contains("sizing.area_ratio"), "{err}");
    assert!(
        err.contains("stage `a` is topology `emitter_resistors`"),
        "{err}"
    );
    assert!(err.contains("form: doublet"), "{err}");
    // A listed cell has areas per transistor, not one ratio.
    let err = refused(&format!(
        "name: p\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh,\n     multi_tanh: {{pairs: [{{area_p: 3, area_m: 1, tail_fraction: 0.5}}, {{area_p: 1, area_m: 3, tail_fraction: 0.5}}]}}}}\n{budget}sizing:\n  area_ratio: {{from: 2, to: 6}}\n"
    ));
    assert!(err.contains("sizing.area_ratio"), "{err}");
    assert!(err.contains("form `pairs`"), "{err}");
    // Outside the ratios a cell may have.
    let err = refused(&format!(
        "name: p\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh,\n     multi_tanh: {{form: doublet, area_ratio: 3}}}}\n{budget}sizing:\n  area_ratio: {{from: 0.5, to: 6}}\n"
    ));
    assert!(err.contains("sizing.area_ratio.from"), "{err}");
    // Three variables at once.
    let err = refused(&format!(
        "name: p\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k, topology: multi_tanh,\n     multi_tanh: {{form: doublet, area_ratio: 3}}}}\n{budget}sizing:\n  emitter_resistance: {{from: 0, to: 100}}\n  tail_current: {{from: 1 mA, to: 2 mA}}\n  area_ratio: {{from: 2, to: 6}}\n"
    ));
    assert!(err.contains("at most two variables"), "{err}");
}
