//! The model layer: stages, transistors, drives, corners, tail laws, budgets and plans as
//! plain data with defaults and builders. Nothing here reads YAML or solves anything; the
//! one computation is [`circuit`], which makes a stage concrete at one temperature.

pub mod bias;
pub mod budget;
pub mod circuit;
pub mod corner;
pub mod drive;
pub mod measurement;
pub mod plan;
pub mod products;
pub mod stage;
pub mod tail;
pub mod transistor;
