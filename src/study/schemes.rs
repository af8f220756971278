//! The plan's stages compared at equal terms — the same tail current, or the same white input
//! noise — for the designer's "which scheme" question: HD3 and IM3 against amplitude, IIP3,
//! noise, the headroom the degeneration takes and the current, at the temperature nearest
//! 27 °C and the first frequency.
//!
//! Equal current sets every stage's tail current to the common value with its resistors as
//! planned. Equal noise scales each stage's impedance level: tail current × k and every
//! resistor it owns (load, degeneration, tail source) ÷ k, capacitances × k and the tail
//! source's noise density × √k, which keeps the gain and the transfer against φT while its
//! own noise power falls as 1/k; k is found by bisection on ln k to 1e-6 relative in noise.
//! The source resistance (outside the stage) and the transistor stay as planned.

use crate::error::Error;
use crate::measure::small_signal::BiasNodes;
use crate::model::plan::{ComparisonBasis, ComparisonSettings, Plan};
use crate::model::stage::Stage;
use crate::model::topology::Topology;

/// The comparison of every planned stage at equal terms.
#[derive(Debug, Clone)]
pub struct SchemeComparison {
    /// What is held equal.
    pub basis: ComparisonBasis,
    /// The common tail current (A) or input noise (V/√Hz).
    pub value: f64,
    /// Temperature of the comparison, °C.
    pub temperature_c: f64,
    /// Frequency of the comparison, Hz.
    pub frequency_hz: f64,
    /// The plan's amplitudes, V.
    pub amplitudes_v: Vec<f64>,
    /// One row per planned stage, in plan order.
    pub rows: Vec<SchemeRow>,
}

/// One stage at the comparison's terms.
#[derive(Debug, Clone)]
pub struct SchemeRow {
    /// The planned stage's name.
    pub stage: String,
    /// Its circuit form.
    pub topology: Topology,
    /// The impedance scale k applied (1 at equal current).
    pub scale: f64,
    /// The stage as compared.
    pub compared: Stage,
    /// Tail current as compared, A.
    pub tail_current_a: f64,
    /// Small-signal gain, dB.
    pub gain_db: f64,
    /// IIP3, peak volts per tone (`None` where the IM3 slope is never 3:1, as at a
    /// multi-tanh cell's cubic null).
    pub iip3_v: Option<f64>,
    /// White input noise, V/√Hz.
    pub input_noise_v_rthz: f64,
    /// Bias nodes at zero input.
    pub bias: BiasNodes,
    /// HD3 at each amplitude, dBc (`None` below the floor).
    pub hd3_dbc: Vec<Option<f64>>,
    /// IM3 at each amplitude, dBc (`None` below the floor or without `two_tone_spacing`).
    pub im3_dbc: Vec<Option<f64>>,
}

/// Multiplies a stage's current by `k` and divides its impedances by `k` (see the module
/// notes).
pub fn impedance_scaled(stage: &Stage, k: f64) -> Stage {
    let mut scaled = stage.clone();
    scaled.tail_current *= k;
    scaled.load_resistance /= k;
    scaled.emitter_resistance /= k;
    scaled.tail_resistance /= k;
    scaled.load_capacitance *= k;
    scaled.tail_capacitance *= k;
    scaled.tail_noise_current *= k.sqrt();
    for pair in &mut scaled.multi_tanh.list {
        pair.emitter_resistance = pair.emitter_resistance.map(|r| r / k);
    }
    scaled
}

/// The temperature of the comparison: the plan's nearest to 27 °C.
pub fn comparison_temperature(plan: &Plan) -> f64 {
    plan.temperatures_c
        .iter()
        .copied()
        .min_by(|a, b| (a - 27.0).abs().total_cmp(&(b - 27.0).abs()))
        .unwrap_or(27.0)
}

