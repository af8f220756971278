//! The Gummel–Poon core of one intrinsic transistor: terminal currents and their derivatives
//! from the two junction voltages, shared by the static solve ([`super::transfer`]) and the
//! periodic steady state ([`super::dynamic::pair`]).
//!
//! With `V_BE`, `V_BC` the intrinsic junction voltages (Gummel & Poon, 1970, from memory):
//!
//! ```text
//! I_CC = I_S·(exp(V_BE/φT) − 1)          I_EC = I_S·(exp(V_BC/φT) − 1)
//! 1/q_1 = 1 + V_CE/V_AF − V_BE/V_AR       (V_CE = V_BE − V_BC)
//! q_2 = I_CC/I_KF + I_EC/I_KR             q_b = q_1·(1 + sqrt(1 + 4·q_2))/2
//! I_C = (I_CC − I_EC)/q_b − I_EC/β_R      I_B = I_CC/β_F + I_EC/β_R
//! ```
//!
//! `I_CC − I_EC` is formed as `I_S·(exp(V_BE/φT) − exp(V_BC/φT))`, so the two "−1" terms
//! cancel exactly. The Early factor `1/q_1` is kept at or above [`EARLY_FACTOR_FLOOR`] so that
//! trial points far from a solution stay finite; [`DeviceCurrents::early_floored`] says when
//! the floor acted, and the solvers refuse a solution where it did. Exponents are capped at
//! [`EXPONENT_CAP`] for the same reason.

use crate::model::circuit::Side;

/// Least value of the Early factor `1/q_1` the model evaluates (see the module docs).
pub const EARLY_FACTOR_FLOOR: f64 = 1e-3;

/// Largest exponent `V/φT` evaluated: 700 (about 18 V at room temperature), far beyond any
/// solution, keeps the exponentials of trial points finite.
pub const EXPONENT_CAP: f64 = 700.0;

/// Base-charge factor `(1 + sqrt(1 + 4·q_2))/2` from which a point counts as high-level
/// injection: the knee has cut the transport current by 1 %.
pub const HIGH_INJECTION_FACTOR: f64 = 1.01;

/// Currents of the intrinsic transistor and their partial derivatives with respect to
/// `(V_BE, V_BC)`, per volt.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct DeviceCurrents {
    /// Collector current I_C (into the collector), A.
    pub collector: f64,
    /// Base current I_B (into the base), A.
    pub base: f64,
    /// `∂I_C/∂V_BE`, `∂I_C/∂V_BC`, S.
    pub d_collector: [f64; 2],
    /// `∂I_B/∂V_BE`, `∂I_B/∂V_BC`, S.
    pub d_base: [f64; 2],
    /// `I_CC/q_b`, A: τ_F times it is the forward diffusion charge.
    pub forward_diffusion: f64,
    /// `∂(I_CC/q_b)/∂V_BE`, `∂(I_CC/q_b)/∂V_BC`, S.
    pub d_forward_diffusion: [f64; 2],
    /// `I_EC`, A: τ_R times it is the reverse diffusion charge.
    pub reverse_transport: f64,
    /// `∂I_EC/∂V_BC`, S.
    pub d_reverse_transport: f64,
    /// `q_2 = I_CC/I_KF + I_EC/I_KR`.
    pub injection: f64,
    /// Whether the Early factor was held at [`EARLY_FACTOR_FLOOR`].
    pub early_floored: bool,
}

impl DeviceCurrents {
    /// Emitter current `I_C + I_B` (out of the emitter), A.
    pub fn emitter(&self) -> f64 {
        self.collector + self.base
    }

    /// `∂I_E/∂V_BE`, `∂I_E/∂V_BC`, S.
    pub fn d_emitter(&self) -> [f64; 2] {
        [
            self.d_collector[0] + self.d_base[0],
            self.d_collector[1] + self.d_base[1],
        ]
    }
}

/// The base-charge factor `(1 + sqrt(1 + 4·q_2))/2` at injection level `q_2`.
pub fn base_charge_factor(injection: f64) -> f64 {
    0.5 * (1.0 + (1.0 + 4.0 * injection).max(0.0).sqrt())
}

/// The whole Gummel–Poon core at `(V_BE, V_BC)`.
pub fn gummel_poon(side: &Side, phi: f64, vbe: f64, vbc: f64) -> DeviceCurrents {
    let forward = side.saturation_current * (vbe / phi).min(EXPONENT_CAP).exp();
    let reverse = side.saturation_current * (vbc / phi).min(EXPONENT_CAP).exp();
    core(side, phi, vbe, vbc, forward, reverse)
}

