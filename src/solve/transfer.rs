//! The memoryless large-signal solve of the emitter-coupled pair, over the whole drive range.
//!
//! Each side is the Gummel–Poon core of [`super::device`] with the base path `R_S + r_b`, the
//! emitter resistor `R_E`, the collector resistance `r_c` and the load `R_L` to the supply;
//! the emitters meet at the tail node, fed by the tail source `I_tail` in parallel with
//! `R_tail` to ground.
//!
//! **Forward-active form.** Where both intrinsic collector-base junctions are at or below zero
//! bias and the transistor has no knee currents and no reverse Early voltage, every term the
//! collector-base junction adds to the core is of order `I_S` (the reverse injection
//! `I_S·exp(V_BC/φT) ≤ I_S` and the constant `I_S` terms of `I_CC`, `I_EC`), about 10⁻¹³ of the
//! currents, and the solve uses the core without them:
//! `I_C = J·(1 + V_CE/V_AF)`, `I_B = J/β_F` with `J = I_S·exp(V_BE/φT)`. Every point it returns
//! is checked (both `V_BC ≤ 0`); where that fails, the whole model is solved instead.
//!
//! - *Reduced solve.* With an ideal tail and no Early effect the forward-active form reduces
//!   exactly to one unknown, the log ratio `y = ln(J_P/J_M)`:
//!
//!   ```text
//!   v_d = φT·(y − ln(I_SP/I_SM)) + Σ± (R_b/β + R_E·(1 + 1/β))·J,   Σ (1 + 1/β)·J = I_tail
//!   ```
//!
//!   which is strictly increasing in `y` and bracketed by `(v_d ± B)/φT`, where `B` bounds
//!   the resistive drops.
//! - *Forward-active general solve.* Otherwise (Early effect or a finite tail resistance) the
//!   unknowns are the tail-node voltage and each side's `ln J`, with the collector voltage
//!   eliminated in closed form. One Newton iteration on all three together, with the analytic
//!   Jacobian, starts from the last two solutions extrapolated linearly in `v_d` (the samples
//!   of a waveform are a smooth sequence; a first point starts from the reduced solution) and
//!   converges in three or four steps. Where it does not within twelve steps, the
//!   nested solve takes over: the tail voltage as the outer unknown of a bracketed safeguarded
//!   Newton, each side's `ln J` the inner unknown of another at every outer iterate.
//!
//! **The whole model.** The tail-node voltage is the outer unknown; for each side `ln J` is
//! the middle unknown (its base-emitter loop) and `V_BC` the inner one (its base-collector
//! loop `V_BC = V_in − R_B·I_B − V_CC + (R_L + r_c)·I_C`), with the full core. Each is a
//! monotone scalar problem solved by bracketed Newton; where the reverse injection is below
//! 2⁻⁵³ of the tail current ([`NEGLIGIBLE_REVERSE_INJECTION`]) the inner one is linear and
//! solved in closed form.
//!
//! Tolerance: every unknown is converged to a few ulps (relative step ≤ 4ε), so the solution
//! is exact to double precision; the analysis floor reported elsewhere (−200 dBc) sits far
//! above that. (The joint Newton also stops where a step of at most 64 such tolerances fails to
//! halve the one before: the residuals' rounding sets the steps there.)

use crate::error::SolveFailure;
use crate::model::circuit::{Side, StageCircuit};
use crate::solve::device::{
    gummel_poon, reverse_biased, reverse_injection_weight, DeviceCurrents, EXPONENT_CAP,
};
use crate::solve::roots::{
    bracket_increasing, newton_increasing, safe_newton, RootFailure, Tolerance,
};
use std::cell::Cell;

/// Reverse injection `I_S·exp(V_BC/φT)·(2 + 1/β_R)` below this fraction of the tail current
/// is left out (it is below the rounding of the currents): 2⁻⁵³.
pub const NEGLIGIBLE_REVERSE_INJECTION: f64 = 1.0 / 9_007_199_254_740_992.0;

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
    /// Collector terminal voltage (below the load), V.
    pub collector_voltage: f64,
    /// Intrinsic base voltage, V.
    pub base_voltage: f64,
    /// Intrinsic collector voltage (inside the collector resistance), V.
    pub internal_collector_voltage: f64,
    /// Injection level `q_2 = I_CC/I_KF + I_EC/I_KR` (0 without knee currents).
    pub injection: f64,
}

