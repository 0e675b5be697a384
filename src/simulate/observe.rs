//! Watched conditions (no mode change): each is a small code per point; a change of code closes
//! one run and may open another. The engine locates each change inside its step. Conditions
//! with a threshold on a continuous quantity open when it is crossed and close only once the
//! quantity is back by the setup's hysteresis (a Schmitt trigger), so a quantity resting on its
//! threshold cannot chatter. The runs are raw: `analysis::episodes` turns them into rows.

use crate::analysis::events::{Event, EventKind, OUT_OF_BAND_DETAIL};
use crate::model::battery::li_ion::TempBand;
use crate::model::battery::BatteryModel;
use crate::scenario::setup::Topology;

use super::plant::{Discrete, Plant, Point, Stage};
use super::state::*;
use super::transitions::SLEEP_HYSTERESIS_V;
use super::usb_rules::device_cut_off;

/// The watched conditions, in a fixed order.
pub const WATCHED: [EventKind; 13] = [
    EventKind::RegulationLoss,
    EventKind::Lockout,
    EventKind::Overcharge,
    EventKind::InputOvervoltage,
    EventKind::BatteryOvertemp,
    EventKind::ChargeTempWindow,
    EventKind::OperatorOverload,
    EventKind::DeviceCutoff,
    EventKind::ChargeComplete,
    EventKind::ModelRange,
    EventKind::ThermalFoldback,
    EventKind::MissedEndOfCharge,
    EventKind::TemperatureRise,
];

/// Codes of every watched condition at one point (0 = not present).
pub type Codes = [u8; WATCHED.len()];

/// Regulation-loss causes that have a row kind of their own (the converter locked out or shut
/// down: `lockout` or `input_overvoltage`; a USB device cut off: `device_cutoff`). Their time
/// still counts against regulation, but they are not written a second time.
pub const REGULATION_CAUSES_COUNTED_ONLY: [u8; 2] = [2, 6];
/// The regulation-loss cause of a USB bus outside its band while the device draws.
pub const USB_OUT_OF_BAND: u8 = 5;

/// Why regulation is lost while the operator cranks: 0 held (or not cranking, or no converter),
/// 1 dropout (duty at its limit or the pass element out of headroom), 2 locked out or shut down,
/// 3 restarting (soft-start ramp), 4 another reason; with a USB port 5 the bus outside its band
/// while the device draws and 6 the device cut off; 7 the current trimmed (or the charger idle)
/// to hold the input floor. Each reason is a run of its own, so events.csv says which.
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
    } else if p.net.floor_limited {
        7
    } else {
        // Not regulating for a reason none of the above names (kept apart, never hidden).
        4
    }
}

/// Whether a quantity is past its threshold, with hysteresis: `open` runs stay open until the
/// quantity is back by `hysteresis` (same unit); `above` says which side is past.
fn past(value: f64, threshold: f64, hysteresis: f64, above: bool, open: bool) -> bool {
    let edge = match (above, open) {
        (true, true) => threshold - hysteresis,
        (true, false) => threshold,
        (false, true) => threshold + hysteresis,
        (false, false) => threshold,
    };
    if above {
        value > edge
    } else {
        value < edge
    }
}

/// Overcharge threshold of the battery terminal at a point: the charge limit in force plus the
/// tolerance per series cell, V.
pub fn overcharge_threshold_v(plant: &Plant, p: &Point) -> f64 {
    p.charge_limit_v + overcharge_tolerance_v(plant)
}

/// The overcharge tolerance of the whole battery, V (per-cell tolerance × series cells).
pub fn overcharge_tolerance_v(plant: &Plant) -> f64 {
    plant.alerts.overcharge.tolerance_v_per_cell * plant.battery.series_cells()
}

