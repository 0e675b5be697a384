//! Estimating the operator of a crank profile from recorded logs: mean cadence, the cadence
//! wander as an Ornstein–Uhlenbeck process (strength and correlation time), the per-revolution
//! ripple, the rest pattern, and critical power and W′ from the power–duration relation when the
//! logs carry the torque. Every estimate comes with its standard error.
//!
//! The cadence is cut into whole crank revolutions (the crank angle is the trapezoidal integral of
//! the cadence): a revolution's mean cadence is free of any ripple that repeats each turn. Only
//! the stretches with the hands on count, less [`SETTLE_S`] after each start (spin-up) and
//! [`END_MARGIN_S`] before each end; each log's linear trend is taken as its plan. The wander is
//! read from means over boxes of a few whole revolutions ([`WANDER_BOX_S`]).

use serde::Serialize;

use crate::model::jitter::MIN_REST_S;
use crate::model::recording::{median, Recording};
use crate::units::rad_s_to_rpm;

/// Seconds left out after each start of cranking (spin-up and the tracking loop settling).
pub const SETTLE_S: f64 = 3.0;
/// Seconds left out before each rest (without torque a rest is seen late, in the coast-down).
pub const END_MARGIN_S: f64 = 1.0;
/// The wander is read from means over boxes of whole revolutions lasting about this long, s: the
/// crank's own answer to the operator's loop (the ripple, lock-outs of the charger, tracking
/// overshoot) lives at shorter time scales and averages out, while a wander whose correlation time
/// is a few seconds or more still shows. Correlation times well under this are not resolved.
pub const WANDER_BOX_S: f64 = 2.5;
/// Blocks of the delete-one-block jackknife.
const JACKKNIFE_BLOCKS: usize = 10;
/// Fewest boxes for a wander estimate.
const MIN_BOXES: usize = 40;
/// Durations of the power–duration fit, s (2 to 20 minutes, as exhaustive trials for critical
/// power are usually chosen).
pub const CP_DURATIONS_S: [f64; 7] = [120.0, 180.0, 300.0, 420.0, 600.0, 900.0, 1200.0];
/// Duration of the peak power, s.
pub const PEAK_DURATION_S: f64 = 5.0;
/// Highest ripple order tried (torque peaks per revolution).
pub const MAX_PEAKS_PER_REV: u32 = 4;

/// A value and its standard error (None where the data cannot give one).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Estimate {
    pub value: f64,
    pub standard_error: Option<f64>,
}

impl Estimate {
    fn new(value: f64, se: f64) -> Self {
        Self {
            value,
            standard_error: se.is_finite().then_some(se),
        }
    }
}

/// What was found in one log.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LogFacts {
    pub file: String,
    pub samples: usize,
    pub span_s: f64,
    pub has_torque: bool,
    /// Time with the hands on the crank, s.
    pub hands_on_s: f64,
    pub rests: usize,
    /// Whole revolutions used for the cadence figures.
    pub revolutions: usize,
}

/// The per-revolution ripple.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RippleFit {
    /// Ripple peaks per revolution k (the strongest of 1 … 4).
    pub peaks_per_rev: u32,
    /// Amplitude of the cadence ripple at k per revolution, rpm.
    pub cadence_amplitude_rpm: Estimate,
    /// Torque ripple a in τ = τ̄·(1 + a·cos(kθ + φ)) (logs with torque), with the tracking loop's
    /// answer to the speed ripple added back (see `ripple_of`).
    pub torque_fraction: Option<Estimate>,
    /// Stretches the figures are averaged over.
    pub stretches: usize,
}

/// Rests and hand changes.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RestFit {
    pub count: usize,
    pub hands_on_s: f64,
    /// Mean time with the hands on between rests, s (rests as a Poisson process).
    pub interval_s: Option<Estimate>,
    /// Mean length of the exponential the rests are drawn from, s (floored at 0.5 s as the
    /// product draws them).
    pub length_s: Option<Estimate>,
    /// Mean observed rest length, s.
    pub observed_mean_length_s: Option<f64>,
}

