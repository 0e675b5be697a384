//! How the person cranks: cadence segments, jitter and the operator's capacities (a profile `.ron` file).

use std::sync::Arc;

use serde::{Deserialize, Serialize};

use crate::model::recording::Recording;

/// A crank profile: what the operator tries to do, and what they can do.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    /// Short name echoed in summaries and tables.
    pub name: String,
    /// Free text (say that demo data is invented).
    #[serde(default)]
    pub description: String,
    /// Seed of the jitter random stream (0 … 2^64−1); `--seed` overrides it.
    #[serde(default)]
    pub seed: u64,
    /// Multiplies every target cadence (0 … 10).
    #[serde(default = "one")]
    pub cadence_scale: f64,
    /// Target cadence segments, played in order; the last target holds after the end.
    pub segments: Vec<Segment>,
    /// The person's capacities.
    #[serde(default)]
    pub operator: Operator,
    /// Human-like variation.
    #[serde(default)]
    pub jitter: Jitter,
    /// How a recorded log is replayed (`--profile LOG.csv`); a planned profile ignores it.
    #[serde(default)]
    pub replay: Replay,
    /// The recording, when the profile is a log (read from the CSV file, not a RON field).
    #[serde(skip)]
    pub recording: Option<Arc<Recording>>,
}

/// How a recorded log drives the crank.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Replay {
    /// `auto` (the recorded torque when the log has it, else the cadence), `cadence` (the
    /// operator's PI source tracks the recorded cadence) or `torque` (the recorded torque is
    /// applied as it is).
    pub follow: Follow,
}

/// What a replay imposes.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum Follow {
    #[default]
    Auto,
    Cadence,
    Torque,
}

fn one() -> f64 {
    1.0
}

/// A stretch of constant or linearly ramped target cadence.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Segment {
    /// Length, s (0.1 … 86 400).
    pub duration_s: f64,
    /// Target crank cadence at the start, rpm (0 … 400); 0 is a planned rest.
    pub cadence_rpm: f64,
    /// Target at the end for a linear ramp, rpm; default: same as the start.
    #[serde(default)]
    pub end_cadence_rpm: Option<f64>,
}

/// The operator's capacities: force–velocity envelope, critical power and tracking.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Operator {
    /// Crank torque the arm can give at zero speed, N·m (1 … 200) (Hill-type line τ0·(1 − ω/ω_max)).
    pub peak_torque_n_m: f64,
    /// Cadence at which the available torque falls to zero, rpm (30 … 600).
    pub max_cadence_rpm: f64,
    /// Critical power, sustainable without drawing on W′, W (5 … 500) (Monod & Scherrer 1965).
    pub critical_power_w: f64,
    /// Anaerobic work capacity above CP, J (0 … 100 000).
    pub w_prime_j: f64,
    /// Highest power when fresh, W (≥ critical power; 5 … 2000).
    pub peak_power_w: f64,
    /// Proportional gain of cadence tracking, N·m per rpm of error (0.001 … 10).
    pub tracking_gain_n_m_per_rpm: f64,
    /// Integral time of cadence tracking, s (0.05 … 100).
    pub tracking_time_s: f64,
    /// Time to bring the crank up to the target after a start or a rest, s (0 … 30).
    pub spin_up_s: f64,
    /// Spreads drawn per Monte Carlo run (standard deviations); none by default.
    pub spread: Spread,
}

impl Default for Operator {
    fn default() -> Self {
        Self {
            peak_torque_n_m: 30.0,
            max_cadence_rpm: 220.0,
            critical_power_w: 65.0,
            w_prime_j: 9000.0,
            peak_power_w: 140.0,
            tracking_gain_n_m_per_rpm: 0.25,
            tracking_time_s: 1.5,
            spin_up_s: 2.0,
            spread: Spread::default(),
        }
    }
}

/// Standard deviations of operator capacities across a Monte Carlo population.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Spread {
    /// Of critical power, W (0 … 200).
    pub critical_power_w: f64,
    /// Of W′, J (0 … 50 000).
    pub w_prime_j: f64,
    /// Of the preferred cadence (added to every target), rpm (0 … 100).
    pub cadence_rpm: f64,
}

/// Human-like jitter, all from one seeded random stream.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Jitter {
    /// False gives a smooth operator (no wander, ripple or rests).
    pub enabled: bool,
    /// Standard deviation of the slow cadence wander (Ornstein–Uhlenbeck), rpm (0 … 100).
    pub wander_rpm: f64,
    /// Correlation time of the wander, s (0.5 … 600).
    pub wander_time_s: f64,
    /// Torque ripple amplitude a in 1 + a·cos(k·θ + φ) (0 … 1).
    pub ripple_fraction: f64,
    /// Ripple phase φ, rad.
    pub ripple_phase_rad: f64,
    /// Torque peaks per crank revolution k in 1 + a·cos(k·θ + φ) (1 … 4); default 2, the two
    /// power phases of a turn with both hands or a two-handled crank (push and pull); 1 for one
    /// arm on a single-arm crank, whose stroke has one strong phase a turn.
    pub ripple_peaks_per_rev: u32,
    /// Mean interval between rests and hand changes (Poisson), s (0 = none; else 5 … 1e5).
    pub rest_interval_s: f64,
    /// Mean length of a rest (exponential), s (0 … 600).
    pub rest_length_s: f64,
}

impl Default for Jitter {
    fn default() -> Self {
        Self {
            enabled: true,
            wander_rpm: 4.0,
            wander_time_s: 4.0,
            ripple_fraction: 0.3,
            ripple_phase_rad: 0.0,
            ripple_peaks_per_rev: 2,
            rest_interval_s: 150.0,
            rest_length_s: 3.0,
        }
    }
}

impl Profile {
    /// Whether a replay applies the recorded torque (a log with torque, not told to follow its
    /// cadence); false for a planned profile.
    pub fn imposes_torque(&self) -> bool {
        match &self.recording {
            Some(r) => r.torque_n_m.is_some() && self.replay.follow != Follow::Cadence,
            None => false,
        }
    }

    /// Sum of the segment durations, s.
    pub fn total_duration_s(&self) -> f64 {
        self.segments.iter().map(|s| s.duration_s).sum()
    }
}
