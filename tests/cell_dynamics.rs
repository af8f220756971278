//! Multi-tanh cells with charge storage (the dynamic engine's N-pair circuit) against
//! references outside the engine: the memoryless engine's pair-by-pair solve of the same cell
//! at low frequency, where every capacitive current is below rounding (a stage's charges
//! carry currents of order ωτ ≈ 10⁻⁵ of the signal at 1 kHz with nanosecond time constants:
//! common practice), and an independent integration of the doublet's stated equations
//! (tests/reference/doublet_dynamic.py, numpy + scipy, its own implicit integrator) at high
//! frequency.

use linbudget::{Mismatch, MultiTanh, Stage, TanhPair, Transistor};

const T: f64 = 27.0;

/// A device with base current, base resistance, Early effect and no charge.
fn device() -> Transistor {
    Transistor::default()
        .beta(120.0)
        .base_resistance(150.0)
        .early_voltage(60.0)
}

/// The same device with junction capacitances and a transit time.
fn charged(device: Transistor) -> Transistor {
    device
        .transit_time(25e-12)
        .emitter_junction_capacitance(60e-15)
        .collector_junction_capacitance(40e-15)
}

fn cell(name: &str, form: MultiTanh) -> Stage {
    Stage::new(name, 1e-3, 2e3)
        .supply(5.0)
        .input_common_mode(2.5)
        .source_resistance(100.0)
        .tail_resistance(200e3)
        .transistor(device())
        .mismatch(Mismatch::default().saturation_current(0.01))
        .multi_tanh(form)
}

fn with_charge(stage: &Stage) -> Stage {
    let transistor = charged(stage.transistor.clone());
    stage
        .clone()
        .transistor(transistor)
        .load_capacitance(0.5e-12)
        .tail_capacitance(1e-12)
}

fn figures(stage: &Stage, amplitude: f64, frequency: f64) -> [f64; 4] {
    let tone = stage.at(T).unwrap().tone(amplitude, frequency).unwrap();
    [
        tone.gain_db(),
        tone.hd_dbc(2).unwrap(),
        tone.hd_dbc(3).unwrap(),
        tone.hd_dbc(5).unwrap_or(f64::NAN),
    ]
}

/// Largest difference of two figure sets, dB.
fn largest_difference(a: &[f64; 4], b: &[f64; 4], orders: usize) -> f64 {
    a.iter()
        .zip(b)
        .take(orders)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
}

#[test]
fn a_doublet_and_a_triplet_with_charge_storage_meet_the_memoryless_cell_at_one_kilohertz() {
    // At 1 kHz every charge's current is ~10⁻⁵ of the signal (time constants of a nanosecond
    // or less: common practice), so the dynamic engine's N-pair circuit must give the
    // memoryless engine's coupled pairs (the same cell without charges) to within both
    // engines' stated tolerance, 0.002 dB: gain, HD2 (from the 1 % I_S mismatch), HD3, HD5.
    // The source resistance couples the pairs' inputs, the Early effect their collectors.
    for form in [
        MultiTanh::doublet(2.0 + 3f64.sqrt()),
        MultiTanh::triplet(4.0, 0.3),
    ] {
        let plain = cell("cell", form.clone());
        let charged = with_charge(&plain);
        for amplitude in [10e-3, 40e-3, 100e-3] {
            let memoryless = figures(&plain, amplitude, 1e3);
            let dynamic = figures(&charged, amplitude, 1e3);
            let difference = largest_difference(&memoryless, &dynamic, 4);
            assert!(
                difference <= 0.002,
                "{form:?} at {amplitude} V: memoryless {memoryless:?}, dynamic {dynamic:?}"
            );
        }
    }
}