/// Compares every planned stage as `settings` asks.
pub fn compare_schemes(
    plan: &Plan,
    settings: &ComparisonSettings,
) -> Result<SchemeComparison, Error> {
    let temperature_c = comparison_temperature(plan);
    let frequency_hz = plan.drive.frequencies[0];
    let noise_of =
        |stage: &Stage| -> Result<f64, Error> { Ok(stage.at(temperature_c)?.input_noise_v_rthz()) };
    let value = match (settings.basis, settings.value) {
        (_, Some(v)) => v,
        (ComparisonBasis::TailCurrent, None) => plan
            .stages
            .iter()
            .map(|s| s.tail_current)
            .fold(0.0, f64::max),
        (ComparisonBasis::InputNoise, None) => {
            let mut least = f64::INFINITY;
            for stage in &plan.stages {
                least = least.min(noise_of(stage)?);
            }
            least
        }
    };
    let mut rows = Vec::with_capacity(plan.stages.len());
    for stage in &plan.stages {
        let scale = match settings.basis {
            ComparisonBasis::TailCurrent => 1.0,
            ComparisonBasis::InputNoise => noise_scale(stage, value, &noise_of)?,
        };
        let compared = match settings.basis {
            ComparisonBasis::TailCurrent => stage.clone().tail_current(value),
            ComparisonBasis::InputNoise => impedance_scaled(stage, scale),
        };
        let solved = compared.at(temperature_c)?;
        let mut hd3_dbc = Vec::with_capacity(plan.drive.amplitudes.len());
        let mut im3_dbc = Vec::with_capacity(plan.drive.amplitudes.len());
        for &amplitude in &plan.drive.amplitudes {
            hd3_dbc.push(solved.tone(amplitude, frequency_hz)?.hd_dbc(3));
            im3_dbc.push(match plan.drive.two_tone_spacing {
                Some(spacing) => solved.two_tone(amplitude, frequency_hz, spacing)?.im3_dbc(),
                None => None,
            });
        }
        let iip3_v = match solved.iip3_v(frequency_hz) {
            Ok(v) => Some(v),
            Err(Error::NotDefined { .. }) => None,
            Err(e) => return Err(e),
        };
        rows.push(SchemeRow {
            stage: stage.name.clone(),
            topology: stage.topology,
            scale,
            tail_current_a: compared.tail_current,
            gain_db: solved.gain_db(),
            iip3_v,
            input_noise_v_rthz: solved.input_noise_v_rthz(),
            bias: solved.bias_nodes()?,
            compared,
            hd3_dbc,
            im3_dbc,
        });
    }
    Ok(SchemeComparison {
        basis: settings.basis,
        value,
        temperature_c,
        frequency_hz,
        amplitudes_v: plan.drive.amplitudes.clone(),
        rows,
    })
}

/// The impedance scale at which `stage` has the input noise `target`: bisection on ln k
/// within 10⁻³…10³ (noise falls as k rises) to 1e-6 relative in noise.
fn noise_scale(
    stage: &Stage,
    target: f64,
    noise_of: &dyn Fn(&Stage) -> Result<f64, Error>,
) -> Result<f64, Error> {
    let at = |ln_k: f64| noise_of(&impedance_scaled(stage, ln_k.exp()));
    let (mut low, mut high) = (-(1e3f64.ln()), 1e3f64.ln());
    let (noisiest, quietest) = (at(low)?, at(high)?);
    if !(quietest <= target && target <= noisiest) {
        return Err(Error::Argument {
            name: format!("comparison: stage `{}`", stage.name),
            problem: format!(
                "an input noise of {target:e} V/√Hz is out of its reach ({quietest:e} to {noisiest:e} V/√Hz over tail currents from 1/1000 to 1000 times the planned one)"
            ),
            accepted: "comparison.value within every stage's reach".into(),
        });
    }
    for _ in 0..100 {
        let mid = 0.5 * (low + high);
        let noise = at(mid)?;
        if (noise / target - 1.0).abs() < 1e-6 {
            return Ok(mid.exp());
        }
        if noise > target {
            low = mid;
        } else {
            high = mid;
        }
    }
    Ok((0.5 * (low + high)).exp())
}
