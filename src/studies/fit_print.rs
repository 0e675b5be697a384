//! What `fit-generator` prints for either machine: numbers for the RON fragment and the table of
//! residuals by point.

use super::outcome::say;
use crate::analysis::fit::Measurement;

/// Residual lines printed at most (`--json` lists every one).
const MAX_RESIDUAL_LINES: usize = 40;

/// Number with about six significant digits, for the RON fragment.
pub fn sig(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return "0.0".to_string();
    }
    let decimals = (5 - v.abs().log10().floor() as i32).clamp(1, 12) as usize;
    format!("{v:.decimals$}")
}

/// The measured points with the fit's residual at each, one line a point.
pub fn residual_table(points: &[Measurement], residuals_v: &[f64]) {
    say(" point      rpm   voltage_v   current_a   residual_v");
    for (k, (p, res)) in points.iter().zip(residuals_v).enumerate() {
        if k == MAX_RESIDUAL_LINES {
            say(&format!(
                "  ... {} more point(s); --json lists every residual",
                points.len() - k
            ));
            break;
        }
        say(&format!(
            "  {:>4} {:>8.1} {:>11.4} {:>11.4} {:>12.3e}",
            k + 1,
            p.rpm,
            p.voltage_v,
            p.current_a,
            res
        ));
    }
}
