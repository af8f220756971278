//! The study layer: a whole plan evaluated ([`evaluate`]) — every stage, temperature,
//! process corner and drive point, the budget, the spread across corners ([`corners`]), the
//! Monte Carlo population ([`montecarlo`]), the fit of measured stages to their bench data
//! ([`fit`]) and the least degeneration meeting the budget
//! ([`sizing`]) — and the work a plan asks for ([`workload`]). Results are typed values; the
//! report layer records and words them.

pub mod case;
pub mod corners;
pub mod evaluate;
pub mod fit;
pub mod montecarlo;
pub mod region;
pub mod schemes;
pub mod sizing;
pub mod verdict;
pub mod workload;
