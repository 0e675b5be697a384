//! The generator: a permanent-magnet DC machine (E = k_e·ω, τ = k_t·i with k_t = k_e in SI, brush
//! drop) or a three-phase permanent-magnet alternator with its six-diode bridge, seen from the
//! bridge's DC side; both with copper R(T), magnets weakening with temperature, iron loss and
//! cogging.
//!
//! The alternator on its bridge is the usual averaged DC-side equivalent (From memory: Krause,
//! Wasynczuk & Sudhoff, Analysis of Electric Machinery and Drive Systems, the average-value model
//! of a three-phase bridge rectifier): a no-load output V_d0 = (3√2/π)·V_LL = k_dc·ω, the
//! commutation overlap of [`crate::model::bridge`] (its drop 3·ω_e·L_s/π·I_d in mode I, where
//! ω_e = p·ω), the copper of the two phases that carry the current (2·R_s: three phases carrying
//! 120° blocks of I_d lose 3·(2/3)·I_d²·R_s), two diode drops, and the two phases' inductance
//! 2·L_s in the current's path (the detailed fidelity's state). Copper and diodes dissipate;
//! overlap does not, so the torque is V_d(I_d)·I_d/ω.

use super::smooth;
use crate::model::bridge;
use crate::scenario::setup::{Generator, GeneratorKind};
use crate::units::{rpm_to_rad_s, v_per_krpm_to_v_s_per_rad};

/// Temperature coefficient of annealed copper at 20 °C, 1/K (Dellinger 1911).
pub const COPPER_ALPHA_PER_K: f64 = 0.00393;

/// Current scale of the brush drop's rise, A: V_b·tanh(i/i_s). A carbon brush's contact drop grows
/// about in proportion to the current at low current density and levels off towards its full
/// value (from memory: brush makers' V–I curves flatten at a few A/cm²); 0.2 A is about a tenth
/// of a small machine's full load. (A sharper knee, 20 mA, made the drop an 80-Ω slope at light
/// load and cost the implicit solver thousands of Newton failures a session.)
const BRUSH_SMOOTH_A: f64 = 0.2;
/// Speed scale below which the hysteresis drag is smoothed to zero (as the drive's Coulomb
/// friction), rad/s.
const IRON_SMOOTH_RAD_S: f64 = 0.5;
/// Temperature at which the back-EMF constant is given, °C.
pub const KE_REFERENCE_C: f64 = 20.0;
/// Average DC output of a six-diode bridge per volt of line-to-line RMS EMF at no load: 3√2/π.
pub const BRIDGE_DC_PER_LINE_RMS: f64 = 3.0 * std::f64::consts::SQRT_2 / std::f64::consts::PI;

/// The alternator's part of the model: what sets its commutation overlap.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Alternator {
    /// Pole pairs p: the electrical angular frequency is p·ω.
    pub pole_pairs: f64,
    /// Synchronous inductance of one phase (equivalent star), H.
    pub phase_inductance_h: f64,
}

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
    /// Hysteresis loss per 1000 rpm, W.
    pub hysteresis_loss_w_per_krpm: f64,
    /// Eddy-current loss per (1000 rpm)², W.
    pub eddy_loss_w_per_krpm2: f64,
    /// Relative change of k_e per kelvin of magnet temperature, 1/K (negative).
    pub ke_tempco_per_k: f64,
    /// Peak cogging torque, N·m.
    pub cogging_torque_n_m: f64,
    /// Cogging periods per rotor revolution.
    pub cogging_periods: f64,
    /// Winding heat capacity, J/K.
    pub winding_heat_capacity_j_per_k: f64,
    /// Winding-to-ambient conductance, W/K.
    pub winding_to_ambient_w_per_k: f64,
    /// A three-phase alternator with its bridge (None: a brushed DC machine). The constants
    /// above are then the DC side's: k_e is the bridge's no-load output per rad/s, the
    /// resistance and inductance those of the two phases in the current's path.
    pub alternator: Option<Alternator>,
}

