//! Averaged asynchronous buck charger (state-space averaging, Middlebrook & Ćuk 1976;
//! Erickson & Maksimović ch. 2, 5 and 7): volt-second balance with switch, catch-diode and DCR drops.
//!
//! CCM inductor balance: d·(V_in − V_sw − I·R_on) − (1 − d)·V_D − I·R_L = V_o.
//! Input current d·I + I_q + ½·I·t_tr·f_sw (switching loss ½·V·I·t·f referred to the input).

use crate::scenario::setup::Converter;

/// Buck charger parameters in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BuckModel {
    pub max_duty: f64,
    pub switch_drop_v: f64,
    pub switch_resistance_ohm: f64,
    pub catch_drop_v: f64,
    pub inductor_resistance_ohm: f64,
    pub inductance_h: f64,
    pub switching_frequency_hz: f64,
    pub switch_transition_s: f64,
    pub quiescent_current_a: f64,
}

/// Loss breakdown of the converter at one operating point, W.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ConverterLosses {
    pub switch_w: f64,
    pub catch_diode_w: f64,
    pub inductor_w: f64,
    pub quiescent_w: f64,
    pub switching_w: f64,
}

impl ConverterLosses {
    /// Sum of all losses, W.
    pub fn total_w(&self) -> f64 {
        self.switch_w + self.catch_diode_w + self.inductor_w + self.quiescent_w + self.switching_w
    }
}

impl BuckModel {
    /// Builds the model from the converter configuration.
    pub fn from_config(c: &Converter) -> Self {
        Self {
            max_duty: c.max_duty,
            switch_drop_v: c.switch_drop_v,
            switch_resistance_ohm: c.switch_resistance_ohm,
            catch_drop_v: c.catch_diode_drop_v,
            inductor_resistance_ohm: c.inductor_resistance_ohm,
            inductance_h: c.inductance_h,
            switching_frequency_hz: c.switching_frequency_hz,
            switch_transition_s: c.switch_transition_s,
            quiescent_current_a: c.quiescent_current_a,
        }
    }

    /// CCM duty for output current `i` at input `v_in` and output `v_o` (volt-second balance).
    pub fn ccm_duty(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let den = v_in - self.switch_drop_v - i * self.switch_resistance_ohm + self.catch_drop_v;
        if den <= 0.0 {
            return f64::INFINITY;
        }
        (v_o + self.catch_drop_v + i * self.inductor_resistance_ohm) / den
    }

    /// Input voltage at which the duty for (`v_o`, `i`) reaches D_max: the dropout edge, V.
    pub fn dropout_input_v(&self, v_o: f64, i: f64) -> f64 {
        (v_o + self.catch_drop_v + i * self.inductor_resistance_ohm) / self.max_duty
            + self.switch_drop_v
            + i * self.switch_resistance_ohm
            - self.catch_drop_v
    }

    /// Volt-second residual at duty D_max: D·(V_in − V_sw − I·R_on + V_D) − V_D − I·R_L − V_o.
    /// Positive means the converter could push more than `i` at this input.
    pub fn dropout_residual(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let d = self.max_duty;
        d * (v_in - self.switch_drop_v - i * self.switch_resistance_ohm + self.catch_drop_v)
            - self.catch_drop_v
            - i * self.inductor_resistance_ohm
            - v_o
    }

    /// d(dropout_residual)/dI at fixed V_in and V_o, Ω (negative).
    pub fn dropout_residual_slope(&self) -> f64 {
        -(self.max_duty * self.switch_resistance_ohm + self.inductor_resistance_ohm)
    }

    /// Switching-loss current referred to the input: ½·I·t_tr·f_sw, A.
    pub fn switching_current_a(&self, i: f64) -> f64 {
        0.5 * i * self.switch_transition_s * self.switching_frequency_hz
    }

    /// Input current at duty `d` and output current `i`: d·I + I_q + ½·I·t_tr·f_sw, A.
    pub fn input_current_a(&self, d: f64, i: f64) -> f64 {
        d * i + self.quiescent_current_a + self.switching_current_a(i)
    }

    /// Losses at duty `d`, output current `i`, input `v_in` (same CCM-form balance as the duty).
    pub fn losses(&self, d: f64, i: f64, v_in: f64) -> ConverterLosses {
        ConverterLosses {
            switch_w: d * i * (self.switch_drop_v + i * self.switch_resistance_ohm),
            catch_diode_w: (1.0 - d) * i * self.catch_drop_v,
            inductor_w: i * i * self.inductor_resistance_ohm,
            quiescent_w: v_in * self.quiescent_current_a,
            switching_w: v_in * self.switching_current_a(i),
        }
    }

    /// Duty actually applied, reporting discontinuous conduction (Erickson ch. 5) when the ripple
    /// would reverse the inductor current: DCM when I < I_crit = (V_in − V_sw − V_o)·d·T/(2L), and then
    /// d = √(2·L·I / (T·a·(1 + a/b))) with a = V_in − V_sw − V_o, b = V_o + V_D.
    pub fn reported_duty(&self, v_in: f64, v_o: f64, i: f64, d_ccm: f64) -> (f64, bool) {
        let a = v_in - self.switch_drop_v - i * self.switch_resistance_ohm - v_o;
        let b = v_o + self.catch_drop_v;
        if a <= 0.0 || b <= 0.0 || i <= 0.0 {
            return (d_ccm, false);
        }
        let period = 1.0 / self.switching_frequency_hz;
        let i_crit = a * d_ccm * period / (2.0 * self.inductance_h);
        if i >= i_crit {
            return (d_ccm, false);
        }
        let d = (2.0 * self.inductance_h * i / (period * a * (1.0 + a / b))).sqrt();
        (d.min(d_ccm), true)
    }
}

/// Erickson's ideal buck DCM conversion ratio M = 2/(1 + √(1 + 4K/D²)), K = 2L/(R·T_s),
/// valid for K < 1 − D; CCM gives M = D.
pub fn buck_conversion_ratio(d: f64, k: f64) -> f64 {
    if k >= 1.0 - d {
        d
    } else {
        2.0 / (1.0 + (1.0 + 4.0 * k / (d * d)).sqrt())
    }
}
