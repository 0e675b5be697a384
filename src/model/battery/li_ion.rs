//! Li-ion pack as a first-order Thevenin equivalent circuit (Plett 2015, ch. 2):
//! V = OCV(SOC) + I·R0(T) + V_RC, dV_RC/dt = I/C1 − V_RC/(R1·C1); pack of N_s × N_p cells.

use super::{thermal_of, BatteryState};
use crate::model::interp::Pchip;
use crate::model::thermal::Lumped;
use crate::scenario::setup::{Battery, ChargeWindow, Chemistry};
use crate::units::c_to_k;

/// SOC knots of the built-in OCV curves.
const SOC_KNOTS: [f64; 12] = [0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0];
/// Typical NMC cell OCV, V (a generic curve of the usual shape, not a particular cell). SOC 1 is
/// defined as full at the CV voltage, so every built-in curve's top knot equals its chemistry's
/// default CV voltage ([`default_cv_v_per_cell`]).
const OCV_NMC: [f64; 12] = [
    3.00, 3.40, 3.50, 3.59, 3.64, 3.69, 3.74, 3.81, 3.90, 3.99, 4.09, 4.20,
];
/// Typical LCO cell OCV, V.
const OCV_LCO: [f64; 12] = [
    3.00, 3.45, 3.57, 3.66, 3.71, 3.75, 3.79, 3.85, 3.93, 4.01, 4.10, 4.20,
];
/// Typical NCA cell OCV, V.
const OCV_NCA: [f64; 12] = [
    3.00, 3.35, 3.46, 3.56, 3.62, 3.67, 3.72, 3.79, 3.88, 3.97, 4.07, 4.20,
];
/// Typical LiFePO4 cell OCV, V: long flat plateau, steep ends; full at the 3.65-V CV voltage.
const OCV_LFP: [f64; 12] = [
    2.50, 3.05, 3.15, 3.22, 3.26, 3.28, 3.29, 3.30, 3.31, 3.32, 3.35, 3.65,
];
/// OCV slope beyond full (overcharge region), V per unit SOC per cell. SOC stays at or below 1
/// by construction ([`charge_acceptance`]); the slope only keeps the curve continuous there.
const OVERFULL_SLOPE_V: f64 = 3.0;
/// SOC width over which a cell's charge acceptance falls to zero at full (see
/// [`charge_acceptance`]): 99.3 % of the charge is still stored at SOC 0.99, 99.99 % at 0.98.
const ACCEPTANCE_WIDTH: f64 = 0.002;

/// Fraction of the charging current a cell stores at `soc`: 1 − exp(−(1 − SOC)/w), w = 0.002. A full
/// cell stores nothing more: the rest of an overcharge current goes into side reactions (heat,
/// booked as coulombic loss, so the energy ledger stays closed). SOC 1 is then a fixed point the
/// charge cannot pass: SOC stays in [0, 1] whatever the charger or the operator does. Past full
/// (by a rounding error of the integrator) the fraction turns negative and pulls SOC back.
/// A modelling construction, not a published law: Li-ion coulombic efficiency is near 1 until full.
pub fn charge_acceptance(soc: f64) -> f64 {
    -(-(1.0 - soc) / ACCEPTANCE_WIDTH).exp_m1()
}

/// The built-in OCV curve of a chemistry: (SOC knots, cell OCV in V).
pub fn builtin_ocv(chem: Chemistry) -> (&'static [f64], &'static [f64]) {
    let table: &'static [f64; 12] = match chem {
        Chemistry::Lco => &OCV_LCO,
        Chemistry::Nca => &OCV_NCA,
        Chemistry::Lfp => &OCV_LFP,
        _ => &OCV_NMC,
    };
    (&SOC_KNOTS, table)
}

/// The cell OCV at SOC 1 a battery's configuration gives (its `ocv_curve`, else the built-in), V.
pub fn full_ocv_v_per_cell(b: &Battery) -> f64 {
    match &b.ocv_curve {
        Some(points) if !points.is_empty() => points[points.len() - 1].ocv_v,
        _ => *builtin_ocv(b.chemistry).1.last().unwrap_or(&0.0),
    }
}

/// Default coulombic efficiency of a Li-ion cell (above 99 %, REFERENCES §2).
pub const DEFAULT_COULOMBIC: f64 = 0.998;

