//! The emitter-coupled pair with its charges, in the charge-based form of
//! [`super::trapezoid`].
//!
//! Unknowns (node voltages): intrinsic bases `B_P, B_M`, intrinsic emitters `E_P, E_M`, the
//! tail node `T`, collector terminals `C_P, C_M` and, when the transistor has a collector
//! resistance, intrinsic collectors `C'_P, C'_M` (otherwise `C' = C`). Resistors are written
//! as `V_a − V_b − R·I = 0`, so a zero resistance simply ties the nodes together without any
//! infinite conductance.
//!
//! Per side, `I_C` and `I_B` are the Gummel–Poon core of [`crate::solve::device`] at
//! `V_BE = V_B − V_E`, `V_BC = V_B − V_C'`, and `i_BE`, `i_BC`, `i_L`, `i_T` the currents of the
//! charges below:
//!
//! ```text
//! base path:   V_in − V_B − (R_S + r_b)·(I_B + i_BE + i_BC) = 0
//! emitter:     V_E − V_T − R_E·(I_C + I_B + i_BE)          = 0
//! collector:   V_CC − V_C + R_L·(i_L − I_C + i_BC)          = 0
//! r_c:         V_C − V_C' − r_c·(I_C − i_BC)                = 0   (with r_c > 0)
//! tail (KCL):  Σ (I_C + I_B + i_BE) − I_tail − V_T/R_tail − i_T = 0
//! ```
//!
//! Charges: `Q_BE = τ_F·I_CC/q_b + Q_j(V_BE; C_je, V_je, m_e)` (the forward diffusion charge
//! carries the Early factor and the knee through `q_b`), `Q_BC = τ_R·I_EC + Q_j(V_BC; C_jc,
//! V_jc, m_c)` (both on the intrinsic junction, inside r_b, R_E and r_c), `Q_L = C_L·(V_CC − V_C)`
//! across each load and `Q_T = C_T·V_T`. The depletion charge follows the junction law
//! `C(V) = C_j0·(1 − V/V_j)^(−m)` below `F_C·V_j` (`F_C` = 0.5) and its tangent line above, so
//! it stays finite under forward bias; the charge is the exact integral of that capacitance.
//! The P side's load and junction capacitances and transit time carry the stage's mismatch
//! (`StageCircuit::p_charge_scale`); the M side's are nominal.

use super::trapezoid::ChargeSystem;
use crate::model::circuit::{ChargeScale, Side, StageCircuit};
use crate::model::transistor::ChargeModel;
use crate::solve::device::gummel_poon;
use crate::solve::response::RegionCheck;
use std::f64::consts::TAU;

/// Forward-bias coefficient where the depletion capacitance law is continued linearly.
pub const FORWARD_BIAS_COEFFICIENT: f64 = 0.5;

/// Unknown indices.
const B_P: usize = 0;
const B_M: usize = 1;
const E_P: usize = 2;
const E_M: usize = 3;
const TAIL: usize = 4;
const C_P: usize = 5;
const C_M: usize = 6;
/// Intrinsic collectors, when the transistor has a collector resistance.
const CI_P: usize = 7;
const CI_M: usize = 8;
/// Number of unknowns without collector resistance.
pub const UNKNOWNS: usize = 7;
/// Number of unknowns with collector resistance (two intrinsic collectors more).
pub const UNKNOWNS_WITH_COLLECTOR_RESISTANCE: usize = 9;
/// Charge indices.
const Q_BE_P: usize = 0;
const Q_BE_M: usize = 1;
const Q_BC_P: usize = 2;
const Q_BC_M: usize = 3;
const Q_L_P: usize = 4;
const Q_L_M: usize = 5;
const Q_T: usize = 6;
/// Number of charges.
pub const CHARGES: usize = 7;

