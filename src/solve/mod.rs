//! The solve layer: the exact large-signal response of a stage at one temperature.
//!
//! - [`transfer`]: the memoryless static solve of the pair (safeguarded Newton to a few ulps);
//! - [`memoryless`] and [`symmetric`]: single- and two-tone drives of a stage without charge
//!   storage, sampled coherently and analysed by FFT ([`spectrum`]);
//! - [`dynamic`]: the periodic steady state of a stage with capacitance or transit time;
//! - [`response`]: what every engine answers, and [`engine`] picks the right one;
//! - [`small_drive`]: drives too small to answer directly, from the small-signal power series.
//!
//! Every solver states its tolerance and returns a [`crate::SolveFailure`] naming the point
//! where it could not meet it.

pub mod device;
pub mod dynamic;
pub mod engine;
pub mod memoryless;
pub mod response;
pub mod roots;
pub mod small_drive;
pub mod spectrum;
pub mod symmetric;
pub mod transfer;
