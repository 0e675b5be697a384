//! Unit conversions used at the edges (datasheet units in files, SI inside).

use std::f64::consts::PI;

/// rad/s per rpm: 2π/60.
pub const RAD_S_PER_RPM: f64 = 2.0 * PI / 60.0;

/// Converts revolutions per minute to rad/s.
pub fn rpm_to_rad_s(rpm: f64) -> f64 {
    rpm * RAD_S_PER_RPM
}

/// Converts rad/s to revolutions per minute.
pub fn rad_s_to_rpm(w: f64) -> f64 {
    w / RAD_S_PER_RPM
}

/// Back-EMF constant from datasheet V/krpm to SI V·s/rad (= N·m/A for an ideal PMDC machine).
/// k_e[V·s/rad] = k[V/krpm] · 60 / (2π·1000).
pub fn v_per_krpm_to_v_s_per_rad(v_per_krpm: f64) -> f64 {
    v_per_krpm * 60.0 / (2.0 * PI * 1000.0)
}

/// Inverse of [`v_per_krpm_to_v_s_per_rad`].
pub fn v_s_per_rad_to_v_per_krpm(ke: f64) -> f64 {
    ke * 2.0 * PI * 1000.0 / 60.0
}

/// Absolute temperature in kelvin from degrees Celsius.
pub fn c_to_k(c: f64) -> f64 {
    c + 273.15
}

/// Thermal voltage kT/q at a temperature in °C (CODATA 2018 k and q).
pub fn thermal_voltage_v(temp_c: f64) -> f64 {
    const K_B: f64 = 1.380_649e-23;
    const Q_E: f64 = 1.602_176_634e-19;
    K_B * c_to_k(temp_c) / Q_E
}
