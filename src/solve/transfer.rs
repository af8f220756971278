//! The memoryless large-signal solve of the emitter-coupled pair.
//!
//! Unknowns are written in well-conditioned forms. With an ideal tail and no Early effect the
//! circuit reduces exactly to one unknown, the log ratio `y = ln(J_P/J_M)` of the two
//! transport currents `J = I_S·exp(V_BE/φT)`:
//!
//! ```text
//! v_d = φT·(y − ln(I_SP/I_SM)) + Σ± (R_b/β + R_E·(1 + 1/β))·J,   J_P + J_M weighted = I_tail
//! ```
//!
//! which is strictly increasing in `y` and bracketed by `(v_d ± B)/φT`, where `B` bounds the
//! resistive drops. Otherwise (Early effect or a finite tail resistance) the tail-node voltage
//! is the outer unknown and each side's `ln J` an inner one; each is a monotone scalar
//! problem solved by bracketed Newton.
//!
//! Tolerance: every unknown is converged to a few ulps (relative step ≤ 4ε), so the solution
//! is exact to double precision; the analysis floor reported elsewhere (−200 dBc) sits far
//! above that.

use crate::error::SolveFailure;
use crate::model::circuit::{Side, StageCircuit};
use crate::solve::roots::{bracket_increasing, safe_newton, RootFailure, Tolerance};

/// The solved state of one side.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SidePoint {
    /// Collector current, A.
    pub collector_current: f64,
    /// Base current, A.
    pub base_current: f64,
    /// Emitter current, A.
    pub emitter_current: f64,
    /// Base-emitter voltage (intrinsic), V.
    pub base_emitter_voltage: f64,
    /// Collector voltage, V.
    pub collector_voltage: f64,
    /// Intrinsic base voltage, V.
    pub base_voltage: f64,
}

impl SidePoint {
    /// Base-collector voltage; positive means the junction is forward-biased.
    pub fn base_collector_voltage(&self) -> f64 {
        self.base_voltage - self.collector_voltage
    }
}

/// The solved circuit at one differential input.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct OperatingPoint {
    /// The P side.
    pub p: SidePoint,
    /// The M side.
    pub m: SidePoint,
    /// Tail (common emitter) node voltage, V.
    pub tail_voltage: f64,
    /// Differential output `V_C,M − V_C,P`, V, computed from the collector-current
    /// difference directly so that small signals keep full relative precision.
    pub output_voltage: f64,
}

impl OperatingPoint {
    /// Fraction of the total emitter current carried by the P side.
    pub fn p_fraction(&self) -> f64 {
        self.p.emitter_current / (self.p.emitter_current + self.m.emitter_current)
    }
}

/// Warm-start memory between neighbouring solves (successive samples of a waveform).
#[derive(Debug, Clone, Copy, Default)]
pub struct WarmStart {
    /// Last reduced unknown `y`.
    log_ratio: Option<f64>,
    /// Last tail voltage and inner unknowns.
    general: Option<(f64, f64, f64)>,
}

/// Solves the memoryless stage; build once per stage and temperature, call per sample.
#[derive(Debug, Clone)]
pub struct StaticSolver {
    circuit: StageCircuit,
    reducible: bool,
}

impl StaticSolver {
    /// Prepares a solver for one stage at one temperature.
    pub fn new(circuit: StageCircuit) -> Self {
        let reducible = circuit.is_reducible();
        StaticSolver { circuit, reducible }
    }

    /// The circuit being solved.
    pub fn circuit(&self) -> &StageCircuit {
        &self.circuit
    }

    /// Solves at differential input `v_d` (volts), reusing and updating `warm`.
    pub fn solve(&self, v_d: f64, warm: &mut WarmStart) -> Result<OperatingPoint, SolveFailure> {
        if !v_d.is_finite() {
            return Err(failure(v_d, "the input is not finite"));
        }
        let reduced = self.solve_reduced(v_d, warm.log_ratio)?;
        warm.log_ratio = Some(reduced.0);
        if self.reducible {
            return Ok(reduced.1);
        }
        let point = self.solve_general(v_d, &reduced.1, warm.general)?;
        warm.general = Some((
            point.tail_voltage,
            transport_log(&point.p, &self.circuit.p, self.circuit.thermal_voltage),
            transport_log(&point.m, &self.circuit.m, self.circuit.thermal_voltage),
        ));
        Ok(point)
    }

