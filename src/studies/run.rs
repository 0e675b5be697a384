//! `run`: one charging session. Cost: one simulation (milliseconds to a second) plus the charts.

use std::path::PathBuf;

use anyhow::anyhow;
use clap::Args;

use crate::cli::{parse_duration, say, Failure, EXIT_FLAGGED, EXIT_OK};
use crate::output::{csv, json, rundir::Staging};
use crate::scenario::load::{InputKind, Override};
use crate::scenario::{load_scenario, Scenario, SourceText};
use crate::simulate::Fidelity;

use super::session::{run_session, RunSettings, Session, SessionError};

/// Options shared by every command that runs sessions.
#[derive(Debug, Clone, Args)]
pub struct SessionArgs {
    /// Crank profile: a .ron path or a shipped name (steady, tiring, sprint-and-rest, uneven, overreach).
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

/// Arguments of `run`.
#[derive(Debug, Clone, Args)]
pub struct RunArgs {
    /// Setup file (.ron) or shipped name; none runs the embedded demo.
    pub setup: Option<String>,
    #[command(flatten)]
    pub session: SessionArgs,
    /// Output folder (default: outputs/<setup name>).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Exit with code 1 when the verdict is not `ok`.
    #[arg(long)]
    pub strict: bool,
    /// Skip the charts (trace, events and summary only).
    #[arg(long)]
    pub no_plot: bool,
}

/// Loads the scenario named by a setup argument and the shared session options.
pub fn scenario_from(setup: Option<&str>, s: &SessionArgs) -> Result<Scenario, Failure> {
    let setup_src =
        SourceText::resolve(setup, InputKind::Setup).map_err(|e| Failure::Input(e.into()))?;
    let profile_src = SourceText::resolve(s.profile.as_deref(), InputKind::Profile)
        .map_err(|e| Failure::Input(e.into()))?;
    load_scenario(&setup_src, &profile_src, &s.set).map_err(|e| Failure::Input(e.into()))
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
    run_session(sc, rs).map_err(|e| match e {
        SessionError::Setup(m) => Failure::Input(anyhow!("{}: {m}", sc.setup_source.name)),
        SessionError::Sim(s) => Failure::Sim(anyhow!("simulation failed: {s}")),
    })
}

/// Executes `run`.
pub fn run(a: &RunArgs) -> Result<i32, Failure> {
    let sc = scenario_from(a.setup.as_deref(), &a.session)?;
    let out = a.out.clone().unwrap_or_else(|| {
        let stem = a
            .setup
            .as_ref()
            .map_or_else(|| "demo".to_string(), |_| sc.setup_source.stem());
        PathBuf::from("outputs").join(stem)
    });
    let staging = Staging::prepare(&out).map_err(|e| Failure::Input(e.into()))?;
    let session = session_or_failure(&sc, &settings_from(&a.session))?;
    write_run(&staging, &session, !a.no_plot).map_err(Failure::Other)?;
    let dir = staging.commit().map_err(|e| Failure::Other(e.into()))?;
    report(&session, &dir);
    Ok(if a.strict && session.summary.verdict.flagged() {
        EXIT_FLAGGED
    } else {
        EXIT_OK
    })
}

/// Writes the contract files of one run into the staging folder.
pub fn write_run(staging: &Staging, s: &Session, plots: bool) -> anyhow::Result<()> {
    staging.write("trace.csv", &csv::trace_csv(&s.result.trace)?)?;
    staging.write("events.csv", &csv::events_csv(&s.result.events)?)?;
    staging.write("summary.json", &json::to_json(&s.summary)?)?;
    if plots {
        let title = format!("{} / {}", s.summary.setup, s.summary.profile);
        let chart = crate::output::plot::session_chart(&s.result.trace, &s.result.events, &title)?;
        staging.write("session.png", &chart.png)?;
        staging.write("session.svg", chart.svg.as_bytes())?;
    }
    Ok(())
}

/// Prints the headline figures of a run.
fn report(s: &Session, dir: &std::path::Path) {
    let m = &s.summary;
    say(&format!(
        "setup {}  profile {}  seed {}  {} fidelity",
        m.setup, m.profile, m.seed, m.fidelity
    ));
    say(&format!(
        "  {:.0} s session: SOC {:.3} -> {:.3}, {:.4} Ah ({:.2} Wh) into the battery",
        m.duration_s, m.soc_start, m.soc_end, m.charge_delivered_ah, m.energy_to_battery_wh
    ));
    say(&format!(
        "  operator: {:.0} J, mean {:.1} W, peak {:.1} W; crank-to-battery efficiency {:.1} %",
        m.operator_work_j,
        m.mean_operator_power_w,
        m.peak_operator_power_w,
        100.0 * m.efficiency_crank_to_battery
    ));
    let regulation = if m.topology == "direct" {
        "no converter (direct)".to_string()
    } else {
        format!(
            "in regulation {:.1} % of cranking time ({:.1} s lost)",
            100.0 * m.in_regulation_fraction,
            m.regulation_loss_s
        )
    };
    say(&format!(
        "  {regulation}; max battery {:.3} V vs limit {:.3} V",
        m.max_battery_v, m.charge_limit_v
    ));
    if let Some(u) = &m.usb {
        say(&format!(
            "  USB bus {:.2} V: lowest {:.3} V while the device drew, {:.1} s outside {:.2}–{:.2} V, {} device cut-off(s); {:.2} Wh to the device",
            u.bus_setpoint_v,
            u.min_bus_v,
            u.out_of_band_s,
            u.band_low_v,
            u.band_high_v,
            u.device_cutoffs,
            u.energy_to_bus_wh
        ));
    }
    say(&format!(
        "  energy ledger closes to {:.2e}; {} alerts; verdict: {}",
        m.energy_balance_error,
        m.alerts.len(),
        m.verdict.words().join(", ")
    ));
    say(&format!("  wrote {}", dir.display()));
}
