//! `check`: static design figures of a setup and profile, then the cautions. Runs no simulation:
//! it validates the files, builds the models and solves the steady-state electrical network at
//! chosen cadences (a few thousand algebraic solves, well under a second).
//!
//! Figures: the crank cadence at which the converter first holds its charge current (at the start
//! SOC and at the CV/absorption voltage), the cadence at which the open-circuit voltage reaches the
//! converter's input limit, the open-circuit voltage, generator current and crank torque at the
//! profile's cadence, the charge limit at ambient, the drive ratio and the reflected inertia. For
//! a diode-only (`direct`) design: the cadence at which the diode starts to pass current and the
//! cadence at which the battery would reach its charge limit.

use std::path::PathBuf;

use clap::Args;

use super::outcome::{say, Failure, EXIT_OK};
use crate::scenario::load::Override;
use crate::scenario::Scenario;

use super::args::{scenario_from, FidelityArg, SessionArgs};
pub use super::cautions::cautions;
pub use super::check_report::{
    analyse, build_plant, BatteryFigures, ConverterFigures, DirectFigures, DriveFigures,
    GeneratorFigures, OperatingFigures, Report, CONDUCTION_A,
};
use super::check_usb;
pub use super::statics::MAX_SEARCH_RPM;

/// Arguments of `check`.
#[derive(Debug, Clone, Args)]
pub struct CheckArgs {
    /// Setup file (.ron) or shipped name; none checks the embedded demo.
    pub setup: Option<String>,
    /// Crank profile: a .ron path, a shipped name (steady, tiring, sprint-and-rest, uneven, overreach), or a recorded crank log LOG.csv.
    #[arg(long, short = 'p')]
    pub profile: Option<String>,
    /// Override a field by its dotted path, e.g. drive.stages.0.ratio=18.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<Override>,
    /// Print the figures and cautions as JSON.
    #[arg(long)]
    pub json: bool,
    /// Write the cadence operating map here (operating_map.csv and its chart).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the chart of the operating map.
    #[arg(long)]
    pub no_plot: bool,
    /// Replace an output folder that crankcharge did not write (its files are lost).
    #[arg(long)]
    pub force: bool,
}

/// Executes `check`.
pub fn run(a: &CheckArgs) -> Result<i32, Failure> {
    let sa = SessionArgs {
        profile: a.profile.clone(),
        seed: None,
        duration: None,
        set: a.set.clone(),
        fidelity: FidelityArg::Fast,
        force: false,
        quiet: true,
    };
    let sc = scenario_from(a.setup.as_deref(), &sa)?;
    let plant = build_plant(&sc)?;
    let out = a
        .out
        .as_ref()
        .map(|o| crate::output::rundir::Staging::prepare(o, "check", a.force))
        .transpose()
        .map_err(|e| Failure::Input(e.into()))?;
    let mut report = analyse(&sc, &plant);
    let map = super::operating_map::attach(&sc, &plant, &mut report);
    if let Some(staging) = out {
        let dir = super::operating_map::write(staging, &sc, &report, &map, !a.no_plot)
            .map_err(Failure::Other)?;
        report
            .notes
            .push(format!("Operating map written to {}.", dir.display()));
    }
    if a.json {
        let text = serde_json::to_string_pretty(&report)
            .map_err(|e| Failure::Other(anyhow::anyhow!("could not format JSON: {e}")))?;
        say(&text);
    } else {
        print_report(&report, &sc);
    }
    Ok(EXIT_OK)
}

fn opt_rpm(r: Option<f64>) -> String {
    r.map_or_else(
        || format!("not reached below {MAX_SEARCH_RPM:.0} rpm"),
        |r| format!("{r:.1} rpm"),
    )
}

