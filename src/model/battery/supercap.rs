//! Supercapacitor (electric double-layer capacitor) bank of N_s × N_p cells: an ideal capacitance
//! behind its equivalent series resistance, with its leakage as a resistance across it.
//!
//! V = V_c + ESR·I, C·dV_c/dt = I − V_c/R_leak. The state of charge is the charge fraction
//! Q/Q_rated = V_c/V_rated, so the stored energy is ½·C·V_c² = ½·C·V_rated²·SOC². The usable
//! share of the energy above a lowest voltage V_min is 1 − (V_min/V_rated)²: half the rated
//! voltage leaves 75 %. The capacitance is taken as constant (real cells gain a few per cent with
//! voltage), the ESR as independent of temperature and frequency, and the leakage as a fixed
//! resistance (real leakage falls over hours at a held voltage).
//!
//! A cell cannot be charged past its rated voltage in this model: at the rated voltage it stores
//! no more, and the current pushed in becomes heat (in a real cell, electrolyte decomposition
//! that ages it fast or vents it). The charger's CV set point holds the terminal there; the
//! overcharge alert watches the terminal voltage.

use super::thermal_of;
use crate::model::thermal::Lumped;
use crate::scenario::setup::Battery;

/// SOC width over which the capacitance stops taking charge at the rated voltage: 1e-4 of it
/// (0.27 mV a 2.7-V cell), well under the ESR drop of any charge current worth the name, so a
/// CV charger's taper is the capacitor's own.
const ACCEPTANCE_WIDTH: f64 = 1e-4;

/// Fraction of a net charging current the capacitance takes at `soc`: 1 − exp(−(1 − SOC)/w),
/// zero at the rated voltage and negative past it (pulling SOC back). A modelling construction
/// that keeps SOC at or below 1 (see the module doc), not a published law.
pub fn charge_acceptance(soc: f64) -> f64 {
    -(-(1.0 - soc) / ACCEPTANCE_WIDTH).exp_m1()
}

/// Default rated voltage per cell, V. Common practice: organic-electrolyte EDLC cells are rated
/// 2.5–2.7 V (2.7 V the most common; some newer cells 3.0 V).
pub const DEFAULT_RATED_V_PER_CELL: f64 = 2.7;

/// Least RC time constant ESR·C of one cell, s. Common practice: makers' tables give double-layer
/// cells a time constant of about 0.5–2 s for large cells (350 F at 3.2 mΩ: 1.1 s) and longer
/// for small ones, whose ESR is higher. Below about 20 ms the bank's taper outruns the fast
/// fidelity's explicit steps (SOC overshoots full); the floor keeps a margin of more than two.
pub const MIN_TIME_CONSTANT_S: f64 = 0.05;

/// Supercapacitor bank parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct SupercapModel {
    pub cells_series: f64,
    pub cells_parallel: f64,
    /// Capacitance of one cell, F.
    pub cell_capacitance_f: f64,
    /// Rated voltage of one cell, V.
    pub rated_v_per_cell: f64,
    /// ESR of one cell, Ω.
    pub cell_esr_ohm: f64,
    /// Leakage current of one cell at its rated voltage, A.
    pub cell_leakage_a: f64,
    /// Lowest usable voltage of one cell, V.
    pub min_v_per_cell: f64,
    pub thermal: Lumped,
}

impl SupercapModel {
    /// Builds the bank from the configuration.
    pub fn from_config(b: &Battery) -> Self {
        let rated = b.charge_v_per_cell.unwrap_or(DEFAULT_RATED_V_PER_CELL);
        Self {
            cells_series: f64::from(b.cells_series),
            cells_parallel: f64::from(b.cells_parallel),
            cell_capacitance_f: b.capacitance_f.unwrap_or(1.0),
            rated_v_per_cell: rated,
            cell_esr_ohm: b.cell_r0_ohm,
            cell_leakage_a: b.leakage_current_a.unwrap_or(0.0),
            min_v_per_cell: b.min_v_per_cell.unwrap_or(0.5 * rated),
            thermal: thermal_of(b),
        }
    }

    /// Capacitance of the bank, F: C·N_p/N_s.
    pub fn capacitance_f(&self) -> f64 {
        self.cell_capacitance_f * self.cells_parallel / self.cells_series
    }

    /// Rated voltage of the bank, V.
    pub fn rated_v(&self) -> f64 {
        self.cells_series * self.rated_v_per_cell
    }

    /// Lowest usable voltage of the bank, V.
    pub fn min_v(&self) -> f64 {
        self.cells_series * self.min_v_per_cell
    }

    /// ESR of the bank, Ω: ESR·N_s/N_p.
    pub fn esr_ohm(&self) -> f64 {
        self.cell_esr_ohm * self.cells_series / self.cells_parallel
    }

    /// Charge held at the rated voltage, Ah: C·V_rated/3600 (what SOC 1 means).
    pub fn capacity_ah(&self) -> f64 {
        self.capacitance_f() * self.rated_v() / 3600.0
    }

    /// Capacitor voltage at `soc`, V: SOC·V_rated.
    pub fn voltage_v(&self, soc: f64) -> f64 {
        soc * self.rated_v()
    }

    /// Energy held at `soc`, J: ½·C·V².
    pub fn energy_j(&self, soc: f64) -> f64 {
        let v = self.voltage_v(soc);
        0.5 * self.capacitance_f() * v * v
    }

    /// Share of the energy at the rated voltage that lies above the lowest usable voltage:
    /// 1 − (V_min/V_rated)².
    pub fn usable_fraction(&self) -> f64 {
        1.0 - (self.min_v_per_cell / self.rated_v_per_cell).powi(2)
    }

    /// Energy above the lowest usable voltage at `soc`, J: ½·C·(V² − V_min²), 0 below it.
    pub fn usable_energy_j(&self, soc: f64) -> f64 {
        let v = self.voltage_v(soc);
        let v_min = self.min_v();
        0.5 * self.capacitance_f() * (v * v - v_min * v_min).max(0.0)
    }

    /// Leakage current of the bank at capacitor voltage `v_c`, A: v_c/R_leak with R_leak set by
    /// the leakage at the rated voltage.
    pub fn leakage_a(&self, v_c: f64) -> f64 {
        if self.cell_leakage_a <= 0.0 {
            return 0.0;
        }
        self.cell_leakage_a * self.cells_parallel * v_c / self.rated_v()
    }

    /// Fraction of a net charging current (beyond the leakage) the capacitance takes at `soc`:
    /// 1 below the rated voltage, zero at it ([`charge_acceptance`]).
    pub fn charge_efficiency(&self, soc: f64) -> f64 {
        charge_acceptance(soc)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bank() -> SupercapModel {
        SupercapModel {
            cells_series: 6.0,
            cells_parallel: 2.0,
            cell_capacitance_f: 100.0,
            rated_v_per_cell: 2.7,
            cell_esr_ohm: 0.01,
            cell_leakage_a: 1e-3,
            min_v_per_cell: 1.35,
            thermal: Lumped {
                heat_capacity_j_per_k: 100.0,
                conductance_w_per_k: 1.0,
            },
        }
    }

    #[test]
    fn series_and_parallel_scale_capacitance_esr_and_leakage() {
        let b = bank();
        assert!((b.capacitance_f() - 100.0 * 2.0 / 6.0).abs() < 1e-12);
        assert!((b.esr_ohm() - 0.01 * 3.0).abs() < 1e-12);
        assert!((b.leakage_a(b.rated_v()) - 2e-3).abs() < 1e-15);
        assert!((b.capacity_ah() * 3600.0 - b.capacitance_f() * 16.2).abs() < 1e-9);
    }
}