/// Critical power and W′ from the mean-maximal powers.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PowerFit {
    pub critical_power_w: Estimate,
    pub w_prime_j: Estimate,
    /// Highest mean power over [`PEAK_DURATION_S`], W.
    pub peak_power_w: f64,
    /// (duration s, mean-maximal power W) of the points fitted.
    pub points: Vec<(f64, f64)>,
}

/// The whole fit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OperatorFit {
    pub logs: Vec<LogFacts>,
    pub revolutions: usize,
    pub mean_cadence_rpm: Option<Estimate>,
    pub wander_rpm: Option<Estimate>,
    pub wander_time_s: Option<Estimate>,
    pub ripple: Option<RippleFit>,
    pub rests: RestFit,
    pub power: Option<PowerFit>,
    pub notes: Vec<String>,
}

/// One whole revolution of a usable stretch.
#[derive(Debug, Clone, Copy)]
struct Rev {
    t_mid: f64,
    duration: f64,
    /// Sample range [lo, hi) inside it.
    lo: usize,
    hi: usize,
}

/// A usable stretch of one log: its revolutions.
struct Window {
    revs: Vec<Rev>,
}

/// Crank angle at every sample: trapezoidal integral of the cadence, rad.
fn angles(r: &Recording) -> Vec<f64> {
    let mut th = Vec::with_capacity(r.time_s.len());
    let mut a = 0.0;
    for k in 0..r.time_s.len() {
        if k > 0 {
            a += 0.5 * (r.crank_rad_s[k - 1] + r.crank_rad_s[k]) * (r.time_s[k] - r.time_s[k - 1]);
        }
        th.push(a);
    }
    th
}

/// Angle at time t by linear interpolation between samples.
fn angle_at(r: &Recording, th: &[f64], t: f64) -> f64 {
    let k = r
        .time_s
        .partition_point(|&s| s <= t)
        .clamp(1, r.time_s.len() - 1);
    let (t0, t1) = (r.time_s[k - 1], r.time_s[k]);
    let f = ((t - t0) / (t1 - t0)).clamp(0.0, 1.0);
    th[k - 1] + f * (th[k] - th[k - 1])
}

/// Time at which the angle reaches `target` within samples [k0, n), or None.
fn time_of_angle(r: &Recording, th: &[f64], k0: usize, target: f64) -> Option<(f64, usize)> {
    let k = k0 + th[k0..].partition_point(|&a| a < target);
    if k == 0 || k >= th.len() {
        return None;
    }
    let (a0, a1) = (th[k - 1], th[k]);
    let f = if a1 > a0 {
        (target - a0) / (a1 - a0)
    } else {
        0.0
    };
    Some((r.time_s[k - 1] + f * (r.time_s[k] - r.time_s[k - 1]), k))
}

/// The usable windows of a log, cut into whole revolutions.
fn windows(r: &Recording, th: &[f64]) -> Vec<Window> {
    let mut out = Vec::new();
    for s in r.stretches().iter().filter(|s| s.hands_on) {
        let (a, b) = (s.start_s + SETTLE_S, s.end_s - END_MARGIN_S);
        if b - a < 1.0 {
            continue;
        }
        let mut revs = Vec::new();
        let mut start = a;
        let mut start_angle = angle_at(r, th, a);
        let mut k = r.time_s.partition_point(|&t| t < a).max(1);
        while let Some((end, k_end)) = time_of_angle(r, th, k, start_angle + std::f64::consts::TAU)
        {
            if end > b {
                break;
            }
            let lo = r.time_s.partition_point(|&t| t < start);
            let hi = r.time_s.partition_point(|&t| t < end);
            revs.push(Rev {
                t_mid: 0.5 * (start + end),
                duration: end - start,
                lo,
                hi,
            });
            start = end;
            start_angle += std::f64::consts::TAU;
            k = k_end.max(1);
        }
        if revs.len() >= 3 {
            out.push(Window { revs });
        }
    }
    out
}

/// Sums the wander estimator needs, kept per jackknife block.
#[derive(Debug, Clone, Copy, Default)]
struct Sums {
    revs: f64,
    boxes: f64,
    duration: f64,
    lag1: f64,
    n1: f64,
    lag2: f64,
    n2: f64,
}

