//! Watched conditions (no mode change): each is a small code per point; a change of code closes
//! one period and may open another. The engine locates each change inside its step.

use crate::analysis::events::{Event, EventKind, OUT_OF_BAND_DETAIL};
use crate::model::battery::li_ion::TempBand;
use crate::scenario::setup::Topology;

use super::plant::{Discrete, Plant, Point};
use super::state::*;
use super::usb_port::device_cut_off;

/// Voltage margin above the charge limit before an overcharge counts, V (below CSV precision).
pub const OVERCHARGE_MARGIN_V: f64 = 1e-6;

/// The watched conditions, in a fixed order.
pub const WATCHED: [EventKind; 9] = [
    EventKind::RegulationLoss,
    EventKind::Lockout,
    EventKind::Overcharge,
    EventKind::InputOvervoltage,
    EventKind::BatteryOvertemp,
    EventKind::ChargeTempWindow,
    EventKind::OperatorOverload,
    EventKind::DeviceCutoff,
    EventKind::ThermalFoldback,
];

/// Codes of every watched condition at one point (0 = not present).
pub type Codes = [u8; WATCHED.len()];

/// Why regulation is lost while the operator cranks: 0 held (or not cranking, or no converter),
/// 1 dropout (duty at its limit or the pass element out of headroom), 2 locked out or shut down,
/// 3 restarting (soft-start ramp), 4 another reason; with a USB port 5 the bus outside its band
/// while the device draws and 6 the device cut off. Each reason is a period of its own, so
/// events.csv says which.
fn regulation_code(plant: &Plant, conv: bool, p: &Point, d: &Discrete) -> u8 {
    if !conv || !p.cranking || p.in_regulation {
        0
    } else if !d.enabled || d.ov_shutdown {
        2
    } else if plant.usb.is_some() {
        if device_cut_off(d) {
            6
        } else {
            5
        }
    } else if p.net.dropout {
        1
    } else if p.restarting {
        3
    } else {
        // Not regulating for a reason none of the above names (kept apart, never hidden).
        4
    }
}

