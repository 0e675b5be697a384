//! `fit-generator --kind three_phase_pm`: a three-phase permanent-magnet alternator on its
//! six-diode bridge fitted to DC measurements after the bridge (open-circuit and loaded V–rpm
//! tables): its line-to-line EMF constant, the winding resistance and the synchronous inductance.
//! Cost: one least-squares solve; no simulation.
//!
//! In the bridge's first overlap mode (see [`crate::model::bridge`]) the DC output is
//! V = k_dc·ω − 2·R_s·I − (3·p·L_s/π)·ω·I − 2·V_F, linear in (k_dc, 2·R_s, 3·p·L_s/π) once the two
//! diode drops are added back to the loaded points (open-circuit points carry no current, so no
//! drop). The columns ω, −I and −ω·I are solved by a QR factorisation (modified Gram–Schmidt with
//! one re-orthogonalisation pass), standard errors from s² = RSS/(n − 3) and (XᵀX)⁻¹ = R⁻¹R⁻ᵀ.

use serde::Serialize;

use super::fit_print::{residual_table, sig};
use super::outcome::say;
use crate::analysis::fit::Measurement;
use crate::model::bridge;
use crate::model::generator::{BRIDGE_DC_PER_LINE_RMS, COPPER_ALPHA_PER_K};
use crate::units::{rpm_to_rad_s, v_s_per_rad_to_v_per_krpm};

/// Relative size of a QR diagonal below which a column counts as dependent on the others.
const DEPENDENT_TOL: f64 = 1e-9;

/// The fitted alternator.
#[derive(Debug, Clone, PartialEq)]
pub struct AlternatorFit {
    /// Line-to-line RMS EMF per 1000 rpm, V/krpm, and its standard error.
    pub line_v_per_krpm: f64,
    pub line_se_v_per_krpm: f64,
    /// Bridge's no-load DC output per rad/s, V·s/rad.
    pub dc_v_s_per_rad: f64,
    /// Resistance of one phase (equivalent star) at the measurement temperature, Ω, and its
    /// standard error.
    pub phase_resistance_ohm: f64,
    pub phase_resistance_se_ohm: f64,
    /// Synchronous inductance of one phase, H, and its standard error.
    pub phase_inductance_h: f64,
    pub phase_inductance_se_h: f64,
    /// Largest x = I/I_s2 among the points: the fit's law holds up to 0.5 (overlap 60°).
    pub largest_overlap_x: f64,
    /// Residuals V_measured − V_model, V.
    pub residuals_v: Vec<f64>,
    pub rms_residual_v: f64,
    pub n: usize,
}

/// Why the points do not determine the three parameters.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AlternatorFitError {
    #[error("{n} measurement point(s); at least 4 are needed to fit three parameters and estimate their errors")]
    TooFewPoints { n: usize },
    #[error("the points do not tell the EMF, the resistance and the reactance apart: give open-circuit points and loaded points at two or more speeds (the reactance drop grows with speed, the resistance drop does not)")]
    Dependent,
    #[error("a value is not a finite number")]
    NonFinite,
    #[error("the pole-pair count must be at least 1")]
    NoPoles,
}

/// A least-squares solution: coefficients, the upper triangle of R (rows), residuals.
struct Solution {
    beta: Vec<f64>,
    r: Vec<Vec<f64>>,
    residuals: Vec<f64>,
}

/// Least squares y ≈ Σ β_j·x_j by modified Gram–Schmidt QR; None when a column is (numerically)
/// dependent on the ones before it.
fn qr_least_squares(cols: &[Vec<f64>], y: &[f64]) -> Option<Solution> {
    let k = cols.len();
    let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
    let mut q: Vec<Vec<f64>> = Vec::with_capacity(k);
    let mut r = vec![vec![0.0; k]; k];
    for (j, col) in cols.iter().enumerate() {
        let norm0 = dot(col, col).sqrt();
        if norm0 <= 0.0 {
            return None;
        }
        let mut w = col.clone();
        // Two passes ("twice is enough").
        for _ in 0..2 {
            for (ri, qi) in r.iter_mut().zip(&q) {
                let c = dot(qi, &w);
                ri[j] += c;
                for (wl, ql) in w.iter_mut().zip(qi) {
                    *wl -= c * ql;
                }
            }
        }
        let norm = dot(&w, &w).sqrt();
        if norm <= DEPENDENT_TOL * norm0 {
            return None;
        }
        r[j][j] = norm;
        q.push(w.iter().map(|v| v / norm).collect());
    }
    let z: Vec<f64> = q.iter().map(|qi| dot(qi, y)).collect();
    let beta = back_substitute(&r, &z);
    let residuals = y
        .iter()
        .enumerate()
        .map(|(i, yi)| yi - beta.iter().zip(cols).map(|(b, c)| b * c[i]).sum::<f64>())
        .collect();
    Some(Solution { beta, r, residuals })
}

