//! The electrical network with every state integrated (detailed fidelity): armature current with
//! L_a, input and output capacitor voltages, inductor current averaged over a switching period in
//! CCM or DCM (full-order averaged model: the catch diode conducts for d2 ≤ 1 − d).
//! The fast fidelity's [`crate::model::network`] is this network with these states at rest.

use crate::model::battery::Terminal;
use crate::model::converter::{BuckBoostModel, BuckModel, ConverterLosses, LinearModel};
use crate::model::network::{NetworkPoint, Source};

/// The fast electrical states.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FastStates {
    pub armature_a: f64,
    pub input_v: f64,
    pub inductor_a: f64,
    pub output_v: f64,
}

/// Their rates.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FastRates {
    pub armature: f64,
    pub input: f64,
    pub inductor: f64,
    pub output: f64,
}

/// Circuit constants of the detailed network.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CircuitConstants {
    pub armature_inductance_h: f64,
    pub input_capacitance_f: f64,
    pub output_capacitance_f: f64,
}

/// What the converter does this instant.
#[derive(Debug, Clone, Copy)]
pub enum Drive<'a> {
    /// Locked out: duty 0, the inductor empties through the catch diode.
    Off(&'a BuckModel),
    /// Switching at `duty`.
    Switching { buck: &'a BuckModel, duty: f64 },
    /// Buck-boost switching at `duty` (0 when locked out: the inductor empties through both diodes).
    BuckBoost {
        model: &'a BuckBoostModel,
        duty: f64,
    },
    /// Linear charger passing `current_a` (limited by its headroom); `on` false when locked out.
    Linear {
        model: &'a LinearModel,
        current_a: f64,
        on: bool,
    },
    /// No converter: the input capacitor sits across the battery.
    Direct,
}

/// Armature current rate L·di/dt = E − i·R − V_b − V_D − v_in; a blocking diode holds i at 0.
/// An alternator's DC-side current is the same equation with its bridge's output for E and the
/// two conducting phases' inductance for L (the averaged model of the phase currents).
fn armature_rate(src: &Source, k: &CircuitConstants, i_raw: f64, v_in: f64) -> (f64, f64) {
    let blocks = src.diode.blocks_reverse();
    let i = if blocks { i_raw.max(0.0) } else { i_raw };
    let push = src.node_v(i) - v_in;
    let threshold = src.threshold_v();
    let rate = if blocks && i_raw <= 0.0 && push - threshold <= 0.0 {
        0.0
    } else if blocks && i_raw <= 0.0 {
        (push - threshold) / k.armature_inductance_h
    } else {
        push / k.armature_inductance_h
    };
    (i, rate)
}

/// Evaluates the network from its states: the operating point (same fields as the fast solve)
/// and the state rates.
pub fn evaluate(
    src: &Source,
    k: &CircuitConstants,
    term: &Terminal,
    drive: Drive,
    x: &FastStates,
) -> (NetworkPoint, FastRates) {
    let (i_a, di_a) = armature_rate(src, k, x.armature_a, x.input_v);
    match drive {
        Drive::BuckBoost { model, duty } => buck_boost(src, k, term, model, duty, x, i_a, di_a),
        Drive::Linear {
            model,
            current_a,
            on,
        } => {
            let v_in = x.input_v;
            let v_o = x.output_v;
            let pass = if on {
                current_a.max(0.0).min(model.max_current_a(v_in, v_o))
            } else {
                0.0
            };
            let iq = if on { model.quiescent_current_a } else { 0.0 };
            let ib = term.current_at(v_o);
            let p = NetworkPoint {
                generator_current_a: i_a,
                input_v: v_in,
                // A linear charger does not switch: no duty to report.
                duty: 0.0,
                balance_duty: if v_in > 0.0 {
                    (v_o / v_in).clamp(0.0, 1.0)
                } else {
                    1.0
                },
                battery_current_a: ib,
                battery_v: v_o,
                diode_v: src.diode_drop(i_a),
                brush_v: src.generator.brush_drop(i_a),
                losses: ConverterLosses {
                    pass_w: pass * (v_in - v_o),
                    quiescent_w: v_in * iq,
                    ..Default::default()
                },
                ..NetworkPoint::default()
            };
            let r = FastRates {
                armature: di_a,
                input: (i_a - pass - iq) / k.input_capacitance_f,
                inductor: 0.0,
                output: (pass - ib) / k.output_capacitance_f,
            };
            (p, r)
        }
        Drive::Direct => {
            let ib = term.current_at(x.input_v);
            let p = NetworkPoint {
                generator_current_a: i_a,
                input_v: x.input_v,
                duty: 1.0,
                balance_duty: 1.0,
                battery_current_a: ib,
                battery_v: x.input_v,
                diode_v: src.diode_drop(i_a),
                brush_v: src.generator.brush_drop(i_a),
                ..NetworkPoint::default()
            };
            let r = FastRates {
                armature: di_a,
                input: (i_a - ib) / k.input_capacitance_f,
                inductor: 0.0,
                output: 0.0,
            };
            (p, r)
        }
        Drive::Off(buck) | Drive::Switching { buck, .. } => {
            let d = match drive {
                Drive::Switching { duty, .. } => duty,
                _ => 0.0,
            };
            let i_l = x.inductor_a.max(0.0);
            let v_o = x.output_v;
            let v_in = x.input_v;
            // The switching cell sees the output plus an always-on output diode (buck mode of a
            // buck-boost; 0 for a buck).
            let a = v_in - buck.switch_drop_v - i_l * buck.switch_resistance_ohm - buck.cell_v(v_o);
            let b = buck.cell_v(v_o) + buck.catch_drop_v;
            let (d2, dcm) =
                diode_interval(d, a, i_l, buck.inductance_h, buck.switching_frequency_hz);
            let dcm = dcm || (i_l <= 0.0 && d <= 0.0);
            let di_l = inductor_rate(
                (d, a),
                (d2, b),
                buck.inductor_resistance_ohm,
                buck.inductance_h,
                x.inductor_a,
            );
            let switching = d > 0.0;
            let i_in = if switching {
                let share = if d + d2 > 0.0 { d / (d + d2) } else { 1.0 };
                share * i_l
                    + buck.quiescent_current_a
                    + buck.switching_current_a(i_l)
                    + buck.core_current_a(v_in)
            } else {
                0.0
            };
            let overhead_w = if switching {
                buck.overhead.power_w(v_in)
            } else {
                0.0
            };
            let ib = term.current_at(v_o);
            let loss = v_in * i_in - v_o * i_l - i_l * buck.inductance_h * di_l;
            let p = averaged_point(src, i_a, v_in, d, dcm, ib, v_o, (loss, overhead_w));
            let r = FastRates {
                armature: di_a,
                input: (i_a - i_in) / k.input_capacitance_f,
                inductor: di_l,
                output: (i_l - ib) / k.output_capacitance_f,
            };
            (p, r)
        }
    }
}

/// The network with a current sink on the output capacitor instead of a battery (a USB device
/// drawing `sink(v_o)` from the bus): the converter evaluated with its output open, then the sink's
/// current taken from the output capacitor. The point's battery side is the bus: (sink current, v_o).
pub fn evaluate_with_sink(
    src: &Source,
    k: &CircuitConstants,
    drive: Drive,
    x: &FastStates,
    sink: impl Fn(f64) -> f64,
) -> (NetworkPoint, FastRates) {
    // current_at(v_o) of this terminal is exactly zero: an open output.
    let open = Terminal::Linear {
        rest_v: x.output_v,
        r_ohm: 1.0,
    };
    let (mut p, mut r) = evaluate(src, k, &open, drive, x);
    let i = sink(x.output_v);
    p.battery_current_a = i;
    r.output -= i / k.output_capacitance_f;
    (p, r)
}

/// Full-order averaged buck-boost: on-interval slope a = v_in − 2V_sw − 2·i_L·R_on, off-interval
/// b = v_o + 2V_D; the diodes conduct for d2 = 2L·i_L/(d·T·a) − d when that is below 1 − d (DCM),
/// else 1 − d. The input takes the share d/(d + d2) of i_L, the output d2/(d + d2).
#[allow(clippy::too_many_arguments)]
fn buck_boost(
    src: &Source,
    k: &CircuitConstants,
    term: &Terminal,
    bb: &BuckBoostModel,
    d: f64,
    x: &FastStates,
    i_a: f64,
    di_a: f64,
) -> (NetworkPoint, FastRates) {
    let i_l = x.inductor_a.max(0.0);
    let v_in = x.input_v;
    let v_o = x.output_v;
    let a = v_in - 2.0 * bb.switch_drop_v - 2.0 * i_l * bb.switch_resistance_ohm;
    let b = bb.off_v(v_o);
    let (d2, dcm) = diode_interval(d, a, i_l, bb.inductance_h, bb.switching_frequency_hz);
    let di_l = inductor_rate(
        (d, a),
        (d2, b),
        bb.inductor_resistance_ohm,
        bb.inductance_h,
        x.inductor_a,
    );
    let (share_in, share_out) = if d + d2 > 0.0 {
        (d / (d + d2), d2 / (d + d2))
    } else {
        (0.0, 0.0)
    };
    let i_in = if d > 0.0 {
        share_in * i_l
            + bb.quiescent_current_a
            + bb.switching_fraction() * i_l
            + bb.core_current_a(v_in)
    } else {
        0.0
    };
    let overhead_w = if d > 0.0 {
        bb.overhead.power_w(v_in)
    } else {
        0.0
    };
    let i_out = share_out * i_l;
    let ib = term.current_at(v_o);
    let loss = v_in * i_in - v_o * i_out - i_l * bb.inductance_h * di_l;
    let p = averaged_point(src, i_a, v_in, d, dcm, ib, v_o, (loss, overhead_w));
    let r = FastRates {
        armature: di_a,
        input: (i_a - i_in) / k.input_capacitance_f,
        inductor: di_l,
        output: (i_out - ib) / k.output_capacitance_f,
    };
    (p, r)
}

/// Diode conduction interval d2 of the full-order averaged model and whether the stage is in DCM:
/// d2 = 2·L·i_L/(d·T·a) − d while that is below 1 − d (a = voltage across L while switched on),
/// else 1 − d (CCM); 0 when the inductor is empty and the switch is off.
fn diode_interval(d: f64, a: f64, i_l: f64, inductance_h: f64, f_sw: f64) -> (f64, bool) {
    if d > 0.0 && a > 0.0 {
        let d2 = 2.0 * inductance_h * i_l * f_sw / (d * a) - d;
        if d2 < 1.0 - d {
            (d2.max(0.0), true)
        } else {
            (1.0 - d, false)
        }
    } else if i_l > 0.0 {
        (1.0 - d, false)
    } else {
        (0.0, false)
    }
}

/// Averaged inductor rate L·di/dt = d·a − d2·b − i·R_L; an empty inductor cannot go negative.
fn inductor_rate(
    (d, a): (f64, f64),
    (d2, b): (f64, f64),
    r_l: f64,
    inductance_h: f64,
    i_raw: f64,
) -> f64 {
    let i_l = i_raw.max(0.0);
    let rate = (d * a - d2 * b - i_l * r_l) / inductance_h;
    if i_raw <= 0.0 && rate < 0.0 {
        0.0
    } else {
        rate
    }
}

/// Operating point of an averaged switching stage; its losses are the power balance
/// v_in·i_in − (power to the output) − (inductor energy rate), booked as one figure but for the
/// gate-drive and core loss (`overhead_w`, part of it), booked apart.
#[allow(clippy::too_many_arguments)]
fn averaged_point(
    src: &Source,
    i_a: f64,
    v_in: f64,
    d: f64,
    dcm: bool,
    ib: f64,
    v_o: f64,
    (loss_w, overhead_w): (f64, f64),
) -> NetworkPoint {
    NetworkPoint {
        generator_current_a: i_a,
        input_v: v_in,
        duty: d,
        balance_duty: d,
        dcm,
        battery_current_a: ib,
        battery_v: v_o,
        dropout: false,
        floor_limited: false,
        diode_v: src.diode_drop(i_a),
        brush_v: src.generator.brush_drop(i_a),
        losses: ConverterLosses {
            switch_w: loss_w - overhead_w,
            overhead_w,
            ..Default::default()
        },
    }
}

/// Energy held in the fast elements, J: ½L_a·i² + ½C_in·v_in² + ½L·i_L² + ½C_o·v_o².
pub fn field_energy_j(k: &CircuitConstants, inductance_h: f64, x: &FastStates) -> f64 {
    0.5 * k.armature_inductance_h * x.armature_a * x.armature_a
        + 0.5 * k.input_capacitance_f * x.input_v * x.input_v
        + 0.5 * inductance_h * x.inductor_a * x.inductor_a
        + 0.5 * k.output_capacitance_f * x.output_v * x.output_v
}