/// Depletion charge and capacitance of a junction at voltage `v` (see the module docs).
pub fn depletion_charge(v: f64, zero_bias_f: f64, potential_v: f64, grading: f64) -> (f64, f64) {
    if zero_bias_f == 0.0 {
        return (0.0, 0.0);
    }
    let fc = FORWARD_BIAS_COEFFICIENT;
    let knee = fc * potential_v;
    let integral = zero_bias_f * potential_v / (1.0 - grading);
    if v < knee {
        let ratio = 1.0 - v / potential_v;
        // ratio^(1 − m) = ratio·ratio^(−m): one power for the charge and the capacitance.
        let inverse_power = ratio.powf(-grading);
        (
            integral * (1.0 - ratio * inverse_power),
            zero_bias_f * inverse_power,
        )
    } else {
        // At the knee the ratio is 1 − F_C, and (1 − F_C)^(−m) gives both the charge there
        // and the slope of the continuation, C_j0/(1 − F_C)^(1 + m): one power, not two.
        let knee_power = (1.0 - fc).powf(-grading);
        let charge_knee = integral * (1.0 - (1.0 - fc) * knee_power);
        let scale = zero_bias_f * knee_power / (1.0 - fc);
        let constant = 1.0 - fc * (1.0 + grading);
        let slope = grading / potential_v;
        let charge =
            charge_knee + scale * (constant * (v - knee) + 0.5 * slope * (v * v - knee * knee));
        (charge, scale * (constant + slope * v))
    }
}

/// The differential drive: one tone or two equal tones, peak volts and angular frequencies.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Drive {
    /// `v_d = A·cos(ω t)`.
    Tone {
        /// Peak amplitude, V.
        amplitude_v: f64,
        /// Frequency, Hz.
        frequency_hz: f64,
    },
    /// `v_d = A·(cos ω₁t + cos ω₂t)`.
    TwoTone {
        /// Peak amplitude per tone, V.
        amplitude_v: f64,
        /// Lower tone, Hz.
        first_hz: f64,
        /// Upper tone, Hz.
        second_hz: f64,
    },
}

impl Drive {
    /// Differential input at `time_s`, V.
    pub fn differential_v(&self, time_s: f64) -> f64 {
        match *self {
            Drive::Tone {
                amplitude_v,
                frequency_hz,
            } => amplitude_v * phase_cos(frequency_hz, time_s),
            Drive::TwoTone {
                amplitude_v,
                first_hz,
                second_hz,
            } => amplitude_v * (phase_cos(first_hz, time_s) + phase_cos(second_hz, time_s)),
        }
    }
}

/// `cos(2π f t)` with the phase reduced to one cycle first (exact periodicity over long spans).
fn phase_cos(frequency_hz: f64, time_s: f64) -> f64 {
    let cycles = frequency_hz * time_s;
    (TAU * (cycles - cycles.round())).cos()
}

/// The stage under a drive, as a [`ChargeSystem`].
#[derive(Debug, Clone)]
pub struct PairSystem<'a> {
    circuit: &'a StageCircuit,
    drive: Drive,
    /// Number of unknowns: [`UNKNOWNS`], or [`UNKNOWNS_WITH_COLLECTOR_RESISTANCE`].
    unknowns: usize,
    /// Intrinsic collector node of the P and M sides.
    internal_collector: [usize; 2],
    coupling: Vec<f64>,
    tail_scale: f64,
    /// Whether every evaluation uses the whole Gummel–Poon core (a drive that saturates
    /// somewhere), rather than the forward-active form where it holds.
    whole: bool,
}

/// A side's currents at the node voltages of a state, with their derivatives with respect to
/// `(V_B, V_E, V_C')`.
pub struct SideCurrents {
    /// Collector current, A.
    pub collector: f64,
    base: f64,
    d_collector: [f64; 3],
    d_base: [f64; 3],
    /// `I_CC/q_b` (τ_F times it is the forward diffusion charge) and its derivatives.
    forward_diffusion: f64,
    d_forward_diffusion: [f64; 3],
    /// `I_EC` (τ_R times it is the reverse diffusion charge) and `∂/∂V_BC`.
    reverse_transport: f64,
    d_reverse_transport: f64,
    /// Injection level `q_2`.
    pub injection: f64,
}