    /// Solves without warm start (single points).
    pub fn solve_cold(&self, v_d: f64) -> Result<OperatingPoint, SolveFailure> {
        self.solve(v_d, &mut WarmStart::default())
    }

    /// The reduced one-unknown problem: exact for an ideal tail without Early effect, and the
    /// starting point of the general solve otherwise.
    fn solve_reduced(
        &self,
        v_d: f64,
        guess: Option<f64>,
    ) -> Result<(f64, OperatingPoint), SolveFailure> {
        let c = &self.circuit;
        let (p, m) = (&c.p, &c.m);
        let phi = c.thermal_voltage;
        let tail = c.tail_current;
        let k_p = 1.0 + p.beta_inv;
        let k_m = 1.0 + m.beta_inv;
        let r_p = p.base_path_resistance * p.beta_inv + p.emitter_resistance * k_p;
        let r_m = m.base_path_resistance * m.beta_inv + m.emitter_resistance * k_m;
        let offset = (p.saturation_current / m.saturation_current).ln();
        // Transport currents with k_P·J_P + k_M·J_M = I_tail, written without overflow.
        let currents = |y: f64| -> (f64, f64) {
            if y >= 0.0 {
                let e = (-y).exp();
                (tail / (k_p + k_m * e), tail * e / (k_p + k_m * e))
            } else {
                let e = y.exp();
                (tail * e / (k_p * e + k_m), tail / (k_p * e + k_m))
            }
        };
        let residual = |y: f64| -> (f64, f64) {
            let (j_p, j_m) = currents(y);
            let value = phi * (y - offset) + r_p * j_p - r_m * j_m - v_d;
            let slope = phi + j_p * j_m / tail * (r_p * k_m + r_m * k_p);
            (value, slope)
        };
        let bound = tail * (r_p / k_p + r_m / k_m);
        let low = (v_d - bound) / phi + offset - 1.0;
        let high = (v_d + bound) / phi + offset + 1.0;
        let start = guess.unwrap_or((v_d / (phi + 0.25 * tail * (r_p + r_m))) + offset);
        let tolerance = Tolerance {
            relative: 4.0 * f64::EPSILON,
            scale: 1.0,
            max_iterations: 200,
        };
        let y = safe_newton(residual, low, high, start, tolerance)
            .map_err(|e| root_failure(v_d, "differential split", e))?;
        let (j_p, j_m) = currents(y);
        // J_P − J_M without cancellation: tail·expm1(±y)/(…)
        let difference = if y >= 0.0 {
            -tail * (-y).exp_m1() / (k_p + k_m * (-y).exp())
        } else {
            tail * y.exp_m1() / (k_p * y.exp() + k_m)
        };
        let side = |side: &Side, j: f64, v_in: f64| -> SidePoint {
            let base_current = j * side.beta_inv;
            let emitter_current = j + base_current;
            SidePoint {
                collector_current: j,
                base_current,
                emitter_current,
                base_emitter_voltage: phi * (j / side.saturation_current).ln(),
                collector_voltage: c.supply - side.load_resistance * j,
                base_voltage: v_in - side.base_path_resistance * base_current,
            }
        };
        let v_in_p = c.input_common_mode + 0.5 * v_d;
        let v_in_m = c.input_common_mode - 0.5 * v_d;
        let p_point = side(p, j_p, v_in_p);
        let m_point = side(m, j_m, v_in_m);
        let tail_voltage = p_point.base_voltage
            - p_point.base_emitter_voltage
            - p.emitter_resistance * p_point.emitter_current;
        Ok((
            y,
            OperatingPoint {
                p: p_point,
                m: m_point,
                tail_voltage,
                output_voltage: differential_output(p, m, difference, j_p + j_m),
            },
        ))
    }

