//! The USB bus solved algebraically (fast fidelity). The converter holds the bus at its set point
//! within the port's current limit. When the device asks more than the port gives, the bus falls
//! until the device's fully-on pass element draws just the limit. When the input cannot hold the
//! bus (duty at D_max: dropout), the bus sags along the saturated converter's output line into the
//! device, a current sink: unlike a battery output, the voltage gives way, not the current.

use crate::model::battery::Terminal;
use crate::model::converter::{BuckBoostModel, BuckModel};
use crate::model::network::{self, Converters, NetworkPoint, Source};
use crate::model::roots::root_in;
use crate::model::usb::{BusPoint, UsbModel};
use crate::scenario::setup::Topology;

/// Absolute tolerance of the bus-current solve, A.
const CURRENT_TOL_A: f64 = 1e-11;

/// The converter at duty D_max passing `bus_current_a` to the bus.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Saturated {
    /// Bus voltage on the saturated converter's output line, V.
    pub bus_v: f64,
    /// d(bus_v)/d(bus current), Ω (negative).
    pub slope_ohm: f64,
    /// Generator current, A.
    pub generator_a: f64,
    /// Input-node voltage, V.
    pub input_v: f64,
}

/// Output line of a buck at D_max (volt-second balance solved for the output):
/// I_g = D·I + I_q + ½·I·t_tr·f_sw, V_in = node_v(I_g), V_bus = D·(V_in − V_sw − I·R_on + V_D) − V_D − I·R_L.
pub fn buck_saturated(src: &Source, b: &BuckModel, i: f64) -> Saturated {
    let d = b.max_duty;
    let ig = with_core_loss(src, b.input_current_a(d, i, f64::INFINITY), |v| {
        b.core_current_a(v)
    });
    let vin = src.node_v(ig);
    let k_in = d + b.switching_current_a(1.0);
    Saturated {
        bus_v: d * (vin - b.switch_drop_v - i * b.switch_resistance_ohm + b.catch_drop_v)
            - b.catch_drop_v
            - i * b.inductor_resistance_ohm,
        slope_ohm: d * (-src.node_slope(ig) * k_in - b.switch_resistance_ohm)
            - b.inductor_resistance_ohm,
        generator_a: ig,
        input_v: vin,
    }
}

/// Output line of the non-inverting buck-boost at D_max: I_g = (D + s)/(1 − D)·I + I_q,
/// V_bus = [D·(V_in − 2V_sw) − I·r]/(1 − D) − 2V_D with r = (2D·R_on + R_L)/(1 − D)
/// (its CCM balance solved for V_o).
pub fn buck_boost_saturated(src: &Source, bb: &BuckBoostModel, i: f64) -> Saturated {
    let d = bb.max_duty;
    let ig = with_core_loss(src, bb.input_current_a(d, i, f64::INFINITY), |v| {
        bb.core_current_a(v)
    });
    let vin = src.node_v(ig);
    let k_in = (d + bb.switching_fraction()) / (1.0 - d);
    let r = (2.0 * d * bb.switch_resistance_ohm + bb.inductor_resistance_ohm) / (1.0 - d);
    Saturated {
        bus_v: (d * (vin - 2.0 * bb.switch_drop_v) - i * r) / (1.0 - d) - 2.0 * bb.diode_drop_v,
        slope_ohm: (-d * src.node_slope(ig) * k_in - r) / (1.0 - d),
        generator_a: ig,
        input_v: vin,
    }
}

/// Generator current `ig0` plus the core-loss current at the node voltage it sets: a few
/// fixed-point steps (the core current is a small fraction of the input current and varies
/// slowly with it, so they converge at once).
fn with_core_loss(src: &Source, ig0: f64, core: impl Fn(f64) -> f64) -> f64 {
    let mut ig = ig0;
    for _ in 0..3 {
        ig = ig0 + core(src.node_v(ig));
    }
    ig
}

fn saturated(src: &Source, conv: &Converters, i: f64) -> Saturated {
    match conv.topology {
        Topology::BuckBoost => buck_boost_saturated(src, conv.buck_boost, i),
        _ => buck_saturated(src, conv.buck, i),
    }
}

