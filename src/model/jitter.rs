//! Human-like variation drawn once per session from one seeded stream: cadence wander (OU),
//! rests and hand changes (Poisson). Same seed, same draws, bit for bit.

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Exp, StandardNormal};

use crate::scenario::profile::Jitter;

/// Spacing of the wander knots, s; smooth interpolation between them keeps the solver's steps long.
pub const WANDER_KNOT_S: f64 = 0.25;
/// Shortest rest drawn, s.
pub const MIN_REST_S: f64 = 0.5;

/// A rest or hand change: the operator lets go of the crank.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rest {
    pub start_s: f64,
    pub end_s: f64,
}

/// The drawn jitter of one session.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct JitterTrack {
    /// Wander in rpm at knots k·WANDER_KNOT_S.
    wander_rpm: Vec<f64>,
    /// Rests in time order, not overlapping.
    pub rests: Vec<Rest>,
}

impl JitterTrack {
    /// Draws wander and rests for `duration_s` from `seed`. Disabled jitter gives an empty track.
    pub fn draw(j: &Jitter, seed: u64, duration_s: f64) -> Self {
        if !j.enabled {
            return Self::default();
        }
        let mut rng = StdRng::seed_from_u64(seed);
        let n = (duration_s / WANDER_KNOT_S).ceil() as usize + 3;
        let mut wander = Vec::with_capacity(n);
        let mut x = 0.0;
        let a = (-WANDER_KNOT_S / j.wander_time_s.max(1e-3)).exp();
        let b = j.wander_rpm * (1.0 - a * a).sqrt();
        for _ in 0..n {
            wander.push(x);
            let z: f64 = StandardNormal.sample(&mut rng);
            x = a * x + b * z;
        }
        let mut rests = Vec::new();
        if j.rest_interval_s > 0.0 && j.rest_length_s > 0.0 {
            if let (Ok(gap), Ok(len)) = (
                Exp::new(1.0 / j.rest_interval_s),
                Exp::new(1.0 / j.rest_length_s),
            ) {
                let mut t = gap.sample(&mut rng);
                while t < duration_s {
                    let l = len
                        .sample(&mut rng)
                        .clamp(MIN_REST_S, 10.0 * j.rest_length_s.max(MIN_REST_S));
                    rests.push(Rest {
                        start_s: t,
                        end_s: t + l,
                    });
                    t += l + gap.sample(&mut rng);
                }
            }
        }
        Self {
            wander_rpm: wander,
            rests,
        }
    }

    /// Wander at time t, rpm: Catmull-Rom (C¹) interpolation through the OU knots.
    pub fn wander_rpm(&self, t: f64) -> f64 {
        let n = self.wander_rpm.len();
        if n < 4 || t <= 0.0 {
            return self.wander_rpm.first().copied().unwrap_or(0.0);
        }
        let u = t / WANDER_KNOT_S;
        let k = (u.floor() as usize).min(n - 3);
        let s = (u - k as f64).clamp(0.0, 1.0);
        let p0 = if k == 0 {
            self.wander_rpm[0]
        } else {
            self.wander_rpm[k - 1]
        };
        let (p1, p2, p3) = (
            self.wander_rpm[k],
            self.wander_rpm[k + 1],
            self.wander_rpm[k + 2],
        );
        0.5 * ((2.0 * p1)
            + (-p0 + p2) * s
            + (2.0 * p0 - 5.0 * p1 + 4.0 * p2 - p3) * s * s
            + (-p0 + 3.0 * p1 - 3.0 * p2 + p3) * s * s * s)
    }

    /// Whether the operator is resting at time t.
    pub fn resting(&self, t: f64) -> bool {
        self.rests.iter().any(|r| t >= r.start_s && t < r.end_s)
    }
}
