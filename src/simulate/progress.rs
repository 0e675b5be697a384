//! How far a running simulation has got, for a progress display: the engine stores the simulated
//! time after each segment (a few times a second of wall time at most, no cost per evaluation);
//! a study on another thread reads it and draws. No I/O here.

use std::sync::atomic::{AtomicU64, Ordering};

/// Simulated time reached, s (an f64 stored in an atomic).
#[derive(Debug, Default)]
pub struct Progress(AtomicU64);

impl Progress {
    /// Records the simulated time reached, s.
    pub fn set(&self, t_s: f64) {
        self.0.store(t_s.to_bits(), Ordering::Relaxed);
    }

    /// The simulated time reached so far, s (0 before the first segment ends).
    pub fn get(&self) -> f64 {
        f64::from_bits(self.0.load(Ordering::Relaxed))
    }
}
