//! A recorded crank session (cadence, optionally the operator's torque) resampled into smooth
//! tracks that the plant can follow, and split into stretches with the hands on and off.
//!
//! Resampling, the one stated method: samples closer together than [`KNOT_SPACING_S`] are first
//! averaged in consecutive groups (a box filter: a group starts at a sample and takes every later
//! sample less than the spacing after it; its knot is the mean time and the mean value), then a
//! monotone piecewise-cubic Hermite interpolant (Fritsch & Carlson 1980, with the Fritsch–Butland
//! derivatives, [`Pchip`]) runs through the knots. It passes through every knot, is C¹ (so the
//! solver meets no kink at a sample), and never overshoots the samples (no negative cadence or
//! torque between two non-negative samples). Past the last sample the last value holds, as the
//! last segment of a planned profile does.

use std::fmt;

use super::interp::Pchip;

/// Knots closer than this are averaged into one, s: logs sampled faster than 10 Hz are thinned
/// by averaging, so the solver does not follow sensor noise sample by sample.
pub const KNOT_SPACING_S: f64 = 0.1;
/// Torque below this fraction of the median cranking torque counts as hands off.
pub const TORQUE_OFF_FRACTION: f64 = 0.05;
/// Without torque, cadence below this fraction of the median cadence counts as hands off.
pub const CADENCE_OFF_FRACTION: f64 = 0.5;
/// Stretches shorter than this are joined to their neighbours, s (a flicker is not a rest).
pub const MIN_STRETCH_S: f64 = 0.3;

/// A stretch of the recording with the hands on the crank or off it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stretch {
    pub start_s: f64,
    pub end_s: f64,
    pub hands_on: bool,
}

impl Stretch {
    /// Length, s.
    pub fn length_s(&self) -> f64 {
        self.end_s - self.start_s
    }
}

/// A recorded session: samples (time from the first sample, s; crank speed, rad/s; torque, N·m)
/// and their resampled tracks.
#[derive(Clone, PartialEq)]
pub struct Recording {
    /// Where it was read from (for messages and summaries).
    pub file: String,
    /// Sample times from the first sample, s (strictly increasing, first 0).
    pub time_s: Vec<f64>,
    /// Crank speed at each sample, rad/s (≥ 0).
    pub crank_rad_s: Vec<f64>,
    /// Operator torque at each sample, N·m (≥ 0), when the log has it.
    pub torque_n_m: Option<Vec<f64>>,
    cadence: Pchip,
    torque: Option<Pchip>,
}

impl fmt::Debug for Recording {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Recording")
            .field("file", &self.file)
            .field("samples", &self.time_s.len())
            .field("span_s", &self.span_s())
            .field("torque", &self.torque_n_m.is_some())
            .finish()
    }
}

/// Knots of the resampled track: consecutive samples less than [`KNOT_SPACING_S`] apart are
/// averaged (mean time, mean value).
pub fn knots(time_s: &[f64], values: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let mut kt = Vec::with_capacity(time_s.len());
    let mut kv = Vec::with_capacity(time_s.len());
    let mut i = 0;
    while i < time_s.len() {
        let start = time_s[i];
        let mut j = i + 1;
        while j < time_s.len() && time_s[j] - start < KNOT_SPACING_S - 1e-9 {
            j += 1;
        }
        let n = (j - i) as f64;
        kt.push(time_s[i..j].iter().sum::<f64>() / n);
        kv.push(values[i..j].iter().sum::<f64>() / n);
        i = j;
    }
    (kt, kv)
}

fn track(time_s: &[f64], values: &[f64]) -> Pchip {
    let (kt, kv) = knots(time_s, values);
    Pchip::new(&kt, &kv).unwrap_or_else(|| Pchip::constant(kv.first().copied().unwrap_or(0.0)))
}