/// The core with the reverse injection `I_S·exp(V_BC/φT)` left out (`I_EC = −I_S`): exact to
/// rounding where the collector-base junction is reverse-biased far enough (the callers check
/// that). `forward` is `I_S·exp(V_BE/φT)`.
pub fn reverse_biased(side: &Side, phi: f64, vbe: f64, vbc: f64, forward: f64) -> DeviceCurrents {
    core(side, phi, vbe, vbc, forward, 0.0)
}

/// The core from the two exponentials `forward = I_S·exp(V_BE/φT)`, `reverse = I_S·exp(V_BC/φT)`.
fn core(side: &Side, phi: f64, vbe: f64, vbc: f64, forward: f64, reverse: f64) -> DeviceCurrents {
    let is = side.saturation_current;
    let i_cc = forward - is;
    let i_ec = reverse - is;
    let d_forward = forward / phi;
    let d_reverse = reverse / phi;
    // Early factor 1/q_1 and its derivatives.
    let raw = 1.0 + (vbe - vbc) * side.early_inv - vbe * side.reverse_early_inv;
    let (early, d_early) = if raw >= EARLY_FACTOR_FLOOR {
        (
            raw,
            [side.early_inv - side.reverse_early_inv, -side.early_inv],
        )
    } else {
        (EARLY_FACTOR_FLOOR, [0.0, 0.0])
    };
    // Knee: D = (1 + s)/2, s = sqrt(1 + 4 q_2).
    let injection = i_cc * side.forward_knee_inv + i_ec * side.reverse_knee_inv;
    let (knee, d_knee) = if side.forward_knee_inv == 0.0 && side.reverse_knee_inv == 0.0 {
        (1.0, [0.0, 0.0])
    } else {
        let root = (1.0 + 4.0 * injection).max(f64::MIN_POSITIVE).sqrt();
        (
            0.5 * (1.0 + root),
            [
                d_forward * side.forward_knee_inv / root,
                d_reverse * side.reverse_knee_inv / root,
            ],
        )
    };
    // Transport current (I_CC − I_EC)/q_b = (forward − reverse)·early/knee.
    let net = forward - reverse;
    let transport = net * early / knee;
    let d_net = [d_forward, -d_reverse];
    let d_transport =
        [0, 1].map(|k| (d_net[k] * early + net * d_early[k]) / knee - transport * d_knee[k] / knee);
    let forward_diffusion = i_cc * early / knee;
    let d_i_cc = [d_forward, 0.0];
    let d_forward_diffusion = [0, 1].map(|k| {
        (d_i_cc[k] * early + i_cc * d_early[k]) / knee - forward_diffusion * d_knee[k] / knee
    });
    let br = side.reverse_beta_inv;
    let bf = side.beta_inv;
    DeviceCurrents {
        collector: transport - i_ec * br,
        base: i_cc * bf + i_ec * br,
        d_collector: [d_transport[0], d_transport[1] - d_reverse * br],
        d_base: [d_forward * bf, d_reverse * br],
        forward_diffusion,
        d_forward_diffusion,
        reverse_transport: i_ec,
        d_reverse_transport: d_reverse,
        injection,
        early_floored: raw < EARLY_FACTOR_FLOOR,
    }
}