/// A side's currents: the forward-active form `I_C = J·(1 + V_CE/V_AF)`, `I_B = J/β_F` where
/// the intrinsic collector-base junction is at or below zero bias and the side has no knee
/// currents or reverse Early voltage (the terms it leaves out are of order I_S, see
/// [`crate::solve::transfer`]), the whole Gummel–Poon core otherwise, and always when
/// `whole` (a drive that saturates somewhere keeps one form over its period).
pub(super) fn side_currents(
    side: &Side,
    phi: f64,
    vb: f64,
    ve: f64,
    vci: f64,
    whole: bool,
) -> SideCurrents {
    if !whole && vb - vci <= 0.0 && side.forward_law() {
        let j = side.saturation_current * ((vb - ve) / phi).exp();
        let early = 1.0 + (vci - ve) * side.early_inv;
        let collector = j * early;
        let dj = j / phi;
        let d_collector = [
            dj * early,
            -dj * early - j * side.early_inv,
            j * side.early_inv,
        ];
        return SideCurrents {
            collector,
            base: j * side.beta_inv,
            d_collector,
            d_base: [dj * side.beta_inv, -dj * side.beta_inv, 0.0],
            forward_diffusion: collector,
            d_forward_diffusion: d_collector,
            reverse_transport: -side.saturation_current,
            d_reverse_transport: 0.0,
            injection: 0.0,
        };
    }
    let d = gummel_poon(side, phi, vb - ve, vb - vci);
    SideCurrents {
        collector: d.collector,
        base: d.base,
        d_collector: by_node(d.d_collector),
        d_base: by_node(d.d_base),
        forward_diffusion: d.forward_diffusion,
        d_forward_diffusion: by_node(d.d_forward_diffusion),
        reverse_transport: d.reverse_transport,
        d_reverse_transport: d.d_reverse_transport,
        injection: d.injection,
    }
}

/// Where one transistor sits among a system's unknowns: its intrinsic base and emitter, the
/// collector terminal below the load, the intrinsic collector (the terminal itself without
/// r_c) and the tail node its emitter resistor returns to.
#[derive(Debug, Clone, Copy)]
pub(super) struct Terminals {
    pub base: usize,
    pub emitter: usize,
    pub collector: usize,
    pub internal_collector: usize,
    pub tail: usize,
}

impl Terminals {
    /// The nodes the device currents depend on, in the order of their derivatives.
    fn device_nodes(&self) -> [usize; 3] {
        [self.base, self.emitter, self.internal_collector]
    }
}

/// Adds one transistor's resistive terms to a system: each of `base_rows` (a row and the
/// resistance the base current flows through on it; the caller has written the row's drive)
/// loses `R·I_B`, the collector row (whose load top the caller has written) loses `R_L·I_C`,
/// the emitter row and the r_c row are written whole, and the tail row gains
/// `tail_scale·(I_C + I_B)`. `n` is the number of unknowns.
#[allow(clippy::too_many_arguments)]
pub(super) fn stamp_transistor(
    side: &Side,
    s: &SideCurrents,
    t: Terminals,
    base_rows: &[(usize, f64)],
    x: &[f64],
    n: usize,
    tail_scale: f64,
    f: &mut [f64],
    jacobian: &mut [f64],
) {
    let (e, col, ci) = (t.emitter, t.collector, t.internal_collector);
    for &(row, resistance) in base_rows {
        f[row] -= resistance * s.base;
    }
    // An emitter-lead source e (the split tail's source difference) lowers the
    // transistor's emitter below the resistor's drop.
    f[e] =
        x[e] - x[t.tail] - side.emitter_resistance * (s.collector + s.base) + side.emitter_source_v;
    jacobian[e * n + e] += 1.0;
    jacobian[e * n + t.tail] -= 1.0;
    f[col] -= side.load_resistance * s.collector;
    if ci != col {
        f[ci] = x[col] - x[ci] - side.collector_resistance * s.collector;
        jacobian[ci * n + col] += 1.0;
        jacobian[ci * n + ci] -= 1.0;
    }
    f[t.tail] += tail_scale * (s.collector + s.base);
    let (d_collector, d_base) = (s.d_collector, s.d_base);
    for (k, &node) in t.device_nodes().iter().enumerate() {
        for &(row, resistance) in base_rows {
            jacobian[row * n + node] -= resistance * d_base[k];
        }
        jacobian[e * n + node] -= side.emitter_resistance * (d_collector[k] + d_base[k]);
        jacobian[col * n + node] -= side.load_resistance * d_collector[k];
        if ci != col {
            jacobian[ci * n + node] -= side.collector_resistance * d_collector[k];
        }
        jacobian[t.tail * n + node] += tail_scale * (d_collector[k] + d_base[k]);
    }
}

