//! The plant with a USB port on the converter output: the bus network at either fidelity (the
//! port's rules and loop gains are in `usb_rules`). The converter holds the bus; the device's
//! charger (CC/CV, termination, temperature window) charges the setup's battery, its cell.

use crate::model::battery::Terminal;
use crate::model::circuit::{self, FastRates, FastStates};
use crate::model::controller::{self, ControlInput};
use crate::model::network::{NetworkPoint, Source};
use crate::model::usb::{BusPoint, UsbModel};
use crate::model::usb_network;
use crate::scenario::setup::Topology;

use super::fidelity::Fidelity;
use super::mode::Discrete;
use super::plant::{Plant, Request};
use super::state::*;

/// Light-load (pulse-skipping) band of the detailed converter, as a fraction of the port limit.
pub const SKIP_FRACTION: f64 = 0.02;

/// The electrical solution with a USB port: (point with the cell as its battery side, device
/// demand, device in CV, fast-state rates, loop-integrator rates), and the bus.
#[derive(Debug, Clone, Copy)]
pub struct UsbEval {
    pub electrical: (NetworkPoint, f64, bool, FastRates, (f64, f64)),
    pub bus: BusPoint,
}

impl Plant {
    /// The network with a USB port at the plant's fidelity at time `t`, the converter serving
    /// request `r`. The device asks (`device`, its charger's request) for its CC limit, or the
    /// current that holds its cell at the CV voltage, while it is attached and not holding, ramped
    /// up over its first `ramp_s` after attaching; it keeps asking while the converter is off.
    pub(super) fn usb_network(
        &self,
        u: &UsbModel,
        src: &Source,
        (t, r, device): (f64, Request, Request),
        cell: &Terminal,
        y: &State,
        d: &Discrete,
    ) -> UsbEval {
        let (demand, cv) = match device {
            Request::Charge {
                cc_limit_a,
                v_set,
                hold: false,
                ..
            } if d.device_on => {
                let i_cv = cell.current_at(v_set).max(0.0);
                let ramp = u.ramp_fraction(t - d.device_on_at_s);
                // In CV only once ramped up: a ramping draw is not a taper to terminate on.
                (
                    ramp * cc_limit_a.min(i_cv),
                    i_cv < cc_limit_a && ramp >= 1.0,
                )
            }
            _ => (0.0, false),
        };
        match self.fidelity {
            Fidelity::Fast => {
                let (p, bus) = match r {
                    Request::Charge { ramp, .. } => usb_network::solve(
                        src,
                        &self.converters(d),
                        u,
                        (ramp * u.bus_v, u.port_current_a),
                        demand,
                        cell,
                    ),
                    _ => usb_network::off(src, cell),
                };
                UsbEval {
                    electrical: (p, demand, cv, FastRates::default(), (0.0, 0.0)),
                    bus,
                }
            }
            Fidelity::Detailed => self.usb_detailed(u, src, r, cell, y, (demand, cv)),
        }
    }

    /// DCM duty for `current_a` minus the CCM feed-forward duty the controller uses (both at the
    /// present input and bus voltages); 0 in CCM.
    fn dcm_duty_offset(&self, x: &FastStates, current_a: f64) -> f64 {
        let (v_in, v_o) = (x.input_v, x.output_v);
        match self.charger.topology {
            Topology::BuckBoost => {
                let bb = &self.buck_boost;
                let d_ss = bb.ccm_duty(v_in, v_o.max(0.0), current_a);
                if !d_ss.is_finite() || current_a <= 0.0 {
                    return 0.0;
                }
                let d_ff = d_ss.clamp(0.0, bb.max_duty);
                bb.reported_duty(v_in, current_a, d_ff).0 - d_ff
            }
            _ => {
                let b = &self.buck;
                let den = v_in - b.switch_drop_v + b.catch_drop_v;
                if den <= 0.0 || current_a <= 0.0 {
                    return 0.0;
                }
                let d_ff = ((v_o + b.catch_drop_v) / den).clamp(0.0, b.max_duty);
                b.reported_duty(v_in, v_o, current_a, d_ff).0 - d_ff
            }
        }
    }