/// Solves R·x = z for an upper-triangular R (given as rows).
fn back_substitute(r: &[Vec<f64>], z: &[f64]) -> Vec<f64> {
    let k = z.len();
    let mut x = vec![0.0; k];
    for j in (0..k).rev() {
        let s: f64 = ((j + 1)..k).map(|l| r[j][l] * x[l]).sum();
        x[j] = (z[j] - s) / r[j][j];
    }
    x
}

/// Diagonal of (XᵀX)⁻¹ = R⁻¹R⁻ᵀ from R's upper triangle: the sums of squares of R⁻¹'s rows,
/// R⁻¹ found column by column.
fn unscaled_variances(r: &[Vec<f64>]) -> Vec<f64> {
    let k = r.len();
    let mut var = vec![0.0; k];
    for c in 0..k {
        let unit: Vec<f64> = (0..k).map(|i| if i == c { 1.0 } else { 0.0 }).collect();
        let col = back_substitute(r, &unit);
        for (v, x) in var.iter_mut().zip(&col) {
            *v += x * x;
        }
    }
    var
}

/// Fits the alternator from DC points after its bridge: `diode_drop_v` is each bridge diode's
/// forward drop at the loaded points (two conduct), `pole_pairs` sets the electrical frequency.
pub fn fit_alternator(
    points: &[Measurement],
    pole_pairs: u32,
    diode_drop_v: f64,
) -> Result<AlternatorFit, AlternatorFitError> {
    if pole_pairs == 0 {
        return Err(AlternatorFitError::NoPoles);
    }
    if !diode_drop_v.is_finite()
        || points
            .iter()
            .any(|p| !(p.rpm.is_finite() && p.voltage_v.is_finite() && p.current_a.is_finite()))
    {
        return Err(AlternatorFitError::NonFinite);
    }
    let n = points.len();
    if n < 4 {
        return Err(AlternatorFitError::TooFewPoints { n });
    }
    let w: Vec<f64> = points.iter().map(|p| rpm_to_rad_s(p.rpm)).collect();
    let cols = vec![
        w.clone(),
        points.iter().map(|p| -p.current_a).collect(),
        points
            .iter()
            .zip(&w)
            .map(|(p, w)| -w * p.current_a)
            .collect(),
    ];
    let y: Vec<f64> = points
        .iter()
        .map(|p| {
            let loaded = if p.current_a > 0.0 { 2.0 } else { 0.0 };
            p.voltage_v + loaded * diode_drop_v
        })
        .collect();
    let Solution { beta, r, residuals } =
        qr_least_squares(&cols, &y).ok_or(AlternatorFitError::Dependent)?;
    let rss: f64 = residuals.iter().map(|e| e * e).sum();
    let s2 = rss / (n - 3) as f64;
    let se: Vec<f64> = unscaled_variances(&r)
        .iter()
        .map(|v| (s2 * v).sqrt())
        .collect();
    let p = f64::from(pole_pairs);
    let to_line = |k_dc: f64| v_s_per_rad_to_v_per_krpm(k_dc / BRIDGE_DC_PER_LINE_RMS);
    let to_inductance = |k: f64| k * std::f64::consts::PI / (3.0 * p);
    // x = I/I_s2 = 2·R_c·I/V_d0 = 2·(3pL/π)·I/k_dc.
    let largest_overlap_x = points
        .iter()
        .map(|pt| 2.0 * beta[2] * pt.current_a / beta[0])
        .fold(0.0, f64::max);
    Ok(AlternatorFit {
        line_v_per_krpm: to_line(beta[0]),
        line_se_v_per_krpm: to_line(se[0]),
        dc_v_s_per_rad: beta[0],
        phase_resistance_ohm: beta[1] / 2.0,
        phase_resistance_se_ohm: se[1] / 2.0,
        phase_inductance_h: to_inductance(beta[2]),
        phase_inductance_se_h: to_inductance(se[2]),
        largest_overlap_x,
        rms_residual_v: (rss / n as f64).sqrt(),
        residuals_v: residuals,
        n,
    })
}

/// Whether every point lies in the bridge's first overlap mode, where the fitted law holds.
pub fn within_mode_one(f: &AlternatorFit) -> bool {
    f.largest_overlap_x <= bridge::MODE_I_END
}

/// The JSON form of an alternator fit.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct AlternatorReport {
    pub file: String,
    pub kind: &'static str,
    pub n: usize,
    pub pole_pairs: u32,
    /// Forward drop of each bridge diode added back at the loaded points, V.
    pub diode_drop_v: f64,
    /// Line-to-line RMS EMF per 1000 rpm (the setup's `back_emf_v_per_krpm`), V/krpm.
    pub back_emf_v_per_krpm: f64,
    pub back_emf_se_v_per_krpm: f64,
    /// Per-phase resistance referred to 20 °C (the setup's `resistance_ohm`), Ω.
    pub resistance_ohm: f64,
    pub resistance_se_ohm: f64,
    /// Per-phase resistance at the measurement temperature, Ω.
    pub resistance_at_measurement_ohm: f64,
    pub winding_c: f64,
    /// Per-phase synchronous inductance (the setup's `inductance_h`), H.
    pub inductance_h: f64,
    pub inductance_se_h: f64,
    /// Largest DC current among the points as a fraction of I_s2 (the fit holds up to 0.5).
    pub largest_overlap_x: f64,
    pub rms_residual_v: f64,
    pub max_abs_residual_v: f64,
    pub residuals_v: Vec<f64>,
}

