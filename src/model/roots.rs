//! Scalar root finding for the algebraic network: bracketed Newton with bisection fallback.

/// Root of `f` on [lo, hi] given f(lo) ≤ 0 ≤ f(hi); `f` returns (value, slope). Newton steps that
/// leave the bracket, or a non-positive slope, fall back to bisection, so it always converges for
/// a continuous `f`. Stops when the step or the bracket is below `tol`.
pub fn newton_bracketed(
    mut lo: f64,
    mut hi: f64,
    x0: f64,
    tol: f64,
    f: impl Fn(f64) -> (f64, f64),
) -> f64 {
    let mut x = if x0 > lo && x0 < hi {
        x0
    } else {
        0.5 * (lo + hi)
    };
    for _ in 0..100 {
        let (fx, dfx) = f(x);
        if fx == 0.0 {
            return x;
        }
        if fx < 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        let newton = if dfx > 0.0 { x - fx / dfx } else { f64::NAN };
        let next = if newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        if (next - x).abs() <= tol || hi - lo <= tol {
            return next;
        }
        x = next;
    }
    x
}

/// Like [`newton_bracketed`], but checks the bracket ends first: returns `lo` if f(lo) ≥ 0 and
/// `hi` if f(hi) ≤ 0 (no sign change inside).
pub fn root_in(lo: f64, hi: f64, x0: f64, tol: f64, f: impl Fn(f64) -> (f64, f64)) -> f64 {
    if f(lo).0 >= 0.0 {
        return lo;
    }
    if f(hi).0 <= 0.0 {
        return hi;
    }
    newton_bracketed(lo, hi, x0, tol, f)
}
