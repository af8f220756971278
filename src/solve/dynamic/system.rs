//! The charge system of a stage: the emitter-coupled pair ([`super::pair`]) or a multi-tanh
//! cell of several pairs ([`super::cell`]), picked from the circuit, with what the engine
//! reads from a state (output, P collector, operating region) asked of either alike.

use super::cell::CellSystem;
use super::pair::{Drive, Linearised, PairSystem, SideCurrents, TransistorCircuit};
use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::RegionCheck;
use crate::solve::transfer::StaticSolver;

/// A stage under a drive, as a [`ChargeSystem`].
#[derive(Debug, Clone)]
pub enum StageSystem<'a> {
    /// One emitter-coupled pair (emitter resistors or a split tail).
    Pair(PairSystem<'a>),
    /// A multi-tanh cell.
    Cell(CellSystem<'a>),
}

impl<'a> StageSystem<'a> {
    /// The system of `circuit` driven by `drive`: a cell when the circuit has pairs of its
    /// own, the pair otherwise; `whole` evaluates the whole core everywhere.
    pub fn new(circuit: &'a StageCircuit, drive: Drive, whole: bool) -> Self {
        if circuit.cell.is_empty() {
            StageSystem::Pair(PairSystem::new(circuit, drive, whole))
        } else {
            StageSystem::Cell(CellSystem::new(circuit, drive, whole))
        }
    }

    /// The node voltages of the memoryless solve at `v_d` (a start for shooting).
    pub fn start_state(&self, solver: &StaticSolver, v_d: f64) -> Result<Vec<f64>, SolveFailure> {
        match self {
            StageSystem::Pair(pair) => Ok(pair.state_from(&solver.solve_cold(v_d)?)),
            StageSystem::Cell(cell) => cell.start_state(solver, v_d),
        }
    }

    /// Differential output `V_C,M − V_C,P` of a state, V.
    pub fn output_v(&self, x: &[f64]) -> f64 {
        match self {
            StageSystem::Pair(_) => PairSystem::output_v(x),
            StageSystem::Cell(_) => CellSystem::output_v(x),
        }
    }

    /// P-side collector terminal voltage of a state, V.
    pub fn p_collector_v(&self, x: &[f64]) -> f64 {
        match self {
            StageSystem::Pair(_) => PairSystem::p_collector_v(x),
            StageSystem::Cell(_) => CellSystem::p_collector_v(x),
        }
    }

    /// Includes a state in a region check.
    pub fn include_region(&self, x: &[f64], region: &mut RegionCheck) {
        match self {
            StageSystem::Pair(pair) => pair.include_region(x, region),
            StageSystem::Cell(cell) => cell.include_region(x, region),
        }
    }

    /// Number of transistors, the width of [`StageSystem::base_collector_v`].
    pub fn transistors(&self) -> usize {
        match self {
            StageSystem::Pair(_) => 2,
            StageSystem::Cell(cell) => cell.transistors(),
        }
    }

    /// Every transistor's intrinsic base-collector voltage at a state, V.
    pub fn base_collector_v(&self, x: &[f64]) -> Vec<f64> {
        match self {
            StageSystem::Pair(pair) => pair.base_collector_pair_v(x).to_vec(),
            StageSystem::Cell(cell) => cell.base_collector_v(x),
        }
    }
}

/// Every transistor's currents of a [`StageSystem`]'s state.
// Lives on the stack for one evaluation; boxing the pair's would allocate at every Newton step.
#[allow(clippy::large_enum_variant)]
pub enum StageCurrents {
    /// The pair's two transistors.
    Pair([SideCurrents; 2]),
    /// The cell's transistors, pair by pair.
    Cell(Vec<SideCurrents>),
}

impl TransistorCircuit for StageSystem<'_> {
    type Currents = StageCurrents;

    fn currents(&self, x: &[f64]) -> StageCurrents {
        match self {
            StageSystem::Pair(pair) => StageCurrents::Pair(pair.currents(x)),
            StageSystem::Cell(cell) => StageCurrents::Cell(cell.currents(x)),
        }
    }

    fn resistive_with(&self, currents: &StageCurrents, x: &[f64], t: f64, out: Linearised) {
        match (self, currents) {
            (StageSystem::Pair(pair), StageCurrents::Pair(c)) => pair.resistive_with(c, x, t, out),
            (StageSystem::Cell(cell), StageCurrents::Cell(c)) => cell.resistive_with(c, x, t, out),
            _ => unreachable!("currents are evaluated by the same system"),
        }
    }

    fn charge_with(&self, currents: &StageCurrents, x: &[f64], out: Linearised) {
        match (self, currents) {
            (StageSystem::Pair(pair), StageCurrents::Pair(c)) => pair.charge_with(c, x, out),
            (StageSystem::Cell(cell), StageCurrents::Cell(c)) => cell.charge_with(c, x, out),
            _ => unreachable!("currents are evaluated by the same system"),
        }
    }

    fn sizes(&self) -> (usize, usize) {
        match self {
            StageSystem::Pair(pair) => pair.sizes(),
            StageSystem::Cell(cell) => cell.sizes(),
        }
    }

    fn charge_coupling(&self) -> &[f64] {
        match self {
            StageSystem::Pair(pair) => pair.charge_coupling(),
            StageSystem::Cell(cell) => cell.charge_coupling(),
        }
    }

    fn limit_step(&self, x: &[f64], dx: &[f64]) -> f64 {
        match self {
            StageSystem::Pair(pair) => pair.limit_step(x, dx),
            StageSystem::Cell(cell) => cell.limit_step(x, dx),
        }
    }

    fn tail_scale(&self) -> f64 {
        match self {
            StageSystem::Pair(pair) => pair.tail_scale(),
            StageSystem::Cell(cell) => cell.tail_scale(),
        }
    }
}
