//! The options every command that runs sessions shares, and loading and running a session from
//! them with its failures classified by exit code.

use anyhow::anyhow;
use clap::Args;

use super::outcome::{parse_duration, Failure};
use crate::scenario::load::{InputKind, Override};
use crate::scenario::{limits, load_scenario, Scenario, SourceText};
use crate::simulate::{Fidelity, Method};

use super::session::{run_session, run_session_watched, RunSettings, Session, SessionError};

/// Options shared by every command that runs sessions.
#[derive(Debug, Clone, Args)]
pub struct SessionArgs {
    /// Crank profile: a .ron path, a shipped name (steady, tiring, sprint-and-rest, uneven, overreach), or a recorded crank log LOG.csv to replay.
    #[arg(long, short = 'p')]
    pub profile: Option<String>,
    /// Seed of the operator's jitter (default: the profile's seed).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Session length, e.g. 600, 10min, 2h (default: the profile's segments).
    #[arg(long, value_parser = parse_duration)]
    pub duration: Option<f64>,
    /// Override a field by its dotted path, e.g. drive.stages.0.ratio=18 or profile.cadence_scale=0.8.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<Override>,
    /// Model fidelity: fast (default) or detailed.
    #[arg(long, value_enum, default_value = "fast")]
    pub fidelity: FidelityArg,
    /// Replace the output folder even if crankcharge did not write it (its files are lost).
    #[arg(long)]
    pub force: bool,
    /// No progress bar (it is drawn only on a terminal, for work longer than about 2 s).
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

/// Fidelity as a command-line word.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FidelityArg {
    Fast,
    Detailed,
}

impl From<FidelityArg> for Fidelity {
    fn from(f: FidelityArg) -> Self {
        match f {
            FidelityArg::Fast => Fidelity::Fast,
            FidelityArg::Detailed => Fidelity::Detailed,
        }
    }
}

/// Loads the scenario named by a setup argument and the shared session options.
pub fn scenario_from(setup: Option<&str>, s: &SessionArgs) -> Result<Scenario, Failure> {
    let setup_src =
        SourceText::resolve(setup, InputKind::Setup).map_err(|e| Failure::Input(e.into()))?;
    let profile_src = SourceText::resolve(s.profile.as_deref(), InputKind::Profile)
        .map_err(|e| Failure::Input(e.into()))?;
    let sc =
        load_scenario(&setup_src, &profile_src, &s.set).map_err(|e| Failure::Input(e.into()))?;
    super::progress::warn(limits::check(&sc, s.duration).map_err(|e| Failure::Input(e.into()))?);
    Ok(sc)
}

/// Run settings from the shared options.
pub fn settings_from(s: &SessionArgs) -> RunSettings {
    RunSettings {
        duration_s: s.duration,
        seed: s.seed,
        fidelity: s.fidelity.into(),
        cadence_offset_rpm: 0.0,
    }
}

/// Runs a session, classifying failures by exit code.
pub fn session_or_failure(sc: &Scenario, rs: &RunSettings) -> Result<Session, Failure> {
    classify(sc, run_session(sc, rs))
}

/// Runs a session with a progress bar (see `progress::with_session_bar`), classifying failures.
pub fn session_with_bar(sc: &Scenario, rs: &RunSettings, quiet: bool) -> Result<Session, Failure> {
    let length = rs
        .duration_s
        .unwrap_or_else(|| sc.profile.total_duration_s());
    super::progress::with_session_bar(quiet, length, |p| {
        classify(
            sc,
            run_session_watched(sc, rs, Method::for_fidelity(rs.fidelity), Some(p)),
        )
    })
}

/// Failures by exit code: bad input 2, a failed or law-breaking simulation 3.
pub(super) fn classify(
    sc: &Scenario,
    r: Result<Session, SessionError>,
) -> Result<Session, Failure> {
    r.map_err(|e| match e {
        SessionError::Setup(m) => Failure::Input(anyhow!("{}: {m}", sc.setup_source.name)),
        SessionError::Sim(s) => Failure::Sim(anyhow!("simulation failed: {s}")),
        SessionError::Broken(b) => Failure::Sim(anyhow!("simulation failed: {b}")),
        e @ SessionError::Rerun { .. } => Failure::Sim(anyhow!("simulation failed: {e}")),
    })
}