/// Default CV voltage per cell, V (BU-409: 4.20 for LCO/NMC/NCA; 3.65 for LiFePO4).
pub fn default_cv_v_per_cell(chem: Chemistry) -> f64 {
    match chem {
        Chemistry::Lfp => 3.65,
        _ => 4.20,
    }
}

/// Li-ion pack parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct LiIonModel {
    pub chemistry: Chemistry,
    pub cells_series: f64,
    pub cells_parallel: f64,
    /// Pack capacity, Ah.
    pub capacity_ah: f64,
    /// Cell resistances at 25 °C, Ω, and RC capacitance, F.
    pub cell_r0_ohm: f64,
    pub cell_r1_ohm: f64,
    pub cell_c1_f: f64,
    /// Arrhenius temperature, K.
    pub activation_k: f64,
    pub coulombic_efficiency: f64,
    /// CV voltage per cell at standard temperature, V.
    pub cv_v_per_cell: f64,
    pub window: ChargeWindow,
    pub thermal: Lumped,
    ocv: Pchip,
}

impl LiIonModel {
    /// Builds the pack from the configuration with chemistry defaults.
    pub fn from_config(b: &Battery) -> Self {
        let (knots, table) = builtin_ocv(b.chemistry);
        let builtin = || Pchip::new(knots, table);
        // The setup's curve is validated (monotone, SOC 0 … 1); the built-in one stands in for a
        // curve that is not, so building never fails.
        let ocv = b
            .ocv_curve
            .as_ref()
            .and_then(|pts| {
                let soc: Vec<f64> = pts.iter().map(|p| p.soc).collect();
                let v: Vec<f64> = pts.iter().map(|p| p.ocv_v).collect();
                Pchip::new(&soc, &v)
            })
            .or_else(builtin)
            .unwrap_or_else(|| Pchip::constant(table[table.len() - 1]));
        Self {
            chemistry: b.chemistry,
            cells_series: f64::from(b.cells_series),
            cells_parallel: f64::from(b.cells_parallel),
            capacity_ah: b.capacity_ah.unwrap_or(0.0),
            cell_r0_ohm: b.cell_r0_ohm,
            cell_r1_ohm: b.cell_r1_ohm,
            cell_c1_f: b.cell_c1_f,
            activation_k: b.resistance_activation_k,
            coulombic_efficiency: b.coulombic_efficiency.unwrap_or(DEFAULT_COULOMBIC),
            cv_v_per_cell: b
                .charge_v_per_cell
                .unwrap_or_else(|| default_cv_v_per_cell(b.chemistry)),
            window: b.charge_window.clone(),
            thermal: thermal_of(b),
            ocv,
        }
    }

    /// Cell OCV, V (monotone cubic through the table; linear rise past full).
    pub fn cell_ocv_v(&self, soc: f64) -> f64 {
        if soc > 1.0 {
            self.ocv.eval(1.0).0 + OVERFULL_SLOPE_V * (soc - 1.0)
        } else {
            self.ocv.eval(soc).0
        }
    }

    /// Fraction of a charging current stored at `soc`: the coulombic efficiency times the
    /// [`charge_acceptance`] that ends at full.
    pub fn charge_efficiency(&self, soc: f64) -> f64 {
        self.coulombic_efficiency * charge_acceptance(soc)
    }

    /// Pack OCV, V.
    pub fn ocv_v(&self, soc: f64) -> f64 {
        self.cells_series * self.cell_ocv_v(soc)
    }

    /// Arrhenius factor exp(E·(1/T − 1/298.15)) for the resistances.
    fn arrhenius(&self, temp_c: f64) -> f64 {
        (self.activation_k * (1.0 / c_to_k(temp_c.max(-60.0)) - 1.0 / 298.15)).exp()
    }

    /// Pack (R0, R1, C1) at temperature: R scales by N_s/N_p, C by N_p/N_s.
    pub fn pack_rc(&self, temp_c: f64) -> (f64, f64, f64) {
        let f = self.arrhenius(temp_c);
        let k = self.cells_series / self.cells_parallel;
        (
            self.cell_r0_ohm * f * k,
            (self.cell_r1_ohm * f * k).max(1e-9),
            self.cell_c1_f / k,
        )
    }