/// Evaluates every watched condition at a point; `open` holds the codes of the runs open now
/// (the hysteresis of each condition depends on them).
pub fn codes(plant: &Plant, p: &Point, y: &State, d: &Discrete, open: &Codes) -> Codes {
    let conv = plant.has_converter();
    let a = &plant.alerts;
    let band_code = match p.band {
        TempBand::Standard => 0,
        TempBand::TooCold => 1,
        TempBand::Cool => 2,
        TempBand::Warm => 3,
        TempBand::TooHot => 4,
    };
    let w0 = plant.operator.w_prime_j;
    let cells = plant.battery.series_cells();
    let o = &a.overcharge;
    [
        regulation_code(plant, conv, p, d),
        u8::from(conv && p.cranking && !d.enabled),
        u8::from(past(
            p.net.battery_v,
            overcharge_threshold_v(plant, p),
            o.hysteresis_v_per_cell * cells,
            true,
            open[2] != 0,
        )),
        u8::from(
            conv && past(
                p.net.input_v,
                plant.charger.input_overvoltage_v,
                a.input_overvoltage.hysteresis_v,
                true,
                open[3] != 0,
            ),
        ),
        u8::from(past(
            y[BATTERY_TEMP],
            a.battery_overtemp.threshold_c,
            a.battery_overtemp.hysteresis_k,
            true,
            open[4] != 0,
        )),
        if plant.battery_is_lithium() {
            band_code
        } else {
            0
        },
        u8::from(
            w0 > 0.0
                && past(
                    y[W_PRIME],
                    a.operator_overload.reserve_fraction * w0,
                    a.operator_overload.hysteresis_fraction * w0,
                    false,
                    open[6] != 0,
                ),
        ),
        device_cutoff_code(plant, d),
        if matches!(d.stage, Stage::Done | Stage::Trickle) {
            d.end_cause.max(1)
        } else {
            0
        },
        u8::from(
            plant
                .battery
                .fit_limit_a()
                .is_some_and(|limit| p.net.battery_current_a > limit),
        ),
        u8::from(conv && d.enabled && !d.ov_shutdown && plant.foldback(y) < 1.0),
        u8::from(
            full_cell_watched(plant)
                && d.stage == Stage::Charging
                && p.net.battery_current_a > full_cell_current_a(plant)
                && past(
                    stored_fraction(plant, p, y),
                    a.missed_end_of_charge.stored_fraction,
                    a.missed_end_of_charge.hysteresis_fraction,
                    false,
                    open[11] != 0,
                ),
        ),
        u8::from(past(
            60.0 * plant.battery_temp_rate(p, y),
            a.temperature_rise.threshold_c_per_min,
            a.temperature_rise.hysteresis_c_per_min,
            true,
            open[12] != 0,
        )),
    ]
}

/// Whether a full cell still charged is watched (`missed_end_of_charge`): NiMH, whose charger
/// must end on −ΔV or dT/dt, and Li-ion and supercapacitor cells, whose model stores nothing
/// past full and turns the rest of the current into heat while a real cell is driven past its
/// voltage limit. Lead-acid has its own gassing branch, whose voltage the overcharge alert sees.
fn full_cell_watched(plant: &Plant) -> bool {
    plant.usb.is_none()
        && matches!(
            plant.battery,
            BatteryModel::Nimh(_) | BatteryModel::LiIon(_) | BatteryModel::Supercap(_)
        )
}

/// Charge current above which a full cell counts as still charged, A: the rule's C-rate (a
/// sealed nickel cell recombines the oxygen of up to C/10) or the charger's termination current
/// (where a CC/CV charger ends), whichever is higher.
fn full_cell_current_a(plant: &Plant) -> f64 {
    (plant.alerts.missed_end_of_charge.min_c_rate * plant.battery.capacity_ah())
        .max(plant.charger.termination_current_a)
}

/// The fraction of a charging current the battery stores (1 when it does not charge).
pub fn stored_fraction(plant: &Plant, p: &Point, y: &State) -> f64 {
    plant
        .battery
        .charge_efficiency(p.net.battery_current_a, &Plant::battery_state(y))
}

/// A device cut off the bus, until it reconnects (cranking or not: the row's length is the time
/// the device stayed off). The code alternates with each cut-off (1, 2, 1 …), so that a
/// reconnection that fails at once still closes one run and opens the next.
fn device_cutoff_code(plant: &Plant, d: &Discrete) -> u8 {
    if plant.usb.is_some() && device_cut_off(d) {
        1 + (d.device_cutoffs % 2) as u8
    } else {
        0
    }
}

