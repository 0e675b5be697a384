//! Six-diode bridge on a three-phase source with series (synchronous) inductance, averaged over
//! a period: its DC output against its DC current through the three modes of commutation overlap.
//!
//! With the line-to-line EMF V_LL (RMS) and the phase reactance X = ω_e·L_s (ω_e the electrical
//! angular frequency, pole pairs × shaft speed), the ideal bridge gives V_d0 = (3√2/π)·V_LL at no
//! load. Handing the current from one phase to the next takes an overlap angle μ, during which the
//! output follows the mean of two phases. With x = I_d/I_s2, where I_s2 = √2·V_LL/(2X) is the
//! peak of the line-to-line short-circuit current (I_s2 = V_d0/(2·R_c) with R_c = 3X/π):
//!
//! - mode I (μ ≤ 60°, x ≤ 1/2): 1 − cos μ = x and V_d = V_d0·(1 − x/2) = V_d0 − (3/π)·X·I_d
//!   (From memory: Mohan, Undeland & Robbins, Power Electronics, 3rd ed., Wiley 2003, §5-6,
//!   the three-phase full-bridge rectifier with line inductance);
//! - mode II (1/2 ≤ x ≤ √3/2): μ stays at 60° and each commutation starts late:
//!   V_d = V_d0·(√3/2)·√(1 − x²);
//! - mode III (√3/2 ≤ x ≤ 2/√3): overlaps of 60–120°, three and two phases conducting in turn:
//!   V_d = V_d0·(√3 − 3x/2), zero at the short circuit x = 2/√3 (From memory: Kimbark, Direct
//!   Current Transmission, vol. 1, Wiley 1971, ch. 3, the three modes of bridge operation).
//!
//! The pieces meet with equal slopes. A switched simulation of the circuit itself
//! (`tests/reference/bridge_reference.py`) agrees with them within 0.2 % of V_d0. The DC short
//! circuit current (2/√3)·I_s2 = √2·E_phase/X does not depend on speed, since EMF and reactance
//! both grow with it: an alternator with a large reactance limits its own current.
//!
//! Overlap dissipates nothing: it is the reactance shifting the phase currents behind their EMFs.
//! The machine's electromagnetic power is V_d(I_d)·I_d, the output before copper and diodes.
//! Outside the model: a capacitor on the DC side at light load lifts the output towards the
//! line-to-line peak √2·V_LL (4.7 % above V_d0), which this continuous-conduction average leaves
//! out.

/// End of mode I (overlap 60°), in units of I_s2.
pub const MODE_I_END: f64 = 0.5;
/// End of mode II, in units of I_s2: √3/2.
pub const MODE_II_END: f64 = 0.866_025_403_784_438_6;
/// DC short circuit, in units of I_s2: 2/√3.
pub const SHORT_CIRCUIT: f64 = 1.154_700_538_379_251_5;

/// Average DC output of the ideal bridge as a fraction of V_d0 at x = I_d/I_s2, and its slope
/// d(V_d/V_d0)/dx. Beyond the short circuit the mode-III line goes on (negative output), so that
/// a root finder may step there; at x < 0 (reverse current, which the diodes block) mode I's line.
pub fn output_factor(x: f64) -> (f64, f64) {
    if x <= MODE_I_END {
        (1.0 - 0.5 * x, -0.5)
    } else if x <= MODE_II_END {
        let r = (1.0 - x * x).sqrt();
        let k = 0.5 * 3.0_f64.sqrt();
        (k * r, -k * x / r)
    } else {
        (3.0_f64.sqrt() - 1.5 * x, -1.5)
    }
}

/// Mode of operation at x = I_d/I_s2: 1, 2 or 3.
pub fn mode(x: f64) -> u8 {
    if x <= MODE_I_END {
        1
    } else if x <= MODE_II_END {
        2
    } else {
        3
    }
}

/// Overlap angle in mode I, rad: μ = acos(1 − x) (60° at the end of mode I; 60° held in mode II,
/// more in mode III).
pub fn overlap_angle_rad(x: f64) -> f64 {
    (1.0 - x.clamp(0.0, MODE_I_END)).acos()
}

/// The bridge's DC output before copper and diodes, V, and its slope dV/dI, Ω, at DC current
/// `i`, for a no-load average `v_d0` (V) and a commutation resistance `r_c` = 3·ω_e·L_s/π (Ω).
/// With no reactance (or at standstill) the output is V_d0 at every current.
pub fn dc_output(v_d0: f64, r_c: f64, i: f64) -> (f64, f64) {
    if r_c <= 0.0 || v_d0 <= 0.0 {
        return (v_d0 - r_c.max(0.0) * i, -r_c.max(0.0));
    }
    let x = 2.0 * r_c * i / v_d0;
    let (f, df) = output_factor(x);
    (v_d0 * f, 2.0 * r_c * df)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_pieces_meet_with_equal_values_and_slopes() {
        for edge in [MODE_I_END, MODE_II_END] {
            let (a, da) = output_factor(edge - 1e-9);
            let (b, db) = output_factor(edge + 1e-9);
            assert!((a - b).abs() < 1e-8, "value at {edge}: {a} vs {b}");
            assert!((da - db).abs() < 1e-6, "slope at {edge}: {da} vs {db}");
        }
        assert!(output_factor(SHORT_CIRCUIT).0.abs() < 1e-12);
        assert_eq!(mode(0.2), 1);
        assert_eq!(mode(0.7), 2);
        assert_eq!(mode(1.0), 3);
    }

    #[test]
    fn slope_is_the_derivative_of_the_output() {
        let (v_d0, r_c) = (24.0, 1.3);
        for i in [0.5, 3.0, 6.0, 8.0, 9.5] {
            let h = 1e-6;
            let fd = (dc_output(v_d0, r_c, i + h).0 - dc_output(v_d0, r_c, i - h).0) / (2.0 * h);
            assert!((fd - dc_output(v_d0, r_c, i).1).abs() < 1e-5, "at {i} A");
        }
    }
}
