//! The smooth sign used wherever a dry friction or a drop must change sign without a kink at zero
//! (so that the implicit solver's Newton iterations see a smooth right-hand side): tanh, computed
//! with one exponential (the library's tanh costs several times that, and the network solve calls
//! it hundreds of thousands of times a session).

/// tanh(x) = (1 − e^(−2|x|))/(1 + e^(−2|x|)) with the sign of x; near zero its Taylor series
/// x − x³/3 + 2x⁵/15 (the quotient cancels there). Agrees with `f64::tanh` to a few ulp.
/// Past |x| = [`SATURATED`] the quotient rounds to exactly 1, so no exponential is taken there
/// (most calls: a shaft turning at a few rad/s is hundreds of smoothing widths from zero).
pub fn sign(x: f64) -> f64 {
    let a = x.abs();
    let t = if a < 1e-3 {
        let a2 = a * a;
        a * (1.0 - a2 / 3.0 + 2.0 * a2 * a2 / 15.0)
    } else if a > SATURATED {
        1.0
    } else {
        let e = (-2.0 * a).exp();
        (1.0 - e) / (1.0 + e)
    };
    t.copysign(x)
}

/// |x| beyond which (1 − e)/(1 + e) with e = e^(−2|x|) rounds to 1: e < e^(−38) ≈ 3.1e-17 is
/// below half an ulp on either side of 1 (2⁻⁵⁴ ≈ 5.6e-17), so both sums round to 1.
const SATURATED: f64 = 19.0;

/// d[`sign`]/dx = 1 − tanh²(x).
pub fn sign_slope(x: f64) -> f64 {
    let t = sign(x);
    1.0 - t * t
}

/// [`sign`] and its slope together (one exponential).
pub fn sign_and_slope(x: f64) -> (f64, f64) {
    let t = sign(x);
    (t, 1.0 - t * t)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn it_is_tanh_and_its_slope_is_its_derivative() {
        for &x in &[
            -50.0, -2.0, -0.3, -1e-4, 0.0, 1e-9, 5e-4, 2e-3, 0.4, 3.0, 1e6,
        ] {
            assert!((sign(x) - x.tanh()).abs() <= 4.0 * f64::EPSILON, "{x}");
            assert_eq!(sign(-x), -sign(x));
            let h = 1e-6 * (1.0 + x.abs());
            let fd = (sign(x + h) - sign(x - h)) / (2.0 * h);
            assert!((sign_slope(x) - fd).abs() < 1e-6, "{x}");
            assert_eq!(sign_and_slope(x), (sign(x), sign_slope(x)));
        }
        // The short cut past SATURATED gives the same bits as the quotient it skips.
        for &x in &[18.99_f64, 19.0, 19.000001, 19.5, 25.0, 700.0, 1e300] {
            let e = (-2.0 * x).exp();
            assert_eq!(sign(x), (1.0 - e) / (1.0 + e), "{x}");
            assert_eq!(sign(-x), -1.0, "{x}");
            assert_eq!(sign_slope(x), 0.0, "{x}");
        }
        assert_eq!(sign(f64::INFINITY), 1.0);
        assert_eq!(sign(0.0), 0.0);
        assert!(sign(f64::NAN).is_nan());
    }
}
