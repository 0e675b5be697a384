//! Small statistics used by studies: percentiles by linear interpolation between order statistics.

/// Percentile `q` (0 … 100) of `samples` by linear interpolation between closest ranks
/// (the "R-7" definition used by common spreadsheets and numpy's default). None when empty.
pub fn percentile(samples: &[f64], q: f64) -> Option<f64> {
    let mut v: Vec<f64> = samples.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() || !(0.0..=100.0).contains(&q) {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let h = (v.len() - 1) as f64 * q / 100.0;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    Some(v[lo] + (h - lo as f64) * (v[hi] - v[lo]))
}

/// Arithmetic mean; None when empty.
pub fn mean(samples: &[f64]) -> Option<f64> {
    (!samples.is_empty()).then(|| samples.iter().sum::<f64>() / samples.len() as f64)
}

/// Smallest and largest finite sample; None when there is none.
pub fn min_max(samples: &[f64]) -> Option<(f64, f64)> {
    samples
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .fold(None, |acc, x| match acc {
            None => Some((x, x)),
            Some((lo, hi)) => Some((lo.min(x), hi.max(x))),
        })
}

/// Wilson score interval (Wilson 1927) for a proportion of `k` successes in `n` trials at normal
/// quantile `z` (1.96 for 95 %): (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n).
/// Stays inside [0, 1] and is sensible at k = 0 or k = n, unlike p̂ ± z·√(p̂(1 − p̂)/n).
/// None when `n` is 0 or `k` > `n`.
pub fn wilson_interval(k: usize, n: usize, z: f64) -> Option<(f64, f64)> {
    if n == 0 || k > n {
        return None;
    }
    let nf = n as f64;
    let p = k as f64 / nf;
    let z2 = z * z;
    let den = 1.0 + z2 / nf;
    let centre = (p + z2 / (2.0 * nf)) / den;
    let half = z * (p * (1.0 - p) / nf + z2 / (4.0 * nf * nf)).sqrt() / den;
    Some(((centre - half).max(0.0), (centre + half).min(1.0)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percentile_follows_linear_interpolation_between_order_statistics() {
        let v = [4.0, 1.0, 3.0, 2.0];
        // Common practice: numpy.percentile's default ("linear", Hyndman & Fan type 7) gives
        // 2.5 at q = 50, 1.75 at q = 25 and 3.25 at q = 75 for [1, 2, 3, 4].
        assert_eq!(percentile(&v, 50.0), Some(2.5));
        assert_eq!(percentile(&v, 25.0), Some(1.75));
        assert_eq!(percentile(&v, 75.0), Some(3.25));
        assert_eq!(percentile(&v, 0.0), Some(1.0));
        assert_eq!(percentile(&v, 100.0), Some(4.0));
        assert_eq!(percentile(&[], 50.0), None);
        assert_eq!(percentile(&v, 101.0), None);
        // Non-finite samples are ignored, not propagated.
        assert_eq!(percentile(&[1.0, f64::NAN, 3.0], 50.0), Some(2.0));
    }

    #[test]
    fn min_max_ignores_non_finite() {
        assert_eq!(min_max(&[2.0, f64::NAN, -1.0, 5.0]), Some((-1.0, 5.0)));
        assert_eq!(min_max(&[f64::INFINITY]), None);
    }

    #[test]
    fn wilson_interval_matches_hand_computation() {
        // From memory: for 5 of 10 at z = 1.96 the Wilson interval is about 0.237 … 0.763 (hand
        // computed: centre 0.5, half-width 1.96·√(0.025 + 0.009604)/1.38416 = 0.26341).
        let (lo, hi) = wilson_interval(5, 10, 1.96).expect("interval");
        assert!((lo - 0.236_59).abs() < 1e-4, "{lo}");
        assert!((hi - 0.763_41).abs() < 1e-4, "{hi}");
        // From memory: with no successes the lower end is 0 and the upper end is z²/(n + z²).
        let (lo0, hi0) = wilson_interval(0, 24, 1.96).expect("interval");
        assert!(lo0.abs() < 1e-12, "{lo0}");
        assert!((hi0 - 3.8416 / (24.0 + 3.8416)).abs() < 1e-12, "{hi0}");
        assert_eq!(wilson_interval(3, 0, 1.96), None);
        assert_eq!(wilson_interval(4, 3, 1.96), None);
    }
}