impl SidePoint {
    /// Intrinsic base-collector voltage; positive means the junction is forward-biased.
    pub fn base_collector_voltage(&self) -> f64 {
        self.base_voltage - self.internal_collector_voltage
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
#[derive(Debug, Clone, Default)]
pub struct WarmStart {
    /// Each pair's own memory, for a multi-tanh cell.
    pairs: Vec<WarmStart>,
    /// Each pair's last point, for a multi-tanh cell: the coupling starts from it.
    pair_points: Vec<OperatingPoint>,
    /// Last reduced unknown `y`.
    log_ratio: Option<f64>,
    /// The last two forward-active general solutions, newest first.
    general: GeneralHistory,
    /// Last solution of the whole model.
    whole: Option<GeneralStart>,
    /// Whether the last point solved had a forward-biased collector-base junction: its
    /// neighbour then goes straight to the whole model.
    saturating: bool,
}

/// The unknowns of the forward-active general solve: the tail voltage and `ln J` of the P and
/// M sides.
type GeneralUnknowns = [f64; 3];

/// The last two forward-active general solutions with their inputs, newest first: the next
/// sample of a waveform starts from their linear extrapolation in `v_d`.
#[derive(Debug, Clone, Copy, Default)]
struct GeneralHistory {
    solved: [Option<(f64, GeneralUnknowns)>; 2],
    /// Points where the joint Newton handed over to the nested solve.
    fallbacks: usize,
}

impl GeneralHistory {
    fn push(&mut self, v_d: f64, unknowns: GeneralUnknowns) {
        self.solved = [Some((v_d, unknowns)), self.solved[0]];
    }

    fn latest(&self) -> Option<GeneralUnknowns> {
        self.solved[0].map(|(_, x)| x)
    }

    /// The unknowns at `v_d` extrapolated linearly from the last two solutions (the latest
    /// alone where there is one, or where both were solved at the same input); `None`
    /// before the first solution.
    fn predict(&self, v_d: f64) -> Option<GeneralUnknowns> {
        match self.solved {
            [Some((v1, x1)), Some((v2, x2))] if v1 != v2 => {
                let w = (v_d - v1) / (v1 - v2);
                Some(std::array::from_fn(|i| x1[i] + w * (x1[i] - x2[i])))
            }
            [Some((_, x1)), _] => Some(x1),
            _ => None,
        }
    }
}

/// How a forward-active general point was solved.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum GeneralRoute {
    /// One Newton iteration on the three unknowns together.
    Joint,
    /// The nested bracketed solve, after the joint Newton did not converge.
    Nested,
}

/// Newton steps the joint solve may take before the nested solve takes over. From the
/// extrapolated start of a waveform sample it converges in three or four.
const JOINT_NEWTON_STEPS: usize = 12;

/// The unknowns of a solve of the whole model, as a warm start.
#[derive(Debug, Clone, Copy)]
struct GeneralStart {
    tail_v: f64,
    /// `ln J` of the P and M sides.
    log_forward: [f64; 2],
    /// `V_BC` of the P and M sides.
    base_collector_v: [f64; 2],
}

/// Solves the memoryless stage; build once per stage and temperature, call per sample.
#[derive(Debug, Clone)]
pub struct StaticSolver {
    circuit: StageCircuit,
    reducible: bool,
    forward_law: bool,
    /// Per side (P, M): the largest `V_BC` at which the reverse injection is negligible, V.
    negligible_below_v: [f64; 2],
    /// The pairs of a multi-tanh cell, each solved on its own and coupled by
    /// [`StaticSolver::solve_cell`] (empty otherwise).
    cell: Vec<StaticSolver>,
    /// Whether the cell's pairs can affect one another: through the shared source resistance
    /// (with base current) or through the shared loads (with an Early effect, or in saturation).
    cell_coupled: bool,
}

/// The cell's coupling iteration stops when no coupling voltage moves by more than this, V
/// (plus 16 ulps of the voltage; the pairs' own solves jitter by a few ulps): below it the
/// output moves by far less than the analysis floor.
pub const CELL_COUPLING_TOLERANCE_V: f64 = 1e-13;
/// The cell's coupling iteration gives up after this many passes, naming the point.
pub const CELL_COUPLING_PASSES: usize = 200;

/// The largest base-collector voltage at which a side's reverse injection
/// `I_S·exp(V_BC/φT)·(2 + 1/β_R)` stays below [`NEGLIGIBLE_REVERSE_INJECTION`] of the tail
/// current, V.
pub fn negligible_injection_limit(circuit: &StageCircuit, side: &Side) -> f64 {
    let weight = side.saturation_current * (2.0 + side.reverse_beta_inv);
    circuit.thermal_voltage * (NEGLIGIBLE_REVERSE_INJECTION * circuit.tail_current / weight).ln()
}

/// Whether both intrinsic collector-base junctions of a point are at or below zero bias,
/// where the forward-active form holds.
pub fn junctions_reverse_biased(point: &OperatingPoint) -> bool {
    point.p.base_collector_voltage() <= 0.0 && point.m.base_collector_voltage() <= 0.0
}

impl StaticSolver {
    /// Prepares a solver for one stage at one temperature.
    pub fn new(circuit: StageCircuit) -> Self {
        let reducible = circuit.is_reducible();
        let forward_law = circuit.p.forward_law() && circuit.m.forward_law();
        let negligible_below_v = [
            negligible_injection_limit(&circuit, &circuit.p),
            negligible_injection_limit(&circuit, &circuit.m),
        ];
        let cell: Vec<StaticSolver> = circuit
            .cell
            .iter()
            .map(|pair| StaticSolver::new(pair.circuit.clone()))
            .collect();
        let cell_coupled = circuit.cell.iter().any(|pair| {
            [&pair.circuit.p, &pair.circuit.m].iter().any(|s| {
                s.early_inv != 0.0
                    || s.reverse_early_inv != 0.0
                    || (circuit.source_resistance > 0.0 && s.beta_inv != 0.0)
            })
        });
        StaticSolver {
            circuit,
            reducible,
            forward_law,
            negligible_below_v,
            cell,
            cell_coupled,
        }
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
        if !self.cell.is_empty() {
            return self
                .solve_cell_pairs(v_d, false, warm)
                .map(|points| self.combine_cell(&points));
        }
        let general =
            self.forward_law && !self.reducible && !(warm.saturating && warm.whole.is_some());
        // The general solve starts from its own history when it has one: the reduced
        // solution is then not needed.
        let mut start = OperatingPoint::default();
        if !general || warm.general.latest().is_none() {
            let reduced = self.solve_reduced(v_d, warm.log_ratio)?;
            warm.log_ratio = Some(reduced.0);
            if self.reducible && junctions_reverse_biased(&reduced.1) {
                warm.saturating = false;
                return Ok(reduced.1);
            }
            start = reduced.1;
        }
        if general {
            let (point, unknowns, route) = self.solve_general(v_d, &start, &warm.general)?;
            warm.general.push(v_d, unknowns);
            if route == GeneralRoute::Nested {
                warm.general.fallbacks += 1;
            }
            if junctions_reverse_biased(&point) {
                warm.saturating = false;
                return Ok(point);
            }
            start = point;
        }
        let point = self.solve_whole(v_d, &start, warm.whole)?;
        self.remember_whole(&point, warm);
        Ok(point)
    }

    /// Solves without warm start (single points).
    pub fn solve_cold(&self, v_d: f64) -> Result<OperatingPoint, SolveFailure> {
        self.solve(v_d, &mut WarmStart::default())
    }

    /// Solves the whole model at `v_d`, even where the forward-active form would do: for
    /// every sample of a waveform that saturates somewhere, so that no sample of it switches
    /// form (the forms differ by terms of order `I_S`, a step the harmonic analysis would
    /// otherwise chase down to its floor).
    pub fn solve_whole_model(
        &self,
        v_d: f64,
        warm: &mut WarmStart,
    ) -> Result<OperatingPoint, SolveFailure> {
        if !v_d.is_finite() {
            return Err(failure(v_d, "the input is not finite"));
        }
        if !self.cell.is_empty() {
            return self
                .solve_cell_pairs(v_d, true, warm)
                .map(|points| self.combine_cell(&points));
        }
        let start = match warm.whole {
            Some(_) => OperatingPoint::default(),
            None => self.solve(v_d, &mut WarmStart::default())?,
        };
        let point = self.solve_whole(v_d, &start, warm.whole)?;
        self.remember_whole(&point, warm);
        Ok(point)
    }

    /// Whether a drive whose input swings over `±peak_v` forward-biases a collector-base
    /// junction somewhere (in the static transfer each side's base-collector voltage rises
    /// with its own input, so the peaks decide).
    pub fn saturates_within(&self, peak_v: f64) -> Result<bool, SolveFailure> {
        for v in [peak_v, -peak_v] {
            if !junctions_reverse_biased(&self.solve_cold(v)?) {
                return Ok(true);
            }
        }
        Ok(false)
    }

