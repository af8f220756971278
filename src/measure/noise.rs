//! Noise and dynamic range: white and flicker input-referred noise, noise integrated over the
//! plan's band, SNR, SFDR and the spurious-free dynamic range.
//!
//! White density: see [`input_noise_density`]. Flicker noise is the base
//! current's `i_b² = KF·I_B^AF/f` (the usual bipolar law); a base noise current sees the
//! base-path resistance `R_S + r_b`, so it adds `KF·I_B^AF·(R_S + r_b)²/f` per side to the
//! input-referred voltage density (it vanishes with β → ∞ or a stiff source). The input noise
//! power density is therefore `e_w² + F/f` with `F` summed over both sides, and over a band
//! `f1…f2` it integrates exactly to `e_w²·(f2 − f1) + F·ln(f2/f1)`.

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::model::plan::NoiseBand;
use crate::model::transistor::Transistor;
use crate::solve::transfer::StaticSolver;
use crate::units::{BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS_K};

/// White input-referred differential noise density, V/√Hz, at the zero-input operating point
/// (the square root of [`NoiseBreakdown::total_v2`]).
pub fn input_noise_density(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    Ok(NoiseBreakdown::measure(solver)?.total_v2().sqrt())
}

/// The white input-referred noise power density of a stage at zero input, V²/Hz, by source.
///
/// Small-signal analysis at the exact zero-input operating point: each noise source is a
/// voltage or current at its own place in the circuit, its transfer to the differential output
/// is the derivative of the exact static solve (a central difference of
/// [`StaticSolver::solve_cold`] with the circuit changed at that place), and it is referred to
/// the input by the small-signal gain `A` found the same way:
///
/// - each transistor `k`: `4kT·(r_b + R_E) + 2kT/g_m + 2q·I_B·r_b²` as a voltage in its
///   emitter lead (`g_m = I_C/φT`; `R_E` only where the transistor has its own emitter
///   resistor), transfer `T_k`; the base shot noise also flows in the shared source
///   resistance, so its term is `2q·I_B·(T_k·r_b + T_s·R_S)²/A²` with `T_s` the transfer of
///   that side's input node;
/// - each source resistance: `4kT·R_S·(T_s/A)²`;
/// - the split tail's resistor `2R_E` between the emitters: `4kT·2R_E` as a voltage in series
///   with it, the same as currents `∓e/(2R_E)` in the two sources;
/// - each tail source: `i_n²·f` (a fraction `f` of the current) times `(∂V/∂I_source / A)²`:
///   zero for one source feeding a matched pair (common mode), `i_n²·R_E²/2` per source of
///   a matched split tail, and the pairs' offset currents in a multi-tanh cell;
/// - each load: `4kT·R_L/A²`.
///
/// Emitter-resistor stages use the textbook sum below directly (it refers the load noise
/// through `G`, leaving out the base path's `R_B/(β + 1)`, which the transfers would include:
/// 0.05 % in the strain-logger example) plus their tail source through its transfer. For a
/// matched emitter-resistor pair with an ideal tail the transfers give the usual
/// `2·[4kT(R_S + r_b + R_E) + 2kT/g_m + 2q·I_B·(R_S + r_b)² + 4kT/(G²·R_L)]`,
/// `G = g_m/(1 + g_m·R_E)` (standard bipolar noise analysis, from memory).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct NoiseBreakdown {
    /// Shot noise of the transistors and thermal noise of their base resistances, V²/Hz.
    pub transistors_v2: f64,
    /// Source and degeneration resistors (emitter resistors or the split tail's resistor),
    /// V²/Hz.
    pub resistors_v2: f64,
    /// Tail sources, V²/Hz.
    pub tail_sources_v2: f64,
    /// Loads, V²/Hz.
    pub loads_v2: f64,
}

/// Relative probe for the central differences: a thousandth of φT (or of the tail current);
/// the output is smooth, so the difference is exact to about 1e-7 relative.
const PROBE: f64 = 1e-3;

impl NoiseBreakdown {
    /// Total input-referred white noise power density, V²/Hz.
    pub fn total_v2(&self) -> f64 {
        self.transistors_v2 + self.resistors_v2 + self.tail_sources_v2 + self.loads_v2
    }