/// Solves the chain with a USB port on the converter output: the converter holding `v_set` (the
/// bus set point, ramped during soft-start) within `limit_a` (the port limit), the device asking
/// for `demand_a` into its cell `cell`. Returns the operating point with the cell as its battery
/// side, and the bus.
pub fn solve(
    src: &Source,
    conv: &Converters,
    usb: &UsbModel,
    (v_set, limit_a): (f64, f64),
    demand_a: f64,
    cell: &Terminal,
) -> (NetworkPoint, BusPoint) {
    let (i_set, _) = usb.device_current_a(v_set, demand_a, cell);
    // Regulated: the set point and what the device draws there, or the port limit and the bus at
    // which the device (fully on) draws just that.
    let (i_reg, v_reg) = if i_set <= limit_a {
        (i_set, v_set)
    } else {
        let i = limit_a.max(0.0);
        (i, usb.bus_for_current_v(i, cell))
    };
    let p = if i_reg > 0.0 {
        let held = Terminal::Linear {
            rest_v: v_reg,
            r_ohm: 0.0,
        };
        let p = network::solve(src, conv.charging(i_reg), &held);
        if p.dropout {
            sag(src, conv, usb, i_reg, demand_a, cell)
        } else {
            p
        }
    } else {
        idle(src, conv, v_reg)
    };
    cell_side(p, demand_a, cell)
}

/// The converter with its output unloaded: a buck's output cannot exceed its input less the
/// switch drop (light load runs in DCM, M → 1); a buck-boost holds its set point.
fn idle(src: &Source, conv: &Converters, v_set: f64) -> NetworkPoint {
    let v = match conv.topology {
        Topology::BuckBoost => v_set,
        _ => v_set.min(src.node_v(conv.buck.quiescent_current_a) - conv.buck.switch_drop_v),
    }
    .max(0.0);
    let held = Terminal::Linear {
        rest_v: v,
        r_ohm: 0.0,
    };
    let mut p = network::solve(src, conv.charging(0.0), &held);
    p.battery_current_a = 0.0;
    p.battery_v = v;
    p.dropout = v < v_set;
    p
}

/// Dropout: duty at D_max; the bus current I is the root of I − I_device(V_sat(I)) on [0, i_reg]
/// (rising in I, since the saturated line falls and the device draws more at a higher bus).
fn sag(
    src: &Source,
    conv: &Converters,
    usb: &UsbModel,
    i_reg: f64,
    demand_a: f64,
    cell: &Terminal,
) -> NetworkPoint {
    let g = |i: f64| {
        let s = saturated(src, conv, i);
        let (id, did) = usb.device_current_a(s.bus_v, demand_a, cell);
        (i - id, 1.0 - did * s.slope_ohm)
    };
    let i = root_in(0.0, i_reg, i_reg, CURRENT_TOL_A, g);
    let s = saturated(src, conv, i);
    let (d, v, ig) = (
        match conv.topology {
            Topology::BuckBoost => conv.buck_boost.max_duty,
            _ => conv.buck.max_duty,
        },
        s.input_v,
        s.generator_a,
    );
    let (duty, dcm, losses) = match conv.topology {
        Topology::BuckBoost => {
            let (duty, dcm) = conv.buck_boost.reported_duty(v, i, d);
            (duty, dcm, conv.buck_boost.losses(d, i, v))
        }
        _ => {
            let (duty, dcm) = conv.buck.reported_duty(v, s.bus_v, i, d);
            (duty, dcm, conv.buck.losses(d, i, v))
        }
    };
    NetworkPoint {
        generator_current_a: ig,
        input_v: v,
        duty,
        balance_duty: d,
        dcm,
        battery_current_a: i,
        battery_v: s.bus_v.max(0.0),
        dropout: true,
        floor_limited: false,
        diode_v: src.diode_drop(ig),
        brush_v: src.generator.brush_drop(ig),
        losses,
    }
}

/// Turns a point whose battery side is the bus into one whose battery side is the device's cell
/// (the bus current at V_cell(I)), with the bus beside it. The point counts as dropout when the
/// device draws less than it asks.
pub fn cell_side(mut p: NetworkPoint, demand_a: f64, cell: &Terminal) -> (NetworkPoint, BusPoint) {
    let (bus, i, v) = BusPoint::device(p.battery_v, p.battery_current_a, demand_a, p.dropout, cell);
    p.battery_current_a = i;
    p.battery_v = v;
    p.dropout = p.dropout || bus.device_limited();
    (p, bus)
}

