//! The target source of a replayed log: the plant's target cadence comes from the recording
//! instead of the profile's plan, and with `imposes_torque` the recorded torque is fed forward
//! through the operator's tracking loop (which then only corrects the drift from the recorded
//! cadence) and the operator's envelope is raised to it (the recording is what the person did).

use std::sync::Arc;

use crate::model::recording::Recording;
use crate::units::rad_s_to_rpm;

/// A recording the plant follows.
#[derive(Debug, Clone)]
pub struct Replay {
    pub recording: Arc<Recording>,
    /// Apply the recorded torque (else the PI source tracks the recorded cadence).
    pub imposes_torque: bool,
}

impl Replay {
    /// Target cadence and its slope at time t with the operator's offset and the profile's
    /// scale, rpm and rpm/s: (recorded + offset)·scale, as for a planned target.
    pub fn target_rpm(&self, t: f64, offset_rpm: f64, scale: f64) -> (f64, f64) {
        let (w, dw) = self.recording.cadence_rad_s(t);
        let rpm = rad_s_to_rpm(w) + offset_rpm;
        if rpm <= 0.0 {
            return (0.0, 0.0);
        }
        (rpm * scale, rad_s_to_rpm(dw) * scale)
    }

    /// The recorded torque at time t when the replay imposes it, N·m (None: the operator's own
    /// loop decides alone). It is fed forward through the operator's tracking loop, which then
    /// only corrects the drift from the recorded cadence: a torque applied open-loop runs away
    /// against a charger that draws constant power (its load torque falls as the speed rises).
    pub fn imposed_torque_n_m(&self, t: f64) -> Option<f64> {
        if !self.imposes_torque {
            return None;
        }
        self.recording.torque_n_m(t)
    }

    /// Crank speed at the start of the session, rad/s: the first recorded sample.
    pub fn start_speed_rad_s(&self) -> f64 {
        self.recording.cadence_rad_s(0.0).0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::RAD_S_PER_RPM;

    #[test]
    fn target_is_the_recording_with_offset_and_scale_and_torque_only_when_imposed() {
        // A linear ramp of 60 → 70 rpm over 10 s: the monotone cubic reproduces a line exactly.
        let t: Vec<f64> = (0..=10).map(f64::from).collect();
        let w: Vec<f64> = t.iter().map(|s| (60.0 + s) * RAD_S_PER_RPM).collect();
        let rec = Arc::new(Recording::new(
            "r.csv".into(),
            t.clone(),
            w,
            Some(vec![5.0; t.len()]),
        ));
        let r = Replay {
            recording: rec.clone(),
            imposes_torque: false,
        };
        let (rpm, slope) = r.target_rpm(4.5, 2.0, 0.5);
        assert!((rpm - (64.5 + 2.0) * 0.5).abs() < 1e-9, "{rpm}");
        assert!((slope - 0.5).abs() < 1e-9, "{slope}");
        assert_eq!(r.imposed_torque_n_m(3.0), None);
        let r = Replay {
            recording: rec,
            imposes_torque: true,
        };
        assert!((r.imposed_torque_n_m(3.0).unwrap() - 5.0).abs() < 1e-12);
        assert!((r.start_speed_rad_s() - 60.0 * RAD_S_PER_RPM).abs() < 1e-12);
    }
}
