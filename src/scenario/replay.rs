//! A recorded crank log as a profile (`--profile LOG.csv`): the log is read and checked, and a
//! profile text is written for it whose segments are the log's plan in outline (the stretches
//! with the hands on, in pieces of at most [`PIECE_S`] at their mean cadence, and the rests at
//! 0). The outline is what the static figures (`check`, the cranking time of the summary) read;
//! the session itself follows the recording (see `model::recording`). `--set profile.…` edits
//! that text like any profile's.

use std::fmt::Write as _;

use crate::model::recording::Recording;
use crate::units::{rad_s_to_rpm, RAD_S_PER_RPM};

use super::error::InputError;
use super::logfile::{self, Channel, Rules, Unit};
use super::source::SourceText;

/// Longest segment of the outline, s.
pub const PIECE_S: f64 = 30.0;
/// Most segments the outline may have (the profile allows 10 000).
const MAX_PIECES: f64 = 4000.0;
/// Longest gap between two samples a crank log may have, s: longer, and what the operator did
/// in between is unknown.
pub const MAX_GAP_S: f64 = 2.0;
/// Shortest crank log, s.
pub const MIN_SPAN_S: f64 = 1.0;

/// The crank cadence of a log (`crank_rpm`, `crank_rad_s`, `crank (rpm)` …).
pub const CADENCE: Channel = Channel {
    name: "crank_rpm",
    what: "crank cadence",
    stems: &["crank", "crank_speed", "cadence"],
    units: &[
        Unit {
            names: &["rpm", "1_min", "r_min", "rev_min"],
            factor: RAD_S_PER_RPM,
            shown: "rpm",
        },
        Unit {
            names: &["rad_s"],
            factor: 1.0,
            shown: "rad/s",
        },
    ],
    required: true,
    min: 0.0,
    max: 400.0 * RAD_S_PER_RPM,
    why: " (the profile's cadence range; the crank is replayed turning forward only)",
};

/// The operator's torque at the crank, optional (`operator_torque_n_m`).
pub const TORQUE: Channel = Channel {
    name: "operator_torque_n_m",
    what: "operator torque",
    stems: &["operator_torque", "crank_torque", "torque"],
    units: &[Unit {
        names: &["n_m", "nm"],
        factor: 1.0,
        shown: "N·m",
    }],
    required: false,
    min: -1.0,
    max: 200.0,
    why: " (down to -1 N·m is taken as a sensor's zero offset and read as 0; the operator only pushes)",
};

/// Whether a profile argument is a log rather than a profile file: its name ends in `.csv`.
pub fn is_log(src: &SourceText) -> bool {
    let first = src.name.split(" (built-in)").next().unwrap_or(&src.name);
    first.to_lowercase().ends_with(".csv")
}

/// Reads and checks a crank log.
pub fn read(src: &SourceText) -> Result<Recording, InputError> {
    let t = logfile::read(
        &src.name,
        &src.text,
        &[CADENCE, TORQUE],
        &Rules {
            max_gap_s: MAX_GAP_S,
            min_span_s: MIN_SPAN_S,
            kind: "a crank log",
        },
    )?;
    let mut values = t.values.into_iter();
    let cadence = values.next().flatten().unwrap_or_default();
    let torque = values
        .next()
        .flatten()
        .map(|q| q.into_iter().map(|v| v.max(0.0)).collect());
    Ok(Recording::new(src.name.clone(), t.time_s, cadence, torque))
}

/// Mean cadence of the samples in [a, b), rpm (the track at the middle when none falls there).
fn mean_rpm(r: &Recording, a: f64, b: f64) -> f64 {
    let lo = r.time_s.partition_point(|&t| t < a);
    let hi = r.time_s.partition_point(|&t| t < b);
    if hi > lo {
        rad_s_to_rpm(r.crank_rad_s[lo..hi].iter().sum::<f64>() / (hi - lo) as f64)
    } else {
        rad_s_to_rpm(r.cadence_rad_s(0.5 * (a + b)).0)
    }
}

