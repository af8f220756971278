//! Small drives are answered, not failed: down to 1 pV the gain is the small-signal gain and
//! the harmonics are either resolved or null below the point's stated floor.

use linbudget::model::circuit::StageCircuit;
use linbudget::report::Report;
use linbudget::solve::memoryless::single_tone_general;
use linbudget::solve::spectrum::FftCache;
use linbudget::solve::transfer::StaticSolver;
use linbudget::Plan;

/// CODATA 2018 k and q (exact by the 2019 SI definition), at 27 °C.
const PHI_T: f64 = 1.380649e-23 * 300.15 / 1.602176634e-19;

fn evaluate(text: &str) -> Report {
    Plan::from_yaml(text, "small.yaml")
        .unwrap()
        .evaluate()
        .unwrap()
}

/// The differential small-signal gain of a matched pair from the half circuit (common
/// practice; e.g. Gray & Meyer's differential-pair analysis, from memory):
/// `A = α·R_L / (r_e + R_E + (R_S + r_b)/(β + 1))`, `r_e = φT/I_E`, with the rest current
/// `I_E` found here by bisection on the input loop (KVL with the exponential law) and the
/// tail resistance's own current `V_tail/R_tail` (the tail node is a virtual ground for the
/// differential signal, so it changes the gain only through `I_E`).
fn half_circuit_gain_db() -> f64 {
    let (beta, r_b, r_s, r_e, r_l, r_tail) = (100.0, 100.0, 50.0, 100.0, 2e3, 5e4);
    let (tail, is, cm) = (1e-3, 1e-16, 2.5);
    let alpha = beta / (beta + 1.0);
    let node = |emitter: f64| {
        cm - (r_s + r_b) * emitter / (beta + 1.0)
            - PHI_T * (alpha * emitter / is).ln()
            - r_e * emitter
    };
    // 2·I_E = I_tail + V_tail/R_tail: bisect on I_E.
    let (mut low, mut high) = (0.5 * tail, 0.5 * tail + 0.5 * cm / r_tail);
    for _ in 0..200 {
        let mid = 0.5 * (low + high);
        if 2.0 * mid - tail - node(mid) / r_tail < 0.0 {
            low = mid;
        } else {
            high = mid;
        }
    }
    let emitter = 0.5 * (low + high);
    let gain = alpha * r_l / (PHI_T / emitter + r_e + (r_s + r_b) / (beta + 1.0));
    20.0 * gain.log10()
}

const GENERAL_STAGE: &str = "  - name: s
    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 100
    source_resistance: 50
    tail_resistance: 50k
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 100, base_resistance: 100}
";

#[test]
fn picovolt_and_nanovolt_drives_give_the_half_circuit_gain() {
    let report = evaluate(&format!(
        "name: small\nstages:\n{GENERAL_STAGE}drive:\n  amplitudes: [1 pV, 10 nV, 1 uV]\n  two_tone_spacing: 10 Hz\n"
    ));
    let expected = half_circuit_gain_db();
    for point in &report.points {
        assert!(
            (point.gain_db - expected).abs() < 1e-6,
            "{} V: {} dB against {expected} dB",
            point.amplitude_v,
            point.gain_db
        );
        // Two tones of the same size: one tone's output fundamental has the same gain.
        let two = point.two_tone_fundamental_v.unwrap();
        assert!((20.0 * (two / point.amplitude_v).log10() - expected).abs() < 1e-6);
        // A matched pair has no even harmonics, and the odd ones of a picovolt drive are far
        // below any floor: null, with the floor stated.
        assert_eq!(point.harmonic(2), None);
        assert_eq!(point.harmonic(3), None);
        assert!(point.floor_dbc <= -100.0, "{}", point.floor_dbc);
        assert!(point.from_series);
    }
}

#[test]
fn two_tones_at_1e_30_and_1e_20_volt_are_answered() {
    let report = evaluate(&format!(
        "name: tiny\nstages:\n{GENERAL_STAGE}drive:\n  amplitudes: [1e-30, 1e-20]\n  two_tone_spacing: 100 Hz\n"
    ));
    let expected = half_circuit_gain_db();
    for point in &report.points {
        assert!((point.gain_db - expected).abs() < 1e-6, "{}", point.gain_db);
        assert_eq!(point.im3_dbc.flatten(), None);
    }
}

