//! Nickel-metal hydride pack of N_s × N_p cells: the Li-ion pack's first-order Thevenin circuit
//! (R0 and one RC pair, both Arrhenius in temperature) on an open-circuit voltage that falls as
//! the cell warms, with a charge acceptance that ends at full.
//!
//! Near full the positive electrode evolves oxygen instead of storing charge; in a sealed cell
//! the oxygen recombines at the negative electrode, so the whole of that current's energy becomes
//! heat (From memory: makers' NiMH handbooks, e.g. the charge-reaction chapters of Panasonic's
//! and Energizer's technical manuals). The cell warms, its voltage, which falls with temperature,
//! turns over: the voltage peak and drop (−ΔV) and the temperature rise (dT/dt) that chargers end
//! on both come out of that heating. Outside the model: the rate dependence of the charge
//! acceptance (a C/10 charge wastes more than a 1 C charge before full), the oxygen's
//! depolarisation of the negative electrode, the hysteresis between charge and rest voltage, and
//! self-discharge.

use super::{thermal_of, BatteryState};
use crate::model::interp::Pchip;
use crate::model::thermal::Lumped;
use crate::scenario::setup::Battery;
use crate::units::c_to_k;

/// SOC knots of the built-in OCV curve.
const SOC_KNOTS: [f64; 12] = [0.0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0];
/// Rested cell OCV at 25 °C, V: a generic curve of the usual shape (not a particular cell), flat
/// near 1.25–1.30 V through the middle, about 1.2 V nominal under load, rising into full.
const OCV_CELL: [f64; 12] = [
    1.10, 1.18, 1.21, 1.235, 1.25, 1.26, 1.27, 1.28, 1.29, 1.305, 1.335, 1.40,
];
/// Rise of the OCV per unit SOC past full (keeps the curve continuous; SOC stays at or below 1).
const OVERFULL_SLOPE_V: f64 = 0.6;
/// Temperature coefficient of the cell's open-circuit voltage, V/K. From memory: NiMH's charge
/// reaction is exothermic (its cells warm from the start of a charge, NiCd's cool), which puts
/// dE/dT near −1 mV/K; chargers' −ΔV relies on this fall with temperature.
pub const OCV_TEMPCO_V_PER_K: f64 = -0.9e-3;
/// SOC width over which the charge acceptance falls to zero at full: 1 − exp(−(1 − SOC)/w),
/// w = 0.02 (98 % at SOC 0.92, 92 % at 0.95, 63 % at 0.98). From memory: makers' charge-efficiency
/// curves for a fast charge stay near their top until the last few per cent and fall steeply
/// there; a −ΔV charger ends near 100–105 % of the capacity put in.
const ACCEPTANCE_WIDTH: f64 = 0.02;
/// Default coulombic efficiency below full (the acceptance adds the losses near full).
pub const DEFAULT_COULOMBIC: f64 = 0.98;
/// Default backup voltage limit per cell, V. From memory: NiMH chargers carry a maximum-voltage
/// cut-off near 1.6–1.8 V/cell, above the 1.4–1.6 V/cell a cell peaks at when charged at 1 C.
pub const DEFAULT_MAX_V_PER_CELL: f64 = 1.60;
/// Default voltage drop below the peak that ends a fast charge, mV per cell. Common practice:
/// NiMH chargers end on about 5–10 mV/cell (NiCd chargers on 10–20).
pub const DEFAULT_END_DROP_MV_PER_CELL: f64 = 5.0;
/// Default temperature rise rate that ends a fast charge, °C per minute (common practice: about
/// 1 °C/min for chargers with a thermistor on the pack).
pub const DEFAULT_END_RISE_C_PER_MIN: f64 = 1.0;
/// Default hold-off of both ends after the charger starts, s. Common practice: chargers wait one
/// to several minutes, since a cell that sat unused can show a false peak at first.
pub const DEFAULT_END_HOLDOFF_S: f64 = 60.0;
/// Reference temperature of the OCV curve and the resistances, °C.
const REFERENCE_C: f64 = 25.0;

/// Fraction of a charging current a NiMH cell stores at `soc` (before the coulombic
/// efficiency): 1 − exp(−(1 − SOC)/w), zero at full and negative past it (pulling SOC back).
pub fn charge_acceptance(soc: f64) -> f64 {
    -(-(1.0 - soc) / ACCEPTANCE_WIDTH).exp_m1()
}

