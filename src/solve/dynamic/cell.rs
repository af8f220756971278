//! A multi-tanh cell with its charges, in the charge-based form of [`super::trapezoid`]: `N`
//! emitter-coupled pairs on the same inputs and the same loads, each with its own tail.
//!
//! Unknowns (node voltages): the two input nodes `S_P, S_M` behind the shared source
//! resistance, the two collector terminals `C_P, C_M` (one load each, shared by every pair),
//! and per pair `k` its intrinsic bases `B_Pk, B_Mk`, intrinsic emitters `E_Pk, E_Mk`, its tail
//! node `T_k` and, when a transistor has a collector resistance, its intrinsic collectors
//! `C'_Pk, C'_Mk` (otherwise `C' = C`). Each transistor is the pair's Gummel–Poon core with its
//! charges ([`super::pair`]), scaled by its emitter area `a` (`a·I_S`, `r_b/a`, `r_c/a`,
//! `a·C_je`, `a·C_jc`; the transit time is the same).
//!
//! ```text
//! input:       V_in − V_S − R_S·Σ_k (I_B + i_BE + i_BC)_k              = 0
//! base path:   V_S − V_B,k − r_b,k·(I_B + i_BE + i_BC)_k                = 0
//! emitter:     V_E,k − V_T,k − R_E,k·(I_C + I_B + i_BE)_k               = 0
//! collector:   V_CC − V_C + R_L·(i_L − Σ_k (I_C − i_BC)_k)              = 0
//! r_c:         V_C − V_C',k − r_c,k·(I_C − i_BC)_k                      = 0   (with r_c > 0)
//! tail k:      Σ_sides (I_C + I_B + i_BE) − I_k − V_T,k/R_k − i_T,k     = 0
//! ```
//!
//! with `Q_L = C_L·(V_CC − V_C)` across each load and `Q_T,k = C_T,k·V_T,k` at each tail
//! (the stage's tail capacitance shared in proportion to the pairs' currents, as their tail
//! conductances are). With no charge anywhere the equations are those the memoryless engine
//! couples pair by pair ([`crate::solve::transfer::StaticSolver::solve_cell`]), so the two
//! engines meet at low frequency.

use super::pair::{
    couple_transistor, junction_step_fraction, side_currents, stamp_transistor, transistor_charges,
    Drive, Linearised, SideCurrents, Terminals, TransistorCircuit,
};
use crate::error::SolveFailure;
use crate::model::circuit::{ChargeScale, StageCircuit};
use crate::solve::response::RegionCheck;
use crate::solve::transfer::StaticSolver;

/// Input nodes behind the source resistance.
const S_P: usize = 0;
const S_M: usize = 1;
/// Collector terminals (shared by every pair).
const C_P: usize = 2;
const C_M: usize = 3;
/// Unknowns before the first pair's.
const SHARED_UNKNOWNS: usize = 4;
/// Unknowns of one pair without collector resistance (bases, emitters, tail).
const PAIR_UNKNOWNS: usize = 5;
/// Unknowns of one pair with collector resistance (two intrinsic collectors more).
const PAIR_UNKNOWNS_WITH_COLLECTOR_RESISTANCE: usize = 7;
/// Load charges.
const Q_L_P: usize = 0;
const Q_L_M: usize = 1;
/// Charges before the first pair's.
const SHARED_CHARGES: usize = 2;
/// Charges of one pair: `Q_BE` and `Q_BC` of each transistor, `Q_T`.
const PAIR_CHARGES: usize = 5;

/// The rows a transistor's base current flows through: its own base row, and the input row
/// when there is a source resistance.
struct BaseRows {
    rows: [(usize, f64); 2],
    shared: bool,
}

impl BaseRows {
    fn as_slice(&self) -> &[(usize, f64)] {
        if self.shared {
            &self.rows
        } else {
            &self.rows[..1]
        }
    }
}

/// A multi-tanh cell under a drive, as a [`ChargeSystem`].
#[derive(Debug, Clone)]
pub struct CellSystem<'a> {
    circuit: &'a StageCircuit,
    drive: Drive,
    unknowns: usize,
    /// Unknowns per pair.
    pair_width: usize,
    coupling: Vec<f64>,
    tail_scale: f64,
    /// Whether every evaluation uses the whole Gummel–Poon core (a drive that saturates
    /// somewhere).
    whole: bool,
}

