//! Lead-acid battery of N cells: OCV(SOC), a charge over-voltage that rises steeply near full,
//! charge efficiency falling near full, and temperature-compensated absorption and float limits.
//!
//! The over-voltage keeps the structure of Copetti, Lorenzo & Chenlo (1993),
//! ΔV = (I/C10)·[A/(1 + (I/I10)^0.86) + B/(1 − SOC)^1.2 + 0.036]·(1 − 0.025·ΔT), bounded smoothly by
//! their end-of-charge voltage V_ec = [2.45 + 2.011·ln(1 + I/C10)]·(1 − 0.002·ΔT). A and B are set
//! here (A = 1.0, B = 0.27) so that C/10 at half charge sits near 2.2 V/cell, as VRLA charge curves
//! show; the efficiency and gassing laws are Copetti's as published.

use super::{thermal_of, BatteryState};
use crate::model::roots::newton_bracketed;
use crate::model::thermal::Lumped;
use crate::scenario::setup::{Battery, LeadAcidKind};

/// Rested OCV per cell at SOC 0, V (12 V block: 11.85 V empty).
const OCV_EMPTY_V: f64 = 1.975;
/// OCV rise per cell from empty to full, V (12 V block: 12.69 V full).
const OCV_SPAN_V: f64 = 0.14;
/// Over-voltage coefficients A and B of the Copetti-form charge law (see module doc).
const COEFF_A: f64 = 1.0;
const COEFF_B: f64 = 0.27;
/// Softness of the bound by the end-of-charge voltage, V.
const SOFT_BOUND_V: f64 = 0.01;
/// Ohmic resistance per cell on discharge, Ω·Ah (a 12 V 7 Ah block: ≈ 22 mΩ).
const DISCHARGE_R_OHM_AH: f64 = 0.026;
/// SOC used in place of 1 in (1 − SOC)^1.2 to keep the law finite.
const SOC_CEILING: f64 = 0.9995;

/// Default absorption voltage per cell at 25 °C by kind, V (BU-403; Linden).
pub fn default_absorption_v(kind: LeadAcidKind) -> f64 {
    match kind {
        LeadAcidKind::Flooded => 2.45,
        LeadAcidKind::Agm => 2.42,
        LeadAcidKind::Gel => 2.35,
    }
}

/// Default float voltage per cell at 25 °C by kind, V.
pub fn default_float_v(kind: LeadAcidKind) -> f64 {
    match kind {
        LeadAcidKind::Flooded => 2.23,
        LeadAcidKind::Agm | LeadAcidKind::Gel => 2.27,
    }
}

/// Lead-acid battery parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct LeadAcidModel {
    pub kind: LeadAcidKind,
    pub cells: f64,
    /// C10 capacity, Ah.
    pub capacity_ah: f64,
    pub absorption_v_per_cell: f64,
    pub float_v_per_cell: f64,
    /// Compensation, V/°C/cell (negative).
    pub temp_comp_v_per_c: f64,
    pub max_v_per_cell: f64,
    pub min_v_per_cell: f64,
    pub thermal: Lumped,
}

impl LeadAcidModel {
    /// Builds the battery from the configuration with kind defaults.
    pub fn from_config(b: &Battery) -> Self {
        Self {
            kind: b.lead_acid_kind,
            cells: f64::from(b.cells_series),
            capacity_ah: b.capacity_ah,
            absorption_v_per_cell: b
                .charge_v_per_cell
                .unwrap_or_else(|| default_absorption_v(b.lead_acid_kind)),
            float_v_per_cell: b
                .float_v_per_cell
                .unwrap_or_else(|| default_float_v(b.lead_acid_kind)),
            temp_comp_v_per_c: b.temp_comp_mv_per_c_per_cell.unwrap_or(-3.0) * 1e-3,
            max_v_per_cell: b.max_compensated_v_per_cell.unwrap_or(2.50),
            min_v_per_cell: b.min_compensated_v_per_cell.unwrap_or(2.20),
            thermal: thermal_of(b),
        }
    }

    /// Rested OCV per cell, V.
    pub fn cell_ocv_v(soc: f64) -> f64 {
        OCV_EMPTY_V + OCV_SPAN_V * soc.clamp(0.0, 1.0)
    }

    /// Battery OCV, V.
    pub fn ocv_v(&self, soc: f64) -> f64 {
        self.cells * Self::cell_ocv_v(soc)
    }

    /// Compensated limit per cell: V25 + k·(T − 25), clamped to [min, max], V.
    fn compensated(&self, v25: f64, temp_c: f64) -> f64 {
        (v25 + self.temp_comp_v_per_c * (temp_c - 25.0))
            .clamp(self.min_v_per_cell, self.max_v_per_cell)
    }

    /// Temperature-compensated absorption voltage of the battery, V.
    pub fn absorption_v(&self, temp_c: f64) -> f64 {
        self.cells * self.compensated(self.absorption_v_per_cell, temp_c)
    }

    /// Temperature-compensated float voltage of the battery, V.
    pub fn float_v(&self, temp_c: f64) -> f64 {
        self.cells
            * self
                .compensated(self.float_v_per_cell, temp_c)
                .min(self.compensated(self.absorption_v_per_cell, temp_c))
    }

