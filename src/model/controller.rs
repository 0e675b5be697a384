//! The charger's two control loops (detailed fidelity): an outer voltage loop that sets the current
//! reference (CV) and an inner current loop that sets the duty (CC); the lower demand wins, with
//! anti-windup by back-calculation. The fast fidelity is this controller at its ideal limit.

use crate::model::converter::{BuckBoostModel, BuckModel, LinearModel};

/// Loop gains, designed from the converter and battery at build time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ControllerGains {
    /// Current loop: duty per ampere of error.
    pub kp_i: f64,
    /// Current loop: duty per ampere-second.
    pub ki_i: f64,
    /// Voltage loop: amperes per volt of error.
    pub kp_v: f64,
    /// Voltage loop: amperes per volt-second.
    pub ki_v: f64,
    /// Back-calculation time of both integrators, s.
    pub anti_windup_s: f64,
    /// Input-floor error scale: volts of output error per volt of input error (the plant sets it
    /// to 0.05·R_batt/R_source, so the input loop crosses over a twentieth as fast as the voltage
    /// loop, under the armature-inductance/input-capacitor resonance).
    pub input_error_scale: f64,
}

impl ControllerGains {
    /// Current-loop crossover at f_sw/30 against the inductor (di/dd ≈ V_in/(L·s));
    /// voltage loop a decade slower against the battery's slope resistance.
    pub fn design(buck: &BuckModel, input_v_nominal: f64, battery_slope_ohm: f64) -> Self {
        let wc_i = 2.0 * std::f64::consts::PI * buck.switching_frequency_hz / 30.0;
        let kp_i = wc_i * buck.inductance_h / input_v_nominal.max(1.0);
        let wc_v = wc_i / 10.0;
        let r = battery_slope_ohm.max(1e-3);
        Self {
            kp_i,
            ki_i: kp_i * wc_i / 4.0,
            kp_v: 0.1 / r,
            ki_v: wc_v / r,
            anti_windup_s: 4.0 / wc_v,
            input_error_scale: 1.0,
        }
    }
}

/// Controller outputs and integrator rates at one instant.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ControlOutput {
    /// Duty applied, 0 … D_max.
    pub duty: f64,
    /// Current reference after soft-start and the CC limit, A.
    pub current_ref_a: f64,
    /// The voltage loop asks for less than the CC limit.
    pub cv_active: bool,
    /// Duty held at D_max while the current is short of its reference.
    pub saturated: bool,
    /// The input floor's error sets the current reference below the CC limit: the charger trims
    /// its current to hold its input (input-limited, not holding its set point).
    pub floor_limited: bool,
    /// d(voltage integrator)/dt, A/s.
    pub voltage_rate: f64,
    /// d(current integrator)/dt, 1/s.
    pub current_rate: f64,
}

/// Inputs of one controller evaluation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ControlInput {
    pub cc_limit_a: f64,
    pub v_set: f64,
    /// Soft-start ramp 0 … 1.
    pub ramp: f64,
    pub input_v: f64,
    pub output_v: f64,
    pub inductor_a: f64,
    pub voltage_integrator: f64,
    pub current_integrator: f64,
    /// Input-voltage floor, V (switching chargers): the lower of the two error demands wins.
    pub input_floor_v: Option<f64>,
}

/// Evaluates both loops. Feed-forward duty (V_o + V_D)/(V_in − V_sw + V_D) keeps the current loop's
/// integrator small across input changes.
pub fn control(g: &ControllerGains, buck: &BuckModel, x: &ControlInput) -> ControlOutput {
    let vl = voltage_loop(x, g);
    let current_ref = vl.current_ref;
    let e_i = current_ref - x.inductor_a;
    let den = x.input_v - buck.switch_drop_v + buck.catch_drop_v;
    let d_ff = if den > 0.0 {
        ((buck.cell_v(x.output_v) + buck.catch_drop_v) / den).clamp(0.0, buck.max_duty)
    } else {
        buck.max_duty
    };
    let d_cmd = d_ff + g.kp_i * e_i + x.current_integrator;
    let duty = d_cmd.clamp(0.0, buck.max_duty);
    let saturated = d_cmd >= buck.max_duty && current_ref > 0.0;
    ControlOutput {
        duty,
        current_ref_a: current_ref,
        cv_active: vl.cv_active,
        saturated,
        floor_limited: vl.floor_limited,
        voltage_rate: voltage_rate(g, x, &vl) + cascade_back_calculation(g, duty, d_cmd),
        current_rate: g.ki_i * e_i + (duty - d_cmd) / g.anti_windup_s,
    }
}

