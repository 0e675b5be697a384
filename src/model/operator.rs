//! The person at the crank: a torque source tracking a target cadence inside a human envelope.
//!
//! Envelope: Hill-type force–velocity line τ_max(ω) = τ0·(1 − ω/ω_max) and a power cap from the
//! critical-power model (Monod & Scherrer 1965) whose reserve W′ follows the differential W′-balance
//! of Skiba et al.: dW′/dt = −(P − CP) above CP, (W′0 − W′)·(CP − P)/W′0 below. P is the power
//! averaged over a crank revolution (the model is fitted to mean power; the plant passes the
//! un-rippled torque times the crank speed), never the rippled instantaneous power.

use crate::scenario::profile::Operator;
use crate::units::RAD_S_PER_RPM;

/// Speed below which the power cap is not applied (avoids P/ω → ∞), rad/s.
const POWER_CAP_MIN_OMEGA: f64 = 0.2;

/// Operator capacities in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatorModel {
    /// Torque at zero speed, N·m.
    pub peak_torque_n_m: f64,
    /// Speed at which torque falls to zero, rad/s.
    pub max_speed_rad_s: f64,
    /// Critical power, W.
    pub critical_power_w: f64,
    /// Full W′, J.
    pub w_prime_j: f64,
    /// Peak power when W′ is full, W.
    pub peak_power_w: f64,
    /// Proportional gain, N·m per rad/s.
    pub kp_n_m_s: f64,
    /// Integral time, s.
    pub ti_s: f64,
}

impl OperatorModel {
    /// Converts the profile's operator (rpm-based gains) to SI.
    pub fn from_config(o: &Operator) -> Self {
        Self {
            peak_torque_n_m: o.peak_torque_n_m,
            max_speed_rad_s: o.max_cadence_rpm * RAD_S_PER_RPM,
            critical_power_w: o.critical_power_w,
            w_prime_j: o.w_prime_j,
            peak_power_w: o.peak_power_w.max(o.critical_power_w),
            kp_n_m_s: o.tracking_gain_n_m_per_rpm / RAD_S_PER_RPM,
            ti_s: o.tracking_time_s,
        }
    }

    /// Power cap from the remaining reserve: CP + (P_peak − CP)·W′/W′0, W.
    pub fn power_cap_w(&self, w_balance_j: f64) -> f64 {
        let frac = if self.w_prime_j > 0.0 {
            (w_balance_j / self.w_prime_j).clamp(0.0, 1.0)
        } else {
            0.0
        };
        self.critical_power_w + (self.peak_power_w - self.critical_power_w) * frac
    }

    /// Largest torque available at crank speed ω: min(τ0·(1 − ω/ω_max), P_cap/ω), N·m (≥ 0).
    pub fn envelope_n_m(&self, omega: f64, w_balance_j: f64) -> f64 {
        let fv = self.peak_torque_n_m * (1.0 - omega.max(0.0) / self.max_speed_rad_s);
        let cap = if omega > POWER_CAP_MIN_OMEGA {
            self.power_cap_w(w_balance_j) / omega
        } else {
            f64::INFINITY
        };
        fv.min(cap).max(0.0)
    }

    /// PI command before saturation: Kp·(ω_t − ω) + integrator + feed-forward, N·m.
    pub fn command_n_m(
        &self,
        omega_target: f64,
        omega: f64,
        integrator_n_m: f64,
        ff_n_m: f64,
    ) -> f64 {
        self.kp_n_m_s * (omega_target - omega) + integrator_n_m + ff_n_m
    }

    /// Integrator rate with back-calculation anti-windup (tracking time = Ti), N·m/s.
    pub fn integrator_rate(
        &self,
        omega_target: f64,
        omega: f64,
        command: f64,
        applied: f64,
    ) -> f64 {
        self.kp_n_m_s / self.ti_s * (omega_target - omega) + (applied - command) / self.ti_s
    }

    /// Skiba's differential W′ balance rate at power `p_w`, J/s.
    pub fn w_prime_rate(&self, p_w: f64, w_balance_j: f64) -> f64 {
        w_prime_balance_rate(self.critical_power_w, self.w_prime_j, p_w, w_balance_j)
    }
}

/// dW′/dt = −(P − CP) for P > CP; (W′0 − W′)·(CP − P)/W′0 for P ≤ CP (the differential form of
/// the W′-balance model of Skiba et al.).
pub fn w_prime_balance_rate(cp_w: f64, w0_j: f64, p_w: f64, w_j: f64) -> f64 {
    if p_w > cp_w {
        if w_j > 0.0 {
            -(p_w - cp_w)
        } else {
            0.0
        }
    } else if w0_j > 0.0 {
        (w0_j - w_j) * (cp_w - p_w) / w0_j
    } else {
        0.0
    }
}

/// Monod & Scherrer time to exhaustion at constant power above CP: t = W′/(P − CP), s.
pub fn time_to_exhaustion_s(cp_w: f64, w0_j: f64, p_w: f64) -> f64 {
    if p_w <= cp_w {
        f64::INFINITY
    } else {
        w0_j / (p_w - cp_w)
    }
}

/// Skiba et al. 2012 recovery time constant τ = 546·e^(−0.01·D_CP) + 316, s.
pub fn skiba_tau_s(d_cp_w: f64) -> f64 {
    546.0 * (-0.01 * d_cp_w).exp() + 316.0
}