    /// Cell voltage at current `i` (battery amps, charging positive).
    /// Cell voltage at current `i` and its slope dV/dI, V and Ω, both in closed form: with
    /// p = (I/I10)^0.86 the over-voltage x·g·k_T has slope k_T/C10·[g − 0.86·A·p/(1 + p)²], the
    /// end-of-charge bound 2.011·k_V/((1 + x)·C10), and the soft bound V = raw − s·softplus(z)
    /// blends them with the logistic σ(z): dV = (1 − σ)·d(raw) + σ·d(V_ec).
    fn cell_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        let ocv = Self::cell_ocv_v(s.soc);
        let c10 = self.capacity_ah;
        if i <= 0.0 {
            let r = DISCHARGE_R_OHM_AH / c10;
            return (ocv + i * r, r);
        }
        let x = i / c10;
        let p = (i / (0.1 * c10)).powf(0.86);
        let dt = s.temp_c - 25.0;
        let soc = s.soc.clamp(0.0, SOC_CEILING);
        let k_t = (1.0 - 0.025 * dt).max(0.1);
        let g = COEFF_A / (1.0 + p) + COEFF_B / (1.0 - soc).powf(1.2) + 0.036;
        let raw = ocv + x * g * k_t;
        let d_raw = k_t / c10 * (g - 0.86 * COEFF_A * p / ((1.0 + p) * (1.0 + p)));
        let vec = end_of_charge_v(x, dt);
        let d_vec = 2.011 * (1.0 - 0.002 * dt) / ((1.0 + x) * c10);
        // Smooth bound: raw below V_ec, tends to V_ec above it.
        let z = (raw - vec) / SOFT_BOUND_V;
        let (softplus, sigma) = if z > 30.0 {
            (z, 1.0)
        } else {
            let e = z.exp();
            (e.ln_1p(), e / (1.0 + e))
        };
        (
            raw - SOFT_BOUND_V * softplus,
            (1.0 - sigma) * d_raw + sigma * d_vec,
        )
    }

    /// Terminal voltage and its slope dV/dI (closed form), V and Ω.
    pub fn terminal_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        let (v, dv) = self.cell_v(i, s);
        (self.cells * v, (self.cells * dv).max(1e-9))
    }

    /// Current at which the terminal voltage equals `v`.
    pub fn current_at_v(&self, v: f64, s: &BatteryState) -> f64 {
        let rest = self.ocv_v(s.soc);
        if v <= rest {
            return (v - rest) / (self.cells * DISCHARGE_R_OHM_AH / self.capacity_ah);
        }
        // Above the end-of-charge bound the current grows without limit; cap the search.
        let hi = 50.0 * self.capacity_ah;
        if self.terminal_v(hi, s).0 < v {
            return hi;
        }
        newton_bracketed(0.0, hi, 0.0, 1e-9 * self.capacity_ah, |i| {
            let (vt, dv) = self.terminal_v(i, s);
            (vt - v, dv)
        })
    }

    /// Copetti's charge efficiency η = 1 − exp[(20.73/(I/I10 + 0.55))·(SOC − 1)].
    pub fn charge_efficiency(&self, i: f64, soc: f64) -> f64 {
        copetti_charge_efficiency(i / (0.1 * self.capacity_ah), soc)
    }
}

/// Copetti's charge efficiency for current ratio I/I10 at `soc`.
pub fn copetti_charge_efficiency(i_over_i10: f64, soc: f64) -> f64 {
    1.0 - ((20.73 / (i_over_i10.max(0.0) + 0.55)) * (soc.min(1.0) - 1.0)).exp()
}

/// Copetti's gassing voltage per cell Vg = [2.24 + 1.97·ln(1 + I/C10)]·(1 − 0.002·ΔT), V.
pub fn copetti_gassing_v(i_over_c10: f64, dt_k: f64) -> f64 {
    (2.24 + 1.97 * i_over_c10.max(0.0).ln_1p()) * (1.0 - 0.002 * dt_k)
}

/// Copetti's end-of-charge voltage per cell V_ec = [2.45 + 2.011·ln(1 + I/C10)]·(1 − 0.002·ΔT), V.
pub fn end_of_charge_v(i_over_c10: f64, dt_k: f64) -> f64 {
    (2.45 + 2.011 * i_over_c10.max(0.0).ln_1p()) * (1.0 - 0.002 * dt_k)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::battery::BatteryState;

    /// The closed-form slope is the derivative of the voltage: a central difference of the voltage
    /// itself agrees, below, across and above the end-of-charge bound, cold and warm.
    #[test]
    fn terminal_slope_is_the_derivative_of_the_voltage() {
        let m = LeadAcidModel {
            kind: LeadAcidKind::Agm,
            cells: 6.0,
            capacity_ah: 7.0,
            absorption_v_per_cell: 2.42,
            float_v_per_cell: 2.27,
            temp_comp_v_per_c: -3e-3,
            max_v_per_cell: 2.5,
            min_v_per_cell: 2.2,
            thermal: Lumped {
                heat_capacity_j_per_k: 1000.0,
                conductance_w_per_k: 0.5,
            },
        };
        for &(soc, temp_c) in &[(0.2, 25.0), (0.9, 25.0), (0.99, 0.0), (0.5, 40.0)] {
            let s = BatteryState {
                soc,
                v_rc_v: 0.0,
                temp_c,
            };
            for &i in &[-1.0_f64, 1e-3, 0.05, 0.7, 3.0, 20.0] {
                let h = 1e-6 * i.abs().max(1e-3);
                let (v, slope) = m.terminal_v(i, &s);
                let fd = (m.terminal_v(i + h, &s).0 - m.terminal_v(i - h, &s).0) / (2.0 * h);
                assert!(v.is_finite() && slope > 0.0, "soc {soc} T {temp_c} i {i}");
                assert!(
                    (slope - fd).abs() <= 1e-5 * fd.abs().max(1e-3),
                    "soc {soc} T {temp_c} i {i}: closed form {slope} vs central difference {fd}"
                );
            }
        }
    }
}