/// The report of a fit, the resistance referred to 20 °C from `winding_c`.
pub fn report(
    name: &str,
    f: &AlternatorFit,
    pole_pairs: u32,
    diode_drop_v: f64,
    winding_c: f64,
) -> AlternatorReport {
    let to20 = 1.0 / (1.0 + COPPER_ALPHA_PER_K * (winding_c - 20.0));
    AlternatorReport {
        file: name.to_string(),
        kind: "three_phase_pm",
        n: f.n,
        pole_pairs,
        diode_drop_v,
        back_emf_v_per_krpm: f.line_v_per_krpm,
        back_emf_se_v_per_krpm: f.line_se_v_per_krpm,
        resistance_ohm: f.phase_resistance_ohm * to20,
        resistance_se_ohm: f.phase_resistance_se_ohm * to20,
        resistance_at_measurement_ohm: f.phase_resistance_ohm,
        winding_c,
        inductance_h: f.phase_inductance_h,
        inductance_se_h: f.phase_inductance_se_h,
        largest_overlap_x: f.largest_overlap_x,
        rms_residual_v: f.rms_residual_v,
        max_abs_residual_v: f.residuals_v.iter().fold(0.0, |m, r| m.max(r.abs())),
        residuals_v: f.residuals_v.clone(),
    }
}

/// Prints a fit with its residuals and a RON fragment.
pub fn print(r: &AlternatorReport, points: &[Measurement]) {
    say(&format!(
        "fit-generator: {} points from {} (three-phase alternator on its bridge, {} pole pairs: V = 1.35·V_LL − 2·R·I − (3·p·ω·L/π)·I − 2·V_F, V_F = {} V a diode)",
        r.n, r.file, r.pole_pairs, r.diode_drop_v
    ));
    say(&format!(
        "  line-to-line EMF = {} ± {:.2e} V/krpm (RMS)",
        sig(r.back_emf_v_per_krpm),
        r.back_emf_se_v_per_krpm
    ));
    say(&format!(
        "  phase resistance R = {} ± {:.2e} Ω at 20 °C  ({} Ω at {} °C)",
        sig(r.resistance_ohm),
        r.resistance_se_ohm,
        sig(r.resistance_at_measurement_ohm),
        r.winding_c
    ));
    say(&format!(
        "  phase inductance L = {} ± {:.2e} H",
        sig(r.inductance_h),
        r.inductance_se_h
    ));
    say(&format!(
        "  rms residual {:.3e} V, largest {:.3e} V; largest current {:.2} of I_s2{}",
        r.rms_residual_v,
        r.max_abs_residual_v,
        r.largest_overlap_x,
        if r.largest_overlap_x > bridge::MODE_I_END {
            " — beyond 0.5 the overlap passes 60° and the fitted law no longer holds: drop those points"
        } else {
            " (all within the first overlap mode)"
        }
    ));
    say("");
    residual_table(points, &r.residuals_v);
    say("");
    say("  RON fragment for the setup's generator section:");
    say("    generator: (");
    say("        kind: three_phase_pm,");
    say(&format!("        pole_pairs: {},", r.pole_pairs));
    say(&format!(
        "        back_emf_v_per_krpm: {},",
        sig(r.back_emf_v_per_krpm)
    ));
    say(&format!(
        "        resistance_ohm: {},",
        sig(r.resistance_ohm)
    ));
    say(&format!("        inductance_h: {},", sig(r.inductance_h)));
    say("        // keep inertia_kg_m2 and the rest of the section as they are");
    say("    ),");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_columns_reduce_to_their_closed_form_when_orthogonal() {
        // Orthogonal unit columns: β_j = y·x_j and (XᵀX)⁻¹ = I.
        let cols = vec![
            vec![1.0, 0.0, 0.0, 0.0],
            vec![0.0, 1.0, 0.0, 0.0],
            vec![0.0, 0.0, 1.0, 0.0],
        ];
        let y = [2.0, -3.0, 0.5, 7.0];
        let sol = qr_least_squares(&cols, &y).expect("solvable");
        assert_eq!(sol.beta, vec![2.0, -3.0, 0.5]);
        assert_eq!(sol.residuals[3], 7.0);
        assert_eq!(unscaled_variances(&sol.r), vec![1.0, 1.0, 1.0]);
    }

    #[test]
    fn a_dependent_column_is_refused() {
        let cols = vec![vec![1.0, 2.0, 3.0], vec![2.0, 4.0, 6.0]];
        assert!(qr_least_squares(&cols, &[1.0, 1.0, 1.0]).is_none());
    }
}
