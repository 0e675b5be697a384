//! Scenario input: setup and profile files (RON), validation, `--set` overrides, embedded demo.

pub mod alerts;
pub mod demo;
pub mod error;
pub mod limits;
pub mod load;
pub mod logfile;
pub mod profile;
pub mod quantity;
pub mod replay;
pub mod ronpath;
pub mod setup;
pub mod source;
pub mod suggest;
pub mod validate;

pub use error::InputError;
pub use load::{load_scenario, Scenario, SourceText};
