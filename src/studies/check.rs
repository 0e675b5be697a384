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
use serde::Serialize;

use crate::cli::{say, Failure, EXIT_OK};
use crate::model::battery::li_ion::TempBand;
use crate::model::battery::{BatteryModel, BatteryState};
use crate::model::jitter::JitterTrack;
use crate::model::network::{self, Load, NetworkPoint, Source};
use crate::scenario::load::Override;
use crate::scenario::setup::{Chemistry, GeneratorKind, Topology};
use crate::scenario::Scenario;
use crate::simulate::plant::Plant;
use crate::units::{rad_s_to_rpm, rpm_to_rad_s};

use super::check_usb::{self, UsbFigures, UsbStatics};
use super::run::{scenario_from, FidelityArg, SessionArgs};

/// Highest crank cadence searched, rpm (well above what a person can hold).
pub const MAX_SEARCH_RPM: f64 = 600.0;
/// Coarse scan step of the cadence searches, rpm.
const SCAN_STEP_RPM: f64 = 0.5;
/// Resolution of the bisection after the scan, rpm.
const BISECT_TOL_RPM: f64 = 1e-3;
/// Generator current taken as "the diode conducts" in a direct design, A.
pub const CONDUCTION_A: f64 = 0.01;

/// Arguments of `check`.
#[derive(Debug, Clone, Args)]
pub struct CheckArgs {
    /// Setup file (.ron) or shipped name; none checks the embedded demo.
    pub setup: Option<String>,
    /// Crank profile: a .ron path or a shipped name (steady, tiring, sprint-and-rest, uneven, overreach).
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

/// Builds the plant of a scenario without jitter, so that model-building errors (e.g. diode
/// points that give no Shockley curve) are reported as bad input before any simulation.
pub fn build_plant(sc: &Scenario) -> Result<Plant, Failure> {
    Plant::new(&sc.setup, &sc.profile, JitterTrack::default(), 0.0)
        .map_err(|m| Failure::Input(anyhow::anyhow!("{}: {m}", sc.setup_source.name)))
}

/// The figures `check` reports (also its JSON form). Cadences are crank cadences, rpm; None
/// (JSON null) means not reached below [`MAX_SEARCH_RPM`] or not applicable.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Report {
    pub setup: String,
    pub profile: String,
    pub topology: String,
    pub chemistry: String,
    /// What the converter feeds: `battery` or `usb_5v`.
    pub output: String,
    pub ambient_c: f64,
    pub drive: DriveFigures,
    pub generator: GeneratorFigures,
    pub battery: BatteryFigures,
    /// Converter figures (None for `direct`).
    pub converter: Option<ConverterFigures>,
    /// Diode-only figures (None with a converter).
    pub direct: Option<DirectFigures>,
    /// USB port figures (None for a battery output).
    pub usb: Option<UsbFigures>,
    /// The operating point at the profile's first cranking cadence (None if the profile never cranks).
    pub at_profile_cadence: Option<OperatingFigures>,
    /// Highest planned target cadence of the profile, rpm.
    pub highest_profile_cadence_rpm: f64,
    /// Remarks on this design computed from the figures.
    pub notes: Vec<String>,
    /// The cadence range the profile produces (jitter, population and fatigue included), over
    /// which `check` draws its operating map.
    pub cadence_range: Option<super::operating_map::CadenceRange>,
    /// Safety cautions.
    pub cautions: Vec<String>,
}

impl Report {
    /// Crank cadence from which the design holds regulation at its start state, rpm: for a USB
    /// port the cadence that holds the band's lower edge, for a battery charger the cadence that
    /// holds its start target; None for a direct design or when it is never reached.
    pub fn regulation_cadence_rpm(&self) -> Option<f64> {
        match (&self.usb, &self.converter) {
            (Some(u), _) => u.band_cadence_rpm,
            (None, Some(c)) => c.regulation_cadence_at_start_rpm,
            (None, None) => None,
        }
    }
}

/// Drive figures.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct DriveFigures {
    pub stages: usize,
    pub total_ratio: f64,
    pub efficiency: f64,
    /// J_gen + J_flywheel + J_crank/N², kg·m².
    pub reflected_inertia_kg_m2: f64,
}

/// Generator figures.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct GeneratorFigures {
    pub back_emf_v_per_krpm: f64,
    /// Armature resistance at ambient (cold winding), Ω; an alternator's: the two phases in the
    /// current's path.
    pub resistance_at_ambient_ohm: f64,
    /// Open-circuit voltage per crank rpm, V/rpm (an alternator's: its bridge's no-load average).
    pub open_circuit_v_per_crank_rpm: f64,
    /// `brushed_dc` or `three_phase_pm`.
    pub kind: String,
    /// Three-phase alternator figures (None for a DC machine).
    pub alternator: Option<AlternatorFigures>,
}

