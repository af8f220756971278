//! Response engines: how a stage at one temperature answers a drive.
//!
//! The memoryless engine solves the static transfer sample by sample; a stage with charge
//! storage needs the periodic steady state instead. Both answer the same questions, so the
//! metrics, budget and sizing code never asks which one it has.

use crate::error::SolveFailure;
use crate::metrics::{self, ToneResult, TwoToneResult};
use crate::spectrum::FftCache;
use crate::stage::StageCircuit;
use crate::transfer::StaticSolver;
use std::sync::Arc;

/// Answers single-tone and two-tone drives of one stage at one temperature.
pub trait ResponseEngine: Sync + Send {
    /// Single tone of peak differential amplitude `amplitude_v` at `frequency_hz`, with
    /// harmonics up to `harmonics` analysed.
    fn tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure>;

    /// Two equal tones of `amplitude_v` each at `frequency_hz` and `frequency_hz + spacing_hz`.
    fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure>;

    /// The static solver of the same stage (operating point, small-signal figures).
    fn static_solver(&self) -> &StaticSolver;
}

/// The engine for stages without charge storage: frequency only labels the points.
#[derive(Debug, Clone)]
pub struct MemorylessEngine {
    solver: StaticSolver,
    cache: Arc<FftCache>,
}

impl MemorylessEngine {
    /// Builds the engine for one stage at one temperature.
    pub fn new(circuit: StageCircuit, cache: Arc<FftCache>) -> Self {
        MemorylessEngine {
            solver: StaticSolver::new(circuit),
            cache,
        }
    }
}

impl ResponseEngine for MemorylessEngine {
    fn tone(
        &self,
        amplitude_v: f64,
        _frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure> {
        metrics::single_tone(&self.solver, &self.cache, amplitude_v, harmonics)
    }

    fn two_tone(
        &self,
        amplitude_v: f64,
        _frequency_hz: f64,
        _spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure> {
        metrics::two_tone(&self.solver, &self.cache, amplitude_v)
    }

    fn static_solver(&self) -> &StaticSolver {
        &self.solver
    }
}

/// Builds the right engine for a stage at one temperature: the memoryless fast path when
/// the stage stores no charge, the periodic steady state otherwise.
pub fn engine_for(
    circuit: StageCircuit,
    cache: Arc<FftCache>,
) -> Result<Box<dyn ResponseEngine>, String> {
    if circuit.is_memoryless() {
        Ok(Box::new(MemorylessEngine::new(circuit, cache)))
    } else {
        Ok(Box::new(crate::dynamic::DynamicEngine::new(circuit, cache)))
    }
}