impl GeneratorModel {
    /// Converts the datasheet-unit configuration once.
    pub fn from_config(g: &Generator) -> Self {
        let ke = v_per_krpm_to_v_s_per_rad(g.back_emf_v_per_krpm);
        let (alternator, ke, path) = match g.kind {
            GeneratorKind::BrushedDc => (None, ke, 1.0),
            GeneratorKind::ThreePhasePm => (
                Some(Alternator {
                    pole_pairs: f64::from(g.pole_pairs.unwrap_or(1)),
                    phase_inductance_h: g.inductance_h,
                }),
                BRIDGE_DC_PER_LINE_RMS * ke,
                2.0,
            ),
        };
        Self {
            ke_v_s_per_rad: ke,
            resistance_20c_ohm: path * g.resistance_ohm,
            inductance_h: path * g.inductance_h,
            inertia_kg_m2: g.inertia_kg_m2,
            brush_drop_v: g.brush_drop_v,
            hysteresis_loss_w_per_krpm: g.hysteresis_loss_w_per_krpm,
            eddy_loss_w_per_krpm2: g.eddy_loss_w_per_krpm2,
            ke_tempco_per_k: g.back_emf_tempco_pct_per_k / 100.0,
            cogging_torque_n_m: g.cogging_torque_n_m,
            cogging_periods: f64::from(g.cogging_periods_per_rev),
            winding_heat_capacity_j_per_k: g.winding_heat_capacity_j_per_k,
            winding_to_ambient_w_per_k: g.winding_to_ambient_w_per_k,
            alternator,
        }
    }

    /// Back-EMF at shaft speed ω with the constant `ke`, V: k_e·ω for a DC machine (negative
    /// when cranked backwards), k_dc·|ω| for an alternator (its bridge rectifies either way).
    pub fn emf_at(&self, ke: f64, omega_rad_s: f64) -> f64 {
        if self.alternator.is_some() {
            ke * omega_rad_s.abs()
        } else {
            ke * omega_rad_s
        }
    }

    /// The alternator's commutation resistance at shaft speed ω, 3·p·|ω|·L_s/π, Ω: the slope of
    /// its bridge's output in mode I (0 for a DC machine).
    pub fn commutation_ohm(&self, omega_rad_s: f64) -> f64 {
        self.alternator.map_or(0.0, |a| {
            3.0 * a.pole_pairs * omega_rad_s.abs() * a.phase_inductance_h / std::f64::consts::PI
        })
    }

    /// Diodes in the current's path: the protection diode, or the bridge's two.
    pub fn conducting_diodes(&self) -> f64 {
        if self.alternator.is_some() {
            2.0
        } else {
            1.0
        }
    }

    /// Electromagnetic torque at current `i` with the constant `ke` (magnets at their
    /// temperature), N·m: k_e·i for a DC machine; for an alternator k_dc·f(x)·i in the sense of
    /// rotation, with f the bridge's output fraction at x = I/I_s2 = 6·p·L_s·I/(π·k_dc), so that
    /// τ·ω = V_d(I)·I, the bridge's output power before copper and diodes.
    pub fn torque_at(&self, ke: f64, omega_rad_s: f64, i: f64) -> f64 {
        match self.alternator {
            None => ke * i,
            Some(a) => {
                let f = if ke > 0.0 && a.phase_inductance_h > 0.0 {
                    let x =
                        6.0 * a.pole_pairs * a.phase_inductance_h * i / (std::f64::consts::PI * ke);
                    bridge::output_factor(x).0
                } else {
                    1.0
                };
                let sense = if omega_rad_s < 0.0 { -1.0 } else { 1.0 };
                sense * ke * f * i
            }
        }
    }

    /// Electrical frequency at shaft speed ω, Hz (the shaft's turns per second for a DC machine).
    pub fn electrical_hz(&self, omega_rad_s: f64) -> f64 {
        let p = self.alternator.map_or(1.0, |a| a.pole_pairs);
        p * omega_rad_s.abs() / (2.0 * std::f64::consts::PI)
    }

    /// The alternator's DC short-circuit current, A: (2/√3)·I_s2 = (2/√3)·π·k_dc/(6·p·L_s),
    /// the same at every speed (None for a DC machine or without inductance).
    pub fn short_circuit_a(&self, ke: f64) -> Option<f64> {
        let a = self.alternator?;
        (a.phase_inductance_h > 0.0).then(|| {
            bridge::SHORT_CIRCUIT * std::f64::consts::PI * ke
                / (6.0 * a.pole_pairs * a.phase_inductance_h)
        })
    }