    /// Terminal voltage and slope: V = OCV + I·R0 + V_RC.
    pub fn terminal_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        let (r0, _, _) = self.pack_rc(s.temp_c);
        (self.ocv_v(s.soc) + i * r0 + s.v_rc_v, r0)
    }

    /// Current giving terminal voltage `v`.
    pub fn current_at_v(&self, v: f64, s: &BatteryState) -> f64 {
        let (r0, _, _) = self.pack_rc(s.temp_c);
        let rest = self.ocv_v(s.soc) + s.v_rc_v;
        if r0 > 0.0 {
            (v - rest) / r0
        } else if v > rest {
            f64::INFINITY
        } else {
            f64::NEG_INFINITY
        }
    }

    /// dV_RC/dt = I/C1 − V_RC/(R1·C1).
    pub fn v_rc_rate(&self, i: f64, s: &BatteryState) -> f64 {
        let (_, r1, c1) = self.pack_rc(s.temp_c);
        rc_branch_rate(i, s.v_rc_v, r1, c1)
    }

    /// Charge limit at battery temperature: N_s·V_cv, reduced in the warm band.
    pub fn charge_limit_v(&self, temp_c: f64) -> f64 {
        let drop = match self.band(temp_c) {
            TempBand::Warm => self.window.warm_cv_drop_v_per_cell,
            _ => 0.0,
        };
        self.cells_series * (self.cv_v_per_cell - drop)
    }

    /// Which charge-temperature band the battery is in.
    pub fn band(&self, temp_c: f64) -> TempBand {
        band_of(&self.window, temp_c)
    }
}

/// Rate of the Thevenin RC-branch voltage, dV_RC/dt = I/C1 − V_RC/(R1·C1), V/s (Plett 2015, ch. 2).
pub fn rc_branch_rate(i: f64, v_rc_v: f64, r1_ohm: f64, c1_f: f64) -> f64 {
    i / c1_f - v_rc_v / (r1_ohm * c1_f)
}

/// Charge-temperature band after the JEITA-style guideline.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TempBand {
    /// Below the minimum: no charge.
    TooCold,
    /// Cool band: reduced current.
    Cool,
    /// Standard band.
    Standard,
    /// Warm band: reduced CV voltage.
    Warm,
    /// Above the maximum: no charge.
    TooHot,
}

/// Band of a temperature in a window.
pub fn band_of(w: &ChargeWindow, temp_c: f64) -> TempBand {
    if temp_c < w.min_c {
        TempBand::TooCold
    } else if temp_c < w.cool_c {
        TempBand::Cool
    } else if temp_c <= w.warm_c {
        TempBand::Standard
    } else if temp_c <= w.max_c {
        TempBand::Warm
    } else {
        TempBand::TooHot
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The acceptance ends exactly at full, is near 1 below 0.98, never rises with SOC, and
    /// turns negative past full (the pull back that keeps SOC at or below 1).
    #[test]
    fn charge_acceptance_ends_at_full_and_pulls_back_past_it() {
        assert_eq!(charge_acceptance(1.0), 0.0);
        assert!(charge_acceptance(0.98) > 0.9999);
        assert!((charge_acceptance(0.99) - (1.0 - (-5.0_f64).exp())).abs() < 1e-12);
        assert!(charge_acceptance(1.0 + 1e-6) < 0.0);
        let mut last = f64::INFINITY;
        for k in 0..=1000 {
            let a = charge_acceptance(f64::from(k) / 1000.0);
            assert!(a <= last && (0.0..=1.0).contains(&a), "soc {k}/1000: {a}");
            last = a;
        }
    }

    /// Every built-in curve rises and ends at its chemistry's default CV voltage, so SOC 1 is
    /// full at CV (the convention the charge acceptance and the CV rule rest on).
    #[test]
    fn built_in_curves_end_at_the_cv_voltage() {
        for chem in [
            Chemistry::Nmc,
            Chemistry::Lco,
            Chemistry::Nca,
            Chemistry::Lfp,
        ] {
            let (soc, v) = builtin_ocv(chem);
            assert_eq!(soc.len(), v.len());
            assert!(v.windows(2).all(|w| w[1] > w[0]), "{chem:?} rises");
            assert_eq!(v[v.len() - 1], default_cv_v_per_cell(chem), "{chem:?}");
        }
    }
}
