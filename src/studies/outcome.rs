//! What a study returns to the command line: its exit code or a failure classified by exit code,
//! and the two small helpers every study shares (a line on stdout, a duration argument). Kept
//! below the studies so that they need nothing from the command line above them.

use std::io::Write;

/// Exit code: finished.
pub const EXIT_OK: i32 = 0;
/// Exit code: a flagged verdict under `--strict`.
pub const EXIT_FLAGGED: i32 = 1;
/// Exit code: bad input or usage.
pub const EXIT_INPUT: i32 = 2;
/// Exit code: the simulation failed.
pub const EXIT_SIM: i32 = 3;

/// A failure classified by exit code.
#[derive(Debug, thiserror::Error)]
pub enum Failure {
    #[error("{0:#}")]
    Input(anyhow::Error),
    #[error("{0:#}")]
    Sim(anyhow::Error),
    #[error("{0:#}")]
    Other(anyhow::Error),
}

impl Failure {
    /// The exit code of this failure.
    pub fn code(&self) -> i32 {
        match self {
            Failure::Input(_) | Failure::Other(_) => EXIT_INPUT,
            Failure::Sim(_) => EXIT_SIM,
        }
    }
}

/// Parses a duration: `600`, `600s`, `10min`, `2h`, `90 s`.
pub fn parse_duration(s: &str) -> Result<f64, String> {
    let t = s.trim();
    let split = t.find(|c: char| c.is_ascii_alphabetic()).unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let v: f64 = num
        .trim()
        .parse()
        .map_err(|_| format!("'{s}' is not a duration (examples: 600, 600s, 10min, 2h)"))?;
    let k = match unit.trim() {
        "" | "s" | "sec" => 1.0,
        "min" | "m" => 60.0,
        "h" => 3600.0,
        other => return Err(format!("unknown duration unit '{other}' (use s, min or h)")),
    };
    let secs = v * k;
    if !(secs.is_finite() && secs > 0.0 && secs <= crate::scenario::limits::MAX_SESSION_S) {
        return Err(format!(
            "duration '{s}' out of range: allowed > 0 s and <= 7 days"
        ));
    }
    Ok(secs)
}

/// Writes a line to stdout, ignoring a closed pipe (so `| head` exits quietly).
pub fn say(line: &str) {
    let mut out = std::io::stdout().lock();
    let _ = writeln!(out, "{line}");
}