/// The rise of a side's base-collector loop `h = V_BC − (V_in − V_CC) + R_B·I_B − R_C·I_C`
/// over its value without reverse injection, divided by the reverse injection
/// `I_S·exp(V_BC/φT)`, Ω: `R_B/β_R + R_C·(1/(q_1·D) + 1/β_R + I_S·exp(V_BE/φT)·(D − D₀)/(q_1·D·D₀·I_S·exp(V_BC/φT)))`,
/// where `D` is the base-charge factor and `D₀` its value without reverse injection. Every
/// term is positive, so the rise is formed without cancellation however small it is.
pub fn reverse_injection_weight(
    side: &Side,
    phi: f64,
    vbe: f64,
    vbc: f64,
    r_b: f64,
    r_c: f64,
) -> f64 {
    let is = side.saturation_current;
    let forward = is * (vbe / phi).min(EXPONENT_CAP).exp();
    let raw = 1.0 + (vbe - vbc) * side.early_inv - vbe * side.reverse_early_inv;
    let early = raw.max(EARLY_FACTOR_FLOOR);
    let mut weight = r_b * side.reverse_beta_inv + r_c * side.reverse_beta_inv;
    if side.forward_knee_inv == 0.0 && side.reverse_knee_inv == 0.0 {
        return weight + r_c * early;
    }
    let reverse = is * (vbc / phi).min(EXPONENT_CAP).exp();
    let base = (forward - is) * side.forward_knee_inv - is * side.reverse_knee_inv;
    let root_0 = (1.0 + 4.0 * base).max(f64::MIN_POSITIVE).sqrt();
    let root = (1.0 + 4.0 * (base + reverse * side.reverse_knee_inv))
        .max(f64::MIN_POSITIVE)
        .sqrt();
    let (knee_0, knee) = (0.5 * (1.0 + root_0), 0.5 * (1.0 + root));
    // (D − D₀)/I_S·exp(V_BC/φT) = 2/(I_KR·(s + s₀)).
    let knee_rise = 2.0 * side.reverse_knee_inv / (root + root_0);
    weight += r_c * (early / knee + forward * early * knee_rise / (knee * knee_0));
    weight
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::stage::Stage;
    use crate::model::transistor::Transistor;

    fn side(transistor: Transistor) -> Side {
        crate::model::circuit::StageCircuit::new(
            &Stage::new("s", 1e-3, 1e3).transistor(transistor),
            27.0,
        )
        .p
    }

    /// The injection weight against the loop's rise computed the long way (whole core minus
    /// the core without reverse injection), where that difference is well conditioned.
    #[test]
    fn injection_weight_is_the_loop_rise_per_ampere() {
        let s = side(
            Transistor::default()
                .beta(80.0)
                .reverse_beta(2.0)
                .early_voltage(30.0)
                .forward_knee_current(2e-3)
                .reverse_knee_current(1e-4),
        );
        let (phi, r_b, r_c) = (0.025852, 300.0, 2000.0);
        for (vbe, vbc) in [(0.75f64, 0.6f64), (0.8, 0.7), (0.7, 0.65)] {
            let forward = s.saturation_current * (vbe / phi).exp();
            let whole = gummel_poon(&s, phi, vbe, vbc);
            let without = reverse_biased(&s, phi, vbe, vbc, forward);
            let rise =
                r_b * (whole.base - without.base) - r_c * (whole.collector - without.collector);
            let injection = s.saturation_current * (vbc / phi).exp();
            let weight = reverse_injection_weight(&s, phi, vbe, vbc, r_b, r_c);
            assert!(
                (weight * injection / rise - 1.0).abs() < 1e-9,
                "({vbe}, {vbc}): {} vs {rise}",
                weight * injection
            );
        }
    }

    /// The analytic derivatives against central differences of the currents (a slow,
    /// obviously correct reference), in forward-active, saturated and high-injection bias.
    #[test]
    fn derivatives_match_central_differences() {
        let s = side(
            Transistor::default()
                .beta(80.0)
                .reverse_beta(2.0)
                .early_voltage(30.0)
                .reverse_early_voltage(5.0)
                .forward_knee_current(2e-3)
                .reverse_knee_current(1e-4),
        );
        let phi = 0.025852;
        for (vbe, vbc) in [(0.7, -2.0), (0.75, 0.6), (0.9, 0.5), (0.6, 0.65)] {
            let at = gummel_poon(&s, phi, vbe, vbc);
            let h = 1e-7;
            for k in 0..2 {
                let (dp, dm) = if k == 0 { (h, 0.0) } else { (0.0, h) };
                let up = gummel_poon(&s, phi, vbe + dp, vbc + dm);
                let down = gummel_poon(&s, phi, vbe - dp, vbc - dm);
                for (name, analytic, numeric) in [
                    (
                        "I_C",
                        at.d_collector[k],
                        (up.collector - down.collector) / (2.0 * h),
                    ),
                    ("I_B", at.d_base[k], (up.base - down.base) / (2.0 * h)),
                    (
                        "I_CC/q_b",
                        at.d_forward_diffusion[k],
                        (up.forward_diffusion - down.forward_diffusion) / (2.0 * h),
                    ),
                ] {
                    let scale = analytic.abs().max(1e-12);
                    assert!(
                        (analytic - numeric).abs() <= 1e-5 * scale,
                        "{name} d/dv{k} at ({vbe}, {vbc}): {analytic:e} vs {numeric:e}"
                    );
                }
            }
        }
    }
}
