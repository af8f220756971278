//! linbudget: large-signal linearity of bipolar differential input stages.
//!
//! The crate reads a plan ([`plan`]), builds each stage at each temperature ([`stage`],
//! [`device`]), solves the exact large-signal transfer ([`transfer`]), measures harmonics by
//! FFT ([`spectrum`]), derives the figures a budget constrains ([`metrics`], [`budget`]),
//! sizes degeneration ([`sizing`]) and writes reports ([`report`]). [`run`] wires these into
//! the two commands.

pub mod analysis;
pub mod budget;
pub mod device;
pub mod dynamic;
pub mod engine;
pub mod error;
pub mod metrics;
pub mod plan;
pub mod report;
pub mod roots;
pub mod run;
pub mod sizing;
pub mod spectrum;
pub mod stage;
pub mod transfer;
pub mod units;

pub use error::{Error, PlanError};
