//! `run`: one charging session. Cost: one simulation (milliseconds to a second) plus the charts.

use std::path::PathBuf;

use clap::Args;

use super::outcome::{say, Failure, EXIT_FLAGGED, EXIT_OK};
use crate::analysis::summary::MARGINAL;
use crate::output::{csv, json, report, rundir::Staging};
use crate::scenario::Scenario;

use super::args::{scenario_from, session_with_bar, settings_from, SessionArgs};
use super::digest::{ledger_digest, replay_line, rerun_note, rows_digest, thresholds_digest};
use super::session::Session;

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
    let staging =
        Staging::prepare(&out, "run", a.session.force).map_err(|e| Failure::Input(e.into()))?;
    let session = session_with_bar(&sc, &settings_from(&a.session), a.session.quiet)?;
    write_run(&staging, &sc, &session, !a.no_plot).map_err(Failure::Other)?;
    let dir = staging.commit().map_err(|e| Failure::Other(e.into()))?;
    report(&session, &dir);
    super::progress::note(rerun_note(&session.summary));
    Ok(if a.strict && session.summary.verdict.flagged() {
        EXIT_FLAGGED
    } else {
        EXIT_OK
    })
}

/// Writes the contract files of one run into the staging folder.
pub fn write_run(staging: &Staging, sc: &Scenario, s: &Session, plots: bool) -> anyhow::Result<()> {
    let events = s.summary.events();
    let chart = || -> anyhow::Result<crate::output::plot::Rendered> {
        let title = format!("{} / {}", s.summary.setup, s.summary.profile);
        let op = &sc.profile.operator;
        let marks = crate::output::plot::SessionMarks {
            critical_power_w: Some(op.critical_power_w),
            w_prime_j: (op.w_prime_j > 0.0).then_some(op.w_prime_j),
        };
        Ok(crate::output::plot::session_chart_with(
            &s.result.trace,
            &events,
            &title,
            &marks,
        )?)
    };
    let tables = || -> anyhow::Result<()> {
        staging.write("trace.csv", &csv::trace_csv(&s.result.trace)?)?;
        staging.write("events.csv", &csv::events_csv(&events)?)?;
        staging.write("summary.json", &json::to_json(&s.summary)?)?;
        Ok(())
    };
    let svg = if plots {
        // The chart is drawn while the tables are formatted and written (they share only inputs).
        let chart = std::thread::scope(|scope| -> anyhow::Result<_> {
            let drawing = scope.spawn(chart);
            let written = tables();
            let chart = drawing
                .join()
                .map_err(|_| anyhow::anyhow!("drawing the session chart panicked"))?;
            written?;
            chart
        })?;
        staging.write("session.png", &chart.png)?;
        staging.write("session.svg", chart.svg.as_bytes())?;
        Some(chart.svg)
    } else {
        tables()?;
        None
    };
    let page = super::pages::run_page(sc, &s.summary, svg.as_deref());
    staging.write("report.html", report::render(&page).as_bytes())?;
    Ok(())
}

/// Prints the headline figures of a run: first which files it read and what was overridden.
fn report(s: &Session, dir: &std::path::Path) {
    let m = &s.summary;
    say(&format!(
        "setup file {} (sha256 {}); profile file {} (sha256 {})",
        m.setup_file, m.setup_sha256, m.profile_file, m.profile_sha256
    ));
    say(&format!(
        "overrides: {}",
        if m.overrides.is_empty() {
            "none".to_string()
        } else {
            m.overrides.join(", ")
        }
    ));
    say(&format!(
        "setup {}  profile {}  seed {}  {} fidelity",
        m.setup, m.profile, m.seed, m.fidelity
    ));
    if let Some(r) = &m.replay {
        say(&format!("  {}", replay_line(r)));
    }
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
    let regulation = match (m.in_regulation_fraction, m.regulation_loss_s) {
        (Some(f), Some(lost)) => format!(
            "in regulation {:.1} % of cranking time ({lost:.1} s lost)",
            100.0 * f
        ),
        _ => "regulation n/a (direct: no converter)".to_string(),
    };
    say(&format!(
        "  {regulation}; max battery {:.3} V vs limit {:.3} V (margin {:+.3} V)",
        m.max_battery_v, m.charge_limit_v, m.overcharge_margin_v
    ));
    if let (Some(low), Some(need)) = (m.lowest_sustained_cadence_rpm, m.regulation_cadence_rpm) {
        say(&format!(
            "  cadence: lowest sustained {low:.1} rpm vs {need:.1} rpm that regulation needs (margin {:+.1} rpm)",
            low - need
        ));
    }
    if let Some(u) = &m.usb {
        let observed = match u.observed_reconnect_delay_s {
            Some((lo, hi)) if (hi - lo).abs() < 0.05 => format!(", reconnected after {lo:.1} s"),
            Some((lo, hi)) => format!(", reconnected after {lo:.1}–{hi:.1} s"),
            None => String::new(),
        };
        say(&format!(
            "  USB bus {:.2} V: lowest {:.3} V while cranking with the device drawing, {:.1} s outside {:.2}–{:.2} V; {} device cut-off(s) (reconnect delay {:.1} s{observed}); {:.2} Wh to the device",
            u.bus_setpoint_v,
            u.min_bus_v,
            u.out_of_band_s,
            u.band_low_v,
            u.band_high_v,
            u.device_cutoffs,
            u.reconnect_delay_s,
            u.energy_to_bus_wh
        ));
    }
    if let Some(c) = &m.supercap {
        say(&format!(
            "  supercapacitor bank {:.2} F: {:.3} V -> {:.3} V, {:.3} Wh -> {:.3} Wh ({:.3} Wh usable down to {:.2} V at the end); leakage {:.4} Wh, ESR {:.4} Wh",
            c.capacitance_f,
            c.voltage_start_v,
            c.voltage_end_v,
            c.energy_start_wh,
            c.energy_end_wh,
            c.usable_end_wh,
            c.min_v,
            c.leakage_wh,
            c.esr_wh
        ));
    }
    if let Some(n) = &m.nimh {
        let end = match (&n.fast_charge_end, n.fast_charge_end_s) {
            (Some(why), Some(t)) => format!(
                "fast charge ended at {t:.1} s on the {}",
                why.replace('_', " ")
            ),
            _ => "fast charge did not end".to_string(),
        };
        say(&format!(
            "  NiMH: {end}; peak {:.4} V/cell; fastest temperature rise {:.2} °C/min; {:.3} Wh recombined as heat",
            n.peak_v_per_cell, n.max_temp_rise_c_per_min, n.recombination_heat_wh
        ));
    }
    say(&format!("  energy ledger {}", ledger_digest(m)));
    say(&format!("  {}", rows_digest(m)));
    say(&format!("  thresholds: {}", thresholds_digest(m)));
    say(&format!("  verdict: {}", m.verdict.words().join(", ")));
    for r in &m.verdict_reasons {
        say(&format!("    - {r}"));
    }
    if m.verdict.has(MARGINAL) {
        say("    a single operator cannot decide a marginal figure: run `crankcharge montecarlo` on this setup for the spread over operators");
    }
    say(&format!("  wrote {}", dir.display()));
}