    /// Measures every source of the stage at its zero-input operating point.
    pub fn measure(solver: &StaticSolver) -> Result<Self, SolveFailure> {
        let c = solver.circuit();
        let phi = c.thermal_voltage;
        let kt = BOLTZMANN * (c.temperature_c + ZERO_CELSIUS_K);
        let q = ELEMENTARY_CHARGE;
        let h_v = PROBE * phi;
        let output = |circuit: StageCircuit, v_d: f64| -> Result<f64, SolveFailure> {
            Ok(StaticSolver::new(circuit).solve_cold(v_d)?.output_voltage)
        };
        // Transfer of a change made by `change(circuit, ±h)` to the output, per unit.
        let transfer =
            |change: &dyn Fn(&mut StageCircuit, f64), h: f64| -> Result<f64, SolveFailure> {
                let mut up = c.clone();
                change(&mut up, h);
                up.apply_split_tail();
                let mut down = c.clone();
                change(&mut down, -h);
                down.apply_split_tail();
                Ok((output(up, 0.0)? - output(down, 0.0)?) / (2.0 * h))
            };
        let gain = (solver.solve_cold(h_v)?.output_voltage
            - solver.solve_cold(-h_v)?.output_voltage)
            / (2.0 * h_v);
        if !(gain.is_finite() && gain != 0.0) {
            return Err(SolveFailure {
                point: "v_d = 0 V".into(),
                reason: format!(
                    "the small-signal gain is {gain:e}: no input noise can be referred"
                ),
            });
        }
        let refer = |t: f64| (t / gain).powi(2);
        // Input nodes: v_P = v_cm + v_d/2, v_M = v_cm − v_d/2.
        let node = |sign: f64| -> Result<f64, SolveFailure> {
            let at = |h: f64| {
                let mut moved = c.clone();
                moved.input_common_mode += 0.5 * h;
                output(moved, sign * h)
            };
            Ok((at(h_v)? - at(-h_v)?) / (2.0 * h_v))
        };
        if c.cell.is_empty() && c.split_tail.is_none() {
            // Emitter resistors: the textbook sum per side (standard bipolar noise analysis,
            // from memory), `G = g_m/(1 + g_m·R_E)`, which the worked example in
            // specs/README.md follows; the tail source through its transfer (zero for a
            // matched pair, common mode).
            let point = solver.solve_cold(0.0)?;
            let mut figures = NoiseBreakdown::default();
            for (side, state) in [(&c.p, &point.p), (&c.m, &point.m)] {
                let gm = state.collector_current / phi;
                let g = gm / (1.0 + gm * side.emitter_resistance);
                let r_b = side.base_path_resistance - c.source_resistance;
                figures.transistors_v2 += 4.0 * kt * r_b
                    + 2.0 * kt / gm
                    + 2.0 * q * state.base_current * side.base_path_resistance.powi(2);
                figures.resistors_v2 += 4.0 * kt * (c.source_resistance + side.emitter_resistance);
                figures.loads_v2 += 4.0 * kt / (g * g * side.load_resistance);
            }
            let i_n2 = c.tail_noise_current * c.tail_noise_current;
            if i_n2 > 0.0 {
                let probe = |circuit: &mut StageCircuit, h: f64| circuit.tail_current += h;
                figures.tail_sources_v2 = i_n2 * refer(transfer(&probe, PROBE * c.tail_current)?);
            }
            return Ok(figures);
        }
        let node_transfer = [node(1.0)?, node(-1.0)?];
        let r_s = c.source_resistance;
        let mut figures = NoiseBreakdown::default();
        for t_s in node_transfer {
            figures.resistors_v2 += 4.0 * kt * r_s * refer(t_s);
        }
        // Transistors, each with its own emitter-lead probe.
        let split = c.split_tail.is_some();
        let pairs = solver.solve_pairs(0.0)?;
        for (j, point) in pairs.iter().enumerate() {
            let pair = if c.cell.is_empty() {
                c
            } else {
                &c.cell[j].circuit
            };
            for (k, (side, state)) in [(&pair.p, &point.p), (&pair.m, &point.m)]
                .into_iter()
                .enumerate()
            {
                let probe = |circuit: &mut StageCircuit, h: f64| {
                    let target = if circuit.cell.is_empty() {
                        circuit
                    } else {
                        &mut circuit.cell[j].circuit
                    };
                    let side = if k == 0 { &mut target.p } else { &mut target.m };
                    side.emitter_source_v += h;
                };
                let t_k = transfer(&probe, h_v)?;
                let gm = state.collector_current / phi;
                let r_b = side.base_path_resistance - r_s;
                let r_e = if split { 0.0 } else { side.emitter_resistance };
                figures.transistors_v2 += (4.0 * kt * r_b + 2.0 * kt / gm) * refer(t_k)
                    + 2.0
                        * q
                        * state.base_current.max(0.0)
                        * ((t_k * r_b + node_transfer[k] * r_s) / gain).powi(2);
                figures.resistors_v2 += 4.0 * kt * r_e * refer(t_k);
            }
        }
        // Tail sources.
        let h_i = PROBE * c.tail_current;
        let i_n2 = c.tail_noise_current * c.tail_noise_current;
        if let Some(elements) = c.split_tail {
            let mut per_source = [0.0; 2];
            for (k, slot) in per_source.iter_mut().enumerate() {
                let probe = move |circuit: &mut StageCircuit, h: f64| {
                    if let Some(split) = circuit.split_tail.as_mut() {
                        split.source_currents[k] += h;
                    }
                };
                *slot = transfer(&probe, h_i)?;
            }
            figures.tail_sources_v2 += 0.5 * i_n2 * (refer(per_source[0]) + refer(per_source[1]));
            let r_bridge = 2.0 * elements.half_resistance;
            if r_bridge > 0.0 {
                // A voltage e in series with the bridge is the current e/R_bridge moved from
                // one source to the other.
                figures.resistors_v2 +=
                    4.0 * kt * r_bridge * refer((per_source[1] - per_source[0]) / r_bridge);
            }
        } else if c.cell.is_empty() {
            if i_n2 > 0.0 {
                let probe = |circuit: &mut StageCircuit, h: f64| circuit.tail_current += h;
                figures.tail_sources_v2 += i_n2 * refer(transfer(&probe, h_i)?);
            }
        } else if i_n2 > 0.0 {
            for (j, pair) in c.cell.iter().enumerate() {
                let probe = move |circuit: &mut StageCircuit, h: f64| {
                    circuit.cell[j].circuit.tail_current += h
                };
                figures.tail_sources_v2 +=
                    i_n2 * pair.tail_fraction * refer(transfer(&probe, h_i)?);
            }
        }
        figures.loads_v2 = 4.0 * kt * (c.p.load_resistance + c.m.load_resistance) / (gain * gain);
        Ok(figures)
    }
}

