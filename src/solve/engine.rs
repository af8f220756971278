//! Choosing the response engine for a stage at one temperature.

use crate::model::circuit::StageCircuit;
use crate::solve::dynamic::DynamicEngine;
use crate::solve::memoryless::MemorylessEngine;
use crate::solve::response::ResponseEngine;
use crate::solve::small_drive::SmallDriveEngine;
use crate::solve::spectrum::FftCache;
use std::sync::Arc;

/// The right engine for a stage at one temperature: the memoryless fast path when the stage
/// stores no charge, the periodic steady state otherwise; drives too small for either to
/// answer directly are answered from the small-signal power series
/// ([`crate::solve::small_drive`]).
pub fn engine_for(circuit: StageCircuit, cache: Arc<FftCache>) -> Box<dyn ResponseEngine> {
    let inner: Box<dyn ResponseEngine> = if circuit.is_memoryless() {
        Box::new(MemorylessEngine::new(circuit, cache))
    } else {
        Box::new(DynamicEngine::new(circuit, cache))
    };
    Box::new(SmallDriveEngine::new(inner))
}