/// NiMH pack parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct NimhModel {
    pub cells_series: f64,
    pub cells_parallel: f64,
    /// Pack capacity, Ah.
    pub capacity_ah: f64,
    /// Cell resistances at 25 °C, Ω, and RC capacitance, F.
    pub cell_r0_ohm: f64,
    pub cell_r1_ohm: f64,
    pub cell_c1_f: f64,
    /// Arrhenius temperature of the resistances, K.
    pub activation_k: f64,
    pub coulombic_efficiency: f64,
    /// The charger's backup voltage limit per cell, V.
    pub max_v_per_cell: f64,
    pub thermal: Lumped,
    ocv: Pchip,
}

impl NimhModel {
    /// Builds the pack from the configuration with NiMH defaults.
    pub fn from_config(b: &Battery) -> Self {
        let ocv = Pchip::new(&SOC_KNOTS, &OCV_CELL)
            .unwrap_or_else(|| Pchip::constant(OCV_CELL[OCV_CELL.len() - 1]));
        Self {
            cells_series: f64::from(b.cells_series),
            cells_parallel: f64::from(b.cells_parallel),
            capacity_ah: b.capacity_ah.unwrap_or(0.0),
            cell_r0_ohm: b.cell_r0_ohm,
            cell_r1_ohm: b.cell_r1_ohm,
            cell_c1_f: b.cell_c1_f,
            activation_k: b.resistance_activation_k,
            coulombic_efficiency: b.coulombic_efficiency.unwrap_or(DEFAULT_COULOMBIC),
            max_v_per_cell: b.charge_v_per_cell.unwrap_or(DEFAULT_MAX_V_PER_CELL),
            thermal: thermal_of(b),
            ocv,
        }
    }

    /// Cell OCV at 25 °C, V (monotone cubic through the table; linear rise past full).
    pub fn cell_ocv_v(&self, soc: f64) -> f64 {
        if soc > 1.0 {
            self.ocv.eval(1.0).0 + OVERFULL_SLOPE_V * (soc - 1.0)
        } else {
            self.ocv.eval(soc.max(0.0)).0
        }
    }

    /// Pack OCV at `temp_c`, V: N_s·(E25(SOC) + dE/dT·(T − 25 °C)).
    pub fn ocv_v(&self, soc: f64, temp_c: f64) -> f64 {
        self.cells_series * (self.cell_ocv_v(soc) + OCV_TEMPCO_V_PER_K * (temp_c - REFERENCE_C))
    }

    /// Fraction of a charging current stored at `soc`: the coulombic efficiency times the
    /// [`charge_acceptance`] that ends at full; the rest evolves oxygen and heats the cell.
    pub fn charge_efficiency(&self, soc: f64) -> f64 {
        self.coulombic_efficiency * charge_acceptance(soc)
    }

    /// Pack (R0, R1, C1) at temperature: R scales by N_s/N_p (Arrhenius), C by N_p/N_s.
    pub fn pack_rc(&self, temp_c: f64) -> (f64, f64, f64) {
        let f = (self.activation_k * (1.0 / c_to_k(temp_c.max(-60.0)) - 1.0 / c_to_k(REFERENCE_C)))
            .exp();
        let k = self.cells_series / self.cells_parallel;
        (
            self.cell_r0_ohm * f * k,
            (self.cell_r1_ohm * f * k).max(1e-9),
            self.cell_c1_f / k,
        )
    }

    /// The charger's backup voltage limit of the pack, V.
    pub fn charge_limit_v(&self) -> f64 {
        self.cells_series * self.max_v_per_cell
    }

    /// Default trickle (top-off) current of the pack, A: C/30.
    pub fn default_trickle_a(&self) -> f64 {
        self.capacity_ah / 30.0
    }

    /// Terminal voltage and slope: V = OCV(SOC, T) + I·R0 + V_RC.
    pub fn terminal_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        let (r0, _, _) = self.pack_rc(s.temp_c);
        (self.ocv_v(s.soc, s.temp_c) + i * r0 + s.v_rc_v, r0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn acceptance_ends_at_full_and_pulls_back_past_it() {
        assert_eq!(charge_acceptance(1.0), 0.0);
        assert!(charge_acceptance(0.9) > 0.99);
        assert!(charge_acceptance(1.0 + 1e-6) < 0.0);
        let mut last = f64::INFINITY;
        for k in 0..=100 {
            let a = charge_acceptance(f64::from(k) / 100.0);
            assert!(a <= last, "falls towards full");
            last = a;
        }
    }

    #[test]
    fn built_in_curve_rises() {
        assert!(OCV_CELL.windows(2).all(|w| w[1] > w[0]));
    }
}