/// How one transistor's two junction charges (indices `[Q_BE, Q_BC]`) enter a system's
/// equations: through every base row (with its resistance), the emitter resistor, the load
/// and r_c, and the tail row (scaled). `charges` is the number of charges.
pub(super) fn couple_transistor(
    side: &Side,
    t: Terminals,
    junction_charges: [usize; 2],
    base_rows: &[(usize, f64)],
    tail_scale: f64,
    charges: usize,
    coupling: &mut [f64],
) {
    let [qbe, qbc] = junction_charges;
    let mut set = |row: usize, charge: usize, value: f64| coupling[row * charges + charge] = value;
    for &(row, resistance) in base_rows {
        set(row, qbe, -resistance);
        set(row, qbc, -resistance);
    }
    set(t.emitter, qbe, -side.emitter_resistance);
    set(t.collector, qbc, side.load_resistance);
    if t.internal_collector != t.collector {
        set(t.internal_collector, qbc, side.collector_resistance);
    }
    set(t.tail, qbe, tail_scale);
}

/// One transistor's charges `Q_BE` and `Q_BC` (indices `[Q_BE, Q_BC]`) and their rows of the
/// charge Jacobian (added to), from its currents, the charge model and the scale of its
/// junction capacitances and transit time. `n` is the number of unknowns.
#[allow(clippy::too_many_arguments)]
pub(super) fn transistor_charges(
    s: &SideCurrents,
    ch: &ChargeModel,
    scale: &ChargeScale,
    t: Terminals,
    junction_charges: [usize; 2],
    x: &[f64],
    n: usize,
    q: &mut [f64],
    jacobian: &mut [f64],
) {
    let [qbe, qbc] = junction_charges;
    let (b, e, ci) = (t.base, t.emitter, t.internal_collector);
    let (junction, capacitance) = depletion_charge(
        x[b] - x[e],
        ch.emitter_junction_capacitance * scale.emitter_junction_capacitance,
        ch.emitter_junction_potential,
        ch.emitter_grading,
    );
    let transit_time = ch.transit_time * scale.transit_time;
    q[qbe] = transit_time * s.forward_diffusion + junction;
    for (k, &node) in t.device_nodes().iter().enumerate() {
        jacobian[qbe * n + node] += transit_time * s.d_forward_diffusion[k];
    }
    jacobian[qbe * n + b] += capacitance;
    jacobian[qbe * n + e] -= capacitance;
    let (junction, capacitance) = depletion_charge(
        x[b] - x[ci],
        ch.collector_junction_capacitance * scale.collector_junction_capacitance,
        ch.collector_junction_potential,
        ch.collector_grading,
    );
    q[qbc] = ch.reverse_transit_time * s.reverse_transport + junction;
    let reverse_diffusion = ch.reverse_transit_time * s.d_reverse_transport;
    jacobian[qbc * n + b] += capacitance + reverse_diffusion;
    jacobian[qbc * n + ci] -= capacitance + reverse_diffusion;
}

/// Junction limiting of a Newton step over a set of transistors: no base-emitter voltage
/// moves by more than 8·φT per iteration (keeps the exponentials finite far from the
/// solution), nor a base-collector voltage that is or would become forward-biased; no node
/// by more than 1 V. Returns the fraction of the step to take.
pub(super) fn junction_step_fraction(
    phi: f64,
    transistors: impl Iterator<Item = Terminals> + Clone,
    x: &[f64],
    dx: &[f64],
) -> f64 {
    let limit = 8.0 * phi;
    let junction = transistors
        .clone()
        .fold(0.0f64, |a, t| a.max((dx[t.base] - dx[t.emitter]).abs()));
    let node = dx.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let mut fraction: f64 = 1.0;
    if junction > limit {
        fraction = fraction.min(limit / junction);
    }
    for t in transistors {
        let (b, ci) = (t.base, t.internal_collector);
        let change = dx[b] - dx[ci];
        let now = x[b] - x[ci];
        if change.abs() > limit && now.max(now + change) > 0.0 {
            fraction = fraction.min(limit / change.abs());
        }
    }
    if node > 1.0 {
        fraction = fraction.min(1.0 / node);
    }
    fraction
}

