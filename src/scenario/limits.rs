//! Limits of one session, checked before any work: its length (at most 7 days, whether it comes
//! from `--duration` or from the profile's segments) and the least number of steps its step limit
//! implies (a tiny `solver.max_step_s` over a long session would run for hours).

use super::error::{InputError, Place};
use super::load::{Override, Scenario, SourceText, PROFILE_PREFIX};
use super::ronpath;

/// Longest session, s (7 days): memory and time grow with the session length.
pub const MAX_SESSION_S: f64 = 7.0 * 86_400.0;

/// Most steps a session's step limit may imply (duration / `solver.max_step_s`). The fast fidelity
/// takes about 3 µs a step on a 2-core machine, so this is about five minutes of work.
pub const MAX_IMPLIED_STEPS: f64 = 1e8;

/// Above this many implied steps (about 3 s of work) a warning says the run will be slow.
pub const WARN_IMPLIED_STEPS: f64 = 1e6;

/// Checks a scenario's session length and implied step count for a `--duration` (None: the
/// profile's segments). Ok carries a warning for a slow but allowed setting.
pub fn check(sc: &Scenario, duration_s: Option<f64>) -> Result<Option<String>, InputError> {
    let total = sc.profile.total_duration_s();
    let length = duration_s.unwrap_or(total);
    if duration_s.is_none() && (total.is_nan() || total > MAX_SESSION_S) {
        return Err(InputError::Range {
            place: place_of(
                &sc.profile_source,
                &sc.overrides,
                PROFILE_PREFIX,
                "segments",
            ),
            path: format!("{PROFILE_PREFIX}segments"),
            value: format!(
                "{} segments adding up to {total} s",
                sc.profile.segments.len()
            ),
            allowed: format!(
                "a total of at most {MAX_SESSION_S} s (7 days) per session; pass --duration to run part of it"
            ),
        });
    }
    let h = sc.setup.solver.max_step_s;
    let steps = length / h;
    if steps > MAX_IMPLIED_STEPS {
        return Err(InputError::Range {
            place: place_of(&sc.setup_source, &sc.overrides, "", "solver.max_step_s"),
            path: "solver.max_step_s".into(),
            value: format!("{h}"),
            allowed: format!(
                ">= {:.3e} s for a {length} s session (at most {MAX_IMPLIED_STEPS:e} steps, about five minutes of work)",
                length / MAX_IMPLIED_STEPS
            ),
        });
    }
    Ok((steps > WARN_IMPLIED_STEPS).then(|| {
        format!(
            "solver.max_step_s = {h} s over a {length} s session means at least {steps:.0} steps; \
             expect the run to take about {:.0} s or more",
            steps * 3e-6
        )
    }))
}

/// Where a field is set: the `--set` that set it, else its line and column in the file, else the
/// file.
fn place_of(src: &SourceText, overrides: &[Override], prefix: &str, path: &str) -> Place {
    let full = format!("{prefix}{path}");
    let by_override = overrides.iter().rev().find(|o| {
        let key = o.key.strip_prefix("setup.").unwrap_or(&o.key);
        key == full || key.starts_with(&format!("{full}."))
    });
    if let Some(o) = by_override {
        return Place::Override {
            key: o.key.clone(),
            value: o.value.clone(),
        };
    }
    match ronpath::parse_path(path)
        .ok()
        .and_then(|p| ronpath::locate(&src.text, &p))
    {
        Some(s) => Place::File {
            file: src.name.clone(),
            line: s.line,
            col: s.col,
        },
        None => Place::FileOnly {
            file: src.name.clone(),
        },
    }
}
