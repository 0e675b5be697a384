//! A 5 V USB port on the converter output: the bus the converter holds, the band it is judged by
//! (USB 2.0 §7.2.1 and Battery Charging 1.2: 4.75–5.25 V), and the device plugged into it — a
//! current-limited linear charger feeding its own cell, which cuts itself off when the bus sags.

use crate::model::battery::Terminal;
use crate::model::roots::root_in;
use crate::scenario::setup::UsbPort;

/// Absolute tolerance of the device-current solve on a curved cell terminal, A.
const CURRENT_TOL_A: f64 = 1e-11;

/// The port and the device, in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct UsbModel {
    /// Bus voltage the converter holds (its CV set point), V.
    pub bus_v: f64,
    /// Port current limit (the converter's CC limit), A.
    pub port_current_a: f64,
    /// Lower edge of the regulation band, V.
    pub band_low_v: f64,
    /// Upper edge of the regulation band, V.
    pub band_high_v: f64,
    /// The device's input current limit, A.
    pub device_current_a: f64,
    /// Headroom the device's charger needs at its current limit, V.
    pub device_dropout_v: f64,
    /// The device's pass element fully on: R_pass = V_dropout / I_device, Ω.
    pub device_pass_ohm: f64,
    /// The device disconnects below this bus voltage, V.
    pub cutoff_v: f64,
    /// The device reconnects at or above this bus voltage, V.
    pub reconnect_v: f64,
    /// Least off-time before a reconnection, s.
    pub reconnect_delay_s: f64,
    /// Time the device ramps its draw up over after attaching, s (0: at once).
    pub ramp_s: f64,
    /// Input-voltage regulation: the device draws nothing at this bus voltage and its full
    /// demand [`DPM_SPAN_V`] above it, V.
    pub input_regulation_v: f64,
}

/// Span of bus voltage over which the device's input regulation takes its draw from nothing to
/// the full demand, V: a stiff loop, as a charger IC's input regulation is.
pub const DPM_SPAN_V: f64 = 0.05;

/// Least current an attached device that asks for charge draws, A: its input regulation can cut
/// the charge current to nothing but not the few milliamperes its own circuits take, so a bus
/// nothing feeds still runs down to the cut-off (our choice; a few mA is the usual size).
pub const DEVICE_FLOOR_A: f64 = 0.005;

impl UsbModel {
    /// Builds the model from the configuration.
    pub fn from_config(u: &UsbPort) -> Self {
        Self {
            bus_v: u.bus_v,
            port_current_a: u.port_current_a,
            band_low_v: u.band_low_v,
            band_high_v: u.band_high_v,
            device_current_a: u.device_current_a,
            device_dropout_v: u.device_dropout_v,
            device_pass_ohm: u.device_dropout_v / u.device_current_a.max(1e-6),
            cutoff_v: u.device_cutoff_v,
            reconnect_v: u.device_reconnect_v,
            reconnect_delay_s: u.device_reconnect_delay_s,
            ramp_s: u.device_ramp_s,
            input_regulation_v: u.device_input_regulation_v,
        }
    }

    /// Resistance of the input-regulation line, Ω: the draw rises from nothing at
    /// `input_regulation_v` to `demand_a` [`DPM_SPAN_V`] above it.
    fn dpm_ohm(&self) -> f64 {
        DPM_SPAN_V / self.device_current_a.max(1e-6)
    }

    /// Fraction of its demand the device allows itself `since_s` after attaching: a linear ramp
    /// from 0 to 1 over `ramp_s` (its charger's soft start, which also spares the bus a step).
    pub fn ramp_fraction(&self, since_s: f64) -> f64 {
        if self.ramp_s <= 0.0 {
            1.0
        } else {
            (since_s / self.ramp_s).clamp(0.0, 1.0)
        }
    }

    /// Whether a bus voltage lies inside the regulation band (edges included).
    pub fn in_band(&self, v: f64) -> bool {
        v >= self.band_low_v && v <= self.band_high_v
    }