impl<'a> CellSystem<'a> {
    /// The cell `circuit` (its pairs in [`StageCircuit::cell`]) driven by `drive`; `whole`
    /// evaluates the whole core everywhere.
    pub fn new(circuit: &'a StageCircuit, drive: Drive, whole: bool) -> Self {
        let with_rc = circuit.cell.iter().any(|pair| {
            pair.circuit.p.collector_resistance > 0.0 || pair.circuit.m.collector_resistance > 0.0
        });
        let pair_width = if with_rc {
            PAIR_UNKNOWNS_WITH_COLLECTOR_RESISTANCE
        } else {
            PAIR_UNKNOWNS
        };
        let unknowns = SHARED_UNKNOWNS + pair_width * circuit.cell.len();
        let charges = SHARED_CHARGES + PAIR_CHARGES * circuit.cell.len();
        let tail_scale = 0.5 * (circuit.p.load_resistance + circuit.m.load_resistance);
        let mut system = CellSystem {
            circuit,
            drive,
            unknowns,
            pair_width,
            coupling: vec![0.0; unknowns * charges],
            tail_scale,
            whole,
        };
        let mut coupling = vec![0.0; unknowns * charges];
        for (k, pair) in circuit.cell.iter().enumerate() {
            for (side_index, side) in [&pair.circuit.p, &pair.circuit.m].into_iter().enumerate() {
                let t = system.terminals(k, side_index);
                couple_transistor(
                    side,
                    t,
                    Self::junction_charges(k, side_index),
                    system.base_rows(k, side_index).as_slice(),
                    tail_scale,
                    charges,
                    &mut coupling,
                );
            }
            coupling[system.tail(k) * charges + Self::tail_charge(k)] = -tail_scale;
        }
        coupling[C_P * charges + Q_L_P] = circuit.p.load_resistance;
        coupling[C_M * charges + Q_L_M] = circuit.m.load_resistance;
        system.coupling = coupling;
        system
    }

    /// Tail node of pair `k`.
    fn tail(&self, k: usize) -> usize {
        SHARED_UNKNOWNS + k * self.pair_width + 4
    }

    /// The terminals of pair `k`'s P (`side` 0) or M (`side` 1) transistor.
    fn terminals(&self, k: usize, side: usize) -> Terminals {
        let first = SHARED_UNKNOWNS + k * self.pair_width;
        let collector = [C_P, C_M][side];
        Terminals {
            base: first + side,
            emitter: first + 2 + side,
            collector,
            internal_collector: if self.pair_width == PAIR_UNKNOWNS {
                collector
            } else {
                first + 5 + side
            },
            tail: first + 4,
        }
    }

    /// `[Q_BE, Q_BC]` of pair `k`'s P (`side` 0) or M (`side` 1) transistor.
    fn junction_charges(k: usize, side: usize) -> [usize; 2] {
        let first = SHARED_CHARGES + k * PAIR_CHARGES;
        [first + side, first + 2 + side]
    }

    /// `Q_T` of pair `k`.
    fn tail_charge(k: usize) -> usize {
        SHARED_CHARGES + k * PAIR_CHARGES + 4
    }

    /// The rows a transistor's base current flows through, with their resistances: its own
    /// base resistance, and the shared source resistance (when there is one).
    fn base_rows(&self, k: usize, side: usize) -> BaseRows {
        let pair = &self.circuit.cell[k].circuit;
        let own = [&pair.p, &pair.m][side].base_path_resistance - pair.source_resistance;
        BaseRows {
            rows: [
                (self.terminals(k, side).base, own.max(0.0)),
                ([S_P, S_M][side], self.circuit.source_resistance),
            ],
            shared: self.circuit.source_resistance > 0.0,
        }
    }

