//! Battery models behind one interface: Li-ion Thevenin pack or lead-acid battery.

pub mod lead_acid;
pub mod li_ion;

use crate::model::thermal::Lumped;
use crate::scenario::setup::{Battery, Chemistry};

pub use lead_acid::LeadAcidModel;
pub use li_ion::LiIonModel;

/// Slow battery states the integrator carries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BatteryState {
    /// State of charge, 0 … 1.
    pub soc: f64,
    /// Voltage across the RC branch (Li-ion), V.
    pub v_rc_v: f64,
    /// Battery temperature, °C.
    pub temp_c: f64,
}

/// Power flows inside the battery at one instant, W.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BatteryPowers {
    /// Ohmic heat in the series resistance and RC resistor (or the lead-acid over-voltage), W.
    pub ohmic_w: f64,
    /// Charge that does not store (coulombic inefficiency, gassing) times OCV, W.
    pub coulombic_loss_w: f64,
    /// Rate of chemical storage OCV·η·I, W.
    pub stored_w: f64,
    /// Rate of energy stored in the RC capacitance, W.
    pub rc_store_w: f64,
}

impl BatteryPowers {
    /// Heat released in the battery, W.
    pub fn heat_w(&self) -> f64 {
        self.ohmic_w + self.coulombic_loss_w
    }
}

/// Either battery kind.
#[derive(Debug, Clone, PartialEq)]
pub enum BatteryModel {
    LiIon(LiIonModel),
    LeadAcid(LeadAcidModel),
}

impl BatteryModel {
    /// Builds the model with chemistry defaults filled in.
    pub fn from_config(b: &Battery) -> Self {
        match b.chemistry {
            Chemistry::LeadAcid => BatteryModel::LeadAcid(LeadAcidModel::from_config(b)),
            _ => BatteryModel::LiIon(LiIonModel::from_config(b)),
        }
    }

    /// Capacity, A·s.
    pub fn capacity_as(&self) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.capacity_ah * 3600.0,
            BatteryModel::LeadAcid(m) => m.capacity_ah * 3600.0,
        }
    }

    /// Open-circuit voltage of the whole battery, V.
    pub fn ocv_v(&self, soc: f64) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.ocv_v(soc),
            BatteryModel::LeadAcid(m) => m.ocv_v(soc),
        }
    }

    /// Terminal voltage at current `i` (charging positive), V, with its slope dV/dI, Ω.
    pub fn terminal_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        match self {
            BatteryModel::LiIon(m) => m.terminal_v(i, s),
            BatteryModel::LeadAcid(m) => m.terminal_v(i, s),
        }
    }

    /// A view of the terminal characteristic at fixed state, cheap to evaluate many times.
    pub fn terminal<'a>(&'a self, s: &BatteryState) -> Terminal<'a> {
        self.freeze(s).terminal()
    }

    /// The state-dependent parameters (OCV, Thevenin R0, R1, C1 at the temperature) at one
    /// instant, computed once so that one evaluation of the chain looks them up once.
    pub fn freeze<'a>(&'a self, s: &BatteryState) -> Frozen<'a> {
        let (r0_ohm, r1_ohm, c1_f) = match self {
            BatteryModel::LiIon(m) => m.pack_rc(s.temp_c),
            BatteryModel::LeadAcid(_) => (0.0, 0.0, 0.0),
        };
        Frozen {
            model: self,
            state: *s,
            ocv_v: self.ocv_v(s.soc),
            r0_ohm,
            r1_ohm,
            c1_f,
        }
    }

    /// Current at which the terminal voltage equals `v`, A (negative if `v` is below the rest voltage).
    pub fn current_at_v(&self, v: f64, s: &BatteryState) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.current_at_v(v, s),
            BatteryModel::LeadAcid(m) => m.current_at_v(v, s),
        }
    }

    /// Charge limit of the battery terminals at battery temperature `temp_c`, V.
    pub fn charge_limit_v(&self, temp_c: f64) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.charge_limit_v(temp_c),
            BatteryModel::LeadAcid(m) => m.absorption_v(temp_c),
        }
    }

    /// Cells in series (per-cell tolerances scale with it).
    pub fn series_cells(&self) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.cells_series,
            BatteryModel::LeadAcid(m) => m.cells,
        }
    }

    /// Lead-acid float voltage at `temp_c`, V; None for Li-ion.
    pub fn float_v(&self, temp_c: f64) -> Option<f64> {
        match self {
            BatteryModel::LiIon(_) => None,
            BatteryModel::LeadAcid(m) => Some(m.float_v(temp_c)),
        }
    }

    /// dSOC/dt at current `i`, 1/s.
    pub fn soc_rate(&self, i: f64, s: &BatteryState) -> f64 {
        let eta = self.charge_efficiency(i, s);
        let eff_i = if i > 0.0 { eta * i } else { i };
        eff_i / self.capacity_as()
    }

    /// Charge efficiency at current `i` (1 on discharge).
    pub fn charge_efficiency(&self, i: f64, s: &BatteryState) -> f64 {
        if i <= 0.0 {
            return 1.0;
        }
        match self {
            BatteryModel::LiIon(m) => m.charge_efficiency(s.soc),
            BatteryModel::LeadAcid(m) => m.charge_efficiency(i, s.soc),
        }
    }

    /// dV_RC/dt, V/s (0 for lead-acid).
    pub fn v_rc_rate(&self, i: f64, s: &BatteryState) -> f64 {
        self.freeze(s).v_rc_rate(i)
    }

    /// Internal power flows at current `i` with terminal voltage `v`.
    pub fn powers(&self, i: f64, v: f64, s: &BatteryState) -> BatteryPowers {
        self.freeze(s).powers(i, v)
    }

    /// Energy held in the RC capacitance, J.
    pub fn rc_energy_j(&self, s: &BatteryState) -> f64 {
        match self {
            BatteryModel::LiIon(m) => {
                let (_, _, c1) = m.pack_rc(s.temp_c);
                0.5 * c1 * s.v_rc_v * s.v_rc_v
            }
            BatteryModel::LeadAcid(_) => 0.0,
        }
    }

    /// Lumped thermal body of the battery.
    pub fn thermal(&self) -> Lumped {
        match self {
            BatteryModel::LiIon(m) => m.thermal,
            BatteryModel::LeadAcid(m) => m.thermal,
        }
    }

    /// Nominal capacity, Ah.
    pub fn capacity_ah(&self) -> f64 {
        self.capacity_as() / 3600.0
    }
}