/// Cascade anti-windup: while the current loop's duty is clamped, the current it cannot deliver,
/// (d_cmd − d)/kp_i, is fed back into the voltage integrator (back-calculation through the inner
/// loop). Without it the voltage loop keeps integrating through a dropout and, when the input
/// recovers, asks for its wound-up current at once: the battery overshot its set point by up to
/// 0.44 mV on `lead-acid-buck` (uneven profile, detailed fidelity).
fn cascade_back_calculation(g: &ControllerGains, duty: f64, d_cmd: f64) -> f64 {
    (duty - d_cmd) / (g.kp_i * g.anti_windup_s)
}

/// The shared voltage loop's demand.
struct VoltageLoop {
    current_ref: f64,
    cv_active: bool,
    /// The input floor's error is the one in force and keeps the reference below CC.
    floor_limited: bool,
    /// Error in force, V.
    e_v: f64,
    /// PI output before the [0, CC] clamp, A.
    i_v: f64,
}

/// Voltage loop shared by every topology: the lower of the output error and the (scaled) input
/// floor error drives one PI whose output, clamped to [0, CC], is the current reference.
fn voltage_loop(x: &ControlInput, g: &ControllerGains) -> VoltageLoop {
    let e_out = x.v_set - x.output_v;
    let e_in = x
        .input_floor_v
        .map_or(f64::INFINITY, |f| g.input_error_scale * (x.input_v - f));
    let e_v = e_out.min(e_in);
    let i_v = x.voltage_integrator + g.kp_v * e_v;
    let current_ref = x.ramp.clamp(0.0, 1.0) * x.cc_limit_a.min(i_v.max(0.0));
    let below_cc = i_v < x.cc_limit_a;
    VoltageLoop {
        current_ref,
        cv_active: below_cc && e_out <= e_in,
        floor_limited: below_cc && e_in < e_out && x.cc_limit_a > 0.0,
        e_v,
        i_v,
    }
}

/// Voltage-integrator rate: integral of the error plus back-calculation to the [0, CC] clamp.
fn voltage_rate(g: &ControllerGains, x: &ControlInput, vl: &VoltageLoop) -> f64 {
    let i_v_clamped = vl.i_v.clamp(0.0, x.cc_limit_a);
    g.ki_v * vl.e_v + (i_v_clamped - vl.i_v) / g.anti_windup_s
}

/// Buck-boost loops: the voltage loop sets the battery-current reference I_ref; the inner loop
/// holds the inductor at I_ref/(1 − d_ss), where d_ss is the steady CCM duty for I_ref with every
/// drop (so in steady CCM the battery gets exactly I_ref); d_ss is also the feed-forward duty.
/// The current loop's plant gain di_L/dd ≈ (V_in + V_o)/L: design the gains with V_in + V_o.
pub fn control_buck_boost(
    g: &ControllerGains,
    bb: &BuckBoostModel,
    x: &ControlInput,
) -> ControlOutput {
    let vl = voltage_loop(x, g);
    let current_ref = vl.current_ref;
    let d_ff = bb
        .feed_forward_duty(x.input_v, x.output_v.max(0.0), current_ref)
        .max(0.0);
    let il_ref = current_ref / (1.0 - d_ff);
    let e_i = il_ref - x.inductor_a;
    let d_cmd = d_ff + g.kp_i * e_i + x.current_integrator;
    let duty = d_cmd.clamp(0.0, bb.max_duty);
    let saturated = d_cmd >= bb.max_duty && current_ref > 0.0;
    ControlOutput {
        duty,
        current_ref_a: current_ref,
        cv_active: vl.cv_active,
        saturated,
        floor_limited: vl.floor_limited,
        // The inner loop holds I_ref/(1 − d_ff): its unmet current scales back by (1 − d_ff).
        voltage_rate: voltage_rate(g, x, &vl)
            + (1.0 - d_ff) * cascade_back_calculation(g, duty, d_cmd),
        current_rate: g.ki_i * e_i + (duty - d_cmd) / g.anti_windup_s,
    }
}

/// Linear charger: the voltage loop sets the pass current directly (no inner loop; the current
/// integrator rests); saturated when the headroom cannot pass the reference (dropout).
pub fn control_linear(g: &ControllerGains, lin: &LinearModel, x: &ControlInput) -> ControlOutput {
    let vl = voltage_loop(x, g);
    let current_ref = vl.current_ref;
    let room = lin.max_current_a(x.input_v, x.output_v);
    let saturated = current_ref > 0.0 && room < current_ref;
    ControlOutput {
        duty: if x.input_v > 0.0 {
            (x.output_v / x.input_v).clamp(0.0, 1.0)
        } else {
            1.0
        },
        current_ref_a: current_ref,
        cv_active: vl.cv_active,
        saturated,
        floor_limited: vl.floor_limited,
        voltage_rate: voltage_rate(g, x, &vl),
        current_rate: -x.current_integrator / g.anti_windup_s,
    }
}