impl Recording {
    /// Builds the tracks. `time_s` must be strictly increasing (the reader checks it); times are
    /// taken from the first sample.
    pub fn new(
        file: String,
        time_s: Vec<f64>,
        crank_rad_s: Vec<f64>,
        torque_n_m: Option<Vec<f64>>,
    ) -> Self {
        let t0 = time_s.first().copied().unwrap_or(0.0);
        let time_s: Vec<f64> = time_s.iter().map(|t| t - t0).collect();
        let cadence = track(&time_s, &crank_rad_s);
        let torque = torque_n_m.as_ref().map(|q| track(&time_s, q));
        Self {
            file,
            time_s,
            crank_rad_s,
            torque_n_m,
            cadence,
            torque,
        }
    }

    /// Time from the first to the last sample, s.
    pub fn span_s(&self) -> f64 {
        self.time_s.last().copied().unwrap_or(0.0)
    }

    /// Resampled crank speed and its rate at time t, rad/s and rad/s² (the last value holds past
    /// the end, with rate 0).
    pub fn cadence_rad_s(&self, t: f64) -> (f64, f64) {
        let (v, d) = self.cadence.eval(t);
        (v.max(0.0), d)
    }

    /// Resampled operator torque at time t, N·m (None: the log has no torque).
    pub fn torque_n_m(&self, t: f64) -> Option<f64> {
        self.torque.as_ref().map(|q| q.eval(t).0.max(0.0))
    }

    /// Whether the hands are on the crank at each sample: torque above
    /// [`TORQUE_OFF_FRACTION`] of its median over the samples with torque, or without torque,
    /// cadence above [`CADENCE_OFF_FRACTION`] of its median over the moving samples.
    pub fn hands_on_samples(&self) -> Vec<bool> {
        let (values, fraction) = match &self.torque_n_m {
            Some(q) => (q.as_slice(), TORQUE_OFF_FRACTION),
            None => (self.crank_rad_s.as_slice(), CADENCE_OFF_FRACTION),
        };
        let threshold = fraction * median(values.iter().copied().filter(|v| *v > 0.0));
        values.iter().map(|&v| v > 0.0 && v > threshold).collect()
    }

    /// The recording split into stretches with the hands on and off (see
    /// [`Recording::hands_on_samples`]); a change of state is placed halfway between the two
    /// samples, and stretches shorter than [`MIN_STRETCH_S`] are joined to their neighbours
    /// (first short rests, then short touches).
    pub fn stretches(&self) -> Vec<Stretch> {
        let flags = self.hands_on_samples();
        let t = &self.time_s;
        let n = t.len();
        if n == 0 {
            return Vec::new();
        }
        let mut out: Vec<Stretch> = Vec::new();
        let mut start = 0.0;
        for k in 1..n {
            if flags[k] != flags[k - 1] {
                let mid = 0.5 * (t[k - 1] + t[k]);
                out.push(Stretch {
                    start_s: start,
                    end_s: mid,
                    hands_on: flags[k - 1],
                });
                start = mid;
            }
        }
        out.push(Stretch {
            start_s: start,
            end_s: t[n - 1],
            hands_on: flags[n - 1],
        });
        let out = absorb_short(out, false);
        absorb_short(out, true)
    }
}

/// Flips stretches of state `hands_on` shorter than [`MIN_STRETCH_S`] and joins neighbours of
/// one state.
fn absorb_short(stretches: Vec<Stretch>, hands_on: bool) -> Vec<Stretch> {
    let many = stretches.len() > 1;
    let mut out: Vec<Stretch> = Vec::with_capacity(stretches.len());
    for mut s in stretches {
        if many && s.hands_on == hands_on && s.length_s() < MIN_STRETCH_S {
            s.hands_on = !hands_on;
        }
        match out.last_mut() {
            Some(last) if last.hands_on == s.hands_on => last.end_s = s.end_s,
            _ => out.push(s),
        }
    }
    out
}

