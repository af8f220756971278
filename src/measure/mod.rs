//! The measure layer: the figures a linearity budget constrains, over one stage at one
//! temperature — gain, steering, noise ([`small_signal`], [`noise`]), compression and
//! intercepts ([`large_signal`]), the lazily kept set of them ([`stage`]), budget margins
//! ([`budget`]) and the library's entry point, [`crate::SolvedStage`] ([`solved`]).

pub mod budget;
pub mod large_signal;
pub mod noise;
pub mod small_signal;
pub mod solved;
pub mod stage;
