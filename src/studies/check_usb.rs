//! `check` figures of a USB port: the crank cadences at which the bus (with the device drawing its
//! current at the start SOC) first reaches the band, the set point and the device's cut-off, the
//! bus at the profile's cadence, and the notes that follow from them. Steady-state network solves
//! only, no simulation.

use serde::Serialize;

use crate::model::battery::li_ion::TempBand;
use crate::model::battery::{BatteryModel, BatteryState};
use crate::model::network::NetworkPoint;
use crate::model::usb::{BusPoint, UsbModel};
use crate::model::usb_network;
use crate::simulate::plant::Plant;
use crate::simulate::transitions::USB_SLEEP_MARGIN_V;

use super::statics::{first_cadence, Statics, MAX_SEARCH_RPM};

/// USB port figures. Cadences are crank cadences, rpm, with the converter running (once UVLO has
/// released it, which `unlock_cadence_rpm` gives); None: not reached below the search limit.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct UsbFigures {
    /// Bus voltage the converter holds, V.
    pub bus_v: f64,
    /// Port current limit, A.
    pub port_current_a: f64,
    /// Regulation band, V.
    pub band_low_v: f64,
    pub band_high_v: f64,
    /// Current the device draws at the start SOC (its input limit, less in its CV taper), A.
    pub device_current_a: f64,
    /// The device lets go of the bus below this, V.
    pub device_cutoff_v: f64,
    /// Crank cadence at which UVLO releases (open circuit reaches `uvlo_on_v`), rpm.
    pub unlock_cadence_rpm: Option<f64>,
    /// Crank cadence from which the bus holds the band's lower edge with the device drawing, rpm.
    pub band_cadence_rpm: Option<f64>,
    /// Crank cadence from which the converter holds the set point (out of dropout), rpm.
    pub setpoint_cadence_rpm: Option<f64>,
    /// Crank cadence from which the bus stays at or above the device's cut-off, rpm.
    pub cutoff_cadence_rpm: Option<f64>,
    /// Converter input over-voltage limit, V, and the cadence at which the open circuit reaches it.
    pub input_limit_v: f64,
    pub input_limit_cadence_rpm: f64,
    /// Bus voltage and current at the profile's first cranking cadence, V and A.
    pub bus_v_at_profile_cadence: Option<f64>,
    pub bus_current_a_at_profile_cadence: Option<f64>,
}

/// The static network of a plant with a USB port: the plant's own, plus the port and the cell.
pub struct UsbStatics<'a> {
    pub(super) statics: &'a Statics<'a>,
    pub plant: &'a Plant,
    pub usb: &'a UsbModel,
    pub cell: BatteryState,
}

impl UsbStatics<'_> {
    /// The running converter and the device asking for `demand_a`: the point (cell side) and the bus.
    pub fn solve(&self, crank_rpm: f64, demand_a: f64) -> (NetworkPoint, BusPoint) {
        let cell = self.plant.battery.terminal(&self.cell);
        usb_network::solve(
            &self.statics.source(crank_rpm),
            &self.statics.converters(),
            self.usb,
            (self.usb.bus_v, self.usb.port_current_a),
            demand_a,
            &cell,
        )
    }

    /// Whether the running converter (input above UVLO off and, for a buck, its headroom over the
    /// bus) gives a bus for which `ok` holds, with the device drawing `demand_a`.
    fn holds(&self, crank_rpm: f64, demand_a: f64, ok: impl Fn(&BusPoint) -> bool) -> bool {
        let (p, bus) = self.solve(crank_rpm, demand_a);
        let c = &self.plant.charger;
        let headroom = !c.sleeps_below_battery || p.input_v >= bus.bus_v + USB_SLEEP_MARGIN_V;
        p.input_v >= c.uvlo_off_v && headroom && ok(&bus)
    }
}

/// The current the device asks for at the start state: its input limit (reduced in a cool band),
/// or what holds its cell at the charge limit if that is less.
pub fn start_demand_a(plant: &Plant, cell: &BatteryState, band: TempBand) -> f64 {
    let fraction = match (&plant.battery, band) {
        (BatteryModel::LiIon(m), TempBand::Cool) => m.window.cool_current_fraction,
        _ => 1.0,
    };
    let limit = plant.battery.charge_limit_v(cell.temp_c);
    let i_cv = plant.battery.current_at_v(limit, cell).max(0.0);
    (plant.charger.charge_current_a * fraction).min(i_cv)
}

