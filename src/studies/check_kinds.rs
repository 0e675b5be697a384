//! Figures `check` reports for some generator and storage kinds only: a three-phase
//! alternator on its bridge, a supercapacitor bank's energy and a NiMH charger's end of charge,
//! with the remarks each brings.

use serde::Serialize;

use crate::model::battery::BatteryModel;
use crate::scenario::setup::Topology;
use crate::simulate::plant::Plant;
use crate::units::rpm_to_rad_s;

use super::statics::Statics;

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

/// A three-phase alternator's figures at the profile's operating point, given as the
/// generator's speed (rpm) and current (A) there (None for a DC machine).
pub fn alternator_figures(
    st: &Statics,
    setup: &crate::scenario::setup::Setup,
    at: Option<(f64, f64)>,
) -> Option<AlternatorFigures> {
    let g = &st.plant.generator;
    let a = g.alternator?;
    let omega = at.map(|(rpm, _)| rpm_to_rad_s(rpm));
    let x = at.and_then(|(_, current_a)| {
        g.short_circuit_a(st.ke_v_s_per_rad)
            .map(|isc| current_a / isc * crate::model::bridge::SHORT_CIRCUIT)
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
pub fn supercap_figures(plant: &Plant, soc_start: f64) -> Option<SupercapFigures> {
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
pub fn nimh_figures(plant: &Plant) -> Option<NimhFigures> {
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
pub fn storage_notes(plant: &Plant, notes: &mut Vec<String>) {
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