/// What a run measures at one point: the quantity, its unit, its value, the threshold in force
/// and whether past the threshold means above it.
#[derive(Debug, Clone, Copy)]
struct Reading {
    quantity: &'static str,
    unit: &'static str,
    value: f64,
    threshold: f64,
    above: bool,
}

impl Reading {
    fn of(quantity: &'static str, unit: &'static str, value: f64, threshold: f64) -> Self {
        Self {
            quantity,
            unit,
            value,
            threshold,
            above: true,
        }
    }

    fn below(self) -> Self {
        Self {
            above: false,
            ..self
        }
    }

    /// How far past the threshold the value lies (positive when past it).
    fn excess(&self) -> f64 {
        if self.above {
            self.value - self.threshold
        } else {
            self.threshold - self.value
        }
    }
}

/// Input voltage at which the charger would hold its target at this point, V.
fn regulation_input_v(plant: &Plant, p: &Point, d: &Discrete) -> f64 {
    plant
        .converters(d)
        .regulation_input_v(p.net.battery_v, p.target_current_a.max(0.0))
}

/// Input voltage the charger needs before it restarts: its UVLO on-threshold, and for a charger
/// that sleeps below its battery the battery plus the wake-up margin, V.
fn restart_input_v(plant: &Plant, p: &Point) -> f64 {
    let c = &plant.charger;
    if c.sleeps_below_battery {
        c.uvlo_on_v.max(p.net.battery_v + SLEEP_HYSTERESIS_V)
    } else {
        c.uvlo_on_v
    }
}

