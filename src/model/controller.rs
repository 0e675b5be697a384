//! The charger's two control loops (detailed fidelity): an outer voltage loop that sets the current
//! reference (CV) and an inner current loop that sets the duty (CC); the lower demand wins, with
//! anti-windup by back-calculation. The fast fidelity is this controller at its ideal limit.

use crate::model::converter::BuckModel;

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
}

/// Evaluates both loops. Feed-forward duty (V_o + V_D)/(V_in − V_sw + V_D) keeps the current loop's
/// integrator small across input changes.
pub fn control(g: &ControllerGains, buck: &BuckModel, x: &ControlInput) -> ControlOutput {
    let e_v = x.v_set - x.output_v;
    let i_v = x.voltage_integrator + g.kp_v * e_v;
    let i_v_clamped = i_v.clamp(0.0, x.cc_limit_a);
    let current_ref = x.ramp.clamp(0.0, 1.0) * x.cc_limit_a.min(i_v.max(0.0));
    let e_i = current_ref - x.inductor_a;
    let den = x.input_v - buck.switch_drop_v + buck.catch_drop_v;
    let d_ff = if den > 0.0 {
        ((x.output_v + buck.catch_drop_v) / den).clamp(0.0, buck.max_duty)
    } else {
        buck.max_duty
    };
    let d_cmd = d_ff + g.kp_i * e_i + x.current_integrator;
    let duty = d_cmd.clamp(0.0, buck.max_duty);
    ControlOutput {
        duty,
        current_ref_a: current_ref,
        cv_active: i_v < x.cc_limit_a,
        saturated: d_cmd >= buck.max_duty && current_ref > 0.0,
        voltage_rate: g.ki_v * e_v + (i_v_clamped - i_v) / g.anti_windup_s,
        current_rate: g.ki_i * e_i + (duty - d_cmd) / g.anti_windup_s,
    }
}