    /// The general problem: outer unknown the tail voltage, inner unknowns `ln J` per side.
    fn solve_general(
        &self,
        v_d: f64,
        reduced: &OperatingPoint,
        warm: Option<(f64, f64, f64)>,
    ) -> Result<OperatingPoint, SolveFailure> {
        let c = &self.circuit;
        let v_in_p = c.input_common_mode + 0.5 * v_d;
        let v_in_m = c.input_common_mode - 0.5 * v_d;
        let (tail_guess, mut u_p, mut u_m) = warm.unwrap_or((
            reduced.tail_voltage,
            transport_log(&reduced.p, &c.p, c.thermal_voltage),
            transport_log(&reduced.m, &c.m, c.thermal_voltage),
        ));
        let mut inner_error: Option<SolveFailure> = None;
        // −(tail KCL residual) and its slope: increasing in the tail voltage.
        let mut outer = |v_tail: f64| -> (f64, f64) {
            let solved_p = solve_side(c, &c.p, v_in_p, v_tail, u_p);
            let solved_m = solve_side(c, &c.m, v_in_m, v_tail, u_m);
            match (solved_p, solved_m) {
                (Ok(sp), Ok(sm)) => {
                    u_p = sp.log_transport;
                    u_m = sm.log_transport;
                    let value = sp.emitter_current + sm.emitter_current
                        - c.tail_current
                        - c.tail_conductance * v_tail;
                    let slope = sp.d_emitter_d_tail + sm.d_emitter_d_tail - c.tail_conductance;
                    (-value, -slope)
                }
                (Err(e), _) | (_, Err(e)) => {
                    inner_error = Some(root_failure(v_d, "one side's junction", e));
                    (f64::NAN, f64::NAN)
                }
            }
        };
        let step = 10.0 * c.thermal_voltage;
        let (low, high) = bracket_increasing(|v| outer(v).0, tail_guess, step, 60)
            .map_err(|e| root_failure(v_d, "tail-node voltage", e))?;
        let tolerance = Tolerance {
            relative: 4.0 * f64::EPSILON,
            scale: 1.0,
            max_iterations: 200,
        };
        let v_tail = safe_newton(&mut outer, low, high, tail_guess, tolerance)
            .map_err(|e| root_failure(v_d, "tail-node voltage", e))?;
        if let Some(err) = inner_error.take() {
            return Err(err);
        }
        let sp = solve_side(c, &c.p, v_in_p, v_tail, u_p)
            .map_err(|e| root_failure(v_d, "P junction", e))?;
        let sm = solve_side(c, &c.m, v_in_m, v_tail, u_m)
            .map_err(|e| root_failure(v_d, "M junction", e))?;
        Ok(OperatingPoint {
            p: sp.point(c, &c.p, v_in_p),
            m: sm.point(c, &c.m, v_in_m),
            tail_voltage: v_tail,
            output_voltage: differential_output(
                &c.p,
                &c.m,
                sp.collector_current - sm.collector_current,
                sp.collector_current + sm.collector_current,
            ),
        })
    }
}

/// `ln J` of a solved side, where `J = I_S·exp(V_BE/φT)` is its transport current.
fn transport_log(point: &SidePoint, side: &Side, thermal_voltage: f64) -> f64 {
    side.saturation_current.ln() + point.base_emitter_voltage / thermal_voltage
}

/// One side solved at a given tail voltage.
struct SideSolution {
    log_transport: f64,
    collector_current: f64,
    base_current: f64,
    emitter_current: f64,
    d_emitter_d_tail: f64,
}

impl SideSolution {
    fn point(&self, c: &StageCircuit, side: &Side, v_in: f64) -> SidePoint {
        SidePoint {
            collector_current: self.collector_current,
            base_current: self.base_current,
            emitter_current: self.emitter_current,
            base_emitter_voltage: c.thermal_voltage
                * (self.log_transport - side.saturation_current.ln()),
            collector_voltage: c.supply - side.load_resistance * self.collector_current,
            base_voltage: v_in - side.base_path_resistance * self.base_current,
        }
    }
}