/// The reading a run of `kind` with cause `code` takes at a point.
fn reading(
    kind: EventKind,
    code: u8,
    plant: &Plant,
    p: &Point,
    y: &State,
    d: &Discrete,
) -> Reading {
    let bus = |threshold| Reading::of("bus_v", "V", p.bus.bus_v, threshold);
    let input = |threshold| Reading::of("input_v", "V", p.net.input_v, threshold);
    let temp = |threshold| Reading::of("battery_temp_c", "degC", y[BATTERY_TEMP], threshold);
    match kind {
        EventKind::RegulationLoss => match (&plant.usb, code) {
            (Some(u), 5) if p.bus.bus_v > u.band_high_v => bus(u.band_high_v),
            (Some(u), 5) => bus(u.band_low_v).below(),
            (Some(u), 6) => bus(u.cutoff_v).below(),
            (_, 2) => input(restart_input_v(plant, p)).below(),
            (_, 7) => input(plant.charger.input_floor_v.unwrap_or(f64::NAN)).below(),
            _ => input(regulation_input_v(plant, p, d)).below(),
        },
        EventKind::Lockout => input(restart_input_v(plant, p)).below(),
        EventKind::Overcharge => Reading::of(
            "battery_v",
            "V",
            p.net.battery_v,
            overcharge_threshold_v(plant, p),
        ),
        EventKind::InputOvervoltage => input(plant.charger.input_overvoltage_v),
        EventKind::BatteryOvertemp => temp(plant.alerts.battery_overtemp.threshold_c),
        EventKind::ChargeTempWindow => match (&plant.battery, code) {
            (BatteryModel::LiIon(m), 1) => temp(m.window.min_c).below(),
            (BatteryModel::LiIon(m), 2) => temp(m.window.cool_c).below(),
            (BatteryModel::LiIon(m), 3) => temp(m.window.warm_c),
            (BatteryModel::LiIon(m), _) => temp(m.window.max_c),
            _ => temp(f64::NAN),
        },
        EventKind::OperatorOverload => Reading::of(
            "w_prime_balance_j",
            "J",
            y[W_PRIME],
            plant.alerts.operator_overload.reserve_fraction * plant.operator.w_prime_j,
        )
        .below(),
        EventKind::DeviceCutoff => match &plant.usb {
            Some(u) => bus(u.cutoff_v).below(),
            None => bus(f64::NAN),
        },
        EventKind::ChargeComplete => match code {
            2 => Reading::of(
                "battery_v",
                "V",
                p.net.battery_v,
                d.peak_v - plant.charger.end_drop_v,
            )
            .below(),
            3 => Reading::of(
                "battery_temp_rate_c_per_min",
                "degC/min",
                60.0 * plant.battery_temp_rate(p, y),
                60.0 * plant.charger.end_rise_k_per_s,
            ),
            _ => Reading::of(
                "battery_current_a",
                "A",
                p.net.battery_current_a,
                plant.charger.termination_current_a,
            )
            .below(),
        },
        EventKind::MissedEndOfCharge => Reading::of(
            "stored_fraction",
            "1",
            stored_fraction(plant, p, y),
            plant.alerts.missed_end_of_charge.stored_fraction,
        )
        .below(),
        EventKind::TemperatureRise => Reading::of(
            "battery_temp_rate_c_per_min",
            "degC/min",
            60.0 * plant.battery_temp_rate(p, y),
            plant.alerts.temperature_rise.threshold_c_per_min,
        ),
        EventKind::ModelRange => Reading::of(
            "battery_current_a",
            "A",
            p.net.battery_current_a,
            plant.battery.fit_limit_a().unwrap_or(f64::NAN),
        ),
        EventKind::ThermalFoldback => Reading::of(
            "junction_temp_c",
            "degC",
            y[JUNCTION_TEMP],
            plant.linear.thermal.foldback_c,
        ),
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
                    "bus below the device's {:.2} V cut-off; it reconnects once the bus is back at {:.2} V, at least {:.1} s later",
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
            7 => format!(
                "input held at its {:.2} V floor: charge current trimmed below the set point",
                plant.charger.input_floor_v.unwrap_or(f64::NAN)
            ),
            _ => "converter not holding its set point".to_string(),
        },
        EventKind::Lockout => {
            let c = &plant.charger;
            let wake_v = p.net.battery_v + SLEEP_HYSTERESIS_V;
            if c.sleeps_below_battery && wake_v > c.uvlo_on_v && p.idle_input_v < wake_v {
                format!(
                    "input below the battery: the charger sleeps until it is {SLEEP_HYSTERESIS_V:.2} V above it (UVLO on {:.2} V, off {:.2} V)",
                    c.uvlo_on_v, c.uvlo_off_v
                )
            } else {
                format!(
                    "input below UVLO (on {:.2} V, off {:.2} V)",
                    c.uvlo_on_v, c.uvlo_off_v
                )
            }
        }
        EventKind::Overcharge => format!(
            "battery above its charge limit {:.3} V plus the {:.3} V/cell tolerance",
            p.charge_limit_v, plant.alerts.overcharge.tolerance_v_per_cell
        ),
        EventKind::InputOvervoltage => {
            let action = if plant.charger.overvoltage_shutdown {
                "converter shut down"
            } else {
                "converter keeps running"
            };
            format!(
                "input above {:.1} V ({action})",
                plant.charger.input_overvoltage_v
            )
        }
        EventKind::BatteryOvertemp => format!(
            "battery above {:.1} degC",
            plant.alerts.battery_overtemp.threshold_c
        ),
        EventKind::ChargeTempWindow => match code {
            1 => "below the charge window: charging refused".to_string(),
            2 => "cool band: charge current reduced".to_string(),
            3 => "warm band: CV voltage reduced".to_string(),
            _ => "above the charge window: charging refused".to_string(),
        },
        EventKind::OperatorOverload => format!(
            "operator reserve W' below {:.0} % (sustainable power only)",
            100.0 * plant.alerts.operator_overload.reserve_fraction
        ),
        EventKind::ChargeComplete => match code {
            2 => format!(
                "pack voltage fell {:.1} mV/cell below its peak (-dV): fast charge ended, trickle at {:.3} A",
                1e3 * plant.charger.end_drop_v / plant.battery.series_cells(),
                plant.charger.trickle_current_a
            ),
            3 => format!(
                "pack temperature rose faster than {:.2} degC/min (dT/dt): fast charge ended, trickle at {:.3} A",
                60.0 * plant.charger.end_rise_k_per_s,
                plant.charger.trickle_current_a
            ),
            _ => "CV current fell below the termination current: charge terminated".to_string(),
        },
        EventKind::MissedEndOfCharge => match &plant.battery {
            BatteryModel::Nimh(_) => format!(
                "pack full and still fast-charged: it stores less than {:.0} % of the current (the rest evolves oxygen, recombined as heat); the -dV or dT/dt end did not come",
                100.0 * plant.alerts.missed_end_of_charge.stored_fraction
            ),
            _ => format!(
                "full and still charged above {:.3} A: it stores less than {:.0} % of the current; the model turns the rest into heat, a real cell is driven past its voltage limit",
                full_cell_current_a(plant),
                100.0 * plant.alerts.missed_end_of_charge.stored_fraction
            ),
        },
        EventKind::TemperatureRise => format!(
            "battery temperature rising faster than {:.2} degC/min",
            plant.alerts.temperature_rise.threshold_c_per_min
        ),
        EventKind::DeviceCutoff => "device cut off".to_string(),
        EventKind::ModelRange => format!(
            "charge current above {:.2} A (1.5·I10): the lead-acid charge laws are extrapolated, the gas branch holds the voltage",
            plant.battery.fit_limit_a().unwrap_or(f64::INFINITY)
        ),
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

/// An open run being tracked.
#[derive(Debug, Clone)]
struct Open {
    code: u8,
    start_s: f64,
    /// The reading where the quantity lay furthest past its threshold so far.
    worst: Reading,
    detail: String,
}

/// Tracks all watched conditions through a session and produces their runs.
#[derive(Debug, Clone, Default)]
pub struct Observer {
    open: Vec<Option<Open>>,
    pub runs: Vec<Event>,
}

impl Observer {
    /// A fresh observer with nothing open.
    pub fn new() -> Self {
        Self {
            open: vec![None; WATCHED.len()],
            runs: Vec::new(),
        }
    }

    /// Updates the worst readings of open runs with a point inside them.
    pub fn touch(&mut self, plant: &Plant, p: &Point, y: &State, d: &Discrete) {
        for (k, slot) in self.open.iter_mut().enumerate() {
            if let Some(o) = slot {
                let r = reading(WATCHED[k], o.code, plant, p, y, d);
                // A finite reading also replaces a NaN one.
                if r.excess() > o.worst.excess() || o.worst.excess().is_nan() {
                    o.worst = r;
                }
            }
        }
    }

    /// Applies the codes at time `t` (the located change time or a step end).
    pub fn set(
        &mut self,
        t: f64,
        codes: &Codes,
        plant: &Plant,
        (p, y, d): (&Point, &State, &Discrete),
    ) {
        for (k, &code) in codes.iter().enumerate() {
            let current = self.open[k].as_ref().map_or(0, |o| o.code);
            if current == code {
                continue;
            }
            if let Some(o) = self.open[k].take() {
                self.close(k, o, t);
            }
            if code != 0 {
                self.open[k] = Some(Open {
                    code,
                    start_s: t,
                    worst: reading(WATCHED[k], code, plant, p, y, d),
                    detail: detail_of(WATCHED[k], code, p, plant),
                });
            }
        }
    }

    /// Current codes of the open runs.
    pub fn current(&self) -> Codes {
        let mut c = [0u8; WATCHED.len()];
        for (k, o) in self.open.iter().enumerate() {
            c[k] = o.as_ref().map_or(0, |o| o.code);
        }
        c
    }

    fn close(&mut self, k: usize, o: Open, t: f64) {
        self.runs.push(Event {
            kind: WATCHED[k],
            start_s: o.start_s,
            end_s: t,
            duration_s: t - o.start_s,
            quantity: o.worst.quantity,
            unit: o.worst.unit,
            threshold: o.worst.threshold,
            worst: o.worst.value,
            affects_verdict: false,
            detail: o.detail,
            cause: o.code,
            above: o.worst.above,
        });
    }

    /// Closes every open run at the session end and returns the runs sorted by start time.
    pub fn finish(mut self, t_end: f64) -> Vec<Event> {
        for k in 0..self.open.len() {
            if let Some(o) = self.open[k].take() {
                self.close(k, o, t_end);
            }
        }
        let mut ev = self.runs;
        ev.sort_by(|a, b| a.start_s.total_cmp(&b.start_s).then(a.kind.cmp(&b.kind)));
        ev
    }
}
