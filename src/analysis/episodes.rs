//! From runs of a watched condition to the rows of `events.csv`: a run shorter than its kind's
//! dwell is not a row; rows of one kind and cause closer than the merge gap are one.

use super::events::{Event, EventKind};

/// When runs of one kind become rows.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Timing {
    /// Least duration of a run, s (a row always lasts longer than zero).
    pub dwell_s: f64,
    /// Rows of one kind and cause whose gap is at most this are joined, s.
    pub merge_gap_s: f64,
}

/// Runs that end and start at the same instant (a condition re-opened by another one's change)
/// are one run, s.
const TOUCH_S: f64 = 1e-9;

/// How far a row's worst value lies past its threshold (positive when past it).
fn excess(e: &Event) -> f64 {
    if e.above {
        e.worst - e.threshold
    } else {
        e.threshold - e.worst
    }
}

/// Joins `b` into `a` (same kind and cause, `b` after `a`): the row spans both and keeps the
/// worst value of the two.
fn join(a: &mut Event, b: &Event) {
    a.end_s = a.end_s.max(b.end_s);
    a.duration_s = a.end_s - a.start_s;
    if excess(b) > excess(a) {
        a.worst = b.worst;
        a.threshold = b.threshold;
    }
}

/// The rows from the runs: runs of a kind and cause that touch are one run; runs shorter than
/// the dwell (or of zero length) are dropped; the rest are joined across gaps up to the merge
/// gap, and their detail says how many runs a row holds. Sorted by start time, then kind.
pub fn rows(runs: &[Event], timing: impl Fn(EventKind) -> Timing) -> Vec<Event> {
    let mut sorted: Vec<&Event> = runs.iter().collect();
    sorted.sort_by(|a, b| {
        (a.kind, a.cause)
            .cmp(&(b.kind, b.cause))
            .then(a.start_s.total_cmp(&b.start_s))
    });
    // Runs that touch become one.
    let mut whole: Vec<Event> = Vec::with_capacity(sorted.len());
    for r in sorted {
        match whole.last_mut() {
            Some(w) if w.kind == r.kind && w.cause == r.cause && r.start_s - w.end_s <= TOUCH_S => {
                join(w, r);
            }
            _ => whole.push(r.clone()),
        }
    }
    let mut out: Vec<Event> = Vec::new();
    let mut joined = 1usize;
    for r in whole {
        let t = timing(r.kind);
        if r.duration_s <= 0.0 || r.duration_s < t.dwell_s {
            continue;
        }
        match out.last_mut() {
            Some(w)
                if w.kind == r.kind
                    && w.cause == r.cause
                    && r.start_s - w.end_s <= t.merge_gap_s =>
            {
                join(w, &r);
                joined += 1;
            }
            _ => {
                note_joined(out.last_mut(), joined);
                joined = 1;
                out.push(r);
            }
        }
    }
    note_joined(out.last_mut(), joined);
    out.sort_by(|a, b| a.start_s.total_cmp(&b.start_s).then(a.kind.cmp(&b.kind)));
    out
}

fn note_joined(row: Option<&mut Event>, joined: usize) {
    if let Some(r) = row {
        if joined > 1 {
            r.detail = format!("{} ({joined} runs joined)", r.detail);
        }
    }
}

/// Total time of the runs of one kind, s (the exact time the condition held, dwell or not).
pub fn run_time(runs: &[Event], kind: EventKind) -> f64 {
    runs.iter()
        .filter(|e| e.kind == kind)
        // A fold from +0.0: `sum()` of no floats is −0.0, which would print as "-0.0".
        .fold(0.0, |a, e| a + e.duration_s)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(kind: EventKind, cause: u8, start_s: f64, end_s: f64, worst: f64) -> Event {
        Event {
            kind,
            start_s,
            end_s,
            duration_s: end_s - start_s,
            quantity: "battery_v",
            unit: "V",
            threshold: 12.75,
            worst,
            affects_verdict: false,
            detail: "battery above its threshold".into(),
            cause,
            above: true,
        }
    }

    fn timing(dwell_s: f64, merge_gap_s: f64) -> impl Fn(EventKind) -> Timing {
        move |_| Timing {
            dwell_s,
            merge_gap_s,
        }
    }

    #[test]
    fn a_run_shorter_than_its_dwell_is_not_a_row() {
        let runs = [run(EventKind::Overcharge, 1, 10.0, 10.0005, 12.750_001)];
        assert!(rows(&runs, timing(1.0, 5.0)).is_empty());
        // The same run held past the dwell is a row.
        let runs = [run(EventKind::Overcharge, 1, 10.0, 11.5, 12.8)];
        assert_eq!(rows(&runs, timing(1.0, 5.0)).len(), 1);
    }

    #[test]
    fn a_zero_length_run_is_never_a_row() {
        let runs = [run(EventKind::Overcharge, 1, 3.0, 3.0, 12.8)];
        assert!(rows(&runs, timing(0.0, 0.0)).is_empty());
    }

    #[test]
    fn rows_inside_the_merge_gap_become_one_with_the_worst_value() {
        let runs = [
            run(EventKind::Overcharge, 1, 10.0, 12.0, 12.80),
            run(EventKind::Overcharge, 1, 14.0, 16.0, 12.90),
            // Outside the gap of the second: a row of its own.
            run(EventKind::Overcharge, 1, 30.0, 32.0, 12.85),
        ];
        let r = rows(&runs, timing(1.0, 5.0));
        assert_eq!(r.len(), 2, "{r:?}");
        assert_eq!(
            (r[0].start_s, r[0].end_s, r[0].duration_s),
            (10.0, 16.0, 6.0)
        );
        assert_eq!(r[0].worst, 12.90);
        assert!(r[0].detail.ends_with("(2 runs joined)"), "{}", r[0].detail);
        assert_eq!((r[1].start_s, r[1].worst), (30.0, 12.85));
        assert!(!r[1].detail.contains("joined"));
    }

    #[test]
    fn runs_of_other_kinds_or_causes_are_not_joined() {
        let runs = [
            run(EventKind::RegulationLoss, 1, 0.0, 1.0, 11.0),
            run(EventKind::RegulationLoss, 3, 1.5, 2.5, 11.0),
            run(EventKind::Overcharge, 1, 2.6, 3.6, 12.8),
        ];
        assert_eq!(rows(&runs, timing(0.5, 5.0)).len(), 3);
    }

    #[test]
    fn touching_runs_are_one_run_before_the_dwell_test() {
        // Two halves of one excursion, split where another condition changed.
        let runs = [
            run(EventKind::Overcharge, 1, 5.0, 5.6, 12.8),
            run(EventKind::Overcharge, 1, 5.6, 6.2, 12.9),
        ];
        let r = rows(&runs, timing(1.0, 0.0));
        assert_eq!(r.len(), 1, "{r:?}");
        assert!((r[0].duration_s - 1.2).abs() < 1e-12);
        assert_eq!(r[0].worst, 12.9);
    }

    #[test]
    fn worst_of_a_lower_limit_is_the_lowest_value() {
        let mut a = run(EventKind::Lockout, 2, 0.0, 1.0, 9.0);
        let mut b = run(EventKind::Lockout, 2, 1.5, 2.5, 8.0);
        for e in [&mut a, &mut b] {
            e.above = false;
            e.threshold = 12.0;
        }
        let r = rows(&[a, b], timing(0.1, 1.0));
        assert_eq!(r.len(), 1);
        assert_eq!(r[0].worst, 8.0);
    }
}