/// `∂/∂(V_B, V_E, V_C')` of a quantity from its `∂/∂(V_BE, V_BC)`.
fn by_node(d: [f64; 2]) -> [f64; 3] {
    [d[0] + d[1], -d[0], -d[1]]
}

impl<'a> PairSystem<'a> {
    /// The terminals of the P (`side` 0) or M (`side` 1) transistor.
    fn terminals(internal_collector: [usize; 2], side: usize) -> Terminals {
        Terminals {
            base: [B_P, B_M][side],
            emitter: [E_P, E_M][side],
            collector: [C_P, C_M][side],
            internal_collector: internal_collector[side],
            tail: TAIL,
        }
    }

    /// The stage `circuit` driven by `drive`; `whole` evaluates the whole core everywhere (for
    /// drives that saturate somewhere).
    pub fn new(circuit: &'a StageCircuit, drive: Drive, whole: bool) -> Self {
        let with_rc = circuit.p.collector_resistance > 0.0 || circuit.m.collector_resistance > 0.0;
        let (unknowns, internal_collector) = if with_rc {
            (UNKNOWNS_WITH_COLLECTOR_RESISTANCE, [CI_P, CI_M])
        } else {
            (UNKNOWNS, [C_P, C_M])
        };
        let mut coupling = vec![0.0; unknowns * CHARGES];
        let tail_scale = 0.5 * (circuit.p.load_resistance + circuit.m.load_resistance);
        for (side, terminals, charges, ql) in [
            (
                &circuit.p,
                Self::terminals(internal_collector, 0),
                [Q_BE_P, Q_BC_P],
                Q_L_P,
            ),
            (
                &circuit.m,
                Self::terminals(internal_collector, 1),
                [Q_BE_M, Q_BC_M],
                Q_L_M,
            ),
        ] {
            let base_rows = [(terminals.base, side.base_path_resistance)];
            couple_transistor(
                side,
                terminals,
                charges,
                &base_rows,
                tail_scale,
                CHARGES,
                &mut coupling,
            );
            coupling[terminals.collector * CHARGES + ql] = side.load_resistance;
        }
        coupling[TAIL * CHARGES + Q_T] = -tail_scale;
        PairSystem {
            circuit,
            drive,
            unknowns,
            internal_collector,
            coupling,
            tail_scale,
            whole,
        }
    }

    /// Differential output `V_C,M − V_C,P` of a state, V.
    pub fn output_v(x: &[f64]) -> f64 {
        x[C_M] - x[C_P]
    }

    /// P-side collector terminal voltage of a state, V.
    pub fn p_collector_v(x: &[f64]) -> f64 {
        x[C_P]
    }

    /// Includes both sides of a state in a region check: intrinsic base-collector voltages,
    /// collector-current fractions and injection levels.
    pub fn include_region(&self, x: &[f64], region: &mut RegionCheck) {
        let c = self.circuit;
        for (side, b, e, ci) in [
            (&c.p, B_P, E_P, self.internal_collector[0]),
            (&c.m, B_M, E_M, self.internal_collector[1]),
        ] {
            let d = side_currents(side, c.thermal_voltage, x[b], x[e], x[ci], self.whole);
            region.include(x[b] - x[ci], d.collector / c.tail_current, d.injection);
        }
    }

    /// Intrinsic base-collector voltages (P, M) of a state, V.
    pub fn base_collector_pair_v(&self, x: &[f64]) -> [f64; 2] {
        [
            x[B_P] - x[self.internal_collector[0]],
            x[B_M] - x[self.internal_collector[1]],
        ]
    }

