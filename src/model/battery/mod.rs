//! Storage models behind one interface: Li-ion Thevenin pack, lead-acid battery, NiMH pack or
//! supercapacitor bank.

pub mod lead_acid;
pub mod li_ion;
pub mod nimh;
pub mod supercap;

use crate::model::thermal::Lumped;
use crate::scenario::setup::{Battery, Chemistry};

pub use lead_acid::LeadAcidModel;
pub use li_ion::LiIonModel;
pub use nimh::NimhModel;
pub use supercap::SupercapModel;

/// Slow battery states the integrator carries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BatteryState {
    /// State of charge, 0 … 1.
    pub soc: f64,
    /// Voltage across the RC pair (Li-ion RC branch, lead-acid charge polarisation), V.
    pub v_rc_v: f64,
    /// Battery temperature, °C.
    pub temp_c: f64,
    /// Lead-acid: progress 0 … 1 of Copetti's time law from the gassing to the end-of-charge
    /// voltage (0 for Li-ion).
    pub gassing_progress: f64,
}

impl BatteryState {
    /// A rested battery: no RC voltage, no gassing history.
    pub fn rested(soc: f64, temp_c: f64) -> Self {
        Self {
            soc,
            v_rc_v: 0.0,
            temp_c,
            gassing_progress: 0.0,
        }
    }
}

/// Power flows inside the battery at one instant, W.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BatteryPowers {
    /// Ohmic heat in the series resistance and RC resistor (lead-acid: the whole over-voltage
    /// (V − OCV)·I), W.
    pub ohmic_w: f64,
    /// Heat of the charge that does not store: OCV times the current that does not store, less
    /// what leaves as gas, W.
    pub coulombic_loss_w: f64,
    /// Rate of chemical storage OCV·η·I, W.
    pub stored_w: f64,
    /// Rate of energy stored in the RC capacitance, W.
    pub rc_store_w: f64,
    /// Lead-acid: chemical energy leaving as gas, thermoneutral voltage × gassing current that
    /// escapes, W (0 for Li-ion).
    pub gas_w: f64,
    /// NiMH: heat of the oxygen that the charge current evolves instead of storing, recombined
    /// inside the sealed cell, W (OCV × the current not stored).
    pub recombination_w: f64,
    /// Supercapacitor: heat of the leakage current across the capacitance, W.
    pub leakage_w: f64,
}

impl BatteryPowers {
    /// Heat released in the battery, W.
    pub fn heat_w(&self) -> f64 {
        self.ohmic_w + self.coulombic_loss_w + self.recombination_w + self.leakage_w
    }
}

/// Rates of the slow battery states at one instant.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BatteryRates {
    /// dSOC/dt, 1/s.
    pub soc: f64,
    /// dV_RC/dt, V/s.
    pub v_rc: f64,
    /// Lead-acid: d(gassing progress)/dt, 1/s (0 for Li-ion).
    pub progress: f64,
}

/// Any storage kind.
#[derive(Debug, Clone, PartialEq)]
pub enum BatteryModel {
    LiIon(LiIonModel),
    LeadAcid(LeadAcidModel),
    Nimh(NimhModel),
    Supercap(SupercapModel),
}

impl BatteryModel {
    /// Builds the model with chemistry defaults filled in.
    pub fn from_config(b: &Battery) -> Self {
        match b.chemistry {
            Chemistry::LeadAcid => BatteryModel::LeadAcid(LeadAcidModel::from_config(b)),
            Chemistry::Nimh => BatteryModel::Nimh(NimhModel::from_config(b)),
            Chemistry::Supercap => BatteryModel::Supercap(SupercapModel::from_config(b)),
            Chemistry::Nmc | Chemistry::Lco | Chemistry::Nca | Chemistry::Lfp => {
                BatteryModel::LiIon(LiIonModel::from_config(b))
            }
        }
    }

