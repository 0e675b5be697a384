//! Progress bars and warnings on stderr. One place decides whether to draw: only on a terminal,
//! never with `--quiet`, and only once the work has run for about two seconds.

use std::collections::HashSet;
use std::io::{IsTerminal, Write};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use crate::simulate::Progress;

/// Work shorter than this shows no bar, s.
pub const SHOW_AFTER: Duration = Duration::from_secs(2);
/// How often the bar of a single session is redrawn.
const TICK: Duration = Duration::from_millis(100);

/// Whether progress may be drawn: stderr is a terminal and `--quiet` was not given.
pub fn draws(quiet: bool) -> bool {
    !quiet && std::io::stderr().is_terminal()
}

/// Prints a warning on stderr, each distinct text once per process.
pub fn warn(message: Option<String>) {
    static SEEN: Mutex<Option<HashSet<String>>> = Mutex::new(None);
    let Some(m) = message else { return };
    let mut seen = SEEN
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    if seen.get_or_insert_with(HashSet::new).insert(m.clone()) {
        let _ = writeln!(std::io::stderr().lock(), "crankcharge: warning: {m}");
    }
}

/// Prints a note on stderr: something the program did on its own that the user should know
/// (it changes no result the files do not state).
pub fn note(message: Option<String>) {
    let Some(m) = message else { return };
    let _ = writeln!(std::io::stderr().lock(), "crankcharge: note: {m}");
}

/// A bar counting finished items (runs of a study) with their rate and the time left, hidden
/// until [`SHOW_AFTER`] has passed. Clones share the bar.
#[derive(Clone)]
pub struct CountBar {
    bar: ProgressBar,
    started: Instant,
    may_draw: bool,
    shown: std::sync::Arc<AtomicBool>,
}

impl CountBar {
    /// A bar of `len` items named `what` (e.g. "runs") under `prefix` (the study).
    pub fn new(len: u64, prefix: &str, what: &str, quiet: bool) -> Self {
        let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::hidden());
        if let Ok(style) = ProgressStyle::with_template(&format!(
            "{{prefix}} [{{bar:32}}] {{pos}}/{{len}} {what}, {{per_sec}}, {{elapsed}} (eta {{eta}})"
        )) {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_prefix(prefix.to_string());
        Self {
            bar,
            started: Instant::now(),
            may_draw: draws(quiet),
            shown: std::sync::Arc::new(AtomicBool::new(false)),
        }
    }

    /// One more item done.
    pub fn inc(&self) {
        if self.may_draw
            && self.started.elapsed() >= SHOW_AFTER
            && !self.shown.swap(true, Ordering::Relaxed)
        {
            self.bar.set_draw_target(ProgressDrawTarget::stderr());
        }
        self.bar.inc(1);
    }

    /// Removes the bar.
    pub fn finish(&self) {
        self.bar.finish_and_clear();
    }
}

/// Runs one session's work `f` with a bar of simulated time (out of `duration_s`) drawn from the
/// engine's [`Progress`] once the work has taken [`SHOW_AFTER`]; no bar if [`draws`] says no.
pub fn with_session_bar<T>(quiet: bool, duration_s: f64, f: impl FnOnce(&Progress) -> T) -> T {
    let progress = Progress::default();
    if !draws(quiet) {
        return f(&progress);
    }
    let done = AtomicBool::new(false);
    std::thread::scope(|scope| {
        scope.spawn(|| {
            let started = Instant::now();
            let mut bar: Option<ProgressBar> = None;
            while !done.load(Ordering::Relaxed) {
                std::thread::sleep(TICK);
                if bar.is_none() && started.elapsed() >= SHOW_AFTER {
                    let b = ProgressBar::with_draw_target(
                        Some(duration_s.ceil().max(1.0) as u64),
                        ProgressDrawTarget::stderr(),
                    );
                    if let Ok(style) = ProgressStyle::with_template(
                        "session [{bar:32}] {pos}/{len} s simulated, {elapsed} (eta {eta})",
                    ) {
                        b.set_style(style.progress_chars("=> "));
                    }
                    bar = Some(b);
                }
                if let Some(b) = &bar {
                    b.set_position(progress.get().max(0.0) as u64);
                }
            }
            if let Some(b) = bar {
                b.finish_and_clear();
            }
        });
        let out = f(&progress);
        done.store(true, Ordering::Relaxed);
        out
    })
}