/// Evaluates every watched condition at a point.
pub fn codes(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> Codes {
    let conv = plant.has_converter();
    let band_code = match p.band {
        TempBand::Standard => 0,
        TempBand::TooCold => 1,
        TempBand::Cool => 2,
        TempBand::Warm => 3,
        TempBand::TooHot => 4,
    };
    let w0 = plant.operator.w_prime_j;
    [
        regulation_code(plant, conv, p, d),
        u8::from(conv && p.cranking && !d.enabled),
        u8::from(p.net.battery_v > p.charge_limit_v + OVERCHARGE_MARGIN_V),
        u8::from(conv && p.net.input_v > plant.charger.input_overvoltage_v),
        u8::from(y[BATTERY_TEMP] > plant.alerts.battery_overtemp_c),
        if plant.battery_is_lithium() {
            band_code
        } else {
            0
        },
        u8::from(w0 > 0.0 && y[W_PRIME] < plant.alerts.operator_reserve_fraction * w0),
        device_cutoff_code(plant, p, d),
        u8::from(conv && d.enabled && !d.ov_shutdown && plant.foldback(y) < 1.0),
    ]
}

/// A device cut off while the operator cranks. The code alternates with each cut-off (1, 2, 1 …),
/// so that a reconnection that fails at once still closes one period and opens the next.
fn device_cutoff_code(plant: &Plant, p: &Point, d: &Discrete) -> u8 {
    if plant.usb.is_some() && p.cranking && device_cut_off(d) {
        1 + (d.device_cutoffs % 2) as u8
    } else {
        0
    }
}

/// The value a period reports as its peak, and its unit.
fn peak_of(kind: EventKind, p: &Point, y: &State) -> (f64, &'static str, bool) {
    // (value, unit, larger-is-worse)
    match kind {
        EventKind::RegulationLoss if p.bus.usb => (p.bus.bus_v, "V", false),
        EventKind::DeviceCutoff => (p.bus.bus_v, "V", false),
        EventKind::RegulationLoss | EventKind::Lockout => (p.net.input_v, "V", false),
        EventKind::Overcharge => (p.net.battery_v, "V", true),
        EventKind::InputOvervoltage => (p.net.input_v, "V", true),
        EventKind::BatteryOvertemp | EventKind::ChargeTempWindow => (y[BATTERY_TEMP], "degC", true),
        EventKind::OperatorOverload => (p.operator_mean_power_w, "W", true),
        EventKind::ChargeComplete => (p.net.battery_current_a, "A", false),
        EventKind::ThermalFoldback => (y[JUNCTION_TEMP], "degC", true),
    }
}

fn detail_of(kind: EventKind, code: u8, p: &Point, plant: &Plant) -> String {
    if let Some(u) = &plant.usb {
        match (kind, code) {
            (EventKind::RegulationLoss, 5) => {
                let why = if p.bus.bus_v > u.band_high_v {
                    format!("above it; set point {:.2} V", u.bus_v)
                } else if p.bus.converter_saturated {
                    "duty at its limit: input too low to hold the bus".to_string()
                } else if p.bus.bus_current_a + 1e-9 >= u.port_current_a {
                    format!("port current limit {:.2} A reached", u.port_current_a)
                } else {
                    format!("set point {:.2} V", u.bus_v)
                };
                return format!(
                    "{OUT_OF_BAND_DETAIL} {:.2}–{:.2} V while the device draws ({why})",
                    u.band_low_v, u.band_high_v
                );
            }
            (EventKind::RegulationLoss, 6) => {
                return format!(
                    "device cut off: the bus fell below its {:.2} V cut-off",
                    u.cutoff_v
                );
            }
            (EventKind::DeviceCutoff, _) => {
                return format!(
                    "bus below the device's {:.2} V cut-off; it reconnects at {:.2} V after {:.1} s",
                    u.cutoff_v, u.reconnect_v, u.reconnect_delay_s
                );
            }
            _ => {}
        }
    }
    match kind {
        EventKind::RegulationLoss => match code {
            1 => match plant.charger.topology {
                Topology::Linear => format!(
                    "input short of the {:.2} V headroom the pass element needs",
                    plant.linear.dropout_v
                ),
                Topology::BuckBoost => format!(
                    "duty at its limit {:.2}: input too low for the charge current",
                    plant.buck_boost.max_duty
                ),
                _ => format!(
                    "duty at its limit {:.2}: input too low for the charge current",
                    plant.buck.max_duty
                ),
            },
            2 => "converter locked out or shut down while cranking".to_string(),
            3 => "converter restarting: soft-start ramp below the set point".to_string(),
            _ => "converter not holding its set point".to_string(),
        },
        EventKind::Lockout => format!(
            "input below UVLO (on {:.2} V, off {:.2} V)",
            plant.charger.uvlo_on_v, plant.charger.uvlo_off_v
        ),
        EventKind::Overcharge => {
            format!("battery above its charge limit {:.3} V", p.charge_limit_v)
        }
        EventKind::InputOvervoltage => {
            format!("input above {:.1} V", plant.charger.input_overvoltage_v)
        }
        EventKind::BatteryOvertemp => {
            format!("battery above {:.1} degC", plant.alerts.battery_overtemp_c)
        }
        EventKind::ChargeTempWindow => match code {
            1 => "below the charge window: charging refused".to_string(),
            2 => "cool band: charge current reduced".to_string(),
            3 => "warm band: CV voltage reduced".to_string(),
            _ => "above the charge window: charging refused".to_string(),
        },
        EventKind::OperatorOverload => format!(
            "operator reserve W' below {:.0} % (sustainable power only)",
            100.0 * plant.alerts.operator_reserve_fraction
        ),
        EventKind::ChargeComplete => "charge terminated".to_string(),
        EventKind::DeviceCutoff => "device cut off".to_string(),
        EventKind::ThermalFoldback => {
            let t = &plant.linear.thermal;
            format!(
                "pass element junction above {:.0} degC: charge current folded back (to zero at \
                 {:.0} degC)",
                t.foldback_c, t.shutdown_c
            )
        }
    }
}

/// An open period being tracked.
#[derive(Debug, Clone)]
struct Open {
    code: u8,
    start_s: f64,
    peak: f64,
    unit: &'static str,
    detail: String,
}

/// Tracks all watched conditions through a session and produces the event rows.
#[derive(Debug, Clone, Default)]
pub struct Observer {
    open: Vec<Option<Open>>,
    pub events: Vec<Event>,
}

impl Observer {
    /// A fresh observer with nothing open.
    pub fn new() -> Self {
        Self {
            open: vec![None; WATCHED.len()],
            events: Vec::new(),
        }
    }

    /// Updates peaks of open periods with a point inside them.
    pub fn touch(&mut self, p: &Point, y: &State) {
        for (k, slot) in self.open.iter_mut().enumerate() {
            if let Some(o) = slot {
                let (v, _, larger) = peak_of(WATCHED[k], p, y);
                if (larger && v > o.peak) || (!larger && v < o.peak) {
                    o.peak = v;
                }
            }
        }
    }

    /// Applies the codes at time `t` (the located change time or a step end).
    pub fn set(&mut self, t: f64, codes: &Codes, plant: &Plant, p: &Point, y: &State) {
        for (k, &code) in codes.iter().enumerate() {
            let current = self.open[k].as_ref().map_or(0, |o| o.code);
            if current == code {
                continue;
            }
            if let Some(o) = self.open[k].take() {
                self.close(k, o, t);
            }
            if code != 0 {
                let (v, unit, _) = peak_of(WATCHED[k], p, y);
                self.open[k] = Some(Open {
                    code,
                    start_s: t,
                    peak: v,
                    unit,
                    detail: detail_of(WATCHED[k], code, p, plant),
                });
            }
        }
    }

    /// Current codes of the open periods.
    pub fn current(&self) -> Codes {
        let mut c = [0u8; WATCHED.len()];
        for (k, o) in self.open.iter().enumerate() {
            c[k] = o.as_ref().map_or(0, |o| o.code);
        }
        c
    }

    fn close(&mut self, k: usize, o: Open, t: f64) {
        self.events.push(Event {
            kind: WATCHED[k],
            start_s: o.start_s,
            end_s: t,
            duration_s: t - o.start_s,
            peak: o.peak,
            unit: o.unit.to_string(),
            detail: o.detail,
        });
    }

    /// Closes every open period at the session end and returns the events sorted by start time.
    pub fn finish(mut self, t_end: f64) -> Vec<Event> {
        for k in 0..self.open.len() {
            if let Some(o) = self.open[k].take() {
                self.close(k, o, t_end);
            }
        }
        let mut ev = self.events;
        ev.sort_by(|a, b| a.start_s.total_cmp(&b.start_s).then(a.kind.cmp(&b.kind)));
        ev
    }

    /// Records an instant (e.g. charge complete).
    pub fn instant(&mut self, kind: EventKind, t: f64, peak: f64, unit: &str, detail: &str) {
        self.events.push(Event {
            kind,
            start_s: t,
            end_s: t,
            duration_s: 0.0,
            peak,
            unit: unit.to_string(),
            detail: detail.to_string(),
        });
    }
}