/// Computes the USB figures and adds their notes.
pub fn analyse(
    st: &UsbStatics,
    demand_a: f64,
    profile_rpm: Option<f64>,
    highest_rpm: f64,
    notes: &mut Vec<String>,
) -> UsbFigures {
    let u = st.usb;
    let c = &st.plant.charger;
    let unlock = (c.uvlo_on_v > 0.0).then(|| st.statics.cadence_for_emf(c.uvlo_on_v));
    let band = first_cadence(|r| st.holds(r, demand_a, |b| b.bus_v >= u.band_low_v));
    let setpoint = first_cadence(|r| st.holds(r, demand_a, |b| !b.converter_saturated));
    let cutoff = first_cadence(|r| st.holds(r, demand_a, |b| b.bus_v >= u.cutoff_v));
    let limit_cadence = st.statics.cadence_for_emf(c.input_overvoltage_v);
    // The bus at the profile's cadence: nothing while UVLO holds the converter off.
    let at = profile_rpm.map(|r| {
        if st.statics.emf_v(r) >= c.uvlo_on_v {
            st.solve(r, demand_a).1
        } else {
            BusPoint::default()
        }
    });
    let need = |r: Option<f64>| {
        r.map_or_else(
            || format!("no cadence up to {MAX_SEARCH_RPM:.0} rpm"),
            |r| format!("{r:.1} rpm"),
        )
    };
    if let (Some(r), Some(b)) = (profile_rpm, &at) {
        let unlocked = st.statics.emf_v(r) >= c.uvlo_on_v;
        if unlocked && b.bus_v < u.band_low_v {
            notes.push(format!(
                "At the profile's cadence ({r:.0} rpm) the bus sits at {:.2} V with the device drawing {:.3} A, below the {:.2} V band edge; it needs {}.",
                b.bus_v, b.bus_current_a, u.band_low_v, need(band)
            ));
        }
        if unlock.is_some_and(|on| on > r) {
            notes.push(format!(
                "The profile's cadence ({r:.0} rpm) does not unlock the converter (UVLO needs {}).",
                need(unlock)
            ));
        }
    }
    if demand_a > u.port_current_a {
        let cell = st.plant.battery.terminal(&st.cell);
        notes.push(format!(
            "The device asks {demand_a:.2} A but the port gives {:.2} A: the bus falls to about {:.2} V (its cell plus its charger's pass element){}.",
            u.port_current_a,
            u.bus_for_current_v(u.port_current_a, &cell),
            if u.bus_for_current_v(u.port_current_a, &cell) < u.cutoff_v {
                ", below its cut-off: it will connect and cut off again and again"
            } else {
                ""
            }
        ));
    }
    if highest_rpm > 0.0 && highest_rpm >= limit_cadence {
        notes.push(format!(
            "At the profile's highest cadence ({highest_rpm:.0} rpm) the open-circuit voltage reaches the {:.1} V input limit (from {limit_cadence:.1} rpm).",
            c.input_overvoltage_v
        ));
    }
    UsbFigures {
        bus_v: u.bus_v,
        port_current_a: u.port_current_a,
        band_low_v: u.band_low_v,
        band_high_v: u.band_high_v,
        device_current_a: demand_a,
        device_cutoff_v: u.cutoff_v,
        unlock_cadence_rpm: unlock,
        band_cadence_rpm: band,
        setpoint_cadence_rpm: setpoint,
        cutoff_cadence_rpm: cutoff,
        input_limit_v: c.input_overvoltage_v,
        input_limit_cadence_rpm: limit_cadence,
        bus_v_at_profile_cadence: at.map(|b| b.bus_v),
        bus_current_a_at_profile_cadence: at.map(|b| b.bus_current_a),
    }
}

/// The lines of the "Crank cadences" table for a USB port.
pub fn cadence_lines(
    u: &UsbFigures,
    opt_rpm: impl Fn(Option<f64>) -> String,
) -> Vec<(String, String)> {
    let mut lines = Vec::new();
    if let Some(r) = u.unlock_cadence_rpm {
        lines.push((
            "converter unlocks (UVLO on, open circuit)".to_string(),
            format!("{r:.1} rpm"),
        ));
    }
    lines.push((
        format!(
            "bus holds {:.2} V (band edge) at {:.3} A",
            u.band_low_v, u.device_current_a
        ),
        opt_rpm(u.band_cadence_rpm),
    ));
    lines.push((
        format!(
            "bus holds its {:.2} V set point at {:.3} A",
            u.bus_v, u.device_current_a
        ),
        opt_rpm(u.setpoint_cadence_rpm),
    ));
    lines.push((
        format!(
            "bus stays above the device's {:.2} V cut-off",
            u.device_cutoff_v
        ),
        opt_rpm(u.cutoff_cadence_rpm),
    ));
    lines.push((
        format!(
            "open circuit reaches the {:.1} V input limit",
            u.input_limit_v
        ),
        format!("{:.1} rpm", u.input_limit_cadence_rpm),
    ));
    lines
}