const EVERY: &str = "name: sweep
stages:
  - name: every
    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 100
    source_resistance: 50
    tail_resistance: 50k
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 100, early_voltage: 60 V, base_resistance: 100}
    mismatch: {saturation_current: 1%, load_resistance: 0.5%, emitter_resistance: 0.5%, beta: 2%}
drive:
  amplitudes: {from: 1 pV, to: 1 V, points: 25}
";

/// A sweep from 1 pV to 1 V on a stage with every non-ideality the memoryless model has:
/// every point is answered; the small-drive gain is flat and equal to the stage's
/// small-signal gain (found by a different method: Richardson-extrapolated central
/// differences of the static transfer); a harmonic answered from the series equals the one
/// the slow, obviously correct sample-by-sample analysis finds at the same drive; and the
/// mismatched pair's HD2 rises 20 dB per decade of drive where it is solved directly (the
/// power series of a smooth transfer: HD2 ∝ A for small A, common practice).
#[test]
fn a_sweep_from_a_picovolt_to_a_volt_is_answered_point_by_point() {
    let plan = Plan::from_yaml(EVERY, "sweep.yaml").unwrap();
    let report = plan.evaluate().unwrap();
    assert_eq!(report.points.len(), 25);
    let small_signal = 20.0 * report.stages[0].small_signal_gain.abs().log10();
    for point in report.points.iter().filter(|p| p.amplitude_v < 1e-6) {
        assert!(
            (point.gain_db - small_signal).abs() < 1e-6,
            "{} V: {} dB against {small_signal} dB",
            point.amplitude_v,
            point.gain_db
        );
    }
    for point in &report.points {
        assert!(point.gain_db.is_finite() && point.floor_dbc.is_finite());
        for order in 2..=9 {
            if let Some(level) = point.harmonic(order) {
                assert!(level >= point.floor_dbc, "HD{order} below its floor");
            }
        }
    }
    // Series answers against the direct analysis.
    let circuit = StageCircuit::new(&plan.stages[0], 27.0);
    let solver = StaticSolver::new(circuit);
    let cache = FftCache::default();
    let mut compared = 0;
    for point in report.points.iter().filter(|p| p.from_series) {
        let Some(hd2) = point.harmonic(2) else {
            continue;
        };
        let direct = single_tone_general(&solver, &cache, point.amplitude_v, 40).unwrap();
        let reference = direct.differential.raw_dbc(2);
        assert!(
            (hd2 - reference).abs() < 0.01,
            "{} V: HD2 {hd2} against {reference}",
            point.amplitude_v
        );
        compared += 1;
    }
    assert!(
        compared >= 2,
        "HD2 of the mismatched pair is resolved from the series"
    );
    let direct: Vec<(f64, f64)> = report
        .points
        .iter()
        .filter(|p| !p.from_series && p.amplitude_v <= 0.011)
        .filter_map(|p| p.harmonic(2).map(|hd2| (p.amplitude_v, hd2)))
        .collect();
    assert!(direct.len() >= 3);
    for pair in direct.windows(2) {
        let ((a1, h1), (a2, h2)) = (pair[0], pair[1]);
        let slope = (h2 - h1) / (20.0 * (a2 / a1).log10());
        assert!((slope - 1.0).abs() < 1e-2, "HD2 slope {slope}");
    }
}

/// A stage with capacitance at a small drive: the same series, its gain that of a drive in
/// the linear region (the periodic steady state is linear there, so gain cannot depend on
/// the drive: linear circuit theory).
#[test]
fn a_stage_with_capacitance_answers_a_nanovolt_drive() {
    let report = evaluate(
        "name: dyn
stages:
  - name: c
    tail_current: 1 mA
    load_resistance: 2k
    load_capacitance: 1 pF
    transistor: {beta: 100, early_voltage: 60 V}
drive:
  amplitudes: [1 nV, 100 uV]
  frequencies: [10 MHz]
",
    );
    let (tiny, linear) = (&report.points[0], &report.points[1]);
    assert!(tiny.from_series && !linear.from_series);
    // 100 µV compresses the gain by about (A/(2φT))²/4 ≈ 4e-6 relative (tanh series).
    assert!(
        (tiny.gain_db - linear.gain_db).abs() < 2e-3,
        "{} vs {}",
        tiny.gain_db,
        linear.gain_db
    );
    assert!(tiny.floor_dbc >= -160.0);
}
