//! Belt/gear drive from crank to generator: ratio, efficiency, reflected inertia, friction, freewheel.

use crate::scenario::setup::Drive;

/// Speed below which Coulomb friction is smoothed to zero, rad/s.
const FRICTION_SMOOTH_RAD_S: f64 = 0.5;

/// Drive parameters in SI, referred as named.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DriveModel {
    /// Total ratio N = Π r_i (generator speed / crank speed).
    pub ratio: f64,
    /// Forward power efficiency η = Π η_i.
    pub efficiency: f64,
    /// Crank-side inertia (crank, handle, arm), kg·m².
    pub crank_inertia_kg_m2: f64,
    /// Generator-side inertia (rotor + flywheel), kg·m².
    pub shaft_inertia_kg_m2: f64,
    /// Coulomb friction at the generator shaft, N·m.
    pub coulomb_friction_n_m: f64,
    /// Viscous friction at the generator shaft, N·m·s/rad.
    pub viscous_friction_n_m_s: f64,
    /// One-way clutch present.
    pub freewheel: bool,
}

/// Accelerations and torques of the coupled (engaged) drive.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Coupled {
    /// Crank angular acceleration, rad/s².
    pub crank_accel: f64,
    /// Belt torque on the crank (reaction to the operator), N·m; negative when the shaft drives the crank.
    pub crank_belt_torque_n_m: f64,
    /// Power lost in the belt stages, W (≥ 0).
    pub loss_w: f64,
}

impl DriveModel {
    /// Builds the drive; `generator_inertia` is the rotor's own inertia.
    pub fn from_config(d: &Drive, generator_inertia_kg_m2: f64) -> Self {
        Self {
            ratio: d.stages.iter().map(|s| s.ratio).product(),
            efficiency: d.stages.iter().map(|s| s.efficiency).product(),
            crank_inertia_kg_m2: d.crank_inertia_kg_m2,
            shaft_inertia_kg_m2: generator_inertia_kg_m2 + d.flywheel_inertia_kg_m2,
            coulomb_friction_n_m: d.coulomb_friction_n_m,
            viscous_friction_n_m_s: d.viscous_friction_n_m_s,
            freewheel: d.freewheel,
        }
    }

    /// Inertia seen at the generator shaft when engaged: J_gen + J_fly + J_crank/N², kg·m².
    pub fn reflected_inertia_kg_m2(&self) -> f64 {
        self.shaft_inertia_kg_m2 + self.crank_inertia_kg_m2 / (self.ratio * self.ratio)
    }

    /// Friction torque at the generator shaft: τ_c·tanh(ω/ω_s) + b·ω, N·m.
    pub fn friction_n_m(&self, omega_gen: f64) -> f64 {
        self.coulomb_friction_n_m * super::smooth::sign(omega_gen / FRICTION_SMOOTH_RAD_S)
            + self.viscous_friction_n_m_s * omega_gen
    }

    /// Engaged dynamics with the rigid constraint ω_gen = N·ω_crank.
    ///
    /// Forward power flow (τ_belt ≥ 0): τ_gen_side = η·τ_belt/N, so
    /// ω̇_c = (τ_op − (N/η)·τ_load)/(J_c + N²·J_s/η); reverse flow uses η in place of 1/η.
    /// `load_torque` is the generator's electromagnetic torque plus friction at the shaft.
    pub fn coupled(
        &self,
        operator_torque_n_m: f64,
        load_torque_n_m: f64,
        omega_crank: f64,
    ) -> Coupled {
        let n = self.ratio;
        let eta = self.efficiency;
        let jc = self.crank_inertia_kg_m2;
        let js = self.shaft_inertia_kg_m2;
        let fwd_accel = (operator_torque_n_m - n / eta * load_torque_n_m) / (jc + n * n * js / eta);
        let fwd_belt = operator_torque_n_m - jc * fwd_accel;
        if fwd_belt >= 0.0 {
            return Coupled {
                crank_accel: fwd_accel,
                crank_belt_torque_n_m: fwd_belt,
                loss_w: (fwd_belt * omega_crank * (1.0 - eta)).abs(),
            };
        }
        let rev_accel = (operator_torque_n_m - n * eta * load_torque_n_m) / (jc + n * n * js * eta);
        let rev_belt = operator_torque_n_m - jc * rev_accel;
        // Shaft-side torque magnitude is |τ_belt|/(N·η); loss = shaft power·(1 − η).
        let shaft_power = (rev_belt / (n * eta) * omega_crank * n).abs();
        Coupled {
            crank_accel: rev_accel,
            crank_belt_torque_n_m: rev_belt,
            loss_w: shaft_power * (1.0 - eta),
        }
    }
}