/// A three-phase alternator on its bridge.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AlternatorFigures {
    pub pole_pairs: u32,
    /// Electrical frequency at the profile's cadence, Hz (p × the shaft's turns per second).
    pub electrical_hz_at_profile_cadence: Option<f64>,
    /// Synchronous reactance of a phase at the profile's cadence, Ω.
    pub reactance_ohm_at_profile_cadence: Option<f64>,
    /// DC current with the bridge's output shorted, A: the same at every speed.
    pub short_circuit_current_a: Option<f64>,
    /// Overlap mode of the bridge at the profile's operating point (1, 2 or 3) and the overlap
    /// angle in mode I, degrees.
    pub overlap_mode_at_profile_cadence: Option<u8>,
    pub overlap_angle_deg_at_profile_cadence: Option<f64>,
}

/// Battery figures.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct BatteryFigures {
    pub soc_start: f64,
    pub capacity_ah: f64,
    /// Rest (open-circuit) voltage at the start SOC, V.
    pub rest_v_at_start: f64,
    /// Charge limit of the terminals at ambient temperature, V.
    pub charge_limit_at_ambient_v: f64,
    /// Charge-temperature band at the start temperature (Li-ion), e.g. `standard`.
    pub temperature_band: String,
    /// Supercapacitor energy figures (None for the other kinds).
    pub supercap: Option<SupercapFigures>,
    /// NiMH charger's end of charge (None for the other kinds).
    pub nimh: Option<NimhFigures>,
}

/// A supercapacitor bank's energy.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct SupercapFigures {
    /// Capacitance of the bank, F.
    pub capacitance_f: f64,
    /// Rated voltage of the bank, V.
    pub rated_v: f64,
    /// Energy held at the rated voltage, Wh: ½·C·V².
    pub energy_at_rated_wh: f64,
    /// Lowest usable voltage of the bank, V.
    pub min_v: f64,
    /// Share of the energy that lies above the lowest usable voltage: 1 − (V_min/V_rated)².
    pub usable_fraction: f64,
    /// Energy between the rated and the lowest usable voltage, Wh.
    pub usable_wh: f64,
    /// Energy held at the start, Wh.
    pub energy_at_start_wh: f64,
    /// Time to reach the rated voltage from the start at the charge current, s: C·ΔV/I (the
    /// leakage left out).
    pub time_to_rated_at_charge_current_s: Option<f64>,
    /// ESR of the bank, Ω.
    pub esr_ohm: f64,
}

/// A NiMH charger's end of the fast charge.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct NimhFigures {
    /// Fast-charge rate, in units of the capacity per hour.
    pub charge_c_rate: f64,
    /// The voltage drop below the peak that ends the fast charge, V for the pack (0: off).
    pub end_voltage_drop_v: f64,
    /// The temperature rise rate that ends it, °C per minute (0: off).
    pub end_temp_rise_c_per_min: f64,
    /// Hold-off after each start, s.
    pub end_holdoff_s: f64,
    /// Trickle current after the end, A.
    pub trickle_current_a: f64,
}

/// Converter (buck) figures.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ConverterFigures {
    /// Charge current in force at the start temperature (CC limit, reduced in a cool band), A.
    pub charge_current_a: f64,
    /// Current the charger aims for at the start SOC (CC, or less when CV already limits), A.
    pub start_target_current_a: f64,
    /// CV/absorption set point, V.
    pub cv_setpoint_v: f64,
    /// Crank cadence at which UVLO releases (open circuit reaches `uvlo_on_v`), rpm.
    pub unlock_cadence_rpm: Option<f64>,
    /// Crank cadence from which the converter holds its start target at the start SOC, rpm.
    pub regulation_cadence_at_start_rpm: Option<f64>,
    /// Crank cadence from which it holds the charge current with the battery at the CV voltage, rpm.
    pub regulation_cadence_at_cv_rpm: Option<f64>,
    /// Converter input over-voltage limit, V.
    pub input_limit_v: f64,
    /// Crank cadence at which the open-circuit voltage reaches the input limit, rpm.
    pub input_limit_cadence_rpm: f64,
}