/// Currents of one side for transport `J = exp(u)` at tail voltage `v_tail`, with the Early
/// effect evaluated at the collector voltage the load sets. Returns
/// `(I_C, I_B, I_E, ∂I_E/∂u, ∂I_C/∂v_tail)`.
fn side_currents(c: &StageCircuit, side: &Side, u: f64, v_tail: f64) -> (f64, f64, f64, f64, f64) {
    let j = u.exp();
    let q = side.early_inv;
    let r_e = side.emitter_resistance;
    // I_C·(1 + q·J·(R_L + R_E)) = J + q·J·(V_CC − V_tail − R_E·J/β)
    let numerator = j + q * j * (c.supply - v_tail - r_e * j * side.beta_inv);
    let denominator = 1.0 + q * j * (side.load_resistance + r_e);
    let collector = numerator / denominator;
    let d_num_dj = 1.0 + q * (c.supply - v_tail) - 2.0 * q * r_e * j * side.beta_inv;
    let d_den_dj = q * (side.load_resistance + r_e);
    let d_collector_dj =
        (d_num_dj * denominator - numerator * d_den_dj) / (denominator * denominator);
    let base = j * side.beta_inv;
    let emitter = collector + base;
    let d_emitter_du = j * (d_collector_dj + side.beta_inv);
    let d_collector_d_tail = -q * j / denominator;
    (collector, base, emitter, d_emitter_du, d_collector_d_tail)
}

fn solve_side(
    c: &StageCircuit,
    side: &Side,
    v_in: f64,
    v_tail: f64,
    guess: f64,
) -> Result<SideSolution, RootFailure> {
    let phi = c.thermal_voltage;
    let log_is = side.saturation_current.ln();
    let residual = |u: f64| -> (f64, f64) {
        let (_, base, emitter, d_emitter_du, _) = side_currents(c, side, u, v_tail);
        let value = side.base_path_resistance * base
            + phi * (u - log_is)
            + side.emitter_resistance * emitter
            + v_tail
            - v_in;
        let slope = side.base_path_resistance * base + phi + side.emitter_resistance * d_emitter_du;
        (value, slope)
    };
    let (low, high) = bracket_increasing(|u| residual(u).0, guess, 1.0, 60)?;
    let u = safe_newton(residual, low, high, guess, Tolerance::MACHINE)?;
    let (collector, base, emitter, d_emitter_du, d_collector_d_tail) =
        side_currents(c, side, u, v_tail);
    // Implicit differentiation of the side's loop: du/dv_tail = −(∂g/∂v_tail)/(∂g/∂u).
    let dg_du = side.base_path_resistance * base + phi + side.emitter_resistance * d_emitter_du;
    let dg_dtail = side.emitter_resistance * d_collector_d_tail + 1.0;
    let du_dtail = -dg_dtail / dg_du;
    Ok(SideSolution {
        log_transport: u,
        collector_current: collector,
        base_current: base,
        emitter_current: emitter,
        d_emitter_d_tail: d_collector_d_tail + d_emitter_du * du_dtail,
    })
}

/// `R_LP·I_CP − R_LM·I_CM` from the current difference and sum, without cancellation.
fn differential_output(p: &Side, m: &Side, difference: f64, sum: f64) -> f64 {
    let mean_load = 0.5 * (p.load_resistance + m.load_resistance);
    let load_difference = p.load_resistance - m.load_resistance;
    mean_load * difference + 0.5 * load_difference * sum
}

fn failure(v_d: f64, reason: &str) -> SolveFailure {
    SolveFailure {
        point: format!("v_d = {v_d:e} V"),
        reason: reason.to_owned(),
    }
}

fn root_failure(v_d: f64, unknown: &str, err: RootFailure) -> SolveFailure {
    failure(v_d, &format!("{unknown}: {}", err.reason))
}