    /// Solves a multi-tanh cell at `v_d`: each pair at its own tail, with the other pairs'
    /// base currents in the shared source resistance (a shift of that side's input) and their
    /// collector currents in the shared loads (a drop at the top of that side's load),
    /// iterated pair by pair (Gauss–Seidel) until no coupling voltage moves by more than
    /// [`CELL_COUPLING_TOLERANCE_V`]. Pairs that cannot affect one another (no Early effect,
    /// no base current in a source resistance, no junction forward-biased at the true
    /// collector voltage) are exact after the first pass. `whole` solves every pair with the
    /// whole model.
    pub fn solve_cell(&self, v_d: f64, whole: bool) -> Result<OperatingPoint, SolveFailure> {
        self.solve_cell_pairs(v_d, whole, &mut WarmStart::default())
            .map(|points| self.combine_cell(&points))
    }

    /// Each pair's own point of a multi-tanh cell at `v_d`, coupled as in
    /// [`StaticSolver::solve_cell`] (collector and internal collector voltages as the pair was
    /// solved, with the other pairs' current in the shared loads once coupled). A stage that is
    /// not a cell gives its one point.
    pub fn solve_pairs(&self, v_d: f64) -> Result<Vec<OperatingPoint>, SolveFailure> {
        if self.cell.is_empty() {
            Ok(vec![self.solve_cold(v_d)?])
        } else {
            self.solve_cell_pairs(v_d, false, &mut WarmStart::default())
        }
    }

    fn solve_cell_pairs(
        &self,
        v_d: f64,
        whole: bool,
        warm: &mut WarmStart,
    ) -> Result<Vec<OperatingPoint>, SolveFailure> {
        let c = &self.circuit;
        let n = self.cell.len();
        let r_s = c.source_resistance;
        // Coupled pairs start from the last sample's points (the coupling moves little from
        // one sample to the next); uncoupled ones need none.
        let remembered = self.cell_coupled && warm.pair_points.len() == n;
        let mut points = if remembered {
            std::mem::take(&mut warm.pair_points)
        } else {
            vec![OperatingPoint::default(); n]
        };
        let mut warms = std::mem::take(&mut warm.pairs);
        warms.resize_with(n, WarmStart::default);
        // Coupling voltages of each pair: [P load drop, M load drop, P input drop, M input drop].
        let mut coupling = vec![[0.0f64; 4]; n];
        let others = |points: &[OperatingPoint], k: usize| -> [f64; 4] {
            let mut sums = [0.0; 4];
            for (j, point) in points.iter().enumerate() {
                if j != k {
                    sums[0] += point.p.collector_current;
                    sums[1] += point.m.collector_current;
                    sums[2] += point.p.base_current;
                    sums[3] += point.m.base_current;
                }
            }
            [
                c.p.load_resistance * sums[0],
                c.m.load_resistance * sums[1],
                r_s * sums[2],
                r_s * sums[3],
            ]
        };
        let solve_pair = |k: usize, drops: [f64; 4], warm: &mut WarmStart| {
            let mut part = self.cell[k].clone();
            part.circuit.p.extra_load_current = drops[0] / c.p.load_resistance;
            part.circuit.m.extra_load_current = drops[1] / c.m.load_resistance;
            part.circuit.input_common_mode = c.input_common_mode - 0.5 * (drops[2] + drops[3]);
            let v_pair = v_d - (drops[2] - drops[3]);
            if whole {
                part.solve_whole_model(v_pair, warm)
            } else {
                part.solve(v_pair, warm)
            }
        };
        for pass in 0..CELL_COUPLING_PASSES {
            let mut moved = 0.0f64;
            for k in 0..n {
                let drops = if pass == 0 && !self.cell_coupled {
                    [0.0; 4]
                } else {
                    others(&points, k)
                };
                for (old, new) in coupling[k].iter().zip(drops) {
                    let excess = (new - old).abs()
                        - CELL_COUPLING_TOLERANCE_V
                        - 16.0 * f64::EPSILON * new.abs();
                    moved = moved.max(excess);
                }
                coupling[k] = drops;
                points[k] = solve_pair(k, drops, &mut warms[k])?;
            }
            let settled = if pass == 0 && !self.cell_coupled {
                // Uncoupled pairs: exact when every junction stays reverse-biased at the true
                // collector voltages (the forward-active currents do not depend on them).
                (0..n).all(|k| {
                    let drops = others(&points, k);
                    let point = &points[k];
                    point.p.base_collector_voltage() + drops[0] <= 0.0
                        && point.m.base_collector_voltage() + drops[1] <= 0.0
                })
            } else {
                pass > 0 && moved <= 0.0
            };
            if settled {
                warm.pairs = warms;
                warm.pair_points.clone_from(&points);
                return Ok(points);
            }
        }
        Err(failure(
            v_d,
            &format!(
                "the multi-tanh pairs' coupling through the shared loads and source resistance did not settle in {CELL_COUPLING_PASSES} passes"
            ),
        ))
    }

    /// The cell's point from its pairs': currents summed per side, voltages of the transistor
    /// nearest saturation on each side at the true (shared) collector voltage, the lowest
    /// tail voltage, and the output from the summed currents.
    fn combine_cell(&self, points: &[OperatingPoint]) -> OperatingPoint {
        let c = &self.circuit;
        let total = |pick: fn(&OperatingPoint) -> &SidePoint, load: f64| -> SidePoint {
            let collector: f64 = points.iter().map(|p| pick(p).collector_current).sum();
            let drop_of = |p: &OperatingPoint| load * (collector - pick(p).collector_current);
            let worst = points
                .iter()
                .max_by(|a, b| {
                    let va = pick(a).base_collector_voltage() + drop_of(a);
                    let vb = pick(b).base_collector_voltage() + drop_of(b);
                    va.total_cmp(&vb)
                })
                .expect("a cell has pairs");
            let own = pick(worst);
            SidePoint {
                collector_current: collector,
                base_current: points.iter().map(|p| pick(p).base_current).sum(),
                emitter_current: points.iter().map(|p| pick(p).emitter_current).sum(),
                base_emitter_voltage: own.base_emitter_voltage,
                collector_voltage: c.supply - load * collector,
                base_voltage: own.base_voltage,
                internal_collector_voltage: own.internal_collector_voltage
                    - (own.collector_voltage - (c.supply - load * collector)),
                injection: points.iter().map(|p| pick(p).injection).fold(0.0, f64::max),
            }
        };
        OperatingPoint {
            p: total(|p| &p.p, c.p.load_resistance),
            m: total(|p| &p.m, c.m.load_resistance),
            tail_voltage: points
                .iter()
                .map(|p| p.tail_voltage)
                .fold(f64::INFINITY, f64::min),
            output_voltage: points.iter().map(|p| p.output_voltage).sum(),
        }
    }

    /// The solvers of a multi-tanh cell's pairs (empty for other stages).
    pub fn cell(&self) -> &[StaticSolver] {
        &self.cell
    }