    /// The node voltages of a memoryless operating point (a start for shooting).
    pub fn state_from(&self, point: &crate::solve::transfer::OperatingPoint) -> Vec<f64> {
        let mut x = vec![0.0; self.unknowns];
        x[B_P] = point.p.base_voltage;
        x[B_M] = point.m.base_voltage;
        x[E_P] = point.p.base_voltage - point.p.base_emitter_voltage;
        x[E_M] = point.m.base_voltage - point.m.base_emitter_voltage;
        x[TAIL] = point.tail_voltage;
        x[C_P] = point.p.collector_voltage;
        x[C_M] = point.m.collector_voltage;
        x[self.internal_collector[0]] = point.p.internal_collector_voltage;
        x[self.internal_collector[1]] = point.m.internal_collector_voltage;
        x
    }
}

/// A residual vector and its row-major Jacobian, written by one evaluation.
pub struct Linearised<'a> {
    /// Values (residuals or charges).
    pub value: &'a mut [f64],
    /// Their derivatives with respect to the unknowns.
    pub jacobian: &'a mut [f64],
}

/// A circuit of transistors in charge-based form whose device currents are evaluated once per
/// state and shared by the resistive part and the charges; every such circuit is a
/// [`ChargeSystem`].
pub trait TransistorCircuit {
    /// Every transistor's currents at a state.
    type Currents;
    /// Numbers of unknowns and of charges.
    fn sizes(&self) -> (usize, usize);
    /// Every transistor's currents at `x`.
    fn currents(&self, x: &[f64]) -> Self::Currents;
    /// The resistive part `f(x, t)` and its Jacobian, from the currents at `x`.
    fn resistive_with(&self, currents: &Self::Currents, x: &[f64], time_s: f64, out: Linearised);
    /// The charges `q(x)` and their Jacobian, from the currents at `x`.
    fn charge_with(&self, currents: &Self::Currents, x: &[f64], out: Linearised);
    /// The constant coupling of the charges' currents into the equations (unknowns × charges).
    fn charge_coupling(&self) -> &[f64];
    /// Junction limiting of a Newton step (see [`junction_step_fraction`]).
    fn limit_step(&self, x: &[f64], dx: &[f64]) -> f64;
    /// The impedance converting a charge current to volts for the steady-state criterion.
    fn tail_scale(&self) -> f64;
}

impl<T: TransistorCircuit> ChargeSystem for T {
    fn unknowns(&self) -> usize {
        self.sizes().0
    }

    fn charges(&self) -> usize {
        self.sizes().1
    }

    fn resistive(&self, x: &[f64], time_s: f64, f: &mut [f64], jacobian: &mut [f64]) {
        let currents = self.currents(x);
        let out = Linearised { value: f, jacobian };
        self.resistive_with(&currents, x, time_s, out);
    }

    fn charge(&self, x: &[f64], q: &mut [f64], jacobian: &mut [f64]) {
        let currents = self.currents(x);
        self.charge_with(&currents, x, Linearised { value: q, jacobian });
    }

    fn evaluate(
        &self,
        x: &[f64],
        time_s: f64,
        f: &mut [f64],
        f_jacobian: &mut [f64],
        q: &mut [f64],
        q_jacobian: &mut [f64],
    ) {
        let currents = self.currents(x);
        let resistive = Linearised {
            value: f,
            jacobian: f_jacobian,
        };
        self.resistive_with(&currents, x, time_s, resistive);
        let charges = Linearised {
            value: q,
            jacobian: q_jacobian,
        };
        self.charge_with(&currents, x, charges);
    }

    fn coupling(&self) -> &[f64] {
        self.charge_coupling()
    }

    fn step_fraction(&self, x: &[f64], dx: &[f64]) -> f64 {
        self.limit_step(x, dx)
    }

    fn current_scale(&self) -> f64 {
        self.tail_scale()
    }
}

