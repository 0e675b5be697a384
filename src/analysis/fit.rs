//! Least-squares fit of a PMDC generator's back-EMF constant and armature resistance from
//! terminal measurements: V = k_e·ω − R·I (open-circuit points have I = 0).
//!
//! The two-column problem is solved by a QR factorisation (modified Gram–Schmidt with one
//! re-orthogonalisation pass), so the accuracy follows the condition number of X rather than
//! of XᵀX. Standard errors come from the residual variance s² = RSS/(n − 2) and
//! (XᵀX)⁻¹ = R⁻¹R⁻ᵀ (ordinary least squares with homoscedastic errors).

use crate::units::{rpm_to_rad_s, v_s_per_rad_to_v_per_krpm};

/// One measured operating point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measurement {
    /// Shaft speed, rpm (≥ 0).
    pub rpm: f64,
    /// Terminal voltage, V.
    pub voltage_v: f64,
    /// Armature current, A (0 for an open-circuit point; positive when generating).
    pub current_a: f64,
}

/// The fitted generator.
#[derive(Debug, Clone, PartialEq)]
pub struct GeneratorFit {
    /// Back-EMF constant, V·s/rad.
    pub ke_v_s_per_rad: f64,
    /// Standard error of k_e, V·s/rad.
    pub ke_se_v_s_per_rad: f64,
    /// Armature resistance at the measurement temperature, Ω.
    pub resistance_ohm: f64,
    /// Standard error of R, Ω.
    pub resistance_se_ohm: f64,
    /// Correlation between the two estimates (−1 … 1).
    pub correlation: f64,
    /// Residuals V_measured − V_model, one per point, V.
    pub residuals_v: Vec<f64>,
    /// Root-mean-square residual, V.
    pub rms_residual_v: f64,
    /// Number of points.
    pub n: usize,
}

impl GeneratorFit {
    /// k_e in the datasheet unit, V/krpm.
    pub fn ke_v_per_krpm(&self) -> f64 {
        v_s_per_rad_to_v_per_krpm(self.ke_v_s_per_rad)
    }

    /// Standard error of k_e, V/krpm.
    pub fn ke_se_v_per_krpm(&self) -> f64 {
        v_s_per_rad_to_v_per_krpm(self.ke_se_v_s_per_rad)
    }
}

/// Why the data do not determine both parameters.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    #[error("{n} measurement point(s); at least 3 are needed to fit two parameters and estimate their errors")]
    TooFewPoints { n: usize },
    #[error("every point is at zero speed, so the back-EMF constant cannot be determined; add points at several speeds")]
    NoSpeed,
    #[error("every point has the same current ({current_a} A), so the resistance cannot be told apart from a fixed voltage offset; add points at other loads (open-circuit points count as current 0)")]
    OneCurrent { current_a: f64 },
    #[error("current is proportional to speed in every point (a single fixed load), so k_e and R cannot be told apart; add open-circuit points or points with a different load")]
    Collinear,
    #[error("a value is not a finite number")]
    NonFinite,
}

/// Relative size of the second QR diagonal below which the columns count as collinear.
const COLLINEAR_TOL: f64 = 1e-9;

/// Fits V = k_e·ω − R·I by ordinary least squares.
pub fn fit_generator(points: &[Measurement]) -> Result<GeneratorFit, FitError> {
    let n = points.len();
    if points
        .iter()
        .any(|p| !(p.rpm.is_finite() && p.voltage_v.is_finite() && p.current_a.is_finite()))
    {
        return Err(FitError::NonFinite);
    }
    if n < 3 {
        return Err(FitError::TooFewPoints { n });
    }
    if points.iter().all(|p| p.rpm == 0.0) {
        return Err(FitError::NoSpeed);
    }
    let i0 = points[0].current_a;
    if points.iter().all(|p| p.current_a == i0) {
        return Err(FitError::OneCurrent { current_a: i0 });
    }
    let a: Vec<f64> = points.iter().map(|p| rpm_to_rad_s(p.rpm)).collect();
    let b: Vec<f64> = points.iter().map(|p| -p.current_a).collect();
    let y: Vec<f64> = points.iter().map(|p| p.voltage_v).collect();
    let ls = two_column_ls(&a, &b, &y).ok_or(FitError::Collinear)?;
    let rss: f64 = ls.residuals.iter().map(|r| r * r).sum();
    let dof = (n - 2) as f64;
    let s2 = rss / dof;
    let (v11, v22, v12) = ls.unscaled_covariance();
    let se1 = (s2 * v11).sqrt();
    let se2 = (s2 * v22).sqrt();
    let correlation = if v11 > 0.0 && v22 > 0.0 {
        (v12 / (v11 * v22).sqrt()).clamp(-1.0, 1.0)
    } else {
        0.0
    };
    Ok(GeneratorFit {
        ke_v_s_per_rad: ls.beta.0,
        ke_se_v_s_per_rad: se1,
        resistance_ohm: ls.beta.1,
        resistance_se_ohm: se2,
        correlation,
        rms_residual_v: (rss / n as f64).sqrt(),
        residuals_v: ls.residuals,
        n,
    })
}

/// Result of a two-column least-squares solve y ≈ β1·a + β2·b.
#[derive(Debug, Clone, PartialEq)]
struct TwoColumn {
    beta: (f64, f64),
    /// Upper-triangular R of X = QR: r11, r12, r22.
    r: (f64, f64, f64),
    residuals: Vec<f64>,
}

