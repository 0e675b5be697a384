//! The digest lines a run prints and its report repeats: the rows by kind, the thresholds used.

use crate::analysis::events::{Event, EventKind};
use crate::analysis::summary::Summary;

/// One line naming the rows by kind: verdict-affecting alerts first, then informational episodes
/// with their total time.
pub fn rows_digest(m: &Summary) -> String {
    let mut parts = Vec::new();
    for (rows, verdict) in [(&m.alerts, true), (&m.episodes, false)] {
        for kind in EventKind::ALL {
            let of: Vec<&Event> = rows.iter().filter(|e| e.kind == kind).collect();
            if of.is_empty() {
                continue;
            }
            let total: f64 = of.iter().map(|e| e.duration_s).sum();
            let name = kind.as_str().replace('_', "-");
            parts.push(if verdict {
                format!("{} {name} episode(s), {total:.1} s (verdict)", of.len())
            } else {
                format!("{} {name} episode(s), {total:.1} s", of.len())
            });
        }
    }
    if parts.is_empty() {
        "no alerts or episodes".to_string()
    } else {
        parts.join("; ")
    }
}

/// The thresholds the verdict used, in one line.
pub fn thresholds_digest(m: &Summary) -> String {
    let a = &m.alert_rules;
    let mut s = format!(
        "overcharge above {:.3} V (limit + {:.3} V/cell) for {} s",
        m.overcharge_threshold_v, a.overcharge.tolerance_v_per_cell, a.overcharge.dwell_s
    );
    if m.in_regulation_fraction.is_some() {
        s.push_str(&format!(
            "; regulation at least {:.0} % of cranking time",
            100.0 * a.min_in_regulation_fraction
        ));
    }
    s.push_str(&format!(
        "; marginal within {:.3} V / {:.3}",
        a.overcharge_decision_band_v, a.regulation_decision_band
    ));
    s
}

/// What a replayed session followed, in one line.
pub fn replay_line(r: &crate::analysis::summary::ReplaySummary) -> String {
    format!(
        "replay of {}: {} samples over {:.1} s, following the recorded {}",
        r.log, r.samples, r.span_s, r.follows
    )
}

/// The energy ledger's closure, with the tolerance it was reached at when the session was run
/// again (the run's line and its report).
pub fn ledger_digest(m: &Summary) -> String {
    let s = &m.solver;
    match s.first_attempt {
        Some(f) => format!(
            "closes to {:.2e} at solver.rtol {:e} and solver.max_step_s {} s, run again once after \
             it closed only to {:.2e} at {:e} and {} s",
            m.energy_balance_error, s.rtol, s.max_step_s, f.energy_balance_error, f.rtol, f.max_step_s
        ),
        None => format!("closes to {:.2e}", m.energy_balance_error),
    }
}

/// The note a run prints on stderr when its session was run again at a tighter tolerance.
pub fn rerun_note(m: &Summary) -> Option<String> {
    let s = &m.solver;
    s.first_attempt.map(|f| {
        format!(
            "the energy ledger closed only to {:.2e} at solver.rtol {:e}, past its bound {:e}; the \
             session was run again at solver.rtol {:e} and solver.max_step_s {} s, where it closes \
             to {:.2e}, and that result is written (summary.json: solver.tolerance_reruns)",
            f.energy_balance_error,
            f.rtol,
            crate::analysis::invariants::LEDGER_BOUND,
            s.rtol,
            s.max_step_s,
            m.energy_balance_error
        )
    })
}

/// The note a study of many sessions prints on stderr when some were run again at a tighter
/// tolerance: how many of how many, and the column that marks them in `table`.
pub fn reruns_note(reruns: usize, sessions: usize, table: &str) -> Option<String> {
    (reruns > 0).then(|| {
        format!(
            "{reruns} of {sessions} session(s) were run again once at a tighter tolerance \
             (solver.rtol / {}, solver.max_step_s / {}) because their energy ledger did not close \
             at the setup's (column tolerance_reruns in {table})",
            super::session::RERUN_RTOL_DIVISOR,
            super::session::RERUN_STEP_DIVISOR
        )
    })
}