    /// Current the device draws from a bus at `bus_v` when its charger asks for `demand_a`, A,
    /// with its slope dI/dV, S: the least of three. The demand; the pass element fully on,
    /// I·R_pass + V_cell(I) = V_bus (it never lets the cell back-feed the bus); and the input
    /// regulation, I = (V_bus − V_dpm)/R_dpm, by which a device on a sagging bus draws less
    /// rather than pulling the bus down to its cut-off.
    /// For a Thevenin cell (V_cell = V_rest + I·R) the pass line is I = (V_bus − V_rest)/(R_pass + R).
    pub fn device_current_a(&self, bus_v: f64, demand_a: f64, cell: &Terminal) -> (f64, f64) {
        if demand_a <= 0.0 {
            return (0.0, 0.0);
        }
        let (i_pass, s_pass) = self.pass_current_a(bus_v, demand_a, cell);
        let r_dpm = self.dpm_ohm();
        let i_dpm = (bus_v - self.input_regulation_v) / r_dpm;
        // Input regulation cuts the draw down to the device's floor, never below it (nor above
        // what the pass element lets through).
        let floor = DEVICE_FLOOR_A.min(demand_a).min(i_pass);
        if i_dpm <= floor {
            (floor, if floor < i_pass { 0.0 } else { s_pass })
        } else if i_dpm < i_pass {
            (i_dpm, 1.0 / r_dpm)
        } else {
            (i_pass, s_pass)
        }
    }

    /// The demand or, without the headroom for it, the current the fully-on pass element lets
    /// through, A, with its slope dI/dV, S.
    fn pass_current_a(&self, bus_v: f64, demand_a: f64, cell: &Terminal) -> (f64, f64) {
        let r_pass = self.device_pass_ohm;
        if let Terminal::Linear { rest_v, r_ohm } = cell {
            let r = (r_pass + r_ohm).max(1e-12);
            let i = (bus_v - rest_v) / r;
            return if i <= 0.0 {
                (0.0, 0.0)
            } else if i >= demand_a {
                (demand_a, 0.0)
            } else {
                (i, 1.0 / r)
            };
        }
        // Curved terminal: root of I·R_pass + V_cell(I) − V_bus, rising in I.
        let f = |i: f64| {
            let (v, s) = cell.v(i);
            (i * r_pass + v - bus_v, r_pass + s)
        };
        let i = root_in(0.0, demand_a, 0.5 * demand_a, CURRENT_TOL_A, f);
        if i <= 0.0 || i >= demand_a {
            (i.clamp(0.0, demand_a), 0.0)
        } else {
            (i, 1.0 / f(i).1.max(1e-12))
        }
    }

    /// Bus voltage at which the device draws `current_a` below its demand: on the fully-on pass
    /// line V_cell(I) + I·R_pass, or on the input-regulation line, whichever is higher, V.
    pub fn bus_for_current_v(&self, current_a: f64, cell: &Terminal) -> f64 {
        (cell.v(current_a).0 + current_a * self.device_pass_ohm)
            .max(self.input_regulation_v + current_a * self.dpm_ohm())
    }
}

/// The bus at one instant: what the converter's output and the device see.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BusPoint {
    /// Whether the converter feeds a USB port (false: the battery sits on its output).
    pub usb: bool,
    /// Bus (converter output) voltage, V.
    pub bus_v: f64,
    /// Current from the bus into the device (or the battery), A.
    pub bus_current_a: f64,
    /// Heat in the device's charger (its pass element): I·(V_bus − V_cell), W.
    pub device_loss_w: f64,
    /// Current the device's charger asks for, A (0 when it is off, holding or done).
    pub device_demand_a: f64,
    /// The converter's duty is at its limit (dropout): the bus is short of its set point.
    pub converter_saturated: bool,
}

impl BusPoint {
    /// The bus of a battery output: the battery terminal itself, no device.
    pub fn battery(v: f64, i: f64) -> Self {
        Self {
            usb: false,
            bus_v: v,
            bus_current_a: i,
            device_loss_w: 0.0,
            device_demand_a: 0.0,
            converter_saturated: false,
        }
    }

    /// The bus seen from the device: the cell gets the bus current at V_cell(I) and the pass
    /// element burns the difference. Returns the bus point and the cell's (current, voltage).
    pub fn device(
        bus_v: f64,
        bus_current_a: f64,
        demand_a: f64,
        converter_saturated: bool,
        cell: &Terminal,
    ) -> (Self, f64, f64) {
        let i = bus_current_a.max(0.0);
        let v_cell = cell.v(i).0;
        (
            Self {
                usb: true,
                bus_v,
                bus_current_a: i,
                device_loss_w: i * (bus_v - v_cell),
                device_demand_a: demand_a,
                converter_saturated,
            },
            i,
            v_cell,
        )
    }