fn print_report(r: &Report, sc: &Scenario) {
    say(&format!(
        "check: setup {} ({}) with profile {} ({})",
        r.setup, sc.setup_source.name, r.profile, sc.profile_source.name
    ));
    let b = &sc.setup.battery;
    let diode = match sc.setup.diode.kind {
        crate::scenario::setup::DiodeKind::Shockley => "Shockley",
        crate::scenario::setup::DiodeKind::Ideal => "fixed-drop",
        crate::scenario::setup::DiodeKind::None => "no",
    };
    let generator = match &r.generator.alternator {
        Some(a) => format!(
            "three-phase alternator {} V/krpm line-to-line, {} pole pairs, {:.3} Ω in the current's path at {} °C; bridge of six {diode} diodes",
            r.generator.back_emf_v_per_krpm, a.pole_pairs, r.generator.resistance_at_ambient_ohm, r.ambient_c
        ),
        None => format!(
            "generator {} V/krpm, {:.3} Ω at {} °C; {diode} diode",
            r.generator.back_emf_v_per_krpm, r.generator.resistance_at_ambient_ohm, r.ambient_c
        ),
    };
    let storage = match (&r.battery.supercap, b.capacitance_f) {
        (Some(_), Some(cf)) => format!("{cf} F a cell"),
        _ => format!("{} Ah", r.battery.capacity_ah),
    };
    say(&format!(
        "  chain: {} stage(s), total ratio {:.3} (efficiency {:.1} %); {generator}; {}; {} {}S{}P {storage}",
        r.drive.stages,
        r.drive.total_ratio,
        100.0 * r.drive.efficiency,
        r.topology,
        r.chemistry,
        b.cells_series,
        b.cells_parallel,
    ));
    say(&format!(
        "  inertia reflected to the generator shaft: {:.3e} kg·m²; open circuit {:.4} V per crank rpm",
        r.drive.reflected_inertia_kg_m2, r.generator.open_circuit_v_per_crank_rpm
    ));
    say(&format!(
        "  battery: rest {:.3} V at SOC {:.2}; charge limit at ambient {:.3} V; temperature band {}",
        r.battery.rest_v_at_start,
        r.battery.soc_start,
        r.battery.charge_limit_at_ambient_v,
        r.battery.temperature_band
    ));
    if let Some(sf) = &r.battery.supercap {
        say(&format!(
            "  bank: {:.2} F, ESR {:.4} Ω; {:.3} Wh at its rated {:.2} V, {:.3} Wh at the start; {:.3} Wh ({:.0} %) usable down to {:.2} V{}",
            sf.capacitance_f,
            sf.esr_ohm,
            sf.energy_at_rated_wh,
            sf.rated_v,
            sf.energy_at_start_wh,
            sf.usable_wh,
            100.0 * sf.usable_fraction,
            sf.min_v,
            sf.time_to_rated_at_charge_current_s
                .map_or_else(String::new, |t| format!("; {t:.0} s to the rated voltage at the charge current"))
        ));
    }
    if let Some(n) = &r.battery.nimh {
        let drop = if n.end_voltage_drop_v > 0.0 {
            format!(
                "ends on a {:.1} mV ({:.1} mV/cell) drop below the peak (-dV)",
                1e3 * n.end_voltage_drop_v,
                1e3 * n.end_voltage_drop_v / f64::from(b.cells_series)
            )
        } else {
            "no -dV end".to_string()
        };
        let rise = if n.end_temp_rise_c_per_min > 0.0 {
            format!(
                "or on a rise of {:.2} °C/min (dT/dt)",
                n.end_temp_rise_c_per_min
            )
        } else {
            "no dT/dt end".to_string()
        };
        say(&format!(
            "  NiMH charger: fast charge at {:.2} C; {drop}; {rise}; watched from {:.0} s after each start; then a {:.3} A trickle",
            n.charge_c_rate, n.end_holdoff_s, n.trickle_current_a
        ));
    }
    if let Some(a) = &r.generator.alternator {
        let opt = |v: Option<f64>, unit: &str| {
            v.map_or_else(|| "—".to_string(), |v| format!("{v:.2} {unit}"))
        };
        say(&format!(
            "  alternator at the profile's cadence: {} electrical, reactance {} a phase, bridge overlap mode {}{}; DC short-circuit current {} at any speed",
            opt(a.electrical_hz_at_profile_cadence, "Hz"),
            opt(a.reactance_ohm_at_profile_cadence, "Ω"),
            a.overlap_mode_at_profile_cadence.map_or_else(|| "—".to_string(), |m| m.to_string()),
            a.overlap_angle_deg_at_profile_cadence.map_or_else(String::new, |d| format!(" (overlap {d:.1}°)")),
            opt(a.short_circuit_current_a, "A"),
        ));
    }
    say("");
    say("Crank cadences");
    let mut lines: Vec<(String, String)> = Vec::new();
    if let Some(c) = &r.converter {
        if let Some(u) = c.unlock_cadence_rpm {
            lines.push((
                "converter unlocks (UVLO on, open circuit)".into(),
                format!("{u:.1} rpm"),
            ));
        }
        lines.push((
            format!("holds {:.3} A at the start SOC", c.start_target_current_a),
            opt_rpm(c.regulation_cadence_at_start_rpm),
        ));
        lines.push((
            format!(
                "holds {:.3} A with the battery at {:.3} V (CV)",
                c.charge_current_a, c.cv_setpoint_v
            ),
            opt_rpm(c.regulation_cadence_at_cv_rpm),
        ));
        lines.push((
            format!(
                "open circuit reaches the {:.1} V input limit",
                c.input_limit_v
            ),
            format!("{:.1} rpm", c.input_limit_cadence_rpm),
        ));
    }
    if let Some(u) = &r.usb {
        lines.extend(check_usb::cadence_lines(u, opt_rpm));
    }
    if let Some(d) = &r.direct {
        lines.push((
            format!(
                "diode passes {:.0} mA into the battery",
                1000.0 * d.conduction_threshold_a
            ),
            opt_rpm(d.conduction_cadence_rpm),
        ));
        lines.push((
            format!(
                "battery reaches its {:.3} V charge limit (start SOC)",
                r.battery.charge_limit_at_ambient_v
            ),
            opt_rpm(d.charge_limit_cadence_rpm),
        ));
    }
    let w = lines
        .iter()
        .map(|(k, _)| k.chars().count())
        .max()
        .unwrap_or(0);
    for (k, v) in &lines {
        say(&format!("  {k:<w$}  {v:>12}"));
    }
    if let Some(at) = &r.at_profile_cadence {
        say("");
        say(&format!(
            "At the profile's cadence ({:.1} rpm crank, {:.0} rpm generator), start SOC",
            at.crank_rpm, at.generator_rpm
        ));
        let state = if r.direct.is_some() {
            "through the diode".to_string()
        } else if let (Some(u), true) = (&r.usb, at.converter_on) {
            format!(
                "device's cell; bus {:.3} V at {:.3} A, {}",
                u.bus_v_at_profile_cadence.unwrap_or(0.0),
                u.bus_current_a_at_profile_cadence.unwrap_or(0.0),
                if at.in_regulation {
                    "in the band"
                } else {
                    "out of the band"
                }
            )
        } else if !at.converter_on {
            "converter locked out".to_string()
        } else if at.in_regulation {
            format!("in regulation, duty {:.3}", at.duty)
        } else {
            format!("dropout, duty {:.3}", at.duty)
        };
        for (k, v) in [
            (
                "open-circuit voltage",
                format!("{:.2} V", at.open_circuit_v),
            ),
            ("input voltage", format!("{:.2} V", at.input_v)),
            (
                "generator current",
                format!("{:.3} A", at.generator_current_a),
            ),
            (
                "battery current",
                format!(
                    "{:.3} A at {:.3} V ({state})",
                    at.battery_current_a, at.battery_v
                ),
            ),
            ("crank torque", format!("{:.2} N·m", at.crank_torque_n_m)),
            (
                "crank power",
                format!(
                    "{:.1} W (operator critical power {:.0} W)",
                    at.crank_power_w, at.operator_critical_power_w
                ),
            ),
        ] {
            say(&format!("  {k:<22}{v}"));
        }
    }
    if !r.notes.is_empty() {
        say("");
        say("Notes");
        for n in &r.notes {
            say(&format!("  - {n}"));
        }
    }
    say("");
    say("Cautions");
    for c in &r.cautions {
        say(&format!("  ! {c}"));
    }
}
