//! The periodic-steady-state engine against references outside the project: linear circuit
//! theory for a capacitively loaded pair, the memoryless engine in the low-frequency limit,
//! and the trapezoidal rule's textbook error order.

use linbudget::model::circuit::StageCircuit;
use linbudget::solve::dynamic::trapezoid::{integrate, ChargeSystem, State, StepTolerance};
use linbudget::solve::dynamic::DynamicEngine;
use linbudget::solve::memoryless::MemorylessEngine;
use linbudget::solve::response::ResponseEngine;
use linbudget::solve::spectrum::FftCache;
use linbudget::Plan;
use std::f64::consts::TAU;
use std::sync::Arc;

fn circuit(stage_yaml: &str) -> StageCircuit {
    let text = format!(
        "name: probe\ntemperatures_c: [27]\nstages:\n  - name: s\n{stage_yaml}\ndrive:\n  amplitudes: [10 mV]\n  frequencies: [1 kHz]\n"
    );
    let plan = Plan::from_yaml(&text, "inline.yaml").expect("valid plan");
    StageCircuit::new(&plan.stages[0], 27.0)
}

fn db(ratio: f64) -> f64 {
    20.0 * ratio.log10()
}

const LOADED: &str = "    tail_current: 1 mA
    load_resistance: 2k
    load_capacitance: 2 pF
    source_resistance: 100
    supply: 5 V
    input_common_mode: 2 V
    transistor: {saturation_current: 1e-16, beta: 100}
";

#[test]
fn load_capacitance_alone_filters_gain_and_third_harmonic_like_rl_parallel_cl() {
    // Linear circuit theory: with no Early effect the collector currents do not depend on the
    // collector voltages, so a capacitance across each load filters unchanged currents by
    // H(jω) = 1/(1 + jωR_L·C_L). The fundamental follows |H(jω)| and HD3 (dBc) moves by
    // exactly 20·log10(|H(3jω)|/|H(jω)|) relative to the memoryless stage.
    let cache = Arc::new(FftCache::default());
    for (name, degeneration) in [("undegenerated", 0.0), ("degenerated", 200.0)] {
        let with = circuit(&format!("{LOADED}    emitter_resistance: {degeneration}\n"));
        let mut without = with.clone();
        without.load_capacitance = 0.0;
        let dynamic = DynamicEngine::new(with.clone(), cache.clone());
        let memoryless = MemorylessEngine::new(without, cache.clone());
        let amplitude = 0.02;
        let reference = memoryless.tone(amplitude, 1.0, 9).expect("memoryless");
        let tau = with.p.load_resistance * with.load_capacitance;
        for frequency in [5e6, 20e6, 60e6] {
            let h = |multiple: f64| 1.0 / (1.0 + (TAU * frequency * multiple * tau).powi(2)).sqrt();
            let tone = dynamic.tone(amplitude, frequency, 9).expect("steady state");
            let gain_shift =
                db(tone.differential.fundamental() / reference.differential.fundamental());
            let hd3_shift = tone.differential.raw_dbc(3) - reference.differential.raw_dbc(3);
            let want_gain = db(h(1.0));
            let want_hd3 = db(h(3.0) / h(1.0));
            assert!(
                (gain_shift - want_gain).abs() < 0.05,
                "{name} at {frequency} Hz: gain shift {gain_shift} dB, theory {want_gain} dB"
            );
            assert!(
                (hd3_shift - want_hd3).abs() < 0.05,
                "{name} at {frequency} Hz: HD3 shift {hd3_shift} dB, theory {want_hd3} dB"
            );
        }
    }
}