    /// Every transistor's terminals, pair by pair, P before M.
    fn all_terminals(&self) -> impl Iterator<Item = Terminals> + Clone + '_ {
        (0..self.circuit.cell.len()).flat_map(move |k| (0..2).map(move |s| self.terminals(k, s)))
    }

    /// Differential output `V_C,M − V_C,P` of a state, V.
    pub fn output_v(x: &[f64]) -> f64 {
        x[C_M] - x[C_P]
    }

    /// P-side collector terminal voltage of a state, V.
    pub fn p_collector_v(x: &[f64]) -> f64 {
        x[C_P]
    }

    /// Number of transistors (two per pair).
    pub fn transistors(&self) -> usize {
        2 * self.circuit.cell.len()
    }

    /// Every transistor's intrinsic base-collector voltage at a state, V (pair by pair, P
    /// before M).
    pub fn base_collector_v(&self, x: &[f64]) -> Vec<f64> {
        self.all_terminals()
            .map(|t| x[t.base] - x[t.internal_collector])
            .collect()
    }

    /// Includes a state in a region check: each side's largest intrinsic base-collector
    /// voltage and injection level over its transistors, and the side's collector current
    /// (summed over the pairs, as the loads see it) as a fraction of the stage's tail current.
    pub fn include_region(&self, x: &[f64], region: &mut RegionCheck) {
        let currents = self.transistor_currents(x);
        for side in 0..2 {
            let mut collector = 0.0;
            let mut base_collector = f64::NEG_INFINITY;
            let mut injection = 0.0f64;
            for k in 0..self.circuit.cell.len() {
                let t = self.terminals(k, side);
                let s = &currents[2 * k + side];
                collector += s.collector;
                base_collector = base_collector.max(x[t.base] - x[t.internal_collector]);
                injection = injection.max(s.injection);
            }
            region.include(
                base_collector,
                collector / self.circuit.tail_current,
                injection,
            );
        }
    }

    /// The node voltages of the memoryless cell at `v_d` (a start for shooting): each pair's
    /// coupled point, the loads carrying the pairs' summed collector currents.
    pub fn start_state(&self, solver: &StaticSolver, v_d: f64) -> Result<Vec<f64>, SolveFailure> {
        let c = self.circuit;
        let points = solver.solve_pairs(v_d)?;
        let mut x = vec![0.0; self.unknowns];
        let sum = |pick: fn(&crate::solve::transfer::OperatingPoint) -> f64| -> f64 {
            points.iter().map(pick).sum()
        };
        x[S_P] = c.input_common_mode + 0.5 * v_d - c.source_resistance * sum(|p| p.p.base_current);
        x[S_M] = c.input_common_mode - 0.5 * v_d - c.source_resistance * sum(|p| p.m.base_current);
        x[C_P] = c.p.load_top_v(c.supply) - c.p.load_resistance * sum(|p| p.p.collector_current);
        x[C_M] = c.m.load_top_v(c.supply) - c.m.load_resistance * sum(|p| p.m.collector_current);
        for (k, point) in points.iter().enumerate() {
            x[self.tail(k)] = point.tail_voltage;
            for (side, own) in [&point.p, &point.m].into_iter().enumerate() {
                let t = self.terminals(k, side);
                x[t.base] = own.base_voltage;
                x[t.emitter] = own.base_voltage - own.base_emitter_voltage;
                if t.internal_collector != t.collector {
                    x[t.internal_collector] =
                        x[t.collector] - (own.collector_voltage - own.internal_collector_voltage);
                }
            }
        }
        Ok(x)
    }

    /// Every transistor's currents at a state, pair by pair, P before M.
    fn transistor_currents(&self, x: &[f64]) -> Vec<SideCurrents> {
        let phi = self.circuit.thermal_voltage;
        self.circuit
            .cell
            .iter()
            .enumerate()
            .flat_map(|(k, pair)| {
                [&pair.circuit.p, &pair.circuit.m]
                    .into_iter()
                    .enumerate()
                    .map(move |(side, own)| (k, side, own))
            })
            .map(|(k, side, own)| {
                let t = self.terminals(k, side);
                side_currents(
                    own,
                    phi,
                    x[t.base],
                    x[t.emitter],
                    x[t.internal_collector],
                    self.whole,
                )
            })
            .collect()
    }

    fn resistive_terms(&self, currents: &[SideCurrents], x: &[f64], time_s: f64, out: Linearised) {
        let Linearised { value: f, jacobian } = out;
        let c = self.circuit;
        let n = self.unknowns;
        let st = self.tail_scale;
        let v_d = self.drive.differential_v(time_s);
        jacobian.fill(0.0);
        for (node, collector, side, sign) in [(S_P, C_P, &c.p, 0.5), (S_M, C_M, &c.m, -0.5)] {
            f[node] = c.input_common_mode + sign * v_d - x[node];
            jacobian[node * n + node] -= 1.0;
            f[collector] = side.load_top_v(c.supply) - x[collector];
            jacobian[collector * n + collector] -= 1.0;
        }
        for (k, pair) in c.cell.iter().enumerate() {
            let tail = self.tail(k);
            f[tail] = -st * (pair.circuit.tail_current + pair.circuit.tail_conductance * x[tail]);
            jacobian[tail * n + tail] = -st * pair.circuit.tail_conductance;
            for (side, own) in [&pair.circuit.p, &pair.circuit.m].into_iter().enumerate() {
                let t = self.terminals(k, side);
                let input = [S_P, S_M][side];
                f[t.base] = x[input] - x[t.base];
                jacobian[t.base * n + input] += 1.0;
                jacobian[t.base * n + t.base] -= 1.0;
                let base_rows = self.base_rows(k, side);
                stamp_transistor(
                    own,
                    &currents[2 * k + side],
                    t,
                    base_rows.as_slice(),
                    x,
                    n,
                    st,
                    f,
                    jacobian,
                );
            }
        }
    }

    fn charge_terms(&self, currents: &[SideCurrents], x: &[f64], out: Linearised) {
        let Linearised { value: q, jacobian } = out;
        let c = self.circuit;
        let n = self.unknowns;
        jacobian.fill(0.0);
        for (k, pair) in c.cell.iter().enumerate() {
            let scales = [
                pair.circuit.p_charge_scale.with_area(pair.areas[0]),
                ChargeScale::MATCHED.with_area(pair.areas[1]),
            ];
            for (side, scale) in scales.iter().enumerate() {
                transistor_charges(
                    &currents[2 * k + side],
                    &pair.circuit.charge,
                    scale,
                    self.terminals(k, side),
                    Self::junction_charges(k, side),
                    x,
                    n,
                    q,
                    jacobian,
                );
            }
            let (tail, charge) = (self.tail(k), Self::tail_charge(k));
            q[charge] = pair.circuit.tail_capacitance * x[tail];
            jacobian[charge * n + tail] = pair.circuit.tail_capacitance;
        }
        for (charge, collector, scale) in [
            (Q_L_P, C_P, c.p_charge_scale.load_capacitance),
            (Q_L_M, C_M, 1.0),
        ] {
            let load_capacitance = c.load_capacitance * scale;
            q[charge] = load_capacitance * (c.supply - x[collector]);
            jacobian[charge * n + collector] = -load_capacitance;
        }
    }
}

impl TransistorCircuit for CellSystem<'_> {
    type Currents = Vec<SideCurrents>;

    fn currents(&self, x: &[f64]) -> Vec<SideCurrents> {
        self.transistor_currents(x)
    }

    fn resistive_with(
        &self,
        currents: &Vec<SideCurrents>,
        x: &[f64],
        time_s: f64,
        out: Linearised,
    ) {
        self.resistive_terms(currents, x, time_s, out);
    }

    fn charge_with(&self, currents: &Vec<SideCurrents>, x: &[f64], out: Linearised) {
        self.charge_terms(currents, x, out);
    }

    fn sizes(&self) -> (usize, usize) {
        let charges = SHARED_CHARGES + PAIR_CHARGES * self.circuit.cell.len();
        (self.unknowns, charges)
    }

    fn tail_scale(&self) -> f64 {
        self.tail_scale
    }

    fn limit_step(&self, x: &[f64], dx: &[f64]) -> f64 {
        junction_step_fraction(self.circuit.thermal_voltage, self.all_terminals(), x, dx)
    }

    fn charge_coupling(&self) -> &[f64] {
        &self.coupling
    }
}