/// The profile text of a recording (see the module notes).
pub fn profile_text(r: &Recording, name: &str) -> String {
    let stretches = r.stretches();
    let piece = PIECE_S.max(r.span_s() / MAX_PIECES);
    let mut segments = String::new();
    for s in &stretches {
        if !s.hands_on {
            let _ = writeln!(
                segments,
                "        (duration_s: {:.6}, cadence_rpm: 0.0),",
                s.length_s()
            );
            continue;
        }
        let n = (s.length_s() / piece).ceil().max(1.0);
        let len = s.length_s() / n;
        for k in 0..n as usize {
            let a = s.start_s + k as f64 * len;
            // A stretch with the hands on stays one in the outline, however slowly it turns.
            let rpm = mean_rpm(r, a, a + len).max(0.1);
            let _ = writeln!(
                segments,
                "        (duration_s: {len:.6}, cadence_rpm: {rpm:.3}),"
            );
        }
    }
    let rests = stretches.iter().filter(|s| !s.hands_on).count();
    let follows = if r.torque_n_m.is_some() {
        "the recorded torque"
    } else {
        "the recorded cadence"
    };
    let name = name.replace(['"', '\\'], "_");
    format!(
        "// Replay of the recorded crank log {file}: {n} samples over {span:.1} s, {rests} rest(s).\n\
         // The segments are the log's outline (hands-on stretches in pieces of at most {piece:.0} s at\n\
         // their mean cadence, rests at 0); the session follows the recording itself, resampled by\n\
         // averaging samples closer than 0.1 s and a monotone cubic (Fritsch-Carlson) through them.\n\
         // By default it follows {follows}; replay.follow = cadence or torque chooses.\n\
         (\n    name: \"{name}\",\n    description: \"Replay of a recorded log ({n} samples, {span:.1} s)\",\n    seed: 0,\n    segments: [\n{segments}    ],\n    operator: (spin_up_s: 0.0),\n    jitter: (enabled: false),\n    replay: (follow: auto),\n)\n",
        file = crate::text::excerpt(&r.file, crate::text::EXCERPT_CHARS),
        n = r.time_s.len(),
        span = r.span_s(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn src(name: &str, text: &str) -> SourceText {
        SourceText {
            name: name.into(),
            text: text.into(),
            built_in: false,
        }
    }

    #[test]
    fn a_log_is_a_csv_name() {
        assert!(is_log(&src("runs/Trace.CSV", "")));
        assert!(!is_log(&src("steady.ron", "")));
    }

    #[test]
    fn cadence_in_rad_s_and_torque_offsets_are_read_in_si() {
        let r = read(&src(
            "l.csv",
            "time_s,crank [rad/s],operator_torque_n_m\n10,1.0,-0.5\n11,2.0,3\n",
        ))
        .expect("read");
        assert_eq!(r.time_s, vec![0.0, 1.0]);
        assert_eq!(r.crank_rad_s, vec![1.0, 2.0]);
        assert_eq!(r.torque_n_m, Some(vec![0.0, 3.0]));
    }

    #[test]
    fn the_outline_parses_as_a_profile_and_spans_the_log() {
        let mut text = String::from("time_s,crank_rpm,operator_torque_n_m\n");
        for k in 0..=1000 {
            let t = f64::from(k) * 0.1;
            let q = if (40.0..43.0).contains(&t) { 0.0 } else { 5.0 };
            let _ = writeln!(text, "{t:.1},70,{q}");
        }
        let r = read(&src("l.csv", &text)).expect("read");
        let p: crate::scenario::profile::Profile =
            ron::from_str(&profile_text(&r, "l")).expect("parses");
        assert!((p.total_duration_s() - 100.0).abs() < 1e-4);
        let zeros = p.segments.iter().filter(|s| s.cadence_rpm == 0.0).count();
        assert_eq!(zeros, 1);
        assert!(p.segments.iter().all(|s| s.duration_s <= PIECE_S + 1e-6));
        assert!(!p.jitter.enabled);
    }
}