#[test]
fn every_capacitance_at_one_kilohertz_matches_the_memoryless_stage() {
    // Low-frequency limit (common practice: charge storage is invisible far below every pole):
    // at 1 kHz picofarads and picoseconds change nothing measurable, so the periodic steady
    // state must equal the memoryless solve within 0.01 dB.
    let cache = Arc::new(FftCache::default());
    let with = circuit(
        "    tail_current: 1 mA
    load_resistance: 2k
    emitter_resistance: 100
    source_resistance: 50
    tail_resistance: 50k
    load_capacitance: 1 pF
    tail_capacitance: 2 pF
    supply: 5 V
    input_common_mode: 2 V
    transistor:
      saturation_current: 1e-16
      beta: 100
      early_voltage: 50 V
      base_resistance: 100
      transit_time: 20 ps
      emitter_junction_capacitance: 100 fF
      collector_junction_capacitance: 50 fF
    mismatch: {saturation_current: 0.01}
",
    );
    let mut without = with.clone();
    without.load_capacitance = 0.0;
    without.tail_capacitance = 0.0;
    without.charge = Default::default();
    assert!(without.is_memoryless() && !with.is_memoryless());
    let dynamic = DynamicEngine::new(with, cache.clone());
    let memoryless = MemorylessEngine::new(without, cache.clone());
    for amplitude in [0.005, 0.05, 0.2] {
        let d = dynamic.tone(amplitude, 1e3, 9).expect("steady state");
        let m = memoryless.tone(amplitude, 1e3, 9).expect("memoryless");
        let gain_change = db(d.differential.fundamental() / m.differential.fundamental());
        assert!(
            gain_change.abs() < 0.01,
            "{amplitude} V: gain differs by {gain_change} dB"
        );
        for order in [2, 3, 5] {
            let change = d.differential.raw_dbc(order) - m.differential.raw_dbc(order);
            assert!(
                change.abs() < 0.01,
                "{amplitude} V: HD{order} differs by {change} dB"
            );
        }
        let thd_change = d.differential.raw_thd_dbc(9) - m.differential.raw_thd_dbc(9);
        assert!(
            thd_change.abs() < 0.01,
            "{amplitude} V: THD differs by {thd_change} dB"
        );
        let dt = dynamic.two_tone(amplitude, 1e3, 100.0).expect("two tones");
        let mt = memoryless
            .two_tone(amplitude, 1e3, 100.0)
            .expect("two tones");
        let im3_change = dt.im3_dbc() - mt.im3_dbc();
        assert!(
            im3_change.abs() < 0.01,
            "{amplitude} V: IM3 differs by {im3_change} dB"
        );
        let fundamental_change = db(dt.fundamental_v / mt.fundamental_v);
        assert!(
            fundamental_change.abs() < 0.01,
            "{amplitude} V: two-tone fundamental differs by {fundamental_change} dB"
        );
    }
}

/// A resistor R from a source V_s(t) into a capacitor C to ground: (x − V_s)/R + i = 0, q = C·x.
struct SeriesRc {
    resistance: f64,
    capacitance: f64,
    source: fn(f64) -> f64,
}

impl ChargeSystem for SeriesRc {
    fn unknowns(&self) -> usize {
        1
    }
    fn charges(&self) -> usize {
        1
    }
    fn resistive(&self, x: &[f64], time_s: f64, f: &mut [f64], jacobian: &mut [f64]) {
        f[0] = (x[0] - (self.source)(time_s)) / self.resistance;
        jacobian[0] = 1.0 / self.resistance;
    }
    fn charge(&self, x: &[f64], q: &mut [f64], jacobian: &mut [f64]) {
        q[0] = self.capacitance * x[0];
        jacobian[0] = self.capacitance;
    }
    fn coupling(&self) -> &[f64] {
        &[1.0]
    }
}

fn rc_error(source: fn(f64) -> f64, exact: impl Fn(f64) -> f64, steps: usize) -> f64 {
    let rc = SeriesRc {
        resistance: 1e3,
        capacitance: 1e-6,
        source,
    };
    let tau = 1e-3;
    // Consistent start: x(0) = 0, i(0) = (V_s(0) − 0)/R.
    let start = State {
        x: vec![0.0],
        i: vec![source(0.0) / rc.resistance],
    };
    let tolerance = StepTolerance {
        absolute: 1e-14,
        max_iterations: 20,
    };
    let run = integrate(&rc, &start, 0.0, 2.0 * tau, steps, tolerance, false).expect("integrates");
    (run.end.x[0] - exact(2.0 * tau)).abs()
}

#[test]
fn trapezoidal_error_on_a_single_rc_falls_as_the_step_squared() {
    // Textbook numerical analysis (e.g. Süli & Mayers, An Introduction to Numerical Analysis,
    // ch. 12): the trapezoidal rule's global error is O(h²), so halving the step divides it
    // by 4. Step response of RC = 1 ms: x(t) = 1 − exp(−t/RC).
    let step = |_t: f64| 1.0;
    let exact_step = |t: f64| 1.0 - (-t / 1e-3).exp();
    // Sine drive sin(ωt), ω = 1/RC: x(t) = (sin ωt − cos ωt + e^{−t/RC})/2 (from memory,
    // checked by substitution into RC·x' + x = sin ωt).
    let sine = |t: f64| (t / 1e-3).sin();
    let exact_sine = |t: f64| {
        let w = t / 1e-3;
        0.5 * (w.sin() - w.cos() + (-w).exp())
    };
    for (name, errors) in [
        ("step", [20, 40, 80].map(|n| rc_error(step, exact_step, n))),
        ("sine", [20, 40, 80].map(|n| rc_error(sine, exact_sine, n))),
    ] {
        for pair in errors.windows(2) {
            let ratio = pair[0] / pair[1];
            assert!(
                (ratio - 4.0).abs() < 0.15,
                "{name}: error ratio {ratio} on halving the step (errors {errors:?})"
            );
        }
    }
}
