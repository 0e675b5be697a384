//! The static design figures `check` reports (its JSON form) and the analysis that computes them
//! from a scenario: no simulation, the steady-state network at chosen cadences. The `check`
//! command prints them; a session's summary takes its cadence margin from them.

use serde::Serialize;

use super::outcome::Failure;
use crate::model::battery::li_ion::TempBand;
use crate::model::battery::{BatteryModel, BatteryState};
use crate::model::jitter::JitterTrack;
use crate::model::network::{self, Load, NetworkPoint};
use crate::scenario::setup::Topology;
use crate::scenario::Scenario;
use crate::simulate::observe::overcharge_tolerance_v;
use crate::simulate::plant::Plant;
use crate::units::rpm_to_rad_s;

use super::cautions::cautions;
use super::check_kinds::{
    alternator_figures, nimh_figures, storage_notes, supercap_figures, AlternatorFigures,
    NimhFigures, SupercapFigures,
};
use super::check_usb::{self, UsbFigures, UsbStatics};
use super::statics::{first_cadence, Statics, MAX_SEARCH_RPM};

/// Generator current taken as "the diode conducts" in a direct design, A.
pub const CONDUCTION_A: f64 = 0.01;

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
    pub cadence_range: Option<CadenceRange>,
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

/// The cadence range a profile produces, and where its ends come from.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct CadenceRange {
    /// Lowest and highest planned target while cranking (rests left out), rpm.
    pub planned_low_rpm: f64,
    pub planned_high_rpm: f64,
    /// Lowest and highest drawn wander over the session (profile's seed), rpm.
    pub wander_low_rpm: f64,
    pub wander_high_rpm: f64,
    /// The population's cadence offsets taken into the range (±2σ), rpm.
    pub population_rpm: f64,
    /// Cadence a weak, tired operator holds (crank power = CP − 2σ), when below the planned
    /// low end, rpm.
    pub fatigue_rpm: Option<f64>,
    /// The range checked, rpm.
    pub low_rpm: f64,
    pub high_rpm: f64,
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
            if plant.charger.topology == Topology::BuckBoost {
                fold_note(&mut notes, plant, &bs_start, start_target);
            }
            let limit_v = battery.charge_limit_v(temp_start);
            let tolerance_v = overcharge_tolerance_v(plant);
            if c.cv_setpoint_v.is_some_and(|v| v > limit_v + tolerance_v) {
                notes.push(format!(
                    "The charger's CV set point {setpoint:.3} V lies {:.3} V past the battery's charge limit {limit_v:.3} V at {temp_start} °C (tolerance {tolerance_v:.3} V): it will overcharge the battery once it is near full, and a run's verdict says `overcharge` whatever the session reaches.",
                    setpoint - limit_v
                ));
            }
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

    let alternator = alternator_figures(
        &st,
        setup,
        at_profile
            .as_ref()
            .map(|at| (at.generator_rpm, at.generator_current_a)),
    );
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

/// A buck-boost whose output folds over short of the charge current `target_a` at its lowest
/// working input (the input floor, or the UVLO off threshold): there it cannot pass its current
/// at any duty, past the fold more duty passes less, and the two fidelities part (the fast one
/// holds the floor past it, the detailed one's loops cycle).
fn fold_note(notes: &mut Vec<String>, plant: &Plant, bs: &BatteryState, target_a: f64) {
    let c = &plant.charger;
    let (v_low, which) = match c.input_floor_v {
        Some(f) => (f, "its input floor"),
        None => (c.uvlo_off_v, "its UVLO off threshold"),
    };
    let bb = &plant.buck_boost;
    let term = plant.battery.static_terminal(bs);
    if let Some((d, i)) = network::bb_fold(bb, &term, v_low).filter(|&(_, i)| i < target_a) {
        notes.push(format!(
            "At {which} ({v_low:.2} V in) the buck-boost passes at most {i:.3} A, short of its {target_a:.3} A, at duty {d:.3} (D_max {:.2}): past that fold more duty passes less current (each switch {:.3} Ω, inductor {:.3} Ω). There the fast and detailed fidelities differ (README, converter topologies); parts with less resistance raise the fold's current.",
            bb.max_duty, bb.switch_resistance_ohm, bb.inductor_resistance_ohm
        ));
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
