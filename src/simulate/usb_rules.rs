//! A USB port's rules apart from the plant: the device's charger settings, when the port counts
//! as in regulation, and the bus loop gains of the detailed fidelity.

use crate::model::controller::ControllerGains;
use crate::model::converter::BuckModel;
use crate::model::usb::{BusPoint, UsbModel};
use crate::scenario::setup::{Setup, Topology, UsbPort};

use super::mode::{Charger, Discrete};

/// With a port, the plant's charger is the device's own: its input current limit as the CC
/// limit, the cell's charge limit as CV, its termination (default C/10 of the cell); no input floor.
pub fn device_charger(c: &mut Charger, u: &UsbPort, capacity_ah: f64) {
    c.charge_current_a = u.device_current_a;
    c.cv_setpoint_v = None;
    c.float_setpoint_v = None;
    c.termination_current_a = u.device_termination_current_a.unwrap_or(capacity_ah / 10.0);
    c.input_floor_v = None;
}

/// Whether the device cut itself off (and has not reconnected yet).
pub fn device_cut_off(d: &Discrete) -> bool {
    !d.device_on && d.device_off_at_s.is_finite()
}

/// Regulation of a USB port: the converter runs, the device has not cut itself off, and whenever
/// the device asks for current the bus lies inside the band.
pub fn usb_in_regulation(u: &UsbModel, d: &Discrete, bus: &BusPoint) -> bool {
    d.enabled
        && !d.ov_shutdown
        && !device_cut_off(d)
        && (bus.device_demand_a <= 0.0 || u.in_band(bus.bus_v))
}

/// Detailed fidelity with a USB port: the voltage loop works against the bus capacitor (the
/// device is a current sink, not a battery's resistance): crossover ω_v a tenth of the current
/// loop's, k_p = ω_v·C_o and the integral zero a quarter below it (k_i = k_p·ω_v/4); the current
/// loop's input gain is designed at the bus voltage instead of the battery's.
pub fn usb_gains(setup: &Setup, buck: &BuckModel, u: &UsbModel) -> ControllerGains {
    let c = &setup.converter;
    let mut v_nominal = c.uvlo_on_v.max(u.bus_v + 2.0);
    if c.topology == Topology::BuckBoost {
        v_nominal += u.bus_v;
    }
    // Designed against a 1 Ω slope, the voltage loop's integral gain equals its crossover, rad/s.
    let base = ControllerGains::design(buck, v_nominal, 1.0);
    let wc_v = base.ki_v;
    let kp_v = wc_v * c.output_capacitance_f;
    ControllerGains {
        kp_v,
        ki_v: kp_v * wc_v / 4.0,
        ..base
    }
}