/// Lumped thermal body from the battery's mass and surface.
pub(crate) fn thermal_of(b: &Battery) -> Lumped {
    Lumped {
        heat_capacity_j_per_k: b.mass_kg * b.specific_heat_j_per_kg_k,
        conductance_w_per_k: b.heat_transfer_w_per_m2_k * b.surface_area_m2,
    }
}

/// A battery at one instant: its state and the parameters that depend on it.
#[derive(Debug, Clone, Copy)]
pub struct Frozen<'a> {
    model: &'a BatteryModel,
    pub state: BatteryState,
    /// Open-circuit voltage of the whole battery, V.
    pub ocv_v: f64,
    /// Li-ion pack series resistance, RC-branch resistance, Ω, and capacitance, F (0 for lead-acid).
    pub r0_ohm: f64,
    pub r1_ohm: f64,
    pub c1_f: f64,
}

impl<'a> Frozen<'a> {
    /// The terminal characteristic V(I) at this state.
    pub fn terminal(&self) -> Terminal<'a> {
        match self.model {
            BatteryModel::LiIon(_) => Terminal::Linear {
                rest_v: self.ocv_v + self.state.v_rc_v,
                r_ohm: self.r0_ohm,
            },
            BatteryModel::LeadAcid(m) => Terminal::Curve {
                model: m,
                state: self.state,
            },
        }
    }

    /// dV_RC/dt = I/C1 − V_RC/(R1·C1), V/s (0 for lead-acid).
    pub fn v_rc_rate(&self, i: f64) -> f64 {
        match self.model {
            BatteryModel::LiIon(_) => {
                li_ion::rc_branch_rate(i, self.state.v_rc_v, self.r1_ohm, self.c1_f)
            }
            BatteryModel::LeadAcid(_) => 0.0,
        }
    }

    /// Internal power flows at current `i` with terminal voltage `v`: stored OCV·η·I, the
    /// coulombic loss OCV·(1 − η)·I, and the ohmic heat (Li-ion I²·R0 + V_RC²/R1; lead-acid the
    /// over-voltage (V − OCV)·I).
    pub fn powers(&self, i: f64, v: f64) -> BatteryPowers {
        let s = &self.state;
        let ocv = self.ocv_v;
        let eta = self.model.charge_efficiency(i, s);
        let stored = ocv * if i > 0.0 { eta * i } else { i };
        let coulombic = if i > 0.0 { ocv * (1.0 - eta) * i } else { 0.0 };
        match self.model {
            BatteryModel::LiIon(_) => BatteryPowers {
                ohmic_w: i * i * self.r0_ohm + s.v_rc_v * s.v_rc_v / self.r1_ohm,
                coulombic_loss_w: coulombic,
                stored_w: stored,
                rc_store_w: s.v_rc_v * i - s.v_rc_v * s.v_rc_v / self.r1_ohm,
            },
            BatteryModel::LeadAcid(_) => BatteryPowers {
                ohmic_w: (v - ocv) * i,
                coulombic_loss_w: coulombic,
                stored_w: stored,
                rc_store_w: 0.0,
            },
        }
    }
}

/// Terminal voltage as a function of current at a frozen battery state.
#[derive(Debug, Clone, Copy)]
pub enum Terminal<'a> {
    /// V = rest + I·R (Thevenin pack with its RC voltage frozen).
    Linear { rest_v: f64, r_ohm: f64 },
    /// Lead-acid charge curve.
    Curve {
        model: &'a LeadAcidModel,
        state: BatteryState,
    },
}

impl Terminal<'_> {
    /// Terminal voltage and slope at current `i`.
    pub fn v(&self, i: f64) -> (f64, f64) {
        match self {
            Terminal::Linear { rest_v, r_ohm } => (rest_v + i * r_ohm, *r_ohm),
            Terminal::Curve { model, state } => model.terminal_v(i, state),
        }
    }

    /// Current at which the terminal voltage equals `v`.
    pub fn current_at(&self, v: f64) -> f64 {
        match self {
            Terminal::Linear { rest_v, r_ohm } => {
                if *r_ohm > 0.0 {
                    (v - rest_v) / r_ohm
                } else if v > *rest_v {
                    f64::INFINITY
                } else {
                    f64::NEG_INFINITY
                }
            }
            Terminal::Curve { model, state } => model.current_at_v(v, state),
        }
    }
}
