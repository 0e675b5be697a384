//! All integration tests in one binary: the real CLI, studies, and validation against outside values.

mod alerts;
mod breadth;
mod check_map;
mod common;
mod fidelity;
mod hardening;
mod machines_storage;
mod measured;
mod messages;
mod report_browser;
mod rerun;
mod run_cli;
mod safety;
mod search_cli;
mod studies_cli;
mod validation;