/// Diode-only figures.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct DirectFigures {
    /// Generator current taken as conduction, A.
    pub conduction_threshold_a: f64,
    /// Crank cadence at which the diode passes that current into the battery, rpm.
    pub conduction_cadence_rpm: Option<f64>,
    /// Crank cadence at which the battery terminal reaches its charge limit at the start SOC, rpm.
    pub charge_limit_cadence_rpm: Option<f64>,
}

/// The steady operating point at one crank cadence, battery at its start state.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct OperatingFigures {
    pub crank_rpm: f64,
    pub generator_rpm: f64,
    pub open_circuit_v: f64,
    pub input_v: f64,
    pub generator_current_a: f64,
    pub battery_current_a: f64,
    pub battery_v: f64,
    pub duty: f64,
    /// Converter running (UVLO released, not shut down); always true for direct.
    pub converter_on: bool,
    /// Converter holds its target (not in dropout, not locked out); true for direct.
    pub in_regulation: bool,
    /// τ_crank = (k_t·i + friction)·N/η, N·m.
    pub crank_torque_n_m: f64,
    /// Crank torque × crank speed, W.
    pub crank_power_w: f64,
    /// The operator's critical power, W (for comparison).
    pub operator_critical_power_w: f64,
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

/// The static network of a plant: what is needed to solve operating points at a cadence.
pub(super) struct Statics<'a> {
    pub plant: &'a Plant,
    /// Armature resistance with the winding at ambient, Ω.
    pub resistance_ohm: f64,
    /// Back-EMF constant with the magnets at ambient, V·s/rad.
    pub ke_v_s_per_rad: f64,
}

impl Statics<'_> {
    /// Open-circuit EMF at a crank cadence, V.
    pub fn emf_v(&self, crank_rpm: f64) -> f64 {
        self.ke_v_s_per_rad * rpm_to_rad_s(crank_rpm) * self.plant.drive.ratio
    }

    /// Crank cadence at which the open-circuit EMF equals `v`, rpm.
    pub fn cadence_for_emf(&self, v: f64) -> f64 {
        rad_s_to_rpm(v / self.ke_v_s_per_rad / self.plant.drive.ratio)
    }

    /// The generator side at a crank cadence (winding at ambient).
    pub fn source(&self, crank_rpm: f64) -> Source<'_> {
        Source {
            generator: &self.plant.generator,
            diode: &self.plant.diode,
            emf_v: self.emf_v(crank_rpm),
            resistance_ohm: self.resistance_ohm,
            commutation_ohm: self
                .plant
                .generator
                .commutation_ohm(rpm_to_rad_s(crank_rpm) * self.plant.drive.ratio),
        }
    }

    /// The design's converter models (a buck-boost switching both sides).
    pub fn converters(&self) -> network::Converters<'_> {
        network::Converters {
            topology: self.plant.charger.topology,
            buck: &self.plant.buck,
            buck_boost: &self.plant.buck_boost,
            linear: &self.plant.linear,
        }
    }

    pub(super) fn solve(&self, crank_rpm: f64, load: Load, bs: &BatteryState) -> NetworkPoint {
        let term = self.plant.battery.static_terminal(bs);
        network::solve(&self.source(crank_rpm), load, &term)
    }

    /// The charger asking for `target_a` at a cadence: a buck-boost as a buck where the buck duty
    /// this needs stays within its buck-mode limit (as it runs there), else switching both.
    fn charging(&self, crank_rpm: f64, target_a: f64, bs: &BatteryState) -> NetworkPoint {
        let limit = self.plant.charger.buck_mode_max_duty;
        if self.plant.charger.topology == Topology::BuckBoost && limit > 0.0 {
            let as_buck = network::Converters {
                topology: Topology::Buck,
                buck: &self.plant.buck_boost_as_buck,
                ..self.converters()
            };
            let p = self.solve(crank_rpm, self.with_floor(as_buck, target_a), bs);
            if !p.dropout && p.balance_duty <= limit {
                return p;
            }
        }
        self.solve(crank_rpm, self.buck(target_a), bs)
    }

    /// The charger asking for `target_a`, trimming it to hold its input floor when it has one.
    pub(super) fn buck(&self, target_a: f64) -> Load<'_> {
        self.with_floor(self.converters(), target_a)
    }

    /// `conv` asking for `target_a`, trimming it to hold the input floor when there is one.
    fn with_floor<'a>(&self, conv: network::Converters<'a>, target_a: f64) -> Load<'a> {
        match self.plant.charger.input_floor_v {
            Some(floor_v) => Load::Floored {
                conv,
                target_a,
                floor_v,
            },
            None => conv.charging(target_a),
        }
    }

    /// Whether the converter runs and holds `target_a` at a cadence (UVLO released by the open
    /// circuit, input above the UVLO off threshold under load, not in dropout, and not trimmed
    /// below the target to hold an input floor).
    fn holds(&self, crank_rpm: f64, target_a: f64, bs: &BatteryState) -> bool {
        let c = &self.plant.charger;
        let oc = self.emf_v(crank_rpm);
        if oc < c.uvlo_on_v || (c.overvoltage_shutdown && oc > c.input_overvoltage_v) {
            return false;
        }
        let p = self.charging(crank_rpm, target_a, bs);
        !p.dropout && p.input_v >= c.uvlo_off_v && p.battery_current_a >= target_a * (1.0 - 1e-9)
    }

    /// Steady torque the crank must give at a cadence for a generator current (electromagnetic
    /// torque, shaft friction and iron loss; cogging averages to zero over a turn), N·m.
    pub(super) fn crank_torque_n_m(&self, crank_rpm: f64, generator_current_a: f64) -> f64 {
        let d = &self.plant.drive;
        let g = &self.plant.generator;
        let omega_g = rpm_to_rad_s(crank_rpm) * d.ratio;
        (g.torque_at(self.ke_v_s_per_rad, omega_g, generator_current_a)
            + d.friction_n_m(omega_g)
            + g.iron_loss_torque_n_m(omega_g))
            * d.ratio
            / d.efficiency
    }
}

