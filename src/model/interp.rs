//! Monotone piecewise-cubic interpolation (Fritsch & Carlson 1980), used for OCV curves.

/// A monotone cubic Hermite interpolant through (x, y) knots; clamps outside the knot range.
#[derive(Debug, Clone, PartialEq)]
pub struct Pchip {
    x: Vec<f64>,
    y: Vec<f64>,
    slope: Vec<f64>,
}

impl Pchip {
    /// Builds the interpolant; `x` must be strictly increasing with at least two knots.
    pub fn new(x: &[f64], y: &[f64]) -> Option<Self> {
        let n = x.len();
        if n < 2
            || y.len() != n
            || x.windows(2)
                .any(|w| w[1].partial_cmp(&w[0]) != Some(std::cmp::Ordering::Greater))
        {
            return None;
        }
        let h: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
        let delta: Vec<f64> = (0..n - 1).map(|k| (y[k + 1] - y[k]) / h[k]).collect();
        let mut m = vec![0.0; n];
        m[0] = delta[0];
        m[n - 1] = delta[n - 2];
        for k in 1..n - 1 {
            if delta[k - 1] * delta[k] > 0.0 {
                // Weighted harmonic mean (Fritsch–Butland form), keeps monotonicity.
                let w1 = 2.0 * h[k] + h[k - 1];
                let w2 = h[k] + 2.0 * h[k - 1];
                m[k] = (w1 + w2) / (w1 / delta[k - 1] + w2 / delta[k]);
            }
        }
        Some(Self {
            x: x.to_vec(),
            y: y.to_vec(),
            slope: m,
        })
    }

    /// A flat curve of value `v` over [0, 1].
    pub fn constant(v: f64) -> Self {
        Self {
            x: vec![0.0, 1.0],
            y: vec![v, v],
            slope: vec![0.0, 0.0],
        }
    }

    /// Value and derivative at `t` (clamped to the knot range; derivative 0 outside).
    pub fn eval(&self, t: f64) -> (f64, f64) {
        let n = self.x.len();
        if t <= self.x[0] {
            return (self.y[0], 0.0);
        }
        if t >= self.x[n - 1] {
            return (self.y[n - 1], 0.0);
        }
        let k = match self.x.binary_search_by(|v| v.total_cmp(&t)) {
            Ok(i) => i.min(n - 2),
            Err(i) => i - 1,
        };
        let h = self.x[k + 1] - self.x[k];
        let s = (t - self.x[k]) / h;
        let (y0, y1, m0, m1) = (self.y[k], self.y[k + 1], self.slope[k], self.slope[k + 1]);
        let h00 = (1.0 + 2.0 * s) * (1.0 - s) * (1.0 - s);
        let h10 = s * (1.0 - s) * (1.0 - s);
        let h01 = s * s * (3.0 - 2.0 * s);
        let h11 = s * s * (s - 1.0);
        let v = h00 * y0 + h10 * h * m0 + h01 * y1 + h11 * h * m1;
        let d00 = 6.0 * s * s - 6.0 * s;
        let d10 = 3.0 * s * s - 4.0 * s + 1.0;
        let d01 = -d00;
        let d11 = 3.0 * s * s - 2.0 * s;
        let dv = (d00 * y0 + d01 * y1) / h + d10 * m0 + d11 * m1;
        (v, dv)
    }
}