impl Sums {
    fn add(&mut self, o: &Sums) {
        self.revs += o.revs;
        self.boxes += o.boxes;
        self.duration += o.duration;
        self.lag1 += o.lag1;
        self.n1 += o.n1;
        self.lag2 += o.lag2;
        self.n2 += o.n2;
    }

    fn sub(&self, o: &Sums) -> Sums {
        Sums {
            revs: self.revs - o.revs,
            boxes: self.boxes - o.boxes,
            duration: self.duration - o.duration,
            lag1: self.lag1 - o.lag1,
            n1: self.n1 - o.n1,
            lag2: self.lag2 - o.lag2,
            n2: self.n2 - o.n2,
        }
    }

    /// Mean cadence (revolutions over time), rpm.
    fn mean_rpm(&self) -> f64 {
        60.0 * self.revs / self.duration
    }

    /// OU strength σ (rpm) and correlation time τ (s) from the lag-1 and lag-2 autocovariances
    /// of the box means (see [`ou_from_box_means`]).
    fn ou(&self) -> Option<(f64, f64)> {
        if self.n1 < 2.0 || self.n2 < 2.0 || self.boxes < 1.0 {
            return None;
        }
        ou_from_box_means(
            self.lag1 / self.n1,
            self.lag2 / self.n2,
            self.duration / self.boxes,
        )
    }
}

/// Ornstein–Uhlenbeck parameters from box means: for x(t) with covariance σ²·e^(−|s|/τ), the means
/// over consecutive boxes of length T have lag-m covariance γ(m) = σ²·(τ/T)²·(1 − φ)²·φ^(m−1)
/// for m ≥ 1, with φ = e^(−T/τ), the exact discretisation of the process over one box. So
/// φ = γ(2)/γ(1), τ = −T/ln φ and σ² = γ(1)/((τ/T)²·(1 − φ)²). Lag 0 is not used: white noise
/// (sensor noise, what is left of the ripple) does not bias the estimate. Returns (σ, τ).
pub fn ou_from_box_means(gamma1: f64, gamma2: f64, box_s: f64) -> Option<(f64, f64)> {
    if !(gamma1 > 0.0 && gamma2 > 0.0 && box_s > 0.0) {
        return None;
    }
    let phi = gamma2 / gamma1;
    if !(phi > 0.0 && phi < 1.0) {
        return None;
    }
    let tau = -box_s / phi.ln();
    let scale = (tau / box_s) * (1.0 - phi);
    Some(((gamma1 / (scale * scale)).sqrt(), tau))
}

/// Delete-one-block jackknife standard error of `f` (Künsch 1989: blocks keep the serial
/// correlation inside them); NaN when any replicate is undefined.
fn jackknife(blocks: &[Sums], f: impl Fn(&Sums) -> Option<f64>) -> f64 {
    let mut total = Sums::default();
    for b in blocks {
        total.add(b);
    }
    let reps: Vec<Option<f64>> = blocks.iter().map(|b| f(&total.sub(b))).collect();
    if reps.iter().any(Option::is_none) || reps.len() < 2 {
        return f64::NAN;
    }
    let reps: Vec<f64> = reps.into_iter().flatten().collect();
    let k = reps.len() as f64;
    let mean = reps.iter().sum::<f64>() / k;
    ((k - 1.0) / k * reps.iter().map(|v| (v - mean).powi(2)).sum::<f64>()).sqrt()
}

/// Least-squares line y = a + b·x; (a, b).
fn line(x: &[f64], y: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - mx).powi(2)).sum();
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let b = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    (my - b * mx, b)
}

