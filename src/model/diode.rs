//! Protection diode: Shockley law with series resistance, a fixed-drop ideal diode, or none.

use crate::scenario::setup::{Diode, DiodeKind};
use crate::units::thermal_voltage_v;

/// Forward characteristic of the protection diode (forward current ≥ 0).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DiodeModel {
    /// V_F = n·V_T·ln(1 + I/I_s) + I·R_s.
    Shockley {
        saturation_current_a: f64,
        /// n·V_T, V.
        n_vt_v: f64,
        series_resistance_ohm: f64,
    },
    /// Constant drop for any forward current.
    Ideal {
        forward_v: f64,
        series_resistance_ohm: f64,
    },
    /// A wire: conducts both ways.
    None,
}

/// Why a diode configuration cannot be turned into a model.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DiodeError {
    #[error("the two datasheet points must have different currents, both > 0, and a forward voltage that rises with current after the series-resistance drop")]
    DegeneratePoints,
    #[error(
        "give either `points` (two datasheet points) or both `saturation_current_a` and `ideality`"
    )]
    MissingParameters,
}

impl DiodeModel {
    /// Builds the model; Shockley parameters come from two datasheet points when given.
    pub fn from_config(d: &Diode, temp_c: f64) -> Result<Self, DiodeError> {
        let vt = thermal_voltage_v(temp_c);
        match d.kind {
            DiodeKind::None => Ok(DiodeModel::None),
            DiodeKind::Ideal => Ok(DiodeModel::Ideal {
                forward_v: d.forward_v.unwrap_or(0.7),
                series_resistance_ohm: d.series_resistance_ohm,
            }),
            DiodeKind::Shockley => {
                let rs = d.series_resistance_ohm;
                if let Some(points) = &d.points {
                    let [p1, p2] = points.as_slice() else {
                        return Err(DiodeError::DegeneratePoints);
                    };
                    let (is, n_vt) = shockley_from_points(
                        (p1.current_a, p1.forward_v),
                        (p2.current_a, p2.forward_v),
                        rs,
                    )
                    .ok_or(DiodeError::DegeneratePoints)?;
                    Ok(DiodeModel::Shockley {
                        saturation_current_a: is,
                        n_vt_v: n_vt,
                        series_resistance_ohm: rs,
                    })
                } else {
                    match (d.saturation_current_a, d.ideality) {
                        (Some(is), Some(n)) => Ok(DiodeModel::Shockley {
                            saturation_current_a: is,
                            n_vt_v: n * vt,
                            series_resistance_ohm: rs,
                        }),
                        _ => Err(DiodeError::MissingParameters),
                    }
                }
            }
        }
    }

    /// Whether the diode blocks reverse current (the battery cannot motor the generator).
    pub fn blocks_reverse(&self) -> bool {
        !matches!(self, DiodeModel::None)
    }

    /// Forward voltage at forward current `i` ≥ 0, V; 0 for no diode.
    pub fn forward_v(&self, i: f64) -> f64 {
        let i = i.max(0.0);
        match *self {
            DiodeModel::Shockley {
                saturation_current_a,
                n_vt_v,
                series_resistance_ohm,
            } => n_vt_v * ln_1p(i / saturation_current_a) + i * series_resistance_ohm,
            DiodeModel::Ideal {
                forward_v,
                series_resistance_ohm,
            } => {
                if i > 0.0 {
                    forward_v + i * series_resistance_ohm
                } else {
                    0.0
                }
            }
            DiodeModel::None => 0.0,
        }
    }

    /// Slope dV_F/dI at forward current `i`, Ω.
    pub fn slope(&self, i: f64) -> f64 {
        let i = i.max(0.0);
        match *self {
            DiodeModel::Shockley {
                saturation_current_a,
                n_vt_v,
                series_resistance_ohm,
            } => n_vt_v / (saturation_current_a + i) + series_resistance_ohm,
            DiodeModel::Ideal {
                series_resistance_ohm,
                ..
            } => series_resistance_ohm,
            DiodeModel::None => 0.0,
        }
    }

    /// Drop that must be overcome before any forward current flows (ideal kind only), V.
    pub fn threshold_v(&self) -> f64 {
        match *self {
            DiodeModel::Ideal { forward_v, .. } => forward_v,
            _ => 0.0,
        }
    }
}

/// ln(1 + x) for x ≥ 0. Above x = 1 (forward currents past I_s, the usual case) `ln` of the
/// exactly representable sum is as accurate and cheaper than `ln_1p`, which is kept for small x.
fn ln_1p(x: f64) -> f64 {
    if x > 1.0 {
        (1.0 + x).ln()
    } else {
        x.ln_1p()
    }
}

/// Shockley parameters (I_s, n·V_T) through two datasheet points with a known series resistance,
/// exact for V = n·V_T·ln(1 + I/I_s) + I·Rs:
/// n·V_T = ((V2 − I2·Rs) − (V1 − I1·Rs)) / ln((I2 + I_s)/(I1 + I_s)),
/// I_s = I1 / (exp((V1 − I1·Rs)/(n·V_T)) − 1), iterated from I_s = 0 (contracts by ≈ I_s/I).
pub fn shockley_from_points(p1: (f64, f64), p2: (f64, f64), rs: f64) -> Option<(f64, f64)> {
    let (i1, v1) = p1;
    let (i2, v2) = p2;
    if i1 <= 0.0 || i2 <= 0.0 || (i2 - i1).abs() < 1e-12 * i1.max(i2) {
        return None;
    }
    let dv = (v2 - i2 * rs) - (v1 - i1 * rs);
    let mut n_vt = dv / (i2 / i1).ln();
    for _ in 0..50 {
        let is = i1 / ((v1 - i1 * rs) / n_vt).exp_m1();
        if !(is.is_finite() && is > 0.0) {
            break;
        }
        let next = dv / ((i2 + is) / (i1 + is)).ln();
        let done = (next - n_vt).abs() <= 1e-15 * n_vt.abs();
        n_vt = next;
        if done {
            break;
        }
    }
    if !(n_vt > 1e-4 && n_vt < 1.0) {
        return None;
    }
    let is = i1 / ((v1 - i1 * rs) / n_vt).exp_m1();
    (is.is_finite() && is > 0.0).then_some((is, n_vt))
}