    /// Whether the device draws less than its charger asks (its headroom ran out), A tolerance 1e-9.
    pub fn device_limited(&self) -> bool {
        self.usb && self.device_demand_a > 0.0 && self.bus_current_a < self.device_demand_a - 1e-9
    }
}

/// A 5 V port with a 1 A phone, the values the unit tests of the USB modules share.
#[cfg(test)]
pub(crate) fn test_port() -> UsbModel {
    UsbModel {
        bus_v: 5.0,
        port_current_a: 1.5,
        band_low_v: 4.75,
        band_high_v: 5.25,
        device_current_a: 1.0,
        device_dropout_v: 0.3,
        device_pass_ohm: 0.3,
        cutoff_v: 4.4,
        reconnect_v: 4.6,
        reconnect_delay_s: 2.0,
        ramp_s: 0.5,
        // Below the cut-off: these tests see the pass line alone.
        input_regulation_v: 3.0,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn port() -> UsbModel {
        test_port()
    }

    #[test]
    fn band_includes_its_edges_only() {
        let u = port();
        assert!(u.in_band(4.75) && u.in_band(5.0) && u.in_band(5.25));
        assert!(!u.in_band(4.7499) && !u.in_band(5.2501));
    }

    #[test]
    fn device_draws_its_demand_with_headroom_and_the_pass_line_without() {
        let u = port();
        let (rest, r) = (3.7, 0.04);
        let cell = Terminal::Linear {
            rest_v: rest,
            r_ohm: r,
        };
        // Headroom: (5 − 3.7)/(0.3 + 0.04) A would exceed the 1 A demand, so the demand flows.
        assert_eq!(u.device_current_a(5.0, 1.0, &cell), (1.0, 0.0));
        // Pass element fully on: I = (V_bus − V_rest)/(R_pass + R_cell).
        let (i, s) = u.device_current_a(3.9, 1.0, &cell);
        assert!((i - (3.9 - rest) / (0.3 + r)).abs() < 1e-12);
        assert!((s - 1.0 / (0.3 + r)).abs() < 1e-12);
        // Below the cell the device passes nothing (no back-feed); no demand, no current.
        assert_eq!(u.device_current_a(3.5, 1.0, &cell), (0.0, 0.0));
        assert_eq!(u.device_current_a(5.0, 0.0, &cell), (0.0, 0.0));
        // The bus at which the fully-on device draws I is the inverse of that line.
        let v = u.bus_for_current_v(0.5, &cell);
        assert!((v - (rest + 0.5 * (r + 0.3))).abs() < 1e-12);
    }

    #[test]
    fn input_regulation_cuts_the_draw_to_hold_the_bus_down_to_the_devices_floor() {
        let u = UsbModel {
            input_regulation_v: 4.5,
            ..port()
        };
        let cell = Terminal::Linear {
            rest_v: 3.7,
            r_ohm: 0.04,
        };
        // Above the line's top (4.55 V at the 1-A demand) the demand flows.
        assert_eq!(u.device_current_a(4.6, 1.0, &cell).0, 1.0);
        // On the line: 0 A at 4.5 V rising to the demand at 4.55 V.
        let (i, s) = u.device_current_a(4.525, 1.0, &cell);
        assert!(
            (i - 0.5).abs() < 1e-12 && (s - 20.0).abs() < 1e-9,
            "{i} {s}"
        );
        // Below it the device still takes its floor; without demand, nothing.
        assert_eq!(u.device_current_a(4.45, 1.0, &cell), (DEVICE_FLOOR_A, 0.0));
        assert_eq!(u.device_current_a(4.45, 0.0, &cell), (0.0, 0.0));
        // The inverse: the bus at which the device draws 0.5 A is on the regulation line.
        assert!((u.bus_for_current_v(0.5, &cell) - 4.525).abs() < 1e-12);
    }

    #[test]
    fn device_side_books_the_pass_element_heat() {
        let cell = Terminal::Linear {
            rest_v: 3.7,
            r_ohm: 0.04,
        };
        let (bus, i, v) = BusPoint::device(5.0, 1.0, 1.0, false, &cell);
        assert_eq!(i, 1.0);
        assert!((v - 3.74).abs() < 1e-12);
        // P_pass = I·(V_bus − V_cell).
        assert!((bus.device_loss_w - (5.0 - 3.74)).abs() < 1e-12);
        assert!(!bus.device_limited());
        let (short, _, _) = BusPoint::device(4.0, 0.5, 1.0, false, &cell);
        assert!(short.device_limited());
    }
}
