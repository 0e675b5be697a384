//! Mode changes (discrete events): which become due at a point, and what they change.

use crate::model::battery::BatteryModel;

use super::plant::{
    Discrete, Plant, Point, Stage, OV_RELEASE_FRACTION, PEAK_RESOLUTION_V_PER_CELL,
};
use super::state::*;

/// Margin by which the input must exceed the battery before the charger wakes from sleep, V.
pub const SLEEP_HYSTERESIS_V: f64 = 0.1;

/// A discrete change of mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Transition {
    /// UVLO releases: the converter starts (soft-start from zero).
    Enable,
    /// Input fell below the UVLO off threshold, or below the battery (sleep).
    Disable,
    /// Input above its limit with shutdown configured.
    OvShutdown,
    /// EMF back below the release level after an over-voltage shutdown.
    OvRelease,
    /// Soft-start ramp complete.
    SoftDone,
    /// Li-ion: CV current below the termination current.
    Terminate,
    /// Lead-acid: absorption voltage reached.
    ToAbsorption,
    /// Lead-acid: absorption complete (current or time criterion).
    ToFloat,
    /// Li-ion charge-temperature band changed.
    Band,
    /// Freewheel: belt torque reversed, the shaft overruns.
    Disengage,
    /// Freewheel: crank caught up with the shaft.
    Engage,
    /// USB port: the bus fell below the device's cut-off; the device lets go of it.
    DeviceCutoff,
    /// USB port: the running converter's bus is back at the device's reconnect voltage and the
    /// device has been off for its delay: it attaches again.
    DeviceReconnect,
    /// Buck-boost: the buck duty it needs fell low enough to run as a buck.
    ToBuckMode,
    /// Buck-boost in buck mode: the buck duty rose past its limit; both switches switch again.
    ToBuckBoostMode,
    /// NiMH: the pack voltage passed the stored peak by the charger's resolution; it stores
    /// the new one.
    NewPeak,
    /// NiMH: the pack voltage fell the set drop below its stored peak (−ΔV): the fast charge
    /// ends, the trickle begins.
    EndOnVoltageDrop,
    /// NiMH: the pack temperature rose faster than the set rate (dT/dt): the fast charge ends.
    EndOnTemperatureRise,
}

/// Hysteresis of the buck-boost's mode change, in buck duty.
pub const BUCK_MODE_HYSTERESIS: f64 = 0.05;

