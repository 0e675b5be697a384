//! A simulated run set against a measured battery log: the simulated channels read at the measured
//! sample times (linear interpolation of the trace), the error per channel (rms, worst, mean), and
//! the charge and energy each puts into the battery over the time both cover.

use serde::Serialize;

/// A piecewise-linear series: strictly increasing times, s, and values.
#[derive(Debug, Clone, Copy)]
pub struct Series<'a> {
    pub time_s: &'a [f64],
    pub values: &'a [f64],
}

impl Series<'_> {
    /// Value at time t by linear interpolation (ends held).
    pub fn at(&self, t: f64) -> f64 {
        let ts = self.time_s;
        let n = ts.len();
        if n == 0 {
            return f64::NAN;
        }
        if t <= ts[0] {
            return self.values[0];
        }
        if t >= ts[n - 1] {
            return self.values[n - 1];
        }
        let k = ts.partition_point(|&s| s <= t);
        let (t0, t1) = (ts[k - 1], ts[k]);
        let f = (t - t0) / (t1 - t0);
        self.values[k - 1] + f * (self.values[k] - self.values[k - 1])
    }

    /// Trapezoidal integral over [a, b] of the piecewise-linear series (exact for it), value·s.
    pub fn integral(&self, a: f64, b: f64) -> f64 {
        if b <= a {
            return 0.0;
        }
        let ts = self.time_s;
        let lo = ts.partition_point(|&s| s <= a);
        let hi = ts.partition_point(|&s| s < b);
        let mut prev = (a, self.at(a));
        let mut sum = 0.0;
        for (&t, &v) in ts[lo..hi].iter().zip(&self.values[lo..hi]) {
            let p = (t, v);
            sum += 0.5 * (prev.1 + p.1) * (p.0 - prev.0);
            prev = p;
        }
        sum + 0.5 * (prev.1 + self.at(b)) * (b - prev.0)
    }
}

/// The error of one channel, simulated minus measured.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ChannelError {
    pub unit: &'static str,
    /// Root-mean-square error over the measured samples.
    pub rms: f64,
    /// Largest absolute error.
    pub worst: f64,
    /// When the largest error occurred, s (simulated time).
    pub worst_at_s: f64,
    /// The simulated and measured values there.
    pub worst_simulated: f64,
    pub worst_measured: f64,
    /// Mean error (bias).
    pub mean: f64,
    pub samples: usize,
}

/// Error of `sim` against the measured samples (times in simulated time) inside [a, b].
pub fn channel_error(
    sim: &Series,
    meas_t: &[f64],
    meas_v: &[f64],
    a: f64,
    b: f64,
    unit: &'static str,
) -> Option<ChannelError> {
    let mut sum2 = 0.0;
    let mut sum = 0.0;
    let mut n = 0usize;
    let mut worst = (0.0_f64, f64::NAN, f64::NAN, f64::NAN);
    for (&t, &m) in meas_t.iter().zip(meas_v) {
        if t < a || t > b {
            continue;
        }
        let s = sim.at(t);
        let e = s - m;
        sum2 += e * e;
        sum += e;
        n += 1;
        if n == 1 || e.abs() > worst.0 {
            worst = (e.abs(), t, s, m);
        }
    }
    (n > 0).then(|| ChannelError {
        unit,
        rms: (sum2 / n as f64).sqrt(),
        worst: worst.0,
        worst_at_s: worst.1,
        worst_simulated: worst.2,
        worst_measured: worst.3,
        mean: sum / n as f64,
        samples: n,
    })
}

/// Relative difference in per cent, (sim − meas)/|meas|·100; None when the measured value is
/// too small to divide by.
pub fn percent_error(sim: f64, meas: f64, floor: f64) -> Option<f64> {
    (meas.abs() > floor).then(|| 100.0 * (sim - meas) / meas.abs())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolation_and_integral_of_a_piecewise_linear_series() {
        let t = [0.0, 1.0, 3.0];
        let v = [0.0, 2.0, 2.0];
        let s = Series {
            time_s: &t,
            values: &v,
        };
        assert_eq!(s.at(0.5), 1.0);
        assert_eq!(s.at(10.0), 2.0);
        // Triangle 0…1 (area 1) plus rectangle 1…3 (area 4); and a piece from 0.5 to 2.
        assert!((s.integral(0.0, 3.0) - 5.0).abs() < 1e-12);
        assert!((s.integral(0.5, 2.0) - (0.75 + 2.0)).abs() < 1e-12);
    }

    #[test]
    fn a_channel_against_itself_has_no_error_and_an_offset_shows_as_bias() {
        let t = [0.0, 1.0, 2.0];
        let v = [1.0, 2.0, 4.0];
        let s = Series {
            time_s: &t,
            values: &v,
        };
        let e = channel_error(&s, &t, &v, 0.0, 2.0, "V").expect("samples");
        assert_eq!((e.rms, e.worst, e.mean), (0.0, 0.0, 0.0));
        let m = [0.5, 1.5, 3.0];
        let e = channel_error(&s, &t, &m, 0.0, 2.0, "V").expect("samples");
        assert_eq!(e.worst, 1.0);
        assert_eq!(e.worst_at_s, 2.0);
        assert!((e.mean - 2.0 / 3.0).abs() < 1e-12);
        assert!((e.rms - (1.5_f64 / 3.0).sqrt()).abs() < 1e-12);
    }
}