    /// Detailed fidelity: the bus capacitor is a state; the device draws from it; the converter's
    /// voltage loop holds it, with the measured bus current fed forward into the current reference
    /// (added to the loop integrator's value), so that a device attaching does not dip the bus.
    /// Soft-start ramps the bus set point (not the current limit), so the bus rises without
    /// overshoot. At light load the converter skips pulses: below [`SKIP_FRACTION`] of the port
    /// limit the duty shrinks in proportion to the current reference, to 0 when the voltage loop
    /// asks for none (an unloaded bus cannot sink charge, so nothing may keep pumping it up); the
    /// controller's quiescent current still flows then.
    fn usb_detailed(
        &self,
        u: &UsbModel,
        src: &Source,
        r: Request,
        cell: &Terminal,
        y: &State,
        (demand, cv): (f64, bool),
    ) -> UsbEval {
        let x = FastStates {
            armature_a: y[ARMATURE_I],
            input_v: y[INPUT_V],
            inductor_a: y[INDUCTOR_I],
            output_v: y[OUTPUT_V],
        };
        let sink = |v: f64| u.device_current_a(v, demand, cell).0;
        let (p, rates, ctrl_rates, saturated) = match r {
            Request::Charge { ramp, .. } => {
                let gains = self.usb_gains.as_ref().unwrap_or(&self.gains);
                let input = ControlInput {
                    cc_limit_a: u.port_current_a,
                    v_set: ramp * u.bus_v,
                    ramp: 1.0,
                    input_v: x.input_v,
                    output_v: x.output_v,
                    inductor_a: x.inductor_a,
                    voltage_integrator: y[CTRL_V] + sink(x.output_v),
                    current_integrator: y[CTRL_I],
                    input_floor_v: None,
                };
                let control = |input: &ControlInput| match self.charger.topology {
                    Topology::BuckBoost => {
                        controller::control_buck_boost(gains, &self.buck_boost, input)
                    }
                    _ => controller::control(gains, &self.buck, input),
                };
                // Light loads run in DCM, where the CCM feed-forward duty is far too large: the
                // duty that carries the current reference in DCM replaces it (passed as an offset
                // of the current integrator, as the load current is of the voltage integrator).
                let first = control(&input);
                let offset = self.dcm_duty_offset(&x, first.current_ref_a);
                let mut out = control(&ControlInput {
                    current_integrator: input.current_integrator + offset,
                    ..input
                });
                let skip = (out.current_ref_a / (SKIP_FRACTION * u.port_current_a)).clamp(0.0, 1.0);
                out.duty *= skip;
                out.saturated &= skip >= 1.0;
                let drive = match self.charger.topology {
                    Topology::BuckBoost => circuit::Drive::BuckBoost {
                        model: &self.buck_boost,
                        duty: out.duty,
                    },
                    _ => circuit::Drive::Switching {
                        buck: &self.buck,
                        duty: out.duty,
                    },
                };
                let (mut p, mut rates) =
                    circuit::evaluate_with_sink(src, &self.circuit, drive, &x, sink);
                if out.duty <= 0.0 {
                    // Skipping every pulse, the running controller still draws its quiescent
                    // current from the input (the averaged stage books it only while switching);
                    // its gate driver then rests.
                    let iq = match self.charger.topology {
                        Topology::BuckBoost => {
                            let bb = &self.buck_boost;
                            bb.quiescent_current_a - bb.overhead.gate_drive_current_a
                        }
                        _ => {
                            let b = &self.buck;
                            b.quiescent_current_a - b.overhead.gate_drive_current_a
                        }
                    };
                    rates.input -= iq / self.circuit.input_capacitance_f;
                    p.losses.quiescent_w += x.input_v * iq;
                }
                (
                    p,
                    rates,
                    (out.voltage_rate, out.current_rate),
                    out.saturated,
                )
            }
            _ => {
                let drive = match self.charger.topology {
                    Topology::BuckBoost => circuit::Drive::BuckBoost {
                        model: &self.buck_boost,
                        duty: 0.0,
                    },
                    _ => circuit::Drive::Off(&self.buck),
                };
                let (p, rates) = circuit::evaluate_with_sink(src, &self.circuit, drive, &x, sink);
                (p, rates, (0.0, 0.0), false)
            }
        };
        let mut p = p;
        p.dropout = saturated;
        let (p, bus) = usb_network::cell_side(p, demand, cell);
        UsbEval {
            electrical: (p, demand, cv, rates, ctrl_rates),
            bus,
        }
    }
}