/// Input-referred noise of one stage at one temperature.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseFigures {
    /// White differential input noise density, V/√Hz.
    pub white_v_rthz: f64,
    /// Flicker coefficient `F` of the input noise power density `F/f`, V².
    pub flicker_v2: f64,
}

impl NoiseFigures {
    /// Measures the stage's noise at its zero-input operating point.
    pub fn measure(solver: &StaticSolver, transistor: &Transistor) -> Result<Self, SolveFailure> {
        let white_v_rthz = input_noise_density(solver)?;
        let mut flicker_v2 = 0.0;
        if transistor.flicker_coefficient > 0.0 {
            let c = solver.circuit();
            let point = solver.solve_cold(0.0)?;
            for (side, state) in [(&c.p, &point.p), (&c.m, &point.m)] {
                flicker_v2 += transistor.flicker_coefficient
                    * state
                        .base_current
                        .max(0.0)
                        .powf(transistor.flicker_exponent)
                    * side.base_path_resistance.powi(2);
            }
        }
        Ok(NoiseFigures {
            white_v_rthz,
            flicker_v2,
        })
    }

    /// Spot input noise density at `frequency_hz`, V/√Hz.
    pub fn density_at(&self, frequency_hz: f64) -> f64 {
        (self.white_v_rthz.powi(2) + self.flicker_v2 / frequency_hz).sqrt()
    }

    /// The 1/f corner: where flicker and white noise densities are equal, Hz.
    pub fn corner_hz(&self) -> Option<f64> {
        (self.flicker_v2 > 0.0 && self.white_v_rthz > 0.0)
            .then(|| self.flicker_v2 / self.white_v_rthz.powi(2))
    }

    /// RMS input noise integrated over `band`, V (exact integral of `e_w² + F/f`).
    pub fn integrated_v(&self, band: &NoiseBand) -> f64 {
        let flicker = if self.flicker_v2 > 0.0 {
            self.flicker_v2 * (band.to / band.from).ln()
        } else {
            0.0
        };
        (self.white_v_rthz.powi(2) * (band.to - band.from) + flicker).sqrt()
    }
}

/// Signal-to-noise ratio of a sine of peak `amplitude_v` against `noise_rms_v`, dB.
pub fn snr_db(amplitude_v: f64, noise_rms_v: f64) -> f64 {
    20.0 * (amplitude_v / std::f64::consts::SQRT_2 / noise_rms_v).log10()
}