/// The first transition due at point `p` in mode `d`, if any.
pub fn due(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> Option<Transition> {
    if let Some(tr) = device_due(plant, p, d) {
        return Some(tr);
    }
    if plant.has_converter() {
        let c = &plant.charger;
        if d.ov_shutdown {
            if p.emf_v < OV_RELEASE_FRACTION * c.input_overvoltage_v {
                return Some(Transition::OvRelease);
            }
        } else if d.enabled {
            if c.overvoltage_shutdown && p.net.input_v > c.input_overvoltage_v {
                return Some(Transition::OvShutdown);
            }
            // UVLO, or sleep: an input below the battery (plus a buck's switch drop) cannot
            // charge it.
            if input_too_low(plant, p) || usb_sleeps(plant, p, 0.0) {
                return Some(Transition::Disable);
            }
            if !d.soft_done && y[SOFT_START] >= 1.0 {
                return Some(Transition::SoftDone);
            }
            if let Some(tr) = buck_mode_due(plant, p, y, d) {
                return Some(tr);
            }
            let regulating = p.cv_active && !p.net.dropout && d.soft_done;
            if let Some(tr) = nimh_end_due(plant, p, y, d) {
                return Some(tr);
            }
            match (&plant.battery, d.stage) {
                (BatteryModel::LiIon(_) | BatteryModel::Supercap(_), Stage::Charging)
                    if regulating && p.net.battery_current_a < c.termination_current_a =>
                {
                    return Some(Transition::Terminate);
                }
                (BatteryModel::LeadAcid(_), Stage::Charging) if regulating => {
                    return Some(Transition::ToAbsorption);
                }
                (BatteryModel::LeadAcid(_), Stage::Absorption) => {
                    let timed_out = p.t - d.absorption_since_s >= c.absorption_max_s;
                    if timed_out
                        || (regulating && p.net.battery_current_a < c.absorption_exit_current_a)
                    {
                        return Some(Transition::ToFloat);
                    }
                }
                _ => {}
            }
        } else if p.idle_input_v >= c.uvlo_on_v
            && (!c.sleeps_below_battery
                || p.idle_input_v >= p.net.battery_v + c.sleep_margin_v + SLEEP_HYSTERESIS_V)
            && !usb_sleeps(plant, p, SLEEP_HYSTERESIS_V)
            && p.t - d.disabled_at_s >= c.restart_delay_s
            && holds_on_start(plant, p, y, d)
        {
            return Some(Transition::Enable);
        }
        if p.band != d.band {
            return Some(Transition::Band);
        }
    }
    if plant.drive.freewheel {
        if d.engaged {
            if p.belt_torque_n_m < 0.0 {
                return Some(Transition::Disengage);
            }
        } else {
            // Re-engage when the crank catches up with the shaft and is gaining on it (the relative
            // acceleration test keeps the clutch from re-engaging the instant it let go).
            let n = plant.drive.ratio;
            if n * p.crank_speed >= p.gen_speed && n * p.crank_accel > p.gen_accel {
                return Some(Transition::Engage);
            }
        }
    }
    None
}

/// Whether a NiMH charger watches its fast charge at this point: charging at its set current
/// (enabled, ramped up, not in dropout, not held by its backup voltage limit) and past the
/// hold-off since it last started.
pub fn nimh_watching(plant: &Plant, p: &Point, d: &Discrete) -> bool {
    plant.battery_is_nimh()
        && plant.has_converter()
        && d.stage == Stage::Charging
        && d.enabled
        && !d.ov_shutdown
        && d.soft_done
        && !p.net.dropout
        && !p.cv_active
        && p.t >= d.watch_from_s
}

/// NiMH: the end of the fast charge (−ΔV below the stored peak, or dT/dt above its rate), else a
/// new peak to store, while the charger watches.
fn nimh_end_due(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> Option<Transition> {
    if !nimh_watching(plant, p, d) {
        return None;
    }
    let c = &plant.charger;
    let v = p.net.battery_v;
    if c.end_drop_v > 0.0 && d.peak_v > 0.0 && v < d.peak_v - c.end_drop_v {
        return Some(Transition::EndOnVoltageDrop);
    }
    if c.end_rise_k_per_s > 0.0 && plant.battery_temp_rate(p, y) > c.end_rise_k_per_s {
        return Some(Transition::EndOnTemperatureRise);
    }
    let resolution = PEAK_RESOLUTION_V_PER_CELL * plant.battery.series_cells();
    (v >= d.peak_v + resolution).then_some(Transition::NewPeak)
}

/// Whether the charger, started from this state, would keep its input above its UVLO off
/// threshold (and, for one that sleeps, above the battery): a source too weak to carry even the
/// starting converter's own currents would lock it out again at once. Where the input is a
/// capacitor (the detailed fidelity) that is a hiccup the capacitor times; in the fast fidelity
/// the input is algebraic, so without this look-ahead the start and the lock-out would follow
/// each other at one instant. The averaged answer for such a source is the one kept: locked out.
fn holds_on_start(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> bool {
    !input_too_low(plant, &after(plant, Transition::Enable, p, y, d))
}

/// A running charger's input below its UVLO off threshold, or (one that sleeps) below the
/// battery plus its switch drop, where it cannot charge.
fn input_too_low(plant: &Plant, p: &Point) -> bool {
    let c = &plant.charger;
    p.net.input_v < c.uvlo_off_v
        || (c.sleeps_below_battery && p.net.input_v < p.net.battery_v + c.sleep_margin_v)
}

/// The operating point right after `tr` were applied at this instant (on copies of the state).
fn after(plant: &Plant, tr: Transition, p: &Point, y: &State, d: &Discrete) -> Point {
    let mut ds = *d;
    let mut ys = *y;
    apply(plant, tr, p.t, p, &mut ys, &mut ds);
    plant.eval(p.t, &ys, &ds)
}

/// Buck-boost: into buck mode when the buck duty for the present input, battery voltage and
/// current is at or below the limit less [`BUCK_MODE_HYSTERESIS`] and the chain, run as a buck
/// from this state, would settle out of dropout within the limit; back to switching both when it
/// passes the limit or the buck stage is in dropout. Checking the buck's own operating point
/// first matters where the input sags once the buck draws its current (a weak source, a lossy
/// switch): the duty read at the buck-boost's operating point alone would switch back and forth.
fn buck_mode_due(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> Option<Transition> {
    let limit = plant.charger.buck_mode_max_duty;
    if limit <= 0.0 {
        return None;
    }
    let as_buck_duty = |q: &Point| {
        plant.buck_boost_as_buck.ccm_duty(
            q.net.input_v,
            q.net.battery_v,
            q.net.battery_current_a.max(0.0),
        )
    };
    if d.buck_mode {
        (as_buck_duty(p) > limit || p.net.dropout).then_some(Transition::ToBuckBoostMode)
    } else {
        if as_buck_duty(p) > limit - BUCK_MODE_HYSTERESIS {
            return None;
        }
        let q = after(plant, Transition::ToBuckMode, p, y, d);
        (!q.net.dropout && as_buck_duty(&q) <= limit).then_some(Transition::ToBuckMode)
    }
}

/// Headroom a buck needs over its USB bus to keep running, V: with less, it sleeps (an input at
/// the bus level cannot hold it, and the averaged DCM stage becomes singular as V_in − V_o → 0).
pub const USB_SLEEP_MARGIN_V: f64 = 0.05;

/// Whether a buck feeding a USB bus lacks headroom: its input (idle input when off) is below the
/// bus plus [`USB_SLEEP_MARGIN_V`] plus `hysteresis_v` (the wake-up margin).
fn usb_sleeps(plant: &Plant, p: &Point, hysteresis_v: f64) -> bool {
    let input_v = if hysteresis_v > 0.0 {
        p.idle_input_v
    } else {
        p.net.input_v
    };
    plant.usb.is_some()
        && plant.charger.sleeps_below_battery
        && input_v < p.bus.bus_v + USB_SLEEP_MARGIN_V + hysteresis_v
}

/// USB device: cut off below the cut-off voltage; reconnect (after the delay, once the converter
/// runs with its soft-start done) at or above the reconnect voltage. The delay keeps a device on a
/// bus that collapses under it from cycling faster than once per delay.
fn device_due(plant: &Plant, p: &Point, d: &Discrete) -> Option<Transition> {
    let u = plant.usb.as_ref()?;
    if d.device_on {
        (p.bus.bus_v < u.cutoff_v).then_some(Transition::DeviceCutoff)
    } else {
        (d.enabled
            && !d.ov_shutdown
            && d.soft_done
            && p.bus.bus_v >= u.reconnect_v
            && p.t - d.device_off_at_s >= u.reconnect_delay_s)
            .then_some(Transition::DeviceReconnect)
    }
}

/// Applies a transition at time `t`, possibly resetting states (soft-start, clutch impact).
pub fn apply(plant: &Plant, tr: Transition, t: f64, p: &Point, y: &mut State, d: &mut Discrete) {
    match tr {
        Transition::Enable => {
            d.enabled = true;
            y[SOFT_START] = 0.0;
            y[CTRL_V] = 0.0;
            y[CTRL_I] = 0.0;
            d.soft_done = plant.charger.soft_start_s <= 0.0;
            // A NiMH charger still in its fast charge watches afresh after each start: a pack that
            // rested reads below the peak it had reached while charging.
            if d.stage == Stage::Charging {
                d.peak_v = 0.0;
                d.watch_from_s = t + plant.charger.end_holdoff_s;
            }
        }
        Transition::Disable => {
            d.enabled = false;
            y[SOFT_START] = 0.0;
            d.soft_done = false;
            d.disabled_at_s = t;
        }
        Transition::OvShutdown => {
            d.ov_shutdown = true;
            d.disabled_at_s = t;
            y[SOFT_START] = 0.0;
            d.soft_done = false;
        }
        Transition::OvRelease => {
            d.ov_shutdown = false;
            d.enabled = false;
        }
        Transition::SoftDone => {
            y[SOFT_START] = 1.0;
            d.soft_done = true;
        }
        Transition::Terminate => {
            d.stage = Stage::Done;
            d.end_cause = 1;
        }
        Transition::NewPeak => d.peak_v = p.net.battery_v,
        Transition::EndOnVoltageDrop | Transition::EndOnTemperatureRise => {
            d.stage = Stage::Trickle;
            d.end_cause = if tr == Transition::EndOnVoltageDrop {
                2
            } else {
                3
            };
            // The current loop's trim was for the fast-charge current.
            y[CTRL_I] = 0.0;
        }
        Transition::ToAbsorption => {
            d.stage = Stage::Absorption;
            d.absorption_since_s = t;
        }
        Transition::ToFloat => d.stage = Stage::Float,
        Transition::Band => d.band = p.band,
        Transition::Disengage => d.engaged = false,
        Transition::Engage => {
            // Perfectly plastic clutch impact: common speed conserves angular momentum (referred to
            // the crank); the small kinetic-energy difference is booked as friction.
            let n = plant.drive.ratio;
            let jc = plant.drive.crank_inertia_kg_m2;
            let js = plant.drive.shaft_inertia_kg_m2;
            let before = plant.kinetic_j(y);
            let wc = (jc * y[CRANK_SPEED] + n * js * y[GEN_SPEED]) / (jc + n * n * js);
            y[CRANK_SPEED] = wc;
            y[GEN_SPEED] = n * wc;
            y[E_FRICTION] += (before - plant.kinetic_j(y)).max(0.0);
            d.engaged = true;
        }
        Transition::DeviceCutoff => {
            d.device_on = false;
            d.device_off_at_s = t;
            d.device_cutoffs += 1;
        }
        Transition::DeviceReconnect => {
            d.device_on = true;
            d.device_on_at_s = t;
        }
        Transition::ToBuckMode | Transition::ToBuckBoostMode => {
            d.buck_mode = tr == Transition::ToBuckMode;
            // The current loop's trim corrects the other stage's feed-forward duty.
            y[CTRL_I] = 0.0;
        }
    }
}