impl TransistorCircuit for PairSystem<'_> {
    type Currents = [SideCurrents; 2];

    fn sizes(&self) -> (usize, usize) {
        (self.unknowns, CHARGES)
    }

    /// Both sides' currents at a state (P, M).
    fn currents(&self, x: &[f64]) -> [SideCurrents; 2] {
        let c = self.circuit;
        let phi = c.thermal_voltage;
        let [ci_p, ci_m] = self.internal_collector;
        [
            side_currents(&c.p, phi, x[B_P], x[E_P], x[ci_p], self.whole),
            side_currents(&c.m, phi, x[B_M], x[E_M], x[ci_m], self.whole),
        ]
    }

    fn resistive_with(&self, sides: &[SideCurrents; 2], x: &[f64], time_s: f64, out: Linearised) {
        let Linearised { value: f, jacobian } = out;
        let c = self.circuit;
        let v_d = self.drive.differential_v(time_s);
        jacobian.fill(0.0);
        let n = self.unknowns;
        let st = self.tail_scale;
        f[TAIL] = -st * (c.tail_current + c.tail_conductance * x[TAIL]);
        jacobian[TAIL * n + TAIL] = -st * c.tail_conductance;
        for (k, (side, sign)) in [(&c.p, 0.5), (&c.m, -0.5)].into_iter().enumerate() {
            let t = Self::terminals(self.internal_collector, k);
            let (b, col) = (t.base, t.collector);
            f[b] = c.input_common_mode + sign * v_d - x[b];
            jacobian[b * n + b] -= 1.0;
            f[col] = side.load_top_v(c.supply) - x[col];
            jacobian[col * n + col] -= 1.0;
            let base_rows = [(b, side.base_path_resistance)];
            stamp_transistor(side, &sides[k], t, &base_rows, x, n, st, f, jacobian);
        }
    }

    fn charge_with(&self, sides: &[SideCurrents; 2], x: &[f64], out: Linearised) {
        let Linearised { value: q, jacobian } = out;
        let c = self.circuit;
        let ch = &c.charge;
        let n = self.unknowns;
        jacobian.fill(0.0);
        let matched = ChargeScale::MATCHED;
        for (k, (scale, ql)) in [(&c.p_charge_scale, Q_L_P), (&matched, Q_L_M)]
            .into_iter()
            .enumerate()
        {
            let t = Self::terminals(self.internal_collector, k);
            let charges = [[Q_BE_P, Q_BC_P], [Q_BE_M, Q_BC_M]][k];
            transistor_charges(&sides[k], ch, scale, t, charges, x, n, q, jacobian);
            let load_capacitance = c.load_capacitance * scale.load_capacitance;
            q[ql] = load_capacitance * (c.supply - x[t.collector]);
            jacobian[ql * n + t.collector] = -load_capacitance;
        }
        q[Q_T] = c.tail_capacitance * x[TAIL];
        jacobian[Q_T * n + TAIL] = c.tail_capacitance;
    }

    fn limit_step(&self, x: &[f64], dx: &[f64]) -> f64 {
        let transistors = (0..2).map(|k| Self::terminals(self.internal_collector, k));
        junction_step_fraction(self.circuit.thermal_voltage, transistors, x, dx)
    }

    fn charge_coupling(&self) -> &[f64] {
        &self.coupling
    }

    fn tail_scale(&self) -> f64 {
        self.tail_scale
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn depletion_charge_is_the_integral_of_its_capacitance() {
        // The charge must be the integral of C(V) on both sides of the knee (charge
        // conservation); checked by a fine midpoint sum.
        let (cj, vj, m) = (1e-12, 0.75, 0.33);
        let mut sum = 0.0;
        let steps = 200_000;
        let top = 0.7;
        for k in 0..steps {
            let v = (k as f64 + 0.5) * top / steps as f64;
            sum += depletion_charge(v, cj, vj, m).1 * top / steps as f64;
        }
        let (charge, _) = depletion_charge(top, cj, vj, m);
        assert!((charge - sum).abs() < 1e-9 * charge, "{charge} vs {sum}");
        // Zero bias: C = C_j0 (the junction law, from memory).
        assert!((depletion_charge(0.0, cj, vj, m).1 - cj).abs() < 1e-24);
    }
}
