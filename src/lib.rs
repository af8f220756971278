//! linbudget: the large-signal linearity of bipolar differential input stages, measured the
//! way a datasheet states it.
//!
//! A stage is plain data ([`Stage`], [`Transistor`]); solved at a temperature it answers the
//! figures a linearity budget constrains — harmonics and THD by FFT of the exact periodic
//! output, IM3, IIP3, P1dB, the steering range and the input noise:
//!
//! ```
//! use linbudget::{Stage, Transistor};
//!
//! let stage = Stage::new("degenerated", 1e-3, 2e3)
//!     .emitter_resistance(100.0)
//!     .transistor(Transistor::default().beta(100.0).early_voltage(50.0));
//! let solved = stage.at(27.0)?;
//! let tone = solved.tone(0.1, 1e3)?; // 100 mV peak differential at 1 kHz
//! println!("HD3 {:?} dBc, THD {:?} dBc, gain {:.2} dB", tone.hd_dbc(3), tone.thd_dbc(), tone.gain_db());
//! let iip3 = solved.iip3_v(1e3)?; // peak volts per tone
//! // Degeneration (g_m·R_E ≈ 1.9) lifts IIP3 well above the bare pair's 4φT ≈ 0.1 V.
//! assert!(iip3 > 0.3 && tone.hd_dbc(3).unwrap() < -30.0);
//! # Ok::<(), linbudget::Error>(())
//! ```
//!
//! A whole plan — stages, temperatures, process corners, drive, budget, sizing, Monte Carlo —
//! is read with [`Plan::from_file`] (the same located errors as `linbudget check`) or built
//! with [`Plan::new`], and [`Plan::evaluate`] returns the [`Report`] that `report.json` holds.
//!
//! Every figure is a model prediction: confirm it against measured silicon and the foundry's
//! device models, following local qualification practice.
//!
//! # Layers
//!
//! Modules import one way: [`model`] (plain data) → [`solve`] (the exact response) →
//! [`measure`] (figures of one stage) → [`study`] (a whole plan: evaluation, sizing,
//! corners, Monte Carlo) → [`report`] (records, tables, writers) → [`plots`] (compliance
//! figures drawn from a report) → [`run`] (the commands). The plan reader turns YAML into the model and is the only place YAML is read.

// Plan errors carry their file, position, key path and the accepted values by value; they are
// built once per failed run, so their size costs nothing that matters.
#![allow(clippy::result_large_err)]

pub mod error;
pub mod measure;
pub mod model;
pub(crate) mod plan;
pub mod plots;
pub mod report;
pub mod run;
pub mod solve;
pub mod study;
pub mod units;

pub use error::{Error, PlanError, SolveFailure};
pub use measure::solved::{SolvedStage, Tone, TwoTone};
pub use model::budget::{BudgetLine, Limit, Metric};
pub use model::corner::Corner;
pub use model::drive::Drive;
pub use model::plan::{
    MonteCarloSettings, NoiseBand, Plan, SizingSettings, SizingVariable, VariableRange,
};
pub use model::stage::{Mismatch, Stage};
pub use model::tail::TailCurrentLaw;
pub use model::topology::{MultiTanh, MultiTanhForm, TanhPair, Topology};
pub use model::transistor::Transistor;
pub use report::Report;
pub use study::evaluate::Progress;