/// The bus while the converter is off: nothing holds it (the device draws its capacitor down at
/// once and cuts off); the input node sits at the open-circuit voltage.
pub fn off(src: &Source, cell: &Terminal) -> (NetworkPoint, BusPoint) {
    let p = NetworkPoint {
        input_v: src.emf_v.max(0.0),
        ..NetworkPoint::default()
    };
    cell_side(p, 0.0, cell)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::converter::{BuckBoostModel, LinearModel};
    use crate::model::diode::DiodeModel;
    use crate::model::generator::GeneratorModel;

    fn generator() -> GeneratorModel {
        GeneratorModel {
            ke_v_s_per_rad: 0.1,
            resistance_20c_ohm: 1.5,
            inductance_h: 1e-3,
            inertia_kg_m2: 6e-5,
            brush_drop_v: 0.0,
            hysteresis_loss_w_per_krpm: 0.0,
            eddy_loss_w_per_krpm2: 0.0,
            ke_tempco_per_k: 0.0,
            cogging_torque_n_m: 0.0,
            cogging_periods: 1.0,
            winding_heat_capacity_j_per_k: 60.0,
            winding_to_ambient_w_per_k: 0.8,
            alternator: None,
        }
    }

    fn buck() -> BuckModel {
        BuckModel {
            max_duty: 0.95,
            switch_drop_v: 0.0,
            switch_resistance_ohm: 0.08,
            catch_drop_v: 0.4,
            output_diode_v: 0.0,
            inductor_resistance_ohm: 0.05,
            inductance_h: 22e-6,
            switching_frequency_hz: 150e3,
            switch_transition_s: 40e-9,
            quiescent_current_a: 0.003,
            overhead: crate::model::converter::Overhead {
                gate_drive_current_a: 0.0,
                // A core loss, so that the power balance below covers it.
                core_loss_w: 0.05,
            },
        }
    }

    fn port() -> UsbModel {
        crate::model::usb::test_port()
    }

    /// Solves at EMF `emf_v` with the given port limit and demand; returns the point and the bus.
    fn at(emf_v: f64, limit_a: f64, demand_a: f64) -> (NetworkPoint, BusPoint) {
        let g = generator();
        let d = DiodeModel::Ideal {
            forward_v: 0.4,
            series_resistance_ohm: 0.0,
        };
        let b = buck();
        let cfg: crate::scenario::setup::Converter =
            ron::from_str("(topology: buck_boost)").expect("converter defaults");
        let bb = BuckBoostModel::from_config(&cfg);
        let lin = LinearModel::from_config(&cfg);
        let conv = Converters {
            topology: Topology::Buck,
            buck: &b,
            buck_boost: &bb,
            linear: &lin,
        };
        let src = Source {
            generator: &g,
            diode: &d,
            emf_v,
            resistance_ohm: 1.5,
            commutation_ohm: 0.0,
        };
        let cell = Terminal::Linear {
            rest_v: 3.7,
            r_ohm: 0.04,
        };
        solve(&src, &conv, &port(), (5.0, limit_a), demand_a, &cell)
    }

    #[test]
    fn a_strong_input_holds_the_set_point_and_the_device_draws_its_demand() {
        let (p, bus) = at(12.0, 1.5, 1.0);
        assert!(!p.dropout);
        assert!((bus.bus_v - 5.0).abs() < 1e-12);
        assert!((bus.bus_current_a - 1.0).abs() < 1e-9);
        assert!((p.battery_current_a - 1.0).abs() < 1e-9);
        assert!((p.battery_v - (3.7 + 0.04 * p.battery_current_a)).abs() < 1e-12);
    }

    #[test]
    fn a_port_limit_below_the_demand_pulls_the_bus_onto_the_device_pass_line() {
        let (p, bus) = at(12.0, 0.5, 1.0);
        assert!((bus.bus_current_a - 0.5).abs() < 1e-9);
        // V_bus = V_rest + I·(R_cell + R_pass).
        assert!((bus.bus_v - (3.7 + 0.5 * 0.34)).abs() < 1e-9);
        assert!(p.dropout, "the cell gets less than it asks");
        assert!(!bus.converter_saturated);
    }

    #[test]
    fn power_balances_through_converter_and_device_in_dropout() {
        let (p, bus) = at(7.0, 1.5, 1.0);
        assert!(bus.converter_saturated && bus.bus_v < 5.0);
        // Generator side = converter losses + bus power; bus power = cell power + pass-element heat.
        let p_in = p.input_v * p.generator_current_a;
        let p_bus = bus.bus_v * bus.bus_current_a;
        assert!((p_in - p.losses.total_w() - p_bus).abs() < 1e-9 * p_in);
        let p_cell = p.battery_v * p.battery_current_a;
        assert!((p_bus - p_cell - bus.device_loss_w).abs() < 1e-12);
    }
}