/// Lowest cadence in [0, MAX_SEARCH_RPM] at which `pred` holds (scan, then bisection); None if
/// it never holds there.
pub fn first_cadence(pred: impl Fn(f64) -> bool) -> Option<f64> {
    if pred(0.0) {
        return Some(0.0);
    }
    let steps = (MAX_SEARCH_RPM / SCAN_STEP_RPM).round() as usize;
    let mut lo = 0.0;
    let hi = (1..=steps).map(|k| k as f64 * SCAN_STEP_RPM).find(|&c| {
        let ok = pred(c);
        if !ok {
            lo = c;
        }
        ok
    })?;
    let (mut lo, mut hi) = (lo, hi);
    while hi - lo > BISECT_TOL_RPM {
        let mid = 0.5 * (lo + hi);
        if pred(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Some(hi)
}

/// SOC at which the battery's terminal voltage at current `i` equals `v` (bisection; the terminal
/// voltage rises with SOC). Clamped to [0, 1] when `v` is outside the reachable range.
fn soc_at_terminal(battery: &BatteryModel, v: f64, i: f64, temp_c: f64) -> f64 {
    let at = |soc: f64| battery.terminal_v(i, &BatteryState::rested(soc, temp_c)).0;
    if at(0.0) >= v {
        return 0.0;
    }
    if at(1.0) <= v {
        return 1.0;
    }
    let (mut lo, mut hi) = (0.0, 1.0);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if at(mid) < v {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

fn band_word(b: TempBand) -> &'static str {
    match b {
        TempBand::TooCold => "too_cold",
        TempBand::Cool => "cool",
        TempBand::Standard => "standard",
        TempBand::Warm => "warm",
        TempBand::TooHot => "too_hot",
    }
}

/// Computes every figure of the report.
pub fn analyse(sc: &Scenario, plant: &Plant) -> Report {
    let setup = &sc.setup;
    let ambient = setup.ambient_c;
    let temp_start = setup.battery.temp_start_c.unwrap_or(ambient);
    let st = Statics {
        plant,
        resistance_ohm: plant.generator.resistance_ohm(ambient),
        ke_v_s_per_rad: plant.generator.ke_at(ambient),
    };
    let bs_start = BatteryState::rested(setup.battery.soc_start, temp_start);
    let battery = &plant.battery;
    let band = plant.band(temp_start);
    let charge_limit = battery.charge_limit_v(ambient);
    let scale = sc.profile.cadence_scale;
    let first_cadence_rpm = sc
        .profile
        .segments
        .iter()
        .find_map(|s| {
            let c = if s.cadence_rpm > 0.0 {
                s.cadence_rpm
            } else {
                s.end_cadence_rpm.unwrap_or(0.0)
            };
            (c > 0.0).then_some(c * scale)
        })
        .filter(|&c| c > 0.0);
    let highest = sc
        .profile
        .segments
        .iter()
        .map(|s| {
            s.cadence_rpm
                .max(s.end_cadence_rpm.unwrap_or(s.cadence_rpm))
        })
        .fold(0.0, f64::max)
        * scale;
    let critical_power = sc.profile.operator.critical_power_w;
    let mut notes = Vec::new();
    let mut usb = None;

    let (converter, direct, at_profile) = match plant.charger.topology {
        _ if plant.usb.is_some() => {
            let (figures, at) =
                usb_port(&st, &bs_start, band, first_cadence_rpm, highest, &mut notes);
            usb = figures;
            (None, None, at)
        }
        Topology::Buck | Topology::BuckBoost | Topology::Linear => {
            let c = &plant.charger;
            // Outside the charge window the charger holds off; the figures then describe the
            // design as it will charge once the battery is back in its window.
            let blocked = matches!(band, TempBand::TooCold | TempBand::TooHot);
            let fraction = match (battery, band) {
                (BatteryModel::LiIon(m), TempBand::Cool) => m.window.cool_current_fraction,
                _ => 1.0,
            };
            let i_cc = c.charge_current_a * fraction;
            let setpoint = c
                .cv_setpoint_v
                .unwrap_or_else(|| battery.charge_limit_v(temp_start));
            let i_cv = battery.current_at_v(setpoint, &bs_start).max(0.0);
            let start_target = i_cc.min(i_cv);
            let bs_cv = BatteryState::rested(
                soc_at_terminal(battery, setpoint, i_cc, temp_start),
                temp_start,
            );
            let unlock = (c.uvlo_on_v > 0.0).then(|| st.cadence_for_emf(c.uvlo_on_v));
            let reg_start = first_cadence(|r| st.holds(r, start_target, &bs_start));
            let reg_cv = first_cadence(|r| st.holds(r, i_cc, &bs_cv));
            let limit_cadence = st.cadence_for_emf(c.input_overvoltage_v);
            let at = first_cadence_rpm.map(|r| {
                let oc = st.emf_v(r);
                let on =
                    oc >= c.uvlo_on_v && !(c.overvoltage_shutdown && oc > c.input_overvoltage_v);
                let p = if on {
                    st.charging(r, start_target, &bs_start)
                } else {
                    st.solve(r, Load::Off, &bs_start)
                };
                operating(
                    &st,
                    r,
                    &p,
                    on,
                    on && st.holds(r, start_target, &bs_start),
                    critical_power,
                )
            });
            converter_notes(
                &mut notes,
                at.as_ref(),
                reg_start,
                reg_cv,
                limit_cadence,
                highest,
                c.input_overvoltage_v,
                c.overvoltage_shutdown,
            );
            if blocked {
                notes.push(format!(
                    "The battery starts at {temp_start} °C, outside its charge temperature window: the charger will not charge it until it is back inside (figures assume it does)."
                ));
            }
            (
                Some(ConverterFigures {
                    charge_current_a: i_cc,
                    start_target_current_a: start_target,
                    cv_setpoint_v: setpoint,
                    unlock_cadence_rpm: unlock,
                    regulation_cadence_at_start_rpm: reg_start,
                    regulation_cadence_at_cv_rpm: reg_cv,
                    input_limit_v: c.input_overvoltage_v,
                    input_limit_cadence_rpm: limit_cadence,
                }),
                None,
                at,
            )
        }
        Topology::Direct => {
            let conduct = first_cadence(|r| {
                st.solve(r, Load::Direct, &bs_start).generator_current_a >= CONDUCTION_A
            });
            let limit =
                first_cadence(|r| st.solve(r, Load::Direct, &bs_start).battery_v >= charge_limit);
            let at = first_cadence_rpm.map(|r| {
                let p = st.solve(r, Load::Direct, &bs_start);
                operating(&st, r, &p, true, true, critical_power)
            });
            notes.push(
                "Diode-only design: nothing but the operator's cadence limits the charge voltage and current."
                    .to_string(),
            );
            if let (Some(l), true) = (limit, highest > 0.0) {
                if highest >= l {
                    notes.push(format!(
                        "At the profile's highest cadence ({highest:.0} rpm) the battery would be pushed past its charge limit ({charge_limit:.2} V), which starts at {l:.1} rpm even at the start SOC."
                    ));
                }
            }
            (
                None,
                Some(DirectFigures {
                    conduction_threshold_a: CONDUCTION_A,
                    conduction_cadence_rpm: conduct,
                    charge_limit_cadence_rpm: limit,
                }),
                at,
            )
        }
    };
    if let Some(at) = &at_profile {
        if at.crank_power_w > critical_power {
            notes.push(format!(
                "At the profile's cadence the crank takes {:.0} W, above the operator's critical power ({critical_power:.0} W): they will tire and slow down.",
                at.crank_power_w
            ));
        }
    } else {
        notes.push("The profile never asks for a cadence above zero.".to_string());
    }
    if let (Topology::Linear, Some(at)) = (plant.charger.topology, &at_profile) {
        // Lumped junction: steady rise P·θ_ja above ambient.
        let th = &plant.linear.thermal;
        let p = (at.input_v - at.battery_v).max(0.0) * at.battery_current_a.max(0.0);
        let tj = ambient + p * th.theta_ja_k_per_w;
        if tj > th.foldback_c {
            notes.push(format!(
                "At the profile's cadence the pass element dissipates {p:.1} W: its junction would settle near {tj:.0} °C (θ_ja {:.1} K/W), past the {:.0} °C foldback, so the charge current will be cut back. A heatsink (lower θ_ja) keeps the full current.",
                th.theta_ja_k_per_w, th.foldback_c
            ));
        }
    }
    if matches!(band, TempBand::Cool | TempBand::Warm) {
        notes.push(format!(
            "The battery starts in its {} charge-temperature band at {temp_start} °C: current or voltage is reduced.",
            band_word(band)
        ));
    }

    let alternator = alternator_figures(&st, setup, at_profile.as_ref());
    let nimh = nimh_figures(plant);
    storage_notes(plant, &mut notes);

    Report {
        setup: setup.name.clone(),
        profile: sc.profile.name.clone(),
        topology: setup.converter.topology.as_str().to_string(),
        chemistry: setup.battery.chemistry.as_str().to_string(),
        output: setup.output_word().to_string(),
        ambient_c: ambient,
        drive: DriveFigures {
            stages: setup.drive.stages.len(),
            total_ratio: plant.drive.ratio,
            efficiency: plant.drive.efficiency,
            reflected_inertia_kg_m2: plant.drive.reflected_inertia_kg_m2(),
        },
        generator: GeneratorFigures {
            back_emf_v_per_krpm: setup.generator.back_emf_v_per_krpm,
            resistance_at_ambient_ohm: st.resistance_ohm,
            open_circuit_v_per_crank_rpm: st.emf_v(1.0),
            kind: setup.generator.kind.as_str().to_string(),
            alternator,
        },
        battery: BatteryFigures {
            soc_start: setup.battery.soc_start,
            capacity_ah: battery.capacity_ah(),
            rest_v_at_start: battery.terminal_v(0.0, &bs_start).0,
            charge_limit_at_ambient_v: charge_limit,
            temperature_band: band_word(band).to_string(),
            supercap: supercap_figures(plant, setup.battery.soc_start),
            nimh,
        },
        converter,
        direct,
        usb,
        at_profile_cadence: at_profile,
        highest_profile_cadence_rpm: highest,
        notes,
        cadence_range: None,
        cautions: cautions(sc),
    }
}

/// A three-phase alternator's figures at the profile's operating point (None for a DC machine).
fn alternator_figures(
    st: &Statics,
    setup: &crate::scenario::setup::Setup,
    at: Option<&OperatingFigures>,
) -> Option<AlternatorFigures> {
    let g = &st.plant.generator;
    let a = g.alternator?;
    let omega = at.map(|at| rpm_to_rad_s(at.generator_rpm));
    let x = at.and_then(|at| {
        g.short_circuit_a(st.ke_v_s_per_rad)
            .map(|isc| at.generator_current_a / isc * crate::model::bridge::SHORT_CIRCUIT)
    });
    Some(AlternatorFigures {
        pole_pairs: setup.generator.pole_pairs.unwrap_or(1),
        electrical_hz_at_profile_cadence: omega.map(|w| g.electrical_hz(w)),
        reactance_ohm_at_profile_cadence: omega.map(|w| a.pole_pairs * w * a.phase_inductance_h),
        short_circuit_current_a: g.short_circuit_a(st.ke_v_s_per_rad),
        overlap_mode_at_profile_cadence: x.map(crate::model::bridge::mode),
        overlap_angle_deg_at_profile_cadence: x
            .filter(|&x| x <= crate::model::bridge::MODE_I_END)
            .map(|x| crate::model::bridge::overlap_angle_rad(x).to_degrees()),
    })
}

/// A supercapacitor bank's energy figures at its rated voltage, its lowest usable voltage and
/// the start (None for the other kinds).
fn supercap_figures(plant: &Plant, soc_start: f64) -> Option<SupercapFigures> {
    let BatteryModel::Supercap(m) = &plant.battery else {
        return None;
    };
    let c = &plant.charger;
    let dv = m.rated_v() - m.voltage_v(soc_start);
    Some(SupercapFigures {
        capacitance_f: m.capacitance_f(),
        rated_v: m.rated_v(),
        energy_at_rated_wh: m.energy_j(1.0) / 3600.0,
        min_v: m.min_v(),
        usable_fraction: m.usable_fraction(),
        usable_wh: m.usable_energy_j(1.0) / 3600.0,
        energy_at_start_wh: m.energy_j(soc_start) / 3600.0,
        time_to_rated_at_charge_current_s: (c.topology != Topology::Direct && dv > 0.0)
            .then(|| m.capacitance_f() * dv / c.charge_current_a),
        esr_ohm: m.esr_ohm(),
    })
}

/// A NiMH charger's end-of-charge settings (None for the other kinds).
fn nimh_figures(plant: &Plant) -> Option<NimhFigures> {
    let BatteryModel::Nimh(m) = &plant.battery else {
        return None;
    };
    let c = &plant.charger;
    (c.topology != Topology::Direct).then(|| NimhFigures {
        charge_c_rate: c.charge_current_a / m.capacity_ah,
        end_voltage_drop_v: c.end_drop_v,
        end_temp_rise_c_per_min: 60.0 * c.end_rise_k_per_s,
        end_holdoff_s: c.end_holdoff_s,
        trickle_current_a: c.trickle_current_a,
    })
}

/// Remarks on NiMH and supercapacitor storage.
fn storage_notes(plant: &Plant, notes: &mut Vec<String>) {
    let c = &plant.charger;
    match &plant.battery {
        BatteryModel::Nimh(_) if c.topology == Topology::Direct => notes.push(
            "NiMH behind a diode only: nothing ends the charge, so the pack is overcharged whenever it is full and the operator keeps cranking (the missed_end_of_charge alert).".to_string(),
        ),
        BatteryModel::Nimh(m) => {
            let rate = c.charge_current_a / m.capacity_ah;
            // Common practice: chargers that end on −ΔV fast-charge at 0.5–1 C; at lower rates
            // the drop is small and late.
            if c.end_drop_v > 0.0 && rate < 1.0 / 3.0 {
                notes.push(format!(
                    "The fast charge runs at {rate:.2} C: below about C/3 the voltage drop at full is small and slow, so the -dV end may come late or not at all (an end on the temperature rise, or a timer, backs it up)."
                ));
            }
            if c.end_drop_v <= 0.0 && c.end_rise_k_per_s <= 0.0 {
                notes.push("Both NiMH ends (-dV and dT/dt) are off: the fast charge never ends by itself.".to_string());
            }
            notes.push(format!(
                "The charger watches for the end of its fast charge only while it holds its current, and only {:.0} s after each start: every lock-out (a rest, a slow crank) restarts that wait, so a pack that fills while the operator keeps stopping can be overcharged.",
                c.end_holdoff_s
            ));
        }
        BatteryModel::Supercap(m) => notes.push(format!(
            "Of the {:.2} Wh the bank holds at {:.2} V, {:.0} % lies above the {:.2} V the load can use down to (1 − (V_min/V_rated)²).",
            m.energy_j(1.0) / 3600.0,
            m.rated_v(),
            100.0 * m.usable_fraction(),
            m.min_v()
        )),
        _ => {}
    }
}

/// USB port figures and the operating point at the profile's cadence (the device drawing its
/// start current from the running converter; in regulation when the bus lies in the band).
fn usb_port(
    st: &Statics,
    bs_start: &BatteryState,
    band: TempBand,
    profile_rpm: Option<f64>,
    highest_rpm: f64,
    notes: &mut Vec<String>,
) -> (Option<UsbFigures>, Option<OperatingFigures>) {
    let Some(u) = &st.plant.usb else {
        return (None, None);
    };
    let us = UsbStatics {
        statics: st,
        plant: st.plant,
        usb: u,
        cell: *bs_start,
    };
    let demand = check_usb::start_demand_a(st.plant, bs_start, band);
    let figures = check_usb::analyse(&us, demand, profile_rpm, highest_rpm, notes);
    let critical_power = st.plant.operator.critical_power_w;
    let at = profile_rpm.map(|r| {
        let c = &st.plant.charger;
        let on = st.emf_v(r) >= c.uvlo_on_v;
        let (p, bus) = if on {
            us.solve(r, demand)
        } else {
            let p = st.solve(r, Load::Off, bs_start);
            let bus = crate::model::usb::BusPoint::default();
            (p, bus)
        };
        operating(st, r, &p, on, on && u.in_band(bus.bus_v), critical_power)
    });
    (Some(figures), at)
}

fn operating(
    st: &Statics,
    crank_rpm: f64,
    p: &NetworkPoint,
    on: bool,
    in_regulation: bool,
    critical_power_w: f64,
) -> OperatingFigures {
    let torque = st.crank_torque_n_m(crank_rpm, p.generator_current_a);
    OperatingFigures {
        crank_rpm,
        generator_rpm: crank_rpm * st.plant.drive.ratio,
        open_circuit_v: st.emf_v(crank_rpm),
        input_v: p.input_v,
        generator_current_a: p.generator_current_a,
        battery_current_a: p.battery_current_a,
        battery_v: p.battery_v,
        duty: p.duty,
        converter_on: on,
        in_regulation,
        crank_torque_n_m: torque,
        crank_power_w: torque * rpm_to_rad_s(crank_rpm),
        operator_critical_power_w: critical_power_w,
    }
}

#[allow(clippy::too_many_arguments)]
fn converter_notes(
    notes: &mut Vec<String>,
    at: Option<&OperatingFigures>,
    reg_start: Option<f64>,
    reg_cv: Option<f64>,
    limit_cadence: f64,
    highest: f64,
    limit_v: f64,
    shutdown: bool,
) {
    let need = |r: Option<f64>| {
        r.map_or_else(
            || format!("no cadence up to {MAX_SEARCH_RPM:.0} rpm"),
            |r| format!("{r:.1} rpm"),
        )
    };
    if let Some(at) = at {
        if !at.in_regulation {
            notes.push(format!(
                "At the profile's cadence ({:.0} rpm) the converter does not hold its current at the start SOC; it needs {}.",
                at.crank_rpm,
                need(reg_start)
            ));
        } else if reg_cv.is_none_or(|r| r > at.crank_rpm) {
            notes.push(format!(
                "At the profile's cadence ({:.0} rpm) the converter regulates at the start SOC but not near the end of the constant-current stage (battery at its CV voltage needs {}).",
                at.crank_rpm,
                need(reg_cv)
            ));
        }
    }
    if highest > 0.0 && highest >= limit_cadence {
        let what = if shutdown {
            "the converter shuts down"
        } else {
            "the input over-voltage alert fires"
        };
        notes.push(format!(
            "At the profile's highest cadence ({highest:.0} rpm) the open-circuit voltage reaches the {limit_v:.1} V input limit (from {limit_cadence:.1} rpm): whenever the charger draws little, {what}."
        ));
    }
}

/// The cautions (DESIGN.md §6), tailored to the chemistry and topology.
pub fn cautions(sc: &Scenario) -> Vec<String> {
    let mut c = Vec::new();
    match sc.setup.battery.chemistry {
        Chemistry::LeadAcid => c.push("Lead-acid batteries give off hydrogen when they gas near full charge: charge them where air moves freely, away from sparks and flames.".to_string()),
        Chemistry::Nimh => c.push("NiMH cells fast-charged past full heat up quickly and can vent; the charge must end on the voltage drop or the temperature rise, with a timer and a temperature cut-off behind them.".to_string()),
        Chemistry::Supercap => c.push("Supercapacitors can deliver a very large current into a short circuit; a cell pushed past its rated voltage ages fast or vents, and a series string needs balancing so that no cell exceeds it.".to_string()),
        _ => c.push("Lithium cells can vent hot gas or catch fire when they are overcharged, charged outside their temperature window, or short-circuited.".to_string()),
    }
    if sc.setup.generator.kind == GeneratorKind::ThreePhasePm {
        c.push("An alternator's open-circuit voltage rises with speed and its leads carry AC before the bridge: insulate them, and size the bridge and the converter for the fastest cranking.".to_string());
    }
    if sc.setup.usb.is_some() {
        c.push("A USB port feeds devices that trust its 5 V: a converter fault can put the full generator voltage on the bus; give the port over-voltage and over-current protection.".to_string());
    }
    if sc.setup.converter.topology == Topology::Direct {
        c.push("With a diode only, nothing but the operator limits the charge: such a design can overcharge the battery.".to_string());
    }
    c.push("Cranks, belts, pulleys and flywheels trap fingers, hair and clothing: guard the pinch points and every moving part.".to_string());
    c.push("A simulation is no substitute for a certified charge controller, a battery management system, local electrical codes or licensed practice.".to_string());
    c.push(
        "Follow the battery maker's limits for charge voltage, current and temperature."
            .to_string(),
    );
    c
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