    /// Back-EMF E = k_e·ω at 20 °C, V (negative when cranked backwards).
    pub fn emf_v(&self, omega_rad_s: f64) -> f64 {
        self.ke_v_s_per_rad * omega_rad_s
    }

    /// Electromagnetic torque τ = k_t·i with k_t = k_e (E·i = τ·ω) at 20 °C, N·m.
    pub fn torque_n_m(&self, current_a: f64) -> f64 {
        self.ke_v_s_per_rad * current_a
    }

    /// Back-EMF (= torque) constant with the magnets at `magnet_c`:
    /// k_e·(1 + c·(T − 20 °C)), V·s/rad (never below zero). Both E and τ use it, so E·i = τ·ω holds.
    pub fn ke_at(&self, magnet_c: f64) -> f64 {
        (self.ke_v_s_per_rad * (1.0 + self.ke_tempco_per_k * (magnet_c - KE_REFERENCE_C))).max(0.0)
    }

    /// Iron-loss drag torque at shaft speed ω, N·m: P_fe = k_h·(n/n_1) + k_e·(n/n_1)² with
    /// n_1 = 1000 rpm (hysteresis loss grows with frequency, eddy loss with its square; Steinmetz
    /// at fixed flux), so τ = P_fe/ω = k_h/ω_1·tanh(ω/ω_s) + k_e·ω/ω_1² (hysteresis smoothed through
    /// zero speed like dry friction). Its power τ·ω is never negative.
    pub fn iron_loss_torque_n_m(&self, omega_rad_s: f64) -> f64 {
        if self.hysteresis_loss_w_per_krpm == 0.0 && self.eddy_loss_w_per_krpm2 == 0.0 {
            return 0.0;
        }
        let w1 = rpm_to_rad_s(1000.0);
        self.hysteresis_loss_w_per_krpm / w1 * smooth::sign(omega_rad_s / IRON_SMOOTH_RAD_S)
            + self.eddy_loss_w_per_krpm2 * omega_rad_s / (w1 * w1)
    }

    /// Cogging torque opposing rotation at rotor angle θ, N·m: T_c·sin(n·θ) = dU/dθ with the
    /// potential U(θ) = (T_c/n)·(1 − cos(n·θ)) ([`Self::cogging_energy_j`]).
    pub fn cogging_torque_n_m(&self, rotor_angle_rad: f64) -> f64 {
        if self.cogging_torque_n_m == 0.0 {
            return 0.0;
        }
        self.cogging_torque_n_m * (self.cogging_periods * rotor_angle_rad).sin()
    }

    /// Cogging potential energy at rotor angle θ, J: U = (T_c/n)·(1 − cos(n·θ)).
    pub fn cogging_energy_j(&self, rotor_angle_rad: f64) -> f64 {
        if self.cogging_torque_n_m == 0.0 {
            return 0.0;
        }
        self.cogging_torque_n_m / self.cogging_periods
            * (1.0 - (self.cogging_periods * rotor_angle_rad).cos())
    }

    /// Winding resistance R(T) = R20·(1 + α·(T − 20)), Ω.
    pub fn resistance_ohm(&self, winding_c: f64) -> f64 {
        copper_resistance(self.resistance_20c_ohm, winding_c)
    }

    /// Brush drop, smoothed through zero current: V_b·tanh(i/i_s), V.
    pub fn brush_drop(&self, current_a: f64) -> f64 {
        self.brush(current_a).0
    }

    /// Derivative of [`Self::brush_drop`] with respect to current, Ω.
    pub fn brush_drop_slope(&self, current_a: f64) -> f64 {
        self.brush(current_a).1
    }

    /// Brush drop and its slope together, V and Ω.
    pub fn brush(&self, current_a: f64) -> (f64, f64) {
        if self.brush_drop_v == 0.0 {
            return (0.0, 0.0);
        }
        let (s, ds) = smooth::sign_and_slope(current_a / BRUSH_SMOOTH_A);
        (
            self.brush_drop_v * s,
            self.brush_drop_v * ds / BRUSH_SMOOTH_A,
        )
    }
}

/// Copper resistance at `temp_c` from its value at 20 °C: R20·(1 + 0.00393·(T − 20)).
pub fn copper_resistance(r20_ohm: f64, temp_c: f64) -> f64 {
    r20_ohm * (1.0 + COPPER_ALPHA_PER_K * (temp_c - 20.0))
}
