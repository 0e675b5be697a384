//! Lumped thermal masses: m·c_p·dT/dt = heat − h·A·(T − T_amb).

/// A lumped thermal body exchanging heat with ambient air.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Lumped {
    /// Heat capacity m·c_p, J/K.
    pub heat_capacity_j_per_k: f64,
    /// Conductance to ambient h·A, W/K.
    pub conductance_w_per_k: f64,
}

impl Lumped {
    /// Temperature rate, K/s, for heat input `heat_w` at temperature `temp_c` in `ambient_c`.
    pub fn rate_k_per_s(&self, heat_w: f64, temp_c: f64, ambient_c: f64) -> f64 {
        (heat_w - self.conductance_w_per_k * (temp_c - ambient_c)) / self.heat_capacity_j_per_k
    }

    /// Time constant τ = m·c_p/(h·A), s.
    pub fn time_constant_s(&self) -> f64 {
        self.heat_capacity_j_per_k / self.conductance_w_per_k
    }

    /// Steady-state rise for a constant heat input, K: ΔT = P/(h·A).
    pub fn steady_rise_k(&self, heat_w: f64) -> f64 {
        heat_w / self.conductance_w_per_k
    }
}