/// Median of the values (0 for none).
pub fn median(values: impl Iterator<Item = f64>) -> f64 {
    let mut v: Vec<f64> = values.collect();
    if v.is_empty() {
        return 0.0;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(t: &[f64], w: &[f64], q: Option<&[f64]>) -> Recording {
        Recording::new(
            "r.csv".into(),
            t.to_vec(),
            w.to_vec(),
            q.map(<[f64]>::to_vec),
        )
    }

    #[test]
    fn dense_samples_are_averaged_into_knots() {
        // 100 Hz samples over 0.3 s: groups of ten, knots at their mean times and values.
        let t: Vec<f64> = (0..30).map(|k| k as f64 * 0.01).collect();
        let v: Vec<f64> = t.iter().map(|t| 10.0 * t).collect();
        let (kt, kv) = knots(&t, &v);
        assert_eq!(kt.len(), 3);
        // Mean of 0.00 … 0.09 is 0.045; of the values 10× that.
        assert!((kt[0] - 0.045).abs() < 1e-12 && (kv[0] - 0.45).abs() < 1e-12);
        assert!((kt[2] - 0.245).abs() < 1e-12);
        // Samples 0.1 s apart stay as they are.
        let t: Vec<f64> = (0..5).map(|k| k as f64 * 0.1).collect();
        assert_eq!(knots(&t, &t).0.len(), 5);
    }

    #[test]
    fn tracks_pass_through_samples_start_at_zero_and_hold_past_the_end() {
        let r = rec(&[5.0, 6.0, 7.0], &[1.0, 3.0, 2.0], Some(&[4.0, 0.0, 8.0]));
        assert_eq!(r.time_s, vec![0.0, 1.0, 2.0]);
        assert!((r.cadence_rad_s(1.0).0 - 3.0).abs() < 1e-12);
        // Monotone: no overshoot above the local maximum between the samples.
        for k in 0..=100 {
            let t = 2.0 * f64::from(k) / 100.0;
            assert!(r.cadence_rad_s(t).0 <= 3.0 + 1e-12);
            assert!(r.torque_n_m(t).unwrap() >= 0.0);
        }
        assert_eq!(r.cadence_rad_s(50.0), (2.0, 0.0));
        assert_eq!(r.span_s(), 2.0);
    }

    #[test]
    fn a_rest_in_the_torque_is_a_stretch_with_the_hands_off() {
        // 10 Hz, torque 5 N·m except 3.0 … 4.9 s (zero): the change sits halfway between samples.
        let t: Vec<f64> = (0..100).map(|k| f64::from(k) * 0.1).collect();
        let q: Vec<f64> = t
            .iter()
            .map(|&t| if (2.95..4.95).contains(&t) { 0.0 } else { 5.0 })
            .collect();
        let w = vec![7.0; t.len()];
        let s = rec(&t, &w, Some(&q)).stretches();
        assert_eq!(s.len(), 3, "{s:?}");
        assert!(!s[1].hands_on);
        assert!((s[1].start_s - 2.95).abs() < 1e-9 && (s[1].end_s - 4.95).abs() < 1e-9);
        // A 0.2-s dip is a flicker, not a rest.
        let q: Vec<f64> = t
            .iter()
            .map(|&t| if (2.95..3.15).contains(&t) { 0.0 } else { 5.0 })
            .collect();
        assert_eq!(rec(&t, &w, Some(&q)).stretches().len(), 1);
    }

    #[test]
    fn without_torque_a_rest_is_cadence_below_half_its_median() {
        let t: Vec<f64> = (0..100).map(|k| f64::from(k) * 0.1).collect();
        let w: Vec<f64> = t
            .iter()
            .map(|&t| if (5.0..7.0).contains(&t) { 1.0 } else { 7.0 })
            .collect();
        let s = rec(&t, &w, None).stretches();
        assert_eq!(s.iter().filter(|s| !s.hands_on).count(), 1, "{s:?}");
    }

    #[test]
    fn median_of_odd_and_even_counts() {
        assert_eq!(median([3.0, 1.0, 2.0].into_iter()), 2.0);
        assert_eq!(median([4.0, 1.0, 2.0, 3.0].into_iter()), 2.5);
        assert_eq!(median(std::iter::empty()), 0.0);
    }
}