    fn remember_whole(&self, point: &OperatingPoint, warm: &mut WarmStart) {
        let phi = self.circuit.thermal_voltage;
        warm.whole = Some(GeneralStart {
            tail_v: point.tail_voltage,
            log_forward: [
                transport_log(&point.p, &self.circuit.p, phi),
                transport_log(&point.m, &self.circuit.m, phi),
            ],
            base_collector_v: [
                point.p.base_collector_voltage(),
                point.m.base_collector_voltage(),
            ],
        });
        warm.saturating = !junctions_reverse_biased(point);
    }

    /// The reduced one-unknown problem: exact for the forward-active form with an ideal tail
    /// and no Early effect, and the starting point of the other solves otherwise.
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
        // Emitter-lead sources act as a differential input.
        let v_drive = v_d + p.emitter_source_v - m.emitter_source_v;
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
            let value = phi * (y - offset) + r_p * j_p - r_m * j_m - v_drive;
            let slope = phi + j_p * j_m / tail * (r_p * k_m + r_m * k_p);
            (value, slope)
        };
        let bound = tail * (r_p / k_p + r_m / k_m);
        let low = (v_drive - bound) / phi + offset - 1.0;
        let high = (v_drive + bound) / phi + offset + 1.0;
        let start = guess.unwrap_or((v_drive / (phi + 0.25 * tail * (r_p + r_m))) + offset);
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
                collector_voltage: side.load_top_v(c.supply) - side.load_resistance * j,
                base_voltage: v_in - side.base_path_resistance * base_current,
                internal_collector_voltage: side.load_top_v(c.supply)
                    - (side.load_resistance + side.collector_resistance) * j,
                injection: 0.0,
            }
        };
        let v_in_p = c.input_common_mode + 0.5 * v_d;
        let v_in_m = c.input_common_mode - 0.5 * v_d;
        let p_point = side(p, j_p, v_in_p);
        let m_point = side(m, j_m, v_in_m);
        let tail_voltage = p_point.base_voltage
            - p_point.base_emitter_voltage
            - p.emitter_resistance * p_point.emitter_current
            + p.emitter_source_v;
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

    /// The forward-active general problem in the tail voltage and `ln J` per side: one Newton
    /// iteration on all three together ([`Self::solve_joint`]) from the extrapolated history,
    /// else from the reduced solution `reduced`; where that does not converge, the nested
    /// bracketed solve ([`Self::solve_nested`]). Returns the point, its unknowns and the route.
    fn solve_general(
        &self,
        v_d: f64,
        reduced: &OperatingPoint,
        history: &GeneralHistory,
    ) -> Result<(OperatingPoint, GeneralUnknowns, GeneralRoute), SolveFailure> {
        let c = &self.circuit;
        let from_reduced = || {
            [
                reduced.tail_voltage,
                transport_log(&reduced.p, &c.p, c.thermal_voltage),
                transport_log(&reduced.m, &c.m, c.thermal_voltage),
            ]
        };
        let start = history.predict(v_d).unwrap_or_else(from_reduced);
        if let Some((point, unknowns)) = self.solve_joint(v_d, start, JOINT_NEWTON_STEPS) {
            return Ok((point, unknowns, GeneralRoute::Joint));
        }
        let start = history.latest().unwrap_or_else(from_reduced);
        let (point, unknowns) = self.solve_nested(v_d, start)?;
        Ok((point, unknowns, GeneralRoute::Nested))
    }

    /// The forward-active general problem as one Newton iteration on `x = (V_tail, u_P, u_M)`,
    /// `u = ln J`, with the analytic Jacobian: both base-emitter loops
    /// `g(u, V_tail) = R_B·I_B + φT·(u − ln I_S) + R_E·I_E + V_tail − V_in` and the tail node
    /// `F = I_E,P + I_E,M − I_tail − V_tail/R_tail`. Each loop involves only its own `u` and
    /// the tail voltage, so the 3×3 system is solved by eliminating `u_P`, `u_M` (the Schur
    /// complement on the tail row). Steps are cut to 8 in `ln J` and 8 φT in the tail voltage
    /// (junction limiting). Converged when a full step is at most `4ε·max(|x|, 1)` in every
    /// unknown, the tolerance of the nested solve, or at most 64 such tolerances without
    /// halving the step before (the residuals' rounding); `None` when neither happens within
    /// `max_steps` steps or a value is not finite (the caller falls back to the nested solve).
    fn solve_joint(
        &self,
        v_d: f64,
        start: GeneralUnknowns,
        max_steps: usize,
    ) -> Option<(OperatingPoint, GeneralUnknowns)> {
        let c = &self.circuit;
        let phi = c.thermal_voltage;
        let sides = [&c.p, &c.m];
        let v_in = [
            c.input_common_mode + 0.5 * v_d,
            c.input_common_mode - 0.5 * v_d,
        ];
        let log_is = [c.p.saturation_current.ln(), c.m.saturation_current.ln()];
        let tolerance = |x: f64| 4.0 * f64::EPSILON * x.abs().max(1.0);
        let mut x = start;
        // The largest step of the previous iteration in units of the tolerance.
        let mut previous = f64::INFINITY;
        for _ in 0..max_steps {
            if !x.iter().all(|v| v.is_finite()) {
                return None;
            }
            // Per side: the loop residual g, ∂g/∂u, ∂g/∂V_tail and ∂I_E/∂u; the tail node's
            // residual and its partial derivative in the tail voltage.
            let mut loops = [(0.0, 0.0, 0.0, 0.0); 2];
            let mut node = -c.tail_current - c.tail_conductance * x[0];
            let mut node_slope = -c.tail_conductance;
            for k in 0..2 {
                let side = sides[k];
                let (_, base, emitter, d_emitter_du, d_collector_d_tail) =
                    side_currents(c, side, x[k + 1], x[0]);
                let value = side.base_path_resistance * base
                    + phi * (x[k + 1] - log_is[k])
                    + side.emitter_resistance * emitter
                    + x[0]
                    - side.emitter_source_v
                    - v_in[k];
                let d_u =
                    side.base_path_resistance * base + phi + side.emitter_resistance * d_emitter_du;
                let d_tail = side.emitter_resistance * d_collector_d_tail + 1.0;
                loops[k] = (value, d_u, d_tail, d_emitter_du);
                node += emitter;
                node_slope += d_collector_d_tail;
            }
            // Newton step: du_k = −(g_k + ∂g_k/∂V_tail·dV_tail)/(∂g_k/∂u_k), and the tail row
            // with those substituted.
            let mut rhs = -node;
            let mut pivot = node_slope;
            for &(value, d_u, d_tail, d_emitter_du) in &loops {
                rhs += d_emitter_du * value / d_u;
                pivot -= d_emitter_du * d_tail / d_u;
            }
            let d_tail_v = rhs / pivot;
            let mut step = [
                d_tail_v,
                -(loops[0].0 + loops[0].2 * d_tail_v) / loops[0].1,
                -(loops[1].0 + loops[1].2 * d_tail_v) / loops[1].1,
            ];
            if !step.iter().all(|v| v.is_finite()) {
                return None;
            }
            let cut = (step[0].abs() / (8.0 * phi))
                .max(step[1].abs() / 8.0)
                .max(step[2].abs() / 8.0);
            // In units of the tolerance: converged at 1 or below, or where a step a few
            // tolerances long is not half the previous one (the residuals' rounding, not the
            // distance to the root, sets the steps there, and applying one is as good as it gets).
            let size = (0..3)
                .map(|i| step[i].abs() / tolerance(x[i]))
                .fold(0.0, f64::max);
            let converged = cut <= 1.0 && (size <= 1.0 || (size <= 64.0 && size > 0.5 * previous));
            previous = size;
            if cut > 1.0 {
                step.iter_mut().for_each(|v| *v /= cut);
            }
            for i in 0..3 {
                x[i] += step[i];
            }
            if converged {
                return self.general_point(v_d, x).map(|point| (point, x));
            }
        }
        None
    }

    /// The operating point at the general unknowns `x` (currents evaluated there); `None`
    /// where a current is not finite.
    fn general_point(&self, v_d: f64, x: GeneralUnknowns) -> Option<OperatingPoint> {
        let c = &self.circuit;
        let v_in_p = c.input_common_mode + 0.5 * v_d;
        let v_in_m = c.input_common_mode - 0.5 * v_d;
        let side = |side: &Side, u: f64| {
            let (collector_current, base_current, emitter_current, _, _) =
                side_currents(c, side, u, x[0]);
            ForwardSide {
                log_transport: u,
                collector_current,
                base_current,
                emitter_current,
                d_emitter_d_tail: 0.0,
            }
        };
        let (sp, sm) = (side(&c.p, x[1]), side(&c.m, x[2]));
        if !(sp.emitter_current.is_finite() && sm.emitter_current.is_finite()) {
            return None;
        }
        Some(OperatingPoint {
            p: sp.point(c, &c.p, v_in_p),
            m: sm.point(c, &c.m, v_in_m),
            tail_voltage: x[0],
            output_voltage: differential_output(
                &c.p,
                &c.m,
                sp.collector_current - sm.collector_current,
                sp.collector_current + sm.collector_current,
            ),
        })
    }

    /// The forward-active general problem nested: outer unknown the tail voltage (bracketed
    /// safeguarded Newton), inner unknowns `ln J` per side (the same, at each tail voltage),
    /// from `start`.
    fn solve_nested(
        &self,
        v_d: f64,
        start: GeneralUnknowns,
    ) -> Result<(OperatingPoint, GeneralUnknowns), SolveFailure> {
        let c = &self.circuit;
        let v_in_p = c.input_common_mode + 0.5 * v_d;
        let v_in_m = c.input_common_mode - 0.5 * v_d;
        let [tail_guess, mut u_p, mut u_m] = start;
        let mut inner_error: Option<SolveFailure> = None;
        // −(tail KCL residual) and its slope: increasing in the tail voltage.
        let mut outer = |v_tail: f64| -> (f64, f64) {
            let solved_p = solve_forward_side(c, &c.p, v_in_p, v_tail, u_p);
            let solved_m = solve_forward_side(c, &c.m, v_in_m, v_tail, u_m);
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
        let sp = solve_forward_side(c, &c.p, v_in_p, v_tail, u_p)
            .map_err(|e| root_failure(v_d, "P junction", e))?;
        let sm = solve_forward_side(c, &c.m, v_in_m, v_tail, u_m)
            .map_err(|e| root_failure(v_d, "M junction", e))?;
        let point = OperatingPoint {
            p: sp.point(c, &c.p, v_in_p),
            m: sm.point(c, &c.m, v_in_m),
            tail_voltage: v_tail,
            output_voltage: differential_output(
                &c.p,
                &c.m,
                sp.collector_current - sm.collector_current,
                sp.collector_current + sm.collector_current,
            ),
        };
        Ok((point, [v_tail, sp.log_transport, sm.log_transport]))
    }

    /// The whole model: outer unknown the tail voltage, middle unknowns `ln J` per side,
    /// inner unknowns `V_BC` per side.
    fn solve_whole(
        &self,
        v_d: f64,
        start_point: &OperatingPoint,
        warm: Option<GeneralStart>,
    ) -> Result<OperatingPoint, SolveFailure> {
        let c = &self.circuit;
        let phi = c.thermal_voltage;
        let v_in = [
            c.input_common_mode + 0.5 * v_d,
            c.input_common_mode - 0.5 * v_d,
        ];
        let sides = [&c.p, &c.m];
        let start = warm.unwrap_or(GeneralStart {
            tail_v: start_point.tail_voltage,
            log_forward: [
                transport_log(&start_point.p, &c.p, phi),
                transport_log(&start_point.m, &c.m, phi),
            ],
            // The starting point knows nothing of saturation: let the loops estimate their own.
            base_collector_v: [f64::NAN, f64::NAN],
        });
        let mut guesses = start;
        let inner_error: Cell<Option<SolveFailure>> = Cell::new(None);
        // −(tail KCL residual) and its slope: increasing in the tail voltage.
        let mut outer = |v_tail: f64| -> (f64, f64) {
            let mut emitter = 0.0;
            let mut slope = 0.0;
            for k in 0..2 {
                let limit = self.negligible_below_v[k];
                match solve_side(
                    c,
                    sides[k],
                    v_in[k],
                    v_tail,
                    guesses.log_forward[k],
                    guesses.base_collector_v[k],
                    limit,
                ) {
                    Ok(solved) => {
                        guesses.log_forward[k] = solved.log_forward;
                        guesses.base_collector_v[k] = solved.base_collector_v;
                        emitter += solved.currents.emitter();
                        slope += solved.d_emitter_d_tail;
                    }
                    Err(e) => {
                        inner_error.set(Some(root_failure(v_d, "one side's junctions", e)));
                        return (f64::NAN, f64::NAN);
                    }
                }
            }
            let value = emitter - c.tail_current - c.tail_conductance * v_tail;
            (-value, -(slope - c.tail_conductance))
        };
        let tolerance = Tolerance {
            relative: 4.0 * f64::EPSILON,
            scale: 1.0,
            max_iterations: 200,
        };
        let v_tail = newton_increasing(
            &mut outer,
            start.tail_v,
            f64::INFINITY,
            8.0 * phi,
            tolerance,
        );
        if let Some(err) = inner_error.take() {
            return Err(err);
        }
        let v_tail = v_tail.map_err(|e| root_failure(v_d, "tail-node voltage", e))?;
        let mut solved = Vec::with_capacity(2);
        for k in 0..2 {
            let side = solve_side(
                c,
                sides[k],
                v_in[k],
                v_tail,
                guesses.log_forward[k],
                guesses.base_collector_v[k],
                self.negligible_below_v[k],
            )
            .map_err(|e| root_failure(v_d, ["P junctions", "M junctions"][k], e))?;
            if side.currents.early_floored {
                return Err(failure(
                    v_d,
                    &format!(
                        "the Early factor 1 + V_CE/V_AF − V_BE/V_AR of the {} side falls to zero or below at V_BE = {:.4} V, V_BC = {:.4} V: the Early voltages are too small for this bias",
                        ["P", "M"][k],
                        side.base_emitter_v,
                        side.base_collector_v
                    ),
                ));
            }
            solved.push(side);
        }
        let (sp, sm) = (&solved[0], &solved[1]);
        Ok(OperatingPoint {
            p: sp.point(c, &c.p, v_in[0]),
            m: sm.point(c, &c.m, v_in[1]),
            tail_voltage: v_tail,
            output_voltage: differential_output(
                &c.p,
                &c.m,
                sp.currents.collector - sm.currents.collector,
                sp.currents.collector + sm.currents.collector,
            ),
        })
    }
}

