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
use crate::model::plan::NoiseBand;
use crate::model::transistor::Transistor;
use crate::solve::transfer::StaticSolver;
use crate::units::{BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS_K};

/// White input-referred differential noise density, V/√Hz, at the zero-input operating point:
/// per side `4kT·(R_S + r_b + R_E) + 2kT/g_m + 2q·I_B·(R_S + r_b)² + 4kT/(G²·R_L)`
/// with `g_m = I_C/φT` and `G = g_m/(1 + g_m·R_E)`, summed over both sides.
pub fn input_noise_density(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    let c = solver.circuit();
    let point = solver.solve_cold(0.0)?;
    let kt = BOLTZMANN * (c.temperature_c + ZERO_CELSIUS_K);
    let mut total = 0.0;
    for (side, state) in [(&c.p, &point.p), (&c.m, &point.m)] {
        let gm = state.collector_current / c.thermal_voltage;
        let g = gm / (1.0 + gm * side.emitter_resistance);
        total += 4.0 * kt * (side.base_path_resistance + side.emitter_resistance)
            + 2.0 * kt / gm
            + 2.0 * ELEMENTARY_CHARGE * state.base_current * side.base_path_resistance.powi(2)
            + 4.0 * kt / (g * g * side.load_resistance);
    }
    Ok(total.sqrt())
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
    use crate::model::circuit::StageCircuit;
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