    /// Capacity, A·s (a supercapacitor's: the charge at its rated voltage).
    pub fn capacity_as(&self) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.capacity_ah * 3600.0,
            BatteryModel::LeadAcid(m) => m.capacity_ah * 3600.0,
            BatteryModel::Nimh(m) => m.capacity_ah * 3600.0,
            BatteryModel::Supercap(m) => m.capacity_ah() * 3600.0,
        }
    }

    /// Open-circuit voltage of the whole battery at 25 °C, V (a supercapacitor's capacitor
    /// voltage).
    pub fn ocv_v(&self, soc: f64) -> f64 {
        self.ocv_at(soc, 25.0)
    }

    /// Open-circuit voltage of the whole battery at `temp_c`, V (only NiMH's depends on it).
    pub fn ocv_at(&self, soc: f64, temp_c: f64) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.ocv_v(soc),
            BatteryModel::LeadAcid(m) => m.ocv_v(soc),
            BatteryModel::Nimh(m) => m.ocv_v(soc, temp_c),
            BatteryModel::Supercap(m) => m.voltage_v(soc),
        }
    }

    /// Terminal voltage at current `i` (charging positive) on the static characteristic
    /// ([`Self::static_terminal`]), V, with its slope dV/dI, Ω.
    pub fn terminal_v(&self, i: f64, s: &BatteryState) -> (f64, f64) {
        self.static_terminal(s).v(i)
    }

    /// The terminal characteristic at an instant (the RC voltage held): what the electrical
    /// network sees. A line through OCV + V_RC with slope R0, for both chemistries.
    pub fn terminal<'a>(&'a self, s: &BatteryState) -> Terminal<'a> {
        self.freeze(s).terminal()
    }

    /// The characteristic static design figures read (`check`): for lead-acid the charge curve
    /// with its polarisation settled at each current; for Li-ion the instantaneous line at the
    /// state's RC voltage, as the figures always were.
    pub fn static_terminal<'a>(&'a self, s: &BatteryState) -> Terminal<'a> {
        match self {
            BatteryModel::LeadAcid(m) => Terminal::Curve {
                model: m,
                state: *s,
            },
            _ => self.terminal(s),
        }
    }

    /// The battery's incremental impedance at a charger's voltage-loop crossover (kHz), Ω: its
    /// ohmic R0, the RC pair being a short there. For lead-acid it is the same at every SOC, so a
    /// loop designed for it keeps its crossover while the battery fills; for Li-ion it is largest
    /// at the coldest, the start.
    pub fn crossover_impedance_ohm(&self, s: &BatteryState) -> f64 {
        self.freeze(s).r0_ohm
    }

    /// Lead-acid: charge current beyond which the model runs outside its fitted range, A.
    pub fn fit_limit_a(&self) -> Option<f64> {
        match self {
            BatteryModel::LeadAcid(m) => Some(m.fit_limit_a()),
            _ => None,
        }
    }

    /// The state-dependent parameters (OCV, Thevenin R0, R1, C1 at the temperature) at one
    /// instant, computed once so that one evaluation of the chain looks them up once.
    pub fn freeze<'a>(&'a self, s: &BatteryState) -> Frozen<'a> {
        let (r0_ohm, r1_ohm, c1_f) = match self {
            BatteryModel::LiIon(m) => m.pack_rc(s.temp_c),
            BatteryModel::LeadAcid(m) => (m.ohmic_r_ohm(), 0.0, 0.0),
            BatteryModel::Nimh(m) => m.pack_rc(s.temp_c),
            BatteryModel::Supercap(m) => (m.esr_ohm(), 0.0, 0.0),
        };
        Frozen {
            model: self,
            state: *s,
            ocv_v: self.ocv_at(s.soc, s.temp_c),
            r0_ohm,
            r1_ohm,
            c1_f,
        }
    }

    /// Current at which the static terminal voltage equals `v`, A (negative below the rest
    /// voltage).
    pub fn current_at_v(&self, v: f64, s: &BatteryState) -> f64 {
        self.static_terminal(s).current_at(v)
    }

    /// Charge limit of the battery terminals at battery temperature `temp_c`, V.
    pub fn charge_limit_v(&self, temp_c: f64) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.charge_limit_v(temp_c),
            BatteryModel::LeadAcid(m) => m.absorption_v(temp_c),
            BatteryModel::Nimh(m) => m.charge_limit_v(),
            BatteryModel::Supercap(m) => m.rated_v(),
        }
    }

    /// Cells in series (per-cell tolerances scale with it).
    pub fn series_cells(&self) -> f64 {
        match self {
            BatteryModel::LiIon(m) => m.cells_series,
            BatteryModel::LeadAcid(m) => m.cells,
            BatteryModel::Nimh(m) => m.cells_series,
            BatteryModel::Supercap(m) => m.cells_series,
        }
    }

    /// Lead-acid float voltage at `temp_c`, V; None for the other kinds.
    pub fn float_v(&self, temp_c: f64) -> Option<f64> {
        match self {
            BatteryModel::LeadAcid(m) => Some(m.float_v(temp_c)),
            _ => None,
        }
    }

    /// dSOC/dt at current `i`, 1/s.
    pub fn soc_rate(&self, i: f64, s: &BatteryState) -> f64 {
        self.freeze(s).rates(i).soc
    }

    /// Charge efficiency at current `i` (1 on discharge).
    pub fn charge_efficiency(&self, i: f64, s: &BatteryState) -> f64 {
        if i <= 0.0 {
            return 1.0;
        }
        match self {
            BatteryModel::LiIon(m) => m.charge_efficiency(s.soc),
            BatteryModel::LeadAcid(m) => m.charge_efficiency(i, s.soc),
            BatteryModel::Nimh(m) => m.charge_efficiency(s.soc),
            BatteryModel::Supercap(m) => m.charge_efficiency(s.soc),
        }
    }

    /// dV_RC/dt, V/s.
    pub fn v_rc_rate(&self, i: f64, s: &BatteryState) -> f64 {
        self.freeze(s).rates(i).v_rc
    }

    /// Internal power flows at current `i` with terminal voltage `v`.
    pub fn powers(&self, i: f64, v: f64, s: &BatteryState) -> BatteryPowers {
        self.freeze(s).powers(i, v)
    }

    /// Energy held in the RC capacitance, J. The lead-acid pair's power V_RC·I is booked as heat as
    /// it arrives (its capacitor τ1/R1 changes with the current), so it holds none here.
    pub fn rc_energy_j(&self, s: &BatteryState) -> f64 {
        match self {
            BatteryModel::LiIon(m) => {
                let (_, _, c1) = m.pack_rc(s.temp_c);
                0.5 * c1 * s.v_rc_v * s.v_rc_v
            }
            BatteryModel::Nimh(m) => {
                let (_, _, c1) = m.pack_rc(s.temp_c);
                0.5 * c1 * s.v_rc_v * s.v_rc_v
            }
            BatteryModel::LeadAcid(_) | BatteryModel::Supercap(_) => 0.0,
        }
    }

    /// Lumped thermal body of the battery.
    pub fn thermal(&self) -> Lumped {
        match self {
            BatteryModel::LiIon(m) => m.thermal,
            BatteryModel::LeadAcid(m) => m.thermal,
            BatteryModel::Nimh(m) => m.thermal,
            BatteryModel::Supercap(m) => m.thermal,
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
    /// Series (ohmic) resistance, Ω; Li-ion RC-branch resistance, Ω, and capacitance, F (0 for
    /// lead-acid, whose pair is nonlinear).
    pub r0_ohm: f64,
    pub r1_ohm: f64,
    pub c1_f: f64,
}

impl<'a> Frozen<'a> {
    /// The terminal characteristic V(I) at this instant: OCV + V_RC + R0·I.
    pub fn terminal(&self) -> Terminal<'a> {
        Terminal::Linear {
            rest_v: self.ocv_v + self.state.v_rc_v,
            r_ohm: self.r0_ohm,
        }
    }

    /// Rates of the slow states at current `i`.
    pub fn rates(&self, i: f64) -> BatteryRates {
        self.flows(i, self.ocv_v + self.state.v_rc_v + self.r0_ohm * i)
            .1
    }

    /// Internal power flows at current `i` with terminal voltage `v`.
    pub fn powers(&self, i: f64, v: f64) -> BatteryPowers {
        self.flows(i, v).0
    }

    /// Power flows and state rates at current `i` with terminal voltage `v`, evaluated once.
    ///
    /// Li-ion: stored OCV·η·I (η the coulombic efficiency times the charge acceptance, which
    /// ends at full), the coulombic loss OCV·(1 − η)·I as heat, the ohmic heat
    /// I²·R0 + V_RC²/R1 and the RC capacitor's store; dV_RC/dt = I/C1 − V_RC/(R1·C1).
    ///
    /// Lead-acid: stored OCV·η·I_m; the gassing current I_gas = I − η·I_m (what does not store)
    /// carries OCV·I_gas, of which the thermoneutral 1.481 V per cell leaves as gas for the share
    /// that escapes and the rest heats the cell; the over-voltage (V − OCV)·I heats it too. These
    /// add up to V·I exactly.
    pub fn flows(&self, i: f64, v: f64) -> (BatteryPowers, BatteryRates) {
        let s = &self.state;
        let ocv = self.ocv_v;
        match self.model {
            BatteryModel::LiIon(m) => {
                // Charge acceptance ends at full (li_ion::charge_acceptance): what is not stored
                // heats the cell, so SOC cannot pass 1.
                let eta = if i > 0.0 {
                    m.charge_efficiency(s.soc)
                } else {
                    1.0
                };
                let stored_a = if i > 0.0 { eta * i } else { i };
                (
                    BatteryPowers {
                        ohmic_w: i * i * self.r0_ohm + s.v_rc_v * s.v_rc_v / self.r1_ohm,
                        coulombic_loss_w: ocv * (i - stored_a),
                        stored_w: ocv * stored_a,
                        rc_store_w: s.v_rc_v * i - s.v_rc_v * s.v_rc_v / self.r1_ohm,
                        ..BatteryPowers::default()
                    },
                    BatteryRates {
                        soc: stored_a / (3600.0 * m.capacity_ah),
                        v_rc: li_ion::rc_branch_rate(i, s.v_rc_v, self.r1_ohm, self.c1_f),
                        progress: 0.0,
                    },
                )
            }
            BatteryModel::LeadAcid(m) => {
                let f = m.flows(i, s);
                let stored_a = i - f.gassing_a;
                let gas_w =
                    m.gas_escape_fraction() * lead_acid::THERMONEUTRAL_V * m.cells * f.gassing_a;
                (
                    BatteryPowers {
                        ohmic_w: (v - ocv) * i,
                        coulombic_loss_w: ocv * f.gassing_a - gas_w,
                        stored_w: ocv * stored_a,
                        gas_w,
                        ..BatteryPowers::default()
                    },
                    BatteryRates {
                        soc: f.soc_rate,
                        v_rc: f.v_rc_rate,
                        progress: f.progress_rate,
                    },
                )
            }
            BatteryModel::Nimh(m) => {
                // What the cell does not store evolves oxygen, which recombines inside the
                // sealed cell: its whole energy is heat.
                let stored_a = if i > 0.0 {
                    m.charge_efficiency(s.soc) * i
                } else {
                    i
                };
                (
                    BatteryPowers {
                        ohmic_w: i * i * self.r0_ohm + s.v_rc_v * s.v_rc_v / self.r1_ohm,
                        stored_w: ocv * stored_a,
                        rc_store_w: s.v_rc_v * i - s.v_rc_v * s.v_rc_v / self.r1_ohm,
                        recombination_w: ocv * (i - stored_a),
                        ..BatteryPowers::default()
                    },
                    BatteryRates {
                        soc: stored_a / (3600.0 * m.capacity_ah),
                        v_rc: li_ion::rc_branch_rate(i, s.v_rc_v, self.r1_ohm, self.c1_f),
                        progress: 0.0,
                    },
                )
            }
            BatteryModel::Supercap(m) => {
                // The leakage runs across the capacitance; of the net current beyond it, the
                // capacitance takes the share η, which ends at the rated voltage, and the rest is
                // heat (the acceptance construction keeps SOC ≤ 1). A CV charger's current then
                // tapers to the leakage, with nothing wasted.
                let leak_a = m.leakage_a(ocv);
                let net_a = i - leak_a;
                let stored_a = if net_a > 0.0 {
                    m.charge_efficiency(s.soc) * net_a
                } else {
                    net_a
                };
                (
                    BatteryPowers {
                        ohmic_w: i * i * self.r0_ohm,
                        coulombic_loss_w: ocv * (net_a - stored_a),
                        stored_w: ocv * stored_a,
                        leakage_w: ocv * leak_a,
                        ..BatteryPowers::default()
                    },
                    BatteryRates {
                        soc: stored_a / (3600.0 * m.capacity_ah()),
                        v_rc: 0.0,
                        progress: 0.0,
                    },
                )
            }
        }
    }
}

/// Terminal voltage as a function of current at a frozen battery state.
#[derive(Debug, Clone, Copy)]
pub enum Terminal<'a> {
    /// V = rest + I·R (Thevenin pack with its RC voltage frozen).
    Linear { rest_v: f64, r_ohm: f64 },
    /// Lead-acid charge curve with its polarisation settled (static figures only).
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
            Terminal::Curve { model, state } => model.settled_v(i, state),
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
            Terminal::Curve { model, state } => model.settled_current_at(v, state),
        }
    }
}
