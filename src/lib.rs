//! linbudget: large-signal linearity of bipolar differential input stages.
//!
//! The crate reads a plan ([`plan`]), builds each stage at each temperature ([`stage`],
//! [`device`]), solves the exact large-signal transfer ([`transfer`]), measures harmonics by
//! FFT ([`spectrum`]), derives the figures a budget constrains ([`metrics`], [`budget`]),
//! sizes degeneration ([`sizing`]) and writes reports ([`report`]). [`run`] wires these into
//! the two commands.

// Plan errors carry their file, position, key path and the accepted values by value; they are
// built once per failed run, so their size costs nothing that matters.
#![allow(clippy::result_large_err)]

pub mod analysis;
pub mod budget;
pub mod corner;
pub mod device;
pub mod dynamic;
pub mod engine;
pub mod error;
pub mod metrics;
pub mod montecarlo;
pub mod noise;
pub mod plan;
pub mod plots;
pub mod report;
pub mod roots;
pub mod run;
pub mod sizing;
pub mod spectrum;
pub mod stage;
pub mod symmetric;
pub mod tail;
pub mod transfer;
pub mod units;
pub mod workload;

pub use error::{Error, PlanError};
