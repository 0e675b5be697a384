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
