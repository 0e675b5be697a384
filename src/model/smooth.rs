//! The smooth sign used wherever a dry friction or a drop must change sign without a kink at zero
//! (so that the implicit solver's Newton iterations see a smooth right-hand side): tanh, computed
//! with one exponential (the library's tanh costs several times that, and the network solve calls
//! it hundreds of thousands of times a session).

/// tanh(x) = (1 − e^(−2|x|))/(1 + e^(−2|x|)) with the sign of x; near zero its Taylor series
/// x − x³/3 + 2x⁵/15 (the quotient cancels there). Agrees with `f64::tanh` to a few ulp.
pub fn sign(x: f64) -> f64 {
    let a = x.abs();
    let t = if a < 1e-3 {
        let a2 = a * a;
        a * (1.0 - a2 / 3.0 + 2.0 * a2 * a2 / 15.0)
    } else {
        let e = (-2.0 * a).exp();
        (1.0 - e) / (1.0 + e)
    };
    t.copysign(x)
}

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
        assert_eq!(sign(0.0), 0.0);
        assert!(sign(f64::NAN).is_nan());
    }
}