/// Spurious-free dynamic range at one drive level, dBc: the fundamental over the largest
/// spur among `spurs_dbc` (null entries are below the analysis floor). `None` when no spur
/// rises above the floor.
pub fn sfdr_dbc(spurs_dbc: impl IntoIterator<Item = Option<f64>>) -> Option<f64> {
    spurs_dbc
        .into_iter()
        .flatten()
        .fold(None, |worst: Option<f64>, s| {
            Some(worst.map_or(s, |w| w.max(s)))
        })
        .map(|largest| -largest)
}

/// Dynamic range at one drive level, dB: the signal over whichever is larger, the integrated
/// noise or the largest spur.
pub fn dynamic_range_db(snr_db: f64, sfdr_dbc: Option<f64>) -> f64 {
    sfdr_dbc.map_or(snr_db, |s| s.min(snr_db))
}

/// Third-order spurious-free dynamic range, dB: `(2/3)·(P_IIP3 − P_noise)` with the
/// intercept's power `IIP3²/2` (peak volts per tone) and the noise power `v_n²` over the band.
pub fn third_order_sfdr_db(iip3_v: f64, noise_rms_v: f64) -> f64 {
    2.0 / 3.0 * 10.0 * (iip3_v * iip3_v / 2.0 / (noise_rms_v * noise_rms_v)).log10()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::stage::Stage;
    use crate::units::thermal_voltage;

    fn stage(tail: f64, load: f64, emitter: f64, source: f64, base: f64) -> Stage {
        Stage::new("n", tail, load)
            .emitter_resistance(emitter)
            .source_resistance(source)
            .supply(5.0)
            .input_common_mode(2.0)
            .transistor(Transistor::default().base_resistance(base))
    }

    #[test]
    fn white_density_matches_the_textbook_pair_formula_for_four_stages() {
        // Standard bipolar noise analysis (input-referred noise of a differential pair with an
        // ideal tail and β → ∞), from memory:
        // e_n² = 2·[4kT(r_b + R_S + R_E) + 2kT/g_m + 4kT/(G²·R_L)], G = g_m/(1 + g_m·R_E).
        let cases = [
            (1e-3, 2e3, 0.0, 0.0, 0.0, 27.0),
            (0.2e-3, 10e3, 500.0, 50.0, 200.0, 27.0),
            (2e-3, 1e3, 50.0, 1e3, 100.0, 85.0),
            (0.5e-3, 4.7e3, 1e3, 0.0, 300.0, -40.0),
        ];
        for (tail, load, emitter, source, base, t) in cases {
            let stage = stage(tail, load, emitter, source, base);
            let solver = StaticSolver::new(StageCircuit::new(&stage, t));
            let measured = NoiseFigures::measure(&solver, &stage.transistor)
                .unwrap()
                .white_v_rthz;
            let kt = BOLTZMANN * (t + ZERO_CELSIUS_K);
            let gm = tail / 2.0 / thermal_voltage(t);
            let g = gm / (1.0 + gm * emitter);
            let expected = (2.0
                * (4.0 * kt * (base + source + emitter)
                    + 2.0 * kt / gm
                    + 4.0 * kt / (g * g * load)))
                .sqrt();
            assert!(
                (measured / expected - 1.0).abs() < 0.01,
                "stage {tail} A {load} Ω {emitter} Ω at {t} °C: {measured:e} vs {expected:e}"
            );
        }
    }

    #[test]
    fn flicker_noise_has_equal_power_per_decade() {
        // Common practice: 1/f noise carries the same power in every decade.
        let figures = NoiseFigures {
            white_v_rthz: 0.0,
            flicker_v2: 1e-16,
        };
        let low = figures.integrated_v(&NoiseBand {
            from: 10.0,
            to: 100.0,
        });
        let high = figures.integrated_v(&NoiseBand { from: 1e3, to: 1e4 });
        assert!((low / high - 1.0).abs() < 1e-12);
        assert!((low * low / (1e-16 * 10f64.ln()) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn two_thirds_rule_for_third_order_dynamic_range() {
        // Common practice: SFDR = (2/3)(IIP3 − N) in dB; 1 V peak intercept (−3 dBV rms power)
        // over 1 µV rms noise (−120 dBV) gives (2/3)·117 dB = 78 dB.
        let sfdr = third_order_sfdr_db(1.0, 1e-6);
        assert!((sfdr - 2.0 / 3.0 * (120.0 - 10.0 * 2f64.log10())).abs() < 1e-9);
    }
}
