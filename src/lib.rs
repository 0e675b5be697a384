//! crankcharge: time-domain simulation of hand-cranked battery chargers, from the operator's
//! arm through belt, generator, diode and converter to the battery.
//!
//! Layers, one direction only: `cli` → `studies` → `scenario` → `simulate` → `model`;
//! `analysis` and `output` read results and never reach back.

pub mod analysis;
pub mod cli;
pub mod model;
pub mod output;
pub mod scenario;
pub mod simulate;
pub mod studies;
pub mod text;
pub mod units;