/// Solves the normal equations of a small least-squares problem (rows of regressors, targets)
/// by Gaussian elimination with partial pivoting; None when singular.
fn least_squares<const N: usize>(rows: &[[f64; N]], y: &[f64]) -> Option<[f64; N]> {
    let mut a = [[0.0; N]; N];
    let mut b = [0.0; N];
    for (r, &v) in rows.iter().zip(y) {
        for i in 0..N {
            b[i] += r[i] * v;
            for j in 0..N {
                a[i][j] += r[i] * r[j];
            }
        }
    }
    let scale = (0..N).map(|i| a[i][i]).fold(0.0, f64::max);
    for c in 0..N {
        let p = (c..N).max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs()))?;
        if a[p][c].abs() <= 1e-12 * scale.max(f64::MIN_POSITIVE) {
            return None;
        }
        a.swap(c, p);
        b.swap(c, p);
        let pivot = a[c];
        for r in c + 1..N {
            let f = a[r][c] / pivot[c];
            for (x, p) in a[r][c..].iter_mut().zip(&pivot[c..]) {
                *x -= f * p;
            }
            b[r] -= f * b[c];
        }
    }
    let mut x = [0.0; N];
    for c in (0..N).rev() {
        let s: f64 = (c + 1..N).map(|j| a[c][j] * x[j]).sum();
        x[c] = (b[c] - s) / a[c][c];
    }
    Some(x)
}

/// Weighted mean and its standard error over stretches (None for fewer than two).
fn weighted(values: &[(f64, f64)]) -> Option<Estimate> {
    let w: f64 = values.iter().map(|v| v.1).sum();
    if values.is_empty() || w <= 0.0 {
        return None;
    }
    let mean = values.iter().map(|(v, k)| v * k).sum::<f64>() / w;
    let n = values.len() as f64;
    let se = if values.len() >= 2 {
        let var = values
            .iter()
            .map(|(v, k)| k * (v - mean).powi(2))
            .sum::<f64>()
            / w;
        (var * n / (n - 1.0)).sqrt() / n.sqrt()
    } else {
        f64::NAN
    };
    Some(Estimate::new(mean, se))
}

/// Ripple amplitudes of one stretch at k per revolution: cadence (rpm) and, with torque, the
/// operator's own torque ripple a. The operator's tracking loop answers the speed ripple δω that
/// the torque ripple causes with −K_p·δω, which shrinks the torque ripple seen in a log; that
/// answer is added back before (τ + K_p·δω)/τ̄ − 1 is regressed on cos kθ and sin kθ, so that a
/// profile with this a and gain K_p gives the logged ripple again. (K_p cannot be fitted with a:
/// δω is itself a sinusoid in kθ.)
fn ripple_of(r: &Recording, th: &[f64], w: &Window, k: f64, kp_n_m_s: f64) -> (f64, Option<f64>) {
    let mut rows2 = Vec::new();
    let mut y2 = Vec::new();
    let mut rows_q = Vec::new();
    let mut y3 = Vec::new();
    for rev in &w.revs {
        if rev.hi <= rev.lo {
            continue;
        }
        let mean_w = std::f64::consts::TAU / rev.duration;
        let mean_q = r
            .torque_n_m
            .as_ref()
            .map(|q| q[rev.lo..rev.hi].iter().sum::<f64>() / (rev.hi - rev.lo) as f64);
        for i in rev.lo..rev.hi {
            let (c, s) = ((k * th[i]).cos(), (k * th[i]).sin());
            let dw = r.crank_rad_s[i] - mean_w;
            rows2.push([c, s]);
            y2.push(rad_s_to_rpm(dw));
            if let (Some(q), Some(mq)) = (&r.torque_n_m, mean_q) {
                if mq > 0.0 {
                    rows_q.push([c, s]);
                    y3.push((q[i] + kp_n_m_s * dw) / mq - 1.0);
                }
            }
        }
    }
    let cadence = least_squares(&rows2, &y2).map_or(f64::NAN, |c| c[0].hypot(c[1]));
    let torque = least_squares(&rows_q, &y3).map(|c| c[0].hypot(c[1]));
    (cadence, torque)
}

