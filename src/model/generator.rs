//! Permanent-magnet DC generator: E = k_e·ω, τ = k_t·i with k_t = k_e in SI, copper R(T).

use crate::scenario::setup::Generator;
use crate::units::v_per_krpm_to_v_s_per_rad;

/// Temperature coefficient of annealed copper at 20 °C, 1/K (Dellinger 1911).
pub const COPPER_ALPHA_PER_K: f64 = 0.00393;

/// Current scale below which the brush drop is smoothed to zero, A.
const BRUSH_SMOOTH_A: f64 = 0.02;

/// Generator parameters in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeneratorModel {
    /// Back-EMF constant, V·s/rad (equal to the torque constant in N·m/A).
    pub ke_v_s_per_rad: f64,
    /// Armature resistance at 20 °C, Ω.
    pub resistance_20c_ohm: f64,
    /// Armature inductance, H.
    pub inductance_h: f64,
    /// Rotor inertia, kg·m².
    pub inertia_kg_m2: f64,
    /// Brush drop at full current, V.
    pub brush_drop_v: f64,
    /// Winding heat capacity, J/K.
    pub winding_heat_capacity_j_per_k: f64,
    /// Winding-to-ambient conductance, W/K.
    pub winding_to_ambient_w_per_k: f64,
}

impl GeneratorModel {
    /// Converts the datasheet-unit configuration once.
    pub fn from_config(g: &Generator) -> Self {
        Self {
            ke_v_s_per_rad: v_per_krpm_to_v_s_per_rad(g.back_emf_v_per_krpm),
            resistance_20c_ohm: g.resistance_ohm,
            inductance_h: g.inductance_h,
            inertia_kg_m2: g.inertia_kg_m2,
            brush_drop_v: g.brush_drop_v,
            winding_heat_capacity_j_per_k: g.winding_heat_capacity_j_per_k,
            winding_to_ambient_w_per_k: g.winding_to_ambient_w_per_k,
        }
    }

    /// Back-EMF E = k_e·ω, V (negative when cranked backwards).
    pub fn emf_v(&self, omega_rad_s: f64) -> f64 {
        self.ke_v_s_per_rad * omega_rad_s
    }

    /// Electromagnetic torque τ = k_t·i with k_t = k_e (E·i = τ·ω), N·m.
    pub fn torque_n_m(&self, current_a: f64) -> f64 {
        self.ke_v_s_per_rad * current_a
    }

    /// Winding resistance R(T) = R20·(1 + α·(T − 20)), Ω.
    pub fn resistance_ohm(&self, winding_c: f64) -> f64 {
        copper_resistance(self.resistance_20c_ohm, winding_c)
    }

    /// Brush drop, smoothed through zero current: V_b·tanh(i/i_s), V.
    pub fn brush_drop(&self, current_a: f64) -> f64 {
        if self.brush_drop_v == 0.0 {
            return 0.0;
        }
        self.brush_drop_v * (current_a / BRUSH_SMOOTH_A).tanh()
    }

    /// Derivative of [`Self::brush_drop`] with respect to current, Ω.
    pub fn brush_drop_slope(&self, current_a: f64) -> f64 {
        if self.brush_drop_v == 0.0 {
            return 0.0;
        }
        let t = (current_a / BRUSH_SMOOTH_A).tanh();
        self.brush_drop_v * (1.0 - t * t) / BRUSH_SMOOTH_A
    }
}

/// Copper resistance at `temp_c` from its value at 20 °C: R20·(1 + 0.00393·(T − 20)).
pub fn copper_resistance(r20_ohm: f64, temp_c: f64) -> f64 {
    r20_ohm * (1.0 + COPPER_ALPHA_PER_K * (temp_c - 20.0))
}