#[test]
fn two_equal_pairs_with_charges_are_one_pair_of_twice_the_area_at_high_frequency() {
    // Two identical pairs in parallel on the same inputs, loads and (split) tail are one pair
    // of devices of twice the area: 2·I_S, 2·C_je, 2·C_jc, r_b/2, and half the emitter
    // resistance (parallel devices; common practice). The cell (dynamic N-pair circuit) and
    // the pair (dynamic pair circuit) must agree at 50 MHz within the engines' 0.002 dB.
    let unit = charged(device()).collector_resistance(40.0);
    let cell_stage = Stage::new("cell", 1e-3, 2e3)
        .supply(5.0)
        .input_common_mode(2.5)
        .source_resistance(100.0)
        .emitter_resistance(100.0)
        .tail_resistance(200e3)
        .transistor(unit.clone())
        .load_capacitance(0.5e-12)
        .tail_capacitance(1e-12)
        .mismatch(Mismatch::default().saturation_current(0.01))
        .multi_tanh(MultiTanh::pairs_of(vec![
            TanhPair::new(1.0, 1.0, 0.5),
            TanhPair::new(1.0, 1.0, 0.5),
        ]));
    let double = unit
        .clone()
        .saturation_current(2.0 * unit.saturation_current)
        .emitter_junction_capacitance(2.0 * unit.emitter_junction_capacitance)
        .collector_junction_capacitance(2.0 * unit.collector_junction_capacitance)
        .base_resistance(0.5 * unit.base_resistance)
        .collector_resistance(0.5 * unit.collector_resistance);
    let mut pair_stage = cell_stage
        .clone()
        .transistor(double)
        .emitter_resistance(50.0);
    pair_stage.topology = linbudget::Topology::EmitterResistors;
    for amplitude in [20e-3, 80e-3] {
        let cell_figures = figures(&cell_stage, amplitude, 50e6);
        let pair_figures = figures(&pair_stage, amplitude, 50e6);
        assert!(
            largest_difference(&cell_figures, &pair_figures, 4) <= 0.002,
            "at {amplitude} V: cell {cell_figures:?}, pair {pair_figures:?}"
        );
    }
}

/// The doublet of `tests/reference/doublet_dynamic.py`, element for element.
fn reference_doublet() -> Stage {
    Stage::new("doublet", 1e-3, 2e3)
        .supply(5.0)
        .input_common_mode(2.5)
        .emitter_resistance(50.0)
        .tail_resistance(200e3)
        .transistor(charged(device()))
        .load_capacitance(0.5e-12)
        .tail_capacitance(1e-12)
        .mismatch(Mismatch::default().saturation_current(0.01))
        .multi_tanh(MultiTanh::doublet(2.0 + 3f64.sqrt()))
}

#[test]
fn a_doublet_with_charge_storage_at_fifty_megahertz_matches_an_independent_integration() {
    // tests/reference/doublet_dynamic.py: the doublet's nodal equations integrated with
    // scipy's Radau IIA (rtol 1e-11) over 40 periods from the DC point, harmonics of the last
    // period by numpy's FFT (settled to 8e-7 dB between the last two periods). Its printed
    // figures (gain dB, HD2, HD3, HD5 dBc) at 50 MHz:
    let reference = [
        (20e-3, [26.186337, -73.599404, -53.158074, -104.981385], 3),
        (60e-3, [25.554545, -65.073550, -34.686155, -68.177169], 4),
    ];
    // Tolerance 0.01 dB: five times the engine's refinement tolerance (HD5 at 20 mV, near
    // −105 dBc, is left out: the script's rounding there is not checked).
    let stage = reference_doublet();
    for (amplitude, expected, orders) in reference {
        let tool = figures(&stage, amplitude, 50e6);
        assert!(
            largest_difference(&tool, &expected, orders) <= 0.01,
            "at {amplitude} V: tool {tool:?}, reference {expected:?}"
        );
    }
    // The charges matter here: the same cell without them is more than 0.5 dB away in gain
    // (the load pole alone is at 160 MHz), so the agreement is not the low-frequency one.
    let mut memoryless = stage.clone().load_capacitance(0.0).tail_capacitance(0.0);
    memoryless.transistor = device();
    let low = figures(&memoryless, 60e-3, 50e6);
    assert!((low[0] - reference[1].1[0]).abs() > 0.5, "{low:?}");
}