impl TwoColumn {
    /// Entries of (XᵀX)⁻¹ = R⁻¹R⁻ᵀ: (v11, v22, v12).
    fn unscaled_covariance(&self) -> (f64, f64, f64) {
        let (r11, r12, r22) = self.r;
        let v22 = 1.0 / (r22 * r22);
        let v11 = 1.0 / (r11 * r11) + r12 * r12 / (r11 * r11 * r22 * r22);
        let v12 = -r12 / (r11 * r22 * r22);
        (v11, v22, v12)
    }
}

fn dot(x: &[f64], y: &[f64]) -> f64 {
    x.iter().zip(y).map(|(a, b)| a * b).sum()
}

/// Least squares y ≈ β1·a + β2·b by modified Gram–Schmidt QR; None when a or b is zero or the
/// two are (numerically) collinear.
fn two_column_ls(a: &[f64], b: &[f64], y: &[f64]) -> Option<TwoColumn> {
    let r11 = dot(a, a).sqrt();
    let nb = dot(b, b).sqrt();
    if !(r11 > 0.0 && nb > 0.0) {
        return None;
    }
    let q1: Vec<f64> = a.iter().map(|x| x / r11).collect();
    let mut r12 = dot(&q1, b);
    let mut w: Vec<f64> = b.iter().zip(&q1).map(|(bi, qi)| bi - r12 * qi).collect();
    // One re-orthogonalisation pass ("twice is enough").
    let c = dot(&q1, &w);
    for (wi, qi) in w.iter_mut().zip(&q1) {
        *wi -= c * qi;
    }
    r12 += c;
    let r22 = dot(&w, &w).sqrt();
    // Inputs are finite here, so r22 is a number; small means collinear.
    if r22 <= COLLINEAR_TOL * nb {
        return None;
    }
    let q2: Vec<f64> = w.iter().map(|x| x / r22).collect();
    let z1 = dot(&q1, y);
    let z2 = dot(&q2, y);
    let beta2 = z2 / r22;
    let beta1 = (z1 - r12 * beta2) / r11;
    let residuals = y
        .iter()
        .zip(a.iter().zip(b))
        .map(|(yi, (ai, bi))| yi - beta1 * ai - beta2 * bi)
        .collect();
    Some(TwoColumn {
        beta: (beta1, beta2),
        r: (r11, r12, r22),
        residuals,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pt(rpm: f64, voltage_v: f64, current_a: f64) -> Measurement {
        Measurement {
            rpm,
            voltage_v,
            current_a,
        }
    }

    #[test]
    fn straight_line_through_the_origin_matches_its_closed_form() {
        // The second column is orthogonal to the first, so the first estimate reduces to the
        // one-regressor case: x = 1, 2, 3 and y = 2, 4.5, 5.5 give Σxy = 27.5 and Σx² = 14.
        let a = [1.0, 2.0, 3.0, 0.0];
        let b = [0.0, 0.0, 0.0, 1.0];
        let y = [2.0, 4.5, 5.5, 0.0];
        let ls = two_column_ls(&a, &b, &y).expect("solvable");
        // Common practice: OLS through the origin gives β = Σxy/Σx² and (XᵀX)⁻¹ = 1/Σx².
        assert!((ls.beta.0 - 27.5 / 14.0).abs() < 1e-12);
        assert!(ls.beta.1.abs() < 1e-12);
        let (v11, _, v12) = ls.unscaled_covariance();
        assert!((v11 - 1.0 / 14.0).abs() < 1e-12);
        assert!(v12.abs() < 1e-12);
    }

    #[test]
    fn collinear_columns_are_refused() {
        let a = [1.0, 2.0, 3.0];
        let b = [2.0, 4.0, 6.0];
        assert!(two_column_ls(&a, &b, &[1.0, 2.0, 3.0]).is_none());
        // A single fixed load resistor makes current proportional to speed.
        let pts: Vec<Measurement> = [500.0, 1000.0, 1500.0]
            .iter()
            .map(|&r| pt(r, r * 0.01, r * 0.001))
            .collect();
        assert_eq!(fit_generator(&pts), Err(FitError::Collinear));
    }

    #[test]
    fn degenerate_inputs_are_named() {
        assert_eq!(
            fit_generator(&[pt(1.0, 1.0, 0.0), pt(2.0, 2.0, 1.0)]),
            Err(FitError::TooFewPoints { n: 2 })
        );
        assert_eq!(
            fit_generator(&[pt(0.0, 0.0, 0.0), pt(0.0, -1.0, 1.0), pt(0.0, -2.0, 2.0)]),
            Err(FitError::NoSpeed)
        );
        assert_eq!(
            fit_generator(&[
                pt(100.0, 1.0, 0.5),
                pt(200.0, 2.0, 0.5),
                pt(300.0, 3.0, 0.5)
            ]),
            Err(FitError::OneCurrent { current_a: 0.5 })
        );
        assert_eq!(
            fit_generator(&[
                pt(100.0, f64::NAN, 0.0),
                pt(200.0, 2.0, 0.5),
                pt(3.0, 3.0, 0.0)
            ]),
            Err(FitError::NonFinite)
        );
    }

    #[test]
    fn exact_points_give_the_chosen_parameters_and_zero_residuals() {
        // Chosen generator: 0.1 V·s/rad and 2 Ω.
        let (ke, r) = (0.1, 2.0);
        let pts: Vec<Measurement> = [(300.0, 0.0), (900.0, 0.0), (600.0, 1.0), (1200.0, 2.5)]
            .iter()
            .map(|&(rpm, i)| pt(rpm, ke * rpm_to_rad_s(rpm) - r * i, i))
            .collect();
        let f = fit_generator(&pts).expect("fit");
        assert!((f.ke_v_s_per_rad - ke).abs() < 1e-12);
        assert!((f.resistance_ohm - r).abs() < 1e-10);
        assert!(f.rms_residual_v < 1e-10);
        assert_eq!(f.n, 4);
    }
}