/// `ln J` of a solved side, where `J = I_S·exp(V_BE/φT)` is its transport current.
fn transport_log(point: &SidePoint, side: &Side, thermal_voltage: f64) -> f64 {
    side.saturation_current.ln() + point.base_emitter_voltage / thermal_voltage
}

/// One side solved in the forward-active form at a given tail voltage.
struct ForwardSide {
    log_transport: f64,
    collector_current: f64,
    base_current: f64,
    emitter_current: f64,
    d_emitter_d_tail: f64,
}

impl ForwardSide {
    fn point(&self, c: &StageCircuit, side: &Side, v_in: f64) -> SidePoint {
        SidePoint {
            collector_current: self.collector_current,
            base_current: self.base_current,
            emitter_current: self.emitter_current,
            base_emitter_voltage: c.thermal_voltage
                * (self.log_transport - side.saturation_current.ln()),
            collector_voltage: side.load_top_v(c.supply)
                - side.load_resistance * self.collector_current,
            base_voltage: v_in - side.base_path_resistance * self.base_current,
            internal_collector_voltage: side.load_top_v(c.supply)
                - (side.load_resistance + side.collector_resistance) * self.collector_current,
            injection: 0.0,
        }
    }
}

/// Currents of one side in the forward-active form for `J = exp(u)` at tail voltage `v_tail`,
/// with the Early effect evaluated at the intrinsic collector voltage the load and the
/// collector resistance set. Returns
/// `(I_C, I_B, I_E, ∂I_E/∂u, ∂I_C/∂v_tail)`.
fn side_currents(c: &StageCircuit, side: &Side, u: f64, v_tail: f64) -> (f64, f64, f64, f64, f64) {
    let j = u.exp();
    let q = side.early_inv;
    let r_e = side.emitter_resistance;
    // I_C·(1 + q·J·(R_L + r_c + R_E)) = J + q·J·(V_top + e − V_tail − R_E·J/β), with V_top the
    // top of the load and e the emitter-lead source.
    let top = side.load_top_v(c.supply) + side.emitter_source_v;
    let numerator = j + q * j * (top - v_tail - r_e * j * side.beta_inv);
    let r_l = side.load_resistance + side.collector_resistance;
    let denominator = 1.0 + q * j * (r_l + r_e);
    let collector = numerator / denominator;
    let d_num_dj = 1.0 + q * (top - v_tail) - 2.0 * q * r_e * j * side.beta_inv;
    let d_den_dj = q * (r_l + r_e);
    let d_collector_dj =
        (d_num_dj * denominator - numerator * d_den_dj) / (denominator * denominator);
    let base = j * side.beta_inv;
    let emitter = collector + base;
    let d_emitter_du = j * (d_collector_dj + side.beta_inv);
    let d_collector_d_tail = -q * j / denominator;
    (collector, base, emitter, d_emitter_du, d_collector_d_tail)
}