/// Solves mean = m0 + L·e^(−m0/L) for L: the mean of max(X, m0) with X exponential of mean L.
fn floored_exponential_mean(observed: f64, m0: f64) -> f64 {
    if observed <= m0 {
        return observed;
    }
    let f = |l: f64| m0 + l * (-m0 / l).exp();
    let (mut lo, mut hi) = (1e-9, observed.max(1.0) * 10.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if f(mid) < observed {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Mean power over the best window of each duration, W (None where no log is long enough).
fn mean_maximal_power(logs: &[&Recording], d: f64) -> Option<f64> {
    let mut best: Option<f64> = None;
    for r in logs {
        let Some(q) = &r.torque_n_m else { continue };
        if r.span_s() < d {
            continue;
        }
        let t = &r.time_s;
        let mut e = vec![0.0; t.len()];
        for k in 1..t.len() {
            e[k] = e[k - 1]
                + 0.5
                    * (q[k - 1] * r.crank_rad_s[k - 1] + q[k] * r.crank_rad_s[k])
                    * (t[k] - t[k - 1]);
        }
        let at = |time: f64| {
            let k = t.partition_point(|&s| s <= time).clamp(1, t.len() - 1);
            let f = ((time - t[k - 1]) / (t[k] - t[k - 1])).clamp(0.0, 1.0);
            e[k - 1] + f * (e[k] - e[k - 1])
        };
        for i in 0..t.len() {
            if t[i] + d > r.span_s() + 1e-9 {
                break;
            }
            let p = (at(t[i] + d) - e[i]) / d;
            best = Some(best.map_or(p, |b: f64| b.max(p)));
        }
    }
    best
}

/// The two-parameter critical-power model of Monod & Scherrer (1965) in its work–time form,
/// W = W′ + CP·t, fitted by ordinary least squares to the mean-maximal work over
/// [`CP_DURATIONS_S`]; standard errors from the residual variance (n − 2 degrees of freedom).
fn power_fit(logs: &[&Recording]) -> Option<PowerFit> {
    let points: Vec<(f64, f64)> = CP_DURATIONS_S
        .iter()
        .filter_map(|&d| mean_maximal_power(logs, d).map(|p| (d, p)))
        .collect();
    if points.len() < 3 {
        return None;
    }
    let x: Vec<f64> = points.iter().map(|p| p.0).collect();
    let y: Vec<f64> = points.iter().map(|p| p.0 * p.1).collect();
    let (w_prime, cp) = line(&x, &y);
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - mx).powi(2)).sum();
    let rss: f64 = x
        .iter()
        .zip(&y)
        .map(|(a, b)| (b - w_prime - cp * a).powi(2))
        .sum();
    let s = (rss / (n - 2.0)).sqrt();
    Some(PowerFit {
        critical_power_w: Estimate::new(cp, s / sxx.sqrt()),
        w_prime_j: Estimate::new(w_prime, s * (1.0 / n + mx * mx / sxx).sqrt()),
        peak_power_w: mean_maximal_power(logs, PEAK_DURATION_S).unwrap_or(0.0),
        points,
    })
}

/// Fits the operator to the logs; `tracking_gain_n_m_per_rpm` is the operator's tracking gain
/// K_p the torque ripple is read with (see [`ripple_of`]).
pub fn fit(logs: &[&Recording], tracking_gain_n_m_per_rpm: f64) -> OperatorFit {
    let kp_n_m_s = tracking_gain_n_m_per_rpm / crate::units::RAD_S_PER_RPM;
    let mut notes = Vec::new();
    let mut facts = Vec::new();
    // Revolution means, detrended per log, in log order; and the stretches for the ripple.
    // Per window: boxes of `per_box` whole revolutions as (revolutions, duration, residual rpm).
    let mut series: Vec<Vec<(f64, f64, f64)>> = Vec::new();
    let mut ripple_in: Vec<(usize, Window)> = Vec::new();
    let mut angles_of = Vec::new();
    let (mut rest_count, mut hands_on, mut rest_lengths) = (0usize, 0.0, Vec::new());
    let all_windows: Vec<(Vec<f64>, Vec<Window>)> = logs
        .iter()
        .map(|r| {
            let th = angles(r);
            let ws = windows(r, &th);
            (th, ws)
        })
        .collect();
    let (n_revs, rev_time) = all_windows
        .iter()
        .flat_map(|(_, ws)| ws.iter().flat_map(|w| w.revs.iter()))
        .fold((0usize, 0.0), |(n, d), v| (n + 1, d + v.duration));
    let per_box = if n_revs > 0 {
        ((WANDER_BOX_S / (rev_time / n_revs as f64)).round() as usize).max(1)
    } else {
        1
    };
    for ((li, r), (th, ws)) in logs.iter().enumerate().zip(all_windows) {
        let stretches = r.stretches();
        let n_st = stretches.len();
        let mut rests = 0;
        for (k, s) in stretches.iter().enumerate() {
            if s.hands_on {
                hands_on += s.length_s();
            } else if k > 0 && k + 1 < n_st {
                rests += 1;
                rest_lengths.push(s.length_s());
            }
        }
        rest_count += rests;
        let revs: usize = ws.iter().map(|w| w.revs.len()).sum();
        facts.push(LogFacts {
            file: r.file.clone(),
            samples: r.time_s.len(),
            span_s: r.span_s(),
            has_torque: r.torque_n_m.is_some(),
            hands_on_s: stretches
                .iter()
                .filter(|s| s.hands_on)
                .map(|s| s.length_s())
                .sum(),
            rests,
            revolutions: revs,
        });
        if revs >= 3 {
            let x: Vec<f64> = ws
                .iter()
                .flat_map(|w| w.revs.iter().map(|v| v.t_mid))
                .collect();
            let y: Vec<f64> = ws
                .iter()
                .flat_map(|w| w.revs.iter().map(|v| 60.0 / v.duration))
                .collect();
            let (a, b) = line(&x, &y);
            for w in &ws {
                series.push(
                    w.revs
                        .chunks(per_box)
                        .filter(|c| c.len() == per_box)
                        .map(|c| {
                            let d: f64 = c.iter().map(|v| v.duration).sum();
                            let mid = 0.5 * (c[0].t_mid + c[c.len() - 1].t_mid);
                            let n = c.len() as f64;
                            (n, d, 60.0 * n / d - a - b * mid)
                        })
                        .collect(),
                );
            }
        }
        angles_of.push(th);
        ripple_in.extend(ws.into_iter().map(|w| (li, w)));
    }
    let boxes: usize = series.iter().map(Vec::len).sum();
    let revolutions = boxes * per_box;

    // Jackknife blocks over the boxes in order; a lag pair belongs to its first box.
    let blocks_n = JACKKNIFE_BLOCKS.min(boxes / 10).max(1);
    let mut blocks = vec![Sums::default(); blocks_n];
    let mut idx = 0usize;
    for w in &series {
        for (k, &(n, dur, x)) in w.iter().enumerate() {
            let b = &mut blocks[(idx * blocks_n / boxes.max(1)).min(blocks_n - 1)];
            b.revs += n;
            b.boxes += 1.0;
            b.duration += dur;
            if let Some(&(_, _, x1)) = w.get(k + 1) {
                b.lag1 += x * x1;
                b.n1 += 1.0;
            }
            if let Some(&(_, _, x2)) = w.get(k + 2) {
                b.lag2 += x * x2;
                b.n2 += 1.0;
            }
            idx += 1;
        }
    }
    let mut total = Sums::default();
    for b in &blocks {
        total.add(b);
    }
    let mean_cadence = (revolutions > 0).then(|| {
        Estimate::new(
            total.mean_rpm(),
            jackknife(&blocks, |s| (s.duration > 0.0).then(|| s.mean_rpm())),
        )
    });
    let (mut wander, mut wander_time) = (None, None);
    if boxes < MIN_BOXES {
        notes.push(format!(
            "{boxes} boxes of {per_box} whole revolution(s) with the hands on (at least {MIN_BOXES} are needed for the wander)"
        ));
    } else if let Some((sigma, tau)) = total.ou() {
        wander = Some(Estimate::new(
            sigma,
            jackknife(&blocks, |s| s.ou().map(|o| o.0)),
        ));
        wander_time = Some(Estimate::new(
            tau,
            jackknife(&blocks, |s| s.ou().map(|o| o.1)),
        ));
    } else {
        notes.push("the cadence wander is not identified: the revolution means show no decaying correlation (lag-2 over lag-1 autocovariance outside 0 … 1)".into());
    }

    // Ripple: each order k that the sampling resolves (k·f_rev below 0.4 of the sample rate).
    let mut ripple = None;
    if let Some(mean) = mean_cadence {
        let f_rev = mean.value / 60.0;
        let dts: Vec<f64> = logs
            .iter()
            .flat_map(|r| r.time_s.windows(2).map(|w| w[1] - w[0]))
            .collect();
        let fs = 1.0 / median(dts.into_iter()).max(1e-9);
        let has_torque = logs.iter().all(|r| r.torque_n_m.is_some());
        let mut best: Option<RippleFit> = None;
        for k in 1..=MAX_PEAKS_PER_REV {
            if f64::from(k) * f_rev >= 0.4 * fs {
                notes.push(format!(
                    "ripple with {k} peak(s) a turn ({:.2} Hz) is too fast for the sampling ({fs:.1} Hz)",
                    f64::from(k) * f_rev
                ));
                break;
            }
            let mut cad = Vec::new();
            let mut tq = Vec::new();
            for (li, w) in &ripple_in {
                let n = w.revs.iter().map(|v| v.hi - v.lo).sum::<usize>() as f64;
                let (c, q) = ripple_of(logs[*li], &angles_of[*li], w, f64::from(k), kp_n_m_s);
                if c.is_finite() {
                    cad.push((c, n));
                }
                if let Some(q) = q.filter(|q| q.is_finite()) {
                    tq.push((q, n));
                }
            }
            let Some(cadence_amplitude_rpm) = weighted(&cad) else {
                continue;
            };
            let candidate = RippleFit {
                peaks_per_rev: k,
                cadence_amplitude_rpm,
                torque_fraction: if has_torque { weighted(&tq) } else { None },
                stretches: cad.len(),
            };
            let score = |f: &RippleFit| {
                f.torque_fraction
                    .map_or(f.cadence_amplitude_rpm.value, |e| e.value)
            };
            if best.as_ref().is_none_or(|b| score(&candidate) > score(b)) {
                best = Some(candidate);
            }
        }
        ripple = best;
    }

    // Rests: a Poisson process over the time with the hands on, exponential lengths floored at
    // the product's shortest rest.
    let interval = (rest_count > 0).then(|| {
        let v = hands_on / rest_count as f64;
        Estimate::new(v, v / (rest_count as f64).sqrt())
    });
    let observed = (!rest_lengths.is_empty())
        .then(|| rest_lengths.iter().sum::<f64>() / rest_lengths.len() as f64);
    let length = observed.map(|m| {
        let l = floored_exponential_mean(m, MIN_REST_S);
        let n = rest_lengths.len() as f64;
        let se_mean = if n >= 2.0 {
            (rest_lengths.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
                / n.sqrt()
        } else {
            f64::NAN
        };
        // d(mean)/dL = e^(−m0/L)·(1 + m0/L).
        let slope = (-MIN_REST_S / l).exp() * (1.0 + MIN_REST_S / l);
        Estimate::new(l, se_mean / slope)
    });
    if rest_count == 0 {
        notes.push(format!(
            "no rest in {hands_on:.0} s with the hands on: the rest interval is not estimated"
        ));
    }

    let power = if logs.iter().all(|r| r.torque_n_m.is_some()) {
        let p = power_fit(logs);
        if p.is_none() {
            notes.push("critical power and W' need torque logs of at least 5 minutes (mean-maximal powers over 2 to 20 minutes)".into());
        }
        p
    } else {
        notes.push(
            "critical power and W' need the operator's torque in every log (operator_torque_n_m)"
                .into(),
        );
        None
    };

    OperatorFit {
        logs: facts,
        revolutions,
        mean_cadence_rpm: mean_cadence,
        wander_rpm: wander,
        wander_time_s: wander_time,
        ripple,
        rests: RestFit {
            count: rest_count,
            hands_on_s: hands_on,
            interval_s: interval,
            length_s: length,
            observed_mean_length_s: observed,
        },
        power,
        notes,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::rngs::StdRng;
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};

    /// A stationary OU series sampled every `dt` by its exact discretisation
    /// x' = φ·x + σ·√(1 − φ²)·z (φ = e^(−dt/τ)), started from its stationary law.
    fn ou_series(sigma: f64, tau: f64, dt: f64, n: usize, seed: u64) -> Vec<f64> {
        let mut rng = StdRng::seed_from_u64(seed);
        let phi = (-dt / tau).exp();
        let b = sigma * (1.0 - phi * phi).sqrt();
        let z0: f64 = StandardNormal.sample(&mut rng);
        let mut x = sigma * z0;
        let mut out = Vec::with_capacity(n);
        for _ in 0..n {
            out.push(x);
            let z: f64 = StandardNormal.sample(&mut rng);
            x = phi * x + b * z;
        }
        out
    }

    #[test]
    fn box_means_of_a_synthetic_ou_series_give_back_sigma_and_tau() {
        // From memory: Gillespie, "Exact numerical simulation of the Ornstein-Uhlenbeck process and its
        // integral", Phys. Rev. E 54(2):2084, 1996: the update x' = φ·x + σ√(1 − φ²)·z is exact.
        // A fine series (10 ms) averaged over boxes of 0.8 s, as a crank revolution averages the
        // cadence; 40 000 boxes leave a sampling error of a few per cent.
        let (sigma, tau, dt) = (5.0, 4.0, 0.01);
        let per_box = 80;
        let x = ou_series(sigma, tau, dt, per_box * 40_000, 11);
        let means: Vec<f64> = x
            .chunks(per_box)
            .map(|c| c.iter().sum::<f64>() / c.len() as f64)
            .collect();
        let m = means.iter().sum::<f64>() / means.len() as f64;
        let cov = |lag: usize| {
            let n = means.len() - lag;
            (0..n)
                .map(|k| (means[k] - m) * (means[k + lag] - m))
                .sum::<f64>()
                / n as f64
        };
        let (s, t) = ou_from_box_means(cov(1), cov(2), per_box as f64 * dt).expect("identified");
        assert!((s - sigma).abs() < 0.05 * sigma, "sigma {s}");
        assert!((t - tau).abs() < 0.10 * tau, "tau {t}");
        // The naive AR(1) on box means (lag-1 correlation read as e^(−T/τ)) is biased long: the
        // estimator must not be that one.
        let naive = -(per_box as f64 * dt) / (cov(1) / cov(0)).ln();
        assert!(naive > 1.3 * tau, "naive {naive}");
    }

    #[test]
    fn no_decaying_correlation_means_no_estimate() {
        assert_eq!(ou_from_box_means(1.0, 1.5, 1.0), None);
        assert_eq!(ou_from_box_means(-1.0, 0.5, 1.0), None);
    }

    #[test]
    fn the_floored_exponential_mean_inverts() {
        // E[max(X, 0.5)] = 0.5 + L·e^(−0.5/L) for X exponential with mean L (integrate the tail).
        let l = 3.0;
        let m = 0.5 + l * (-0.5_f64 / l).exp();
        assert!((floored_exponential_mean(m, 0.5) - l).abs() < 1e-9);
    }

    #[test]
    fn work_against_time_gives_critical_power_and_w_prime() {
        // Monod & Scherrer 1965: a person who holds P for t_lim = W'/(P − CP) does W = W' + CP·t.
        // A log whose power is exactly CP + W'/d over its first d seconds for every d (so the
        // mean-maximal power is the model's) must give CP and W' back.
        let (cp, wp) = (80.0, 8000.0);
        let dt = 0.5;
        let n = (1300.0 / dt) as usize;
        let t: Vec<f64> = (0..=n).map(|k| k as f64 * dt).collect();
        // Power p(t) with ∫0^d p = CP·d + W' (1 − e^(−d/30)): p = CP + (W'/30)·e^(−t/30).
        let w = vec![10.0; t.len()];
        let q: Vec<f64> = t
            .iter()
            .map(|&s| (cp + wp / 30.0 * (-s / 30.0).exp()) / 10.0)
            .collect();
        let r = Recording::new("p.csv".into(), t, w, Some(q));
        let f = power_fit(&[&r]).expect("fitted");
        // Over 2–20 min e^(−d/30) < 2e-2: the line through the points is W' + CP·d within 0.5 %.
        assert!((f.critical_power_w.value - cp).abs() < 0.005 * cp, "{f:?}");
        assert!((f.w_prime_j.value - wp).abs() < 0.02 * wp, "{f:?}");
        assert_eq!(f.points.len(), CP_DURATIONS_S.len());
    }
}