fn solve_forward_side(
    c: &StageCircuit,
    side: &Side,
    v_in: f64,
    v_tail: f64,
    guess: f64,
) -> Result<ForwardSide, RootFailure> {
    let phi = c.thermal_voltage;
    let log_is = side.saturation_current.ln();
    let residual = |u: f64| -> (f64, f64) {
        let (_, base, emitter, d_emitter_du, _) = side_currents(c, side, u, v_tail);
        let value = side.base_path_resistance * base
            + phi * (u - log_is)
            + side.emitter_resistance * emitter
            + v_tail
            - side.emitter_source_v
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
    Ok(ForwardSide {
        log_transport: u,
        collector_current: collector,
        base_current: base,
        emitter_current: emitter,
        d_emitter_d_tail: d_collector_d_tail + d_emitter_du * du_dtail,
    })
}

/// One side of the whole model solved at a given tail voltage.
struct SideSolution {
    log_forward: f64,
    base_emitter_v: f64,
    base_collector_v: f64,
    currents: DeviceCurrents,
    /// Total derivative of the emitter current with respect to the tail voltage, S.
    d_emitter_d_tail: f64,
}

impl SideSolution {
    fn point(&self, c: &StageCircuit, side: &Side, v_in: f64) -> SidePoint {
        let collector = self.currents.collector;
        SidePoint {
            collector_current: collector,
            base_current: self.currents.base,
            emitter_current: self.currents.emitter(),
            base_emitter_voltage: self.base_emitter_v,
            collector_voltage: side.load_top_v(c.supply) - side.load_resistance * collector,
            base_voltage: v_in - side.base_path_resistance * self.currents.base,
            internal_collector_voltage: side.load_top_v(c.supply)
                - (side.load_resistance + side.collector_resistance) * collector,
            injection: self.currents.injection,
        }
    }
}

/// A side's currents at a given `V_BE` with its base-collector loop solved, and the total
/// derivatives along that loop's solution.
struct LoopSolution {
    base_collector_v: f64,
    currents: DeviceCurrents,
    /// `dV_BC/dV_BE` along the base-collector loop.
    d_bc_d_be: f64,
}

impl LoopSolution {
    /// Total derivative of the emitter and base currents with respect to `V_BE`.
    fn total_derivatives(&self) -> (f64, f64) {
        let de = self.currents.d_emitter();
        let db = self.currents.d_base;
        (
            de[0] + de[1] * self.d_bc_d_be,
            db[0] + db[1] * self.d_bc_d_be,
        )
    }
}

/// Solves a side's base-collector loop
/// `h(V_BC) = V_BC − (V_in − V_CC) + R_B·I_B − (R_L + r_c)·I_C = 0` at `V_BE`, `h` increasing
/// in `V_BC`. Without reverse injection it is linear; that root bounds the true one from
/// above (the reverse injection only raises `h`), and is the answer when it lies at or below
/// `limit_v`, where the reverse injection is negligible. `guess_v` (NaN: none) warm-starts
/// the full solve.
fn solve_loop(
    c: &StageCircuit,
    side: &Side,
    v_in: f64,
    log_forward: f64,
    guess_v: f64,
    limit_v: f64,
) -> Result<LoopSolution, RootFailure> {
    let phi = c.thermal_voltage;
    let vbe = phi * (log_forward - side.saturation_current.ln());
    let forward = log_forward
        .min(side.saturation_current.ln() + EXPONENT_CAP)
        .exp();
    let r_b = side.base_path_resistance;
    let r_c = side.load_resistance + side.collector_resistance;
    let drive = v_in - side.load_top_v(c.supply);
    // Without reverse injection I_B does not depend on V_BC and I_C is linear in it through
    // the Early factor, wherever that factor is above its floor (it is linear in V_BC, so
    // above the floor at both ends means above it in between).
    let mut upper = f64::INFINITY;
    let at_zero = reverse_biased(side, phi, vbe, 0.0, forward);
    let linear_slope = 1.0 - r_c * at_zero.d_collector[1];
    if !at_zero.early_floored {
        let root = (drive - r_b * at_zero.base + r_c * at_zero.collector) / linear_slope;
        let linear = reverse_biased(side, phi, vbe, root, forward);
        if !linear.early_floored && root.is_finite() {
            if root <= limit_v {
                let d_h_d_be = r_b * linear.d_base[0] - r_c * linear.d_collector[0];
                return Ok(LoopSolution {
                    base_collector_v: root,
                    currents: linear,
                    d_bc_d_be: -d_h_d_be / linear_slope,
                });
            }
            upper = root;
        }
    }
    let h = |vbc: f64| -> (f64, f64) {
        let d = gummel_poon(side, phi, vbe, vbc);
        (
            vbc - drive + r_b * d.base - r_c * d.collector,
            1.0 + r_b * d.d_base[1] - r_c * d.d_collector[1],
        )
    };
    // The linear root bounds the root from above (the reverse injection only raises h); where
    // the Early floor bent the linear form there is no such bound. Start from the guess, else
    // where the reverse injection alone would close the linear loop,
    // V ≈ φT·ln(s·(V₀ − V)/K) with K the injection's weight in h (one fixed-point step).
    let start = if guess_v.is_finite() {
        guess_v
    } else {
        let weight = side.saturation_current
            * (r_b * side.reverse_beta_inv + r_c * (1.0 + side.reverse_beta_inv));
        let first = phi * (linear_slope * phi / weight).ln();
        let reference = if upper.is_finite() {
            upper
        } else {
            first + phi
        };
        let second = phi * (linear_slope * (reference - first).max(phi) / weight).ln();
        if second.is_finite() {
            second
        } else {
            reference
        }
    };
    let vbc = if upper.is_finite() {
        // Below the linear root the loop is h = s·(V − V₀) + W·I_S·exp(V/φT) with W the
        // injection weight: solve ln(W·I_S·exp(V/φT)) = ln(s·(V₀ − V)) instead, nearly linear
        // in V on both sides of the root (h itself is exponential above it), then polish on h.
        let log_is = side.saturation_current.ln();
        let log_form = |v: f64| -> (f64, f64) {
            let gap = upper - v;
            if gap.is_nan() || gap <= 0.0 {
                return (f64::INFINITY, f64::INFINITY);
            }
            let weight = reverse_injection_weight(side, phi, vbe, v, r_b, r_c);
            (
                log_is + v / phi + weight.ln() - (linear_slope * gap).ln(),
                1.0 / phi + 1.0 / gap,
            )
        };
        let tolerance = Tolerance {
            relative: 1e-12,
            scale: 1.0,
            max_iterations: 200,
        };
        let near = newton_increasing(log_form, start.min(upper), upper, 8.0, tolerance)?;
        // Newton on h from there: quadratic, a step or two to the last ulps.
        let mut v = near;
        for _ in 0..4 {
            let (value, slope) = h(v);
            let step = value / slope;
            if !step.is_finite() {
                break;
            }
            v = (v - step).min(upper);
            if step.abs() <= 4.0 * f64::EPSILON * v.abs().max(1.0) {
                break;
            }
        }
        v
    } else {
        newton_increasing(h, start, upper, 8.0 * phi, Tolerance::MACHINE)?
    };
    let currents = gummel_poon(side, phi, vbe, vbc);
    let d_h_d_bc = 1.0 + r_b * currents.d_base[1] - r_c * currents.d_collector[1];
    let d_h_d_be = r_b * currents.d_base[0] - r_c * currents.d_collector[0];
    Ok(LoopSolution {
        base_collector_v: vbc,
        currents,
        d_bc_d_be: -d_h_d_be / d_h_d_bc,
    })
}

/// Solves one side at tail voltage `v_tail`: its base-emitter loop
/// `g(u) = R_B·I_B + V_BE + R_E·I_E + V_tail − V_in = 0` in `u = ln J`, each evaluation solving
/// the base-collector loop.
fn solve_side(
    c: &StageCircuit,
    side: &Side,
    v_in: f64,
    v_tail: f64,
    guess: f64,
    guess_bc: f64,
    limit_v: f64,
) -> Result<SideSolution, RootFailure> {
    let phi = c.thermal_voltage;
    let log_is = side.saturation_current.ln();
    // The last loop solved (ln J, V_BC, dV_BC/dV_BE): V_BC is predicted along its slope (in
    // saturation it follows V_BE almost one for one).
    let mut last = (guess, guess_bc, 1.0);
    let predict = |last: (f64, f64, f64), u: f64| last.1 + last.2 * phi * (u - last.0);
    let loop_error: Cell<Option<RootFailure>> = Cell::new(None);
    let mut residual = |u: f64| -> (f64, f64) {
        match solve_loop(c, side, v_in, u, predict(last, u), limit_v) {
            Ok(solved) => {
                last = (u, solved.base_collector_v, solved.d_bc_d_be);
                let (d_emitter, d_base) = solved.total_derivatives();
                let value = side.base_path_resistance * solved.currents.base
                    + phi * (u - log_is)
                    + side.emitter_resistance * solved.currents.emitter()
                    + v_tail
                    - side.emitter_source_v
                    - v_in;
                let slope = phi
                    * (side.base_path_resistance * d_base
                        + 1.0
                        + side.emitter_resistance * d_emitter);
                (value, slope)
            }
            Err(e) => {
                loop_error.set(Some(e));
                (f64::NAN, f64::NAN)
            }
        }
    };
    let u = newton_increasing(&mut residual, guess, f64::INFINITY, 8.0, Tolerance::MACHINE);
    if let Some(e) = loop_error.take() {
        return Err(e);
    }
    let u = u?;
    let solved = solve_loop(c, side, v_in, u, predict(last, u), limit_v)?;
    let (d_emitter, d_base) = solved.total_derivatives();
    // Implicit differentiation of the base-emitter loop: dV_BE/dV_tail = −1/(∂g/∂V_BE).
    let dg_dbe = side.base_path_resistance * d_base + 1.0 + side.emitter_resistance * d_emitter;
    Ok(SideSolution {
        log_forward: u,
        base_emitter_v: phi * (u - log_is),
        base_collector_v: solved.base_collector_v,
        currents: solved.currents,
        d_emitter_d_tail: -d_emitter / dg_dbe,
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::stage::Stage;
    use crate::model::transistor::Transistor;

    /// A realistic general-path stage: β, base resistance, the Early effect, a finite tail
    /// resistance and an I_S mismatch (so no fast path applies).
    fn general_solver() -> StaticSolver {
        let stage = Stage::new("general", 1e-3, 2e3)
            .emitter_resistance(200.0)
            .tail_resistance(50e3)
            .supply(5.0)
            .input_common_mode(1.5)
            .transistor(
                Transistor::default()
                    .beta(110.0)
                    .early_voltage(70.0)
                    .base_resistance(120.0),
            )
            .mismatch(crate::model::stage::Mismatch::default().saturation_current(0.01));
        StaticSolver::new(StageCircuit::new(&stage, 27.0))
    }

    /// Kirchhoff's current law at the tail node and the voltage law around each base-emitter
    /// loop (common practice), as residuals relative to the tail current and the input.
    fn kirchhoff_residuals(solver: &StaticSolver, v_d: f64, point: &OperatingPoint) -> [f64; 3] {
        let c = solver.circuit();
        let node = point.p.emitter_current + point.m.emitter_current
            - c.tail_current
            - c.tail_conductance * point.tail_voltage;
        let lp = c.input_common_mode + 0.5 * v_d;
        let lm = c.input_common_mode - 0.5 * v_d;
        let loop_of = |s: &SidePoint, side: &Side, v_in: f64| {
            side.base_path_resistance * s.base_current
                + s.base_emitter_voltage
                + side.emitter_resistance * s.emitter_current
                + point.tail_voltage
                - v_in
        };
        [
            node / c.tail_current,
            loop_of(&point.p, &c.p, lp) / lp,
            loop_of(&point.m, &c.m, lm) / lm,
        ]
    }

    fn assert_same_point(a: &OperatingPoint, b: &OperatingPoint, what: &str) {
        let close = |x: f64, y: f64| (x - y).abs() <= 1e-13 * x.abs().max(y.abs());
        assert!(
            close(a.tail_voltage, b.tail_voltage),
            "{what}: tail voltage"
        );
        assert!(
            close(a.p.collector_current, b.p.collector_current)
                && close(a.m.collector_current, b.m.collector_current),
            "{what}: collector currents {:e}, {:e} vs {:e}, {:e}",
            a.p.collector_current,
            a.m.collector_current,
            b.p.collector_current,
            b.m.collector_current
        );
        assert!(
            (a.output_voltage - b.output_voltage).abs() <= 1e-14 + 1e-13 * a.output_voltage.abs(),
            "{what}: output"
        );
    }

    /// An absurd start (a history extrapolated over a 1e-12 V step to a tail voltage of
    /// thousands of volts) defeats the joint Newton within its step budget; the nested solve
    /// takes over and returns the same point as the joint Newton from a good start, one that
    /// satisfies Kirchhoff's laws to rounding.
    #[test]
    fn the_nested_solve_takes_over_where_the_joint_newton_does_not_converge() {
        let solver = general_solver();
        let v_d = 0.12;
        let good = solver.solve_cold(v_d).unwrap();
        let mut history = GeneralHistory::default();
        history.push(0.0, [0.64, -8.0, -8.0]);
        history.push(1e-12, [10.0, -7.0, -9.0]);
        assert!(
            history.predict(v_d).unwrap()[0] > 1e9,
            "the start is absurd"
        );
        let (point, _, route) = solver
            .solve_general(v_d, &OperatingPoint::default(), &history)
            .unwrap();
        assert_eq!(route, GeneralRoute::Nested);
        assert_same_point(&point, &good, "fallback");
        for r in kirchhoff_residuals(&solver, v_d, &point) {
            assert!(r.abs() <= 1e-14, "residual {r:e}");
        }
        // From the last solution instead, the joint Newton converges.
        let mut near = GeneralHistory::default();
        near.push(0.11, [0.66, -7.6, -7.7]);
        let (joint, _, route) = solver
            .solve_general(v_d, &OperatingPoint::default(), &near)
            .unwrap();
        assert_eq!(route, GeneralRoute::Joint);
        assert_same_point(&joint, &point, "joint against nested");
    }

    /// Over a sampled period from 1 mV to 1 V (every sample forward-active), every point is
    /// solved by the joint Newton, agrees with the nested solve started afresh to 1e-13, and
    /// meets Kirchhoff's laws to rounding.
    #[test]
    fn sampled_periods_take_the_joint_route_and_match_the_nested_solve() {
        let solver = general_solver();
        for amplitude in [1e-3, 0.05, 0.3, 1.0] {
            let mut warm = WarmStart::default();
            for i in 0..128 {
                let v_d = amplitude * (std::f64::consts::TAU * i as f64 / 128.0).cos();
                let point = solver.solve(v_d, &mut warm).unwrap();
                assert!(junctions_reverse_biased(&point));
                let (reduced_y, reduced) = solver.solve_reduced(v_d, None).unwrap();
                assert!(reduced_y.is_finite());
                let start = [
                    reduced.tail_voltage,
                    transport_log(
                        &reduced.p,
                        &solver.circuit.p,
                        solver.circuit.thermal_voltage,
                    ),
                    transport_log(
                        &reduced.m,
                        &solver.circuit.m,
                        solver.circuit.thermal_voltage,
                    ),
                ];
                let (nested, _) = solver.solve_nested(v_d, start).unwrap();
                assert_same_point(&point, &nested, &format!("A = {amplitude}, sample {i}"));
                for r in kirchhoff_residuals(&solver, v_d, &point) {
                    assert!(
                        r.abs() <= 1e-14,
                        "A = {amplitude}, sample {i}: residual {r:e}"
                    );
                }
            }
            assert_eq!(warm.general.fallbacks, 0, "A = {amplitude}");
        }
    }
}
