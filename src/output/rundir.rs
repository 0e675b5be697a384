//! Output folders: filled in a hidden staging folder next to the target and renamed into place,
//! so a failed, refused or interrupted study leaves the previous outputs untouched and no staging
//! folder. A folder is replaced only when this program wrote it (its [`MARKER`] file says so) or
//! `--force` is given; the current folder and its parents are never replaced.
//!
//! Staging folders are registered while they live: an interrupt (Ctrl-C, SIGTERM, SIGHUP) removes
//! them before the process exits ([`install_interrupt_cleanup`]), and ones left by a killed process
//! (named with its process id) are removed by the next study that writes next to them.

use std::fs;
use std::path::{Component, Path, PathBuf};
use std::sync::{Mutex, MutexGuard, Once};

/// The marker file every output folder gets: a small manifest naming the program, its version and
/// the command that wrote the folder.
pub const MARKER: &str = "manifest.json";

/// What the marker's `written_by` field says.
const WRITTEN_BY: &str = "crankcharge";

/// Every file name a study of this program writes into its folder. A folder without a marker
/// (written by a version before markers) is recognised as ours when it holds only these names.
pub const OWN_FILE_NAMES: [&str; 25] = [
    "trace.csv",
    "events.csv",
    "summary.json",
    "session.png",
    "session.svg",
    "report.html",
    "compare.csv",
    "compare.png",
    "compare.svg",
    "sweep.csv",
    "sweep.png",
    "sweep.svg",
    "runs.csv",
    "montecarlo.json",
    "montecarlo.png",
    "montecarlo.svg",
    "operating_map.csv",
    "profile.ron",
    "fit.json",
    "fit.png",
    "fit.svg",
    "comparison.json",
    "comparison.png",
    "comparison.svg",
    MARKER,
];

/// Exit code of a study stopped by a signal (128 + SIGINT, the shell's convention).
pub const EXIT_INTERRUPTED: i32 = 130;

/// Why the output folder cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    #[error("cannot write to '{path}': {reason}")]
    NotWritable { path: String, reason: String },
    #[error("refusing to use '{path}' as the output folder: {reason}")]
    Refused { path: String, reason: String },
    #[error("could not write '{path}': {reason}")]
    Write { path: String, reason: String },
    #[error("could not move the finished run into '{path}': {reason}")]
    Rename { path: String, reason: String },
}

/// Paths (staging folders, temporary files) to remove if the process is interrupted. Held locked
/// while a finished folder is swapped into place, so an interrupt waits for the swap to end.
static LIVE: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn live() -> MutexGuard<'static, Vec<PathBuf>> {
    LIVE.lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner)
}

/// Registers a path to remove on interrupt.
pub fn register(p: &Path) {
    live().push(p.to_path_buf());
}

/// Forgets a registered path (it was removed or renamed into place).
pub fn unregister(p: &Path) {
    live().retain(|q| q != p);
}

/// Removes every registered path (called on interrupt); returns how many were removed.
fn remove_live(list: &mut Vec<PathBuf>) -> usize {
    let mut n = 0;
    for p in list.drain(..) {
        let gone = if p.is_dir() {
            fs::remove_dir_all(&p)
        } else {
            fs::remove_file(&p)
        };
        n += usize::from(gone.is_ok());
    }
    n
}

/// Installs the handler that removes staging folders and temporary files on Ctrl-C, SIGTERM or
/// SIGHUP, then exits with [`EXIT_INTERRUPTED`]. Safe to call more than once.
pub fn install_interrupt_cleanup() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        let _ = ctrlc::set_handler(|| {
            let mut list = live();
            let n = remove_live(&mut list);
            eprintln!(
                "crankcharge: interrupted; {n} unfinished output(s) removed, earlier outputs kept"
            );
            std::process::exit(EXIT_INTERRUPTED);
        });
    });
}

/// The marker's text: program, version and the command that wrote the folder.
pub fn marker_text(command: &str) -> Vec<u8> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let v = serde_json::json!({
        "written_by": WRITTEN_BY,
        "version": env!("CARGO_PKG_VERSION"),
        "command": command,
        "arguments": args,
    });
    let mut s = serde_json::to_string_pretty(&v).unwrap_or_default();
    s.push('\n');
    s.into_bytes()
}

/// True if `dir` holds a marker written by this program.
fn has_marker(dir: &Path) -> bool {
    fs::read_to_string(dir.join(MARKER))
        .ok()
        .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
        .is_some_and(|v| v["written_by"] == WRITTEN_BY)
}

/// Whether an existing folder may be replaced: empty, marked as ours, or (older versions) holding
/// only file names our studies write. Otherwise the reason, naming a few of the foreign entries.
pub fn replaceable(dir: &Path) -> Result<(), String> {
    if has_marker(dir) {
        return Ok(());
    }
    let entries = fs::read_dir(dir).map_err(|e| format!("it cannot be read ({e})"))?;
    let mut foreign = Vec::new();
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        let is_file = e.file_type().is_ok_and(|t| t.is_file());
        if !(is_file && OWN_FILE_NAMES.contains(&name.as_str())) {
            foreign.push(name);
        }
    }
    if foreign.is_empty() {
        return Ok(());
    }
    foreign.sort();
    let shown: Vec<String> = foreign
        .iter()
        .take(3)
        .map(|n| format!("'{}'", crate::text::excerpt(n, 40)))
        .collect();
    let more = if foreign.len() > 3 {
        format!(" and {} more", foreign.len() - 3)
    } else {
        String::new()
    };
    Err(format!(
        "it is a folder crankcharge did not write (no {MARKER}; it holds {}{more}). \
         Choose another --out, or add --force to replace it and everything in it",
        shown.join(", ")
    ))
}

/// Refuses targets that can never be replaced: no final name (`.`, `..`, `/`), the current folder
/// or one of its parents, or an existing non-folder.
pub fn check_target(target: &Path) -> Result<(), OutputError> {
    let refuse = |reason: &str| OutputError::Refused {
        path: target.display().to_string(),
        reason: reason.to_string(),
    };
    let last = target.components().next_back();
    if !matches!(last, Some(Component::Normal(_))) {
        return Err(refuse(
            "it names no folder of its own (`.`, `..` or a root); give a new or earlier output folder, e.g. --out outputs/run1",
        ));
    }
    if target.exists() {
        if !target.is_dir() {
            return Err(refuse("it exists and is not a folder"));
        }
        if let (Ok(t), Ok(cwd)) = (target.canonicalize(), std::env::current_dir()) {
            let cwd = cwd.canonicalize().unwrap_or(cwd);
            if cwd.starts_with(&t) {
                return Err(refuse(
                    "it is the current folder or one of its parents; give a folder inside it, e.g. --out outputs/run1",
                ));
            }
        }
    }
    Ok(())
}

/// Checks that `target` may be written (and replaced, when it exists), before any work is spent:
/// [`check_target`], then [`replaceable`] unless `force`.
pub fn claim(target: &Path, force: bool) -> Result<(), OutputError> {
    check_target(target)?;
    if target.is_dir() && !force {
        replaceable(target).map_err(|reason| OutputError::Refused {
            path: target.display().to_string(),
            reason,
        })?;
    }
    Ok(())
}

/// The folder `target` sits in ("." for a bare name).
fn parent_of(target: &Path) -> &Path {
    target
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or_else(|| Path::new("."))
}

/// The file name of a target, for its sibling staging names.
fn name_of(target: &Path) -> String {
    target
        .file_name()
        .map_or_else(|| "run".to_string(), |n| n.to_string_lossy().into_owned())
}

/// Whether the process `pid` is still running. On Linux from /proc; elsewhere unknown (None).
fn process_alive(pid: u32) -> Option<bool> {
    let proc_root = Path::new("/proc");
    if proc_root.join("self").exists() {
        Some(proc_root.join(pid.to_string()).exists())
    } else {
        None
    }
}

/// Removes staging folders and swap leftovers of `target` left by processes that no longer run:
/// `.NAME.partial-PID-…` is removed; `.NAME.old-PID` (a killed swap) is put back when the target is
/// missing, else removed. Names without a process id (older versions), or when it cannot be told
/// whether the process runs, are removed once they are an hour old.
pub fn clean_stale(target: &Path) {
    let parent = parent_of(target);
    let name = name_of(target);
    let partial = format!(".{name}.partial-");
    let old = format!(".{name}.old-");
    let Ok(entries) = fs::read_dir(parent) else {
        return;
    };
    for e in entries.flatten() {
        let file = e.file_name().to_string_lossy().into_owned();
        let (rest, is_old) = if let Some(r) = file.strip_prefix(&partial) {
            (r, false)
        } else if let Some(r) = file.strip_prefix(&old) {
            (r, true)
        } else {
            continue;
        };
        let pid = rest
            .split('-')
            .next()
            .and_then(|p| p.parse::<u32>().ok())
            .filter(|p| *p != 0);
        let alive = pid.and_then(process_alive);
        let stale = match alive {
            Some(a) => !a,
            None => e
                .metadata()
                .and_then(|m| m.modified())
                .ok()
                .and_then(|m| m.elapsed().ok())
                .is_some_and(|age| age.as_secs() > 3600),
        };
        if !stale || pid == Some(std::process::id()) {
            continue;
        }
        let p = e.path();
        if is_old && !target.exists() {
            let _ = fs::rename(&p, target);
        } else if p.is_dir() {
            let _ = fs::remove_dir_all(&p);
        } else {
            let _ = fs::remove_file(&p);
        }
    }
}

/// A staging folder next to the final folder.
#[derive(Debug)]
pub struct Staging {
    target: PathBuf,
    command: String,
    temp: Option<tempfile::TempDir>,
}

impl Staging {
    /// Checks the target ([`claim`]: refused unless new, empty, ours, or `force`), removes stale
    /// staging folders next to it and makes this run's. Call before spending time on simulation.
    pub fn prepare(target: &Path, command: &str, force: bool) -> Result<Self, OutputError> {
        claim(target, force)?;
        let parent = parent_of(target);
        // The reason without the staging folder's own name (tempfile appends "at path …"): the
        // user asked for the target and never sees the staging folder.
        let not_writable = |e: std::io::Error| OutputError::NotWritable {
            path: target.display().to_string(),
            reason: e
                .to_string()
                .split(" at path ")
                .next()
                .unwrap_or_default()
                .to_string(),
        };
        fs::create_dir_all(parent).map_err(not_writable)?;
        clean_stale(target);
        let name = name_of(target);
        let mut list = live();
        let temp = tempfile::Builder::new()
            .prefix(&format!(".{name}.partial-{}-", std::process::id()))
            .tempdir_in(parent)
            .map_err(not_writable)?;
        list.push(temp.path().to_path_buf());
        drop(list);
        Ok(Self {
            target: target.to_path_buf(),
            command: command.to_string(),
            temp: Some(temp),
        })
    }

    /// Path of the staging folder.
    pub fn dir(&self) -> &Path {
        self.temp
            .as_ref()
            .map_or(self.target.as_path(), |t| t.path())
    }

    /// Writes one file into the staging folder.
    pub fn write(&self, name: &str, bytes: &[u8]) -> Result<(), OutputError> {
        let p = self.dir().join(name);
        fs::write(&p, bytes).map_err(|e| OutputError::Write {
            path: self.target.join(name).display().to_string(),
            reason: e.to_string(),
        })
    }

    /// Writes the marker, then replaces the target folder with the staging folder (the old one is
    /// moved aside, and removed after the swap). An interrupt waits until the swap is done.
    pub fn commit(mut self) -> Result<PathBuf, OutputError> {
        self.write(MARKER, &marker_text(&self.command))?;
        let mut list = live();
        let Some(temp) = self.temp.take() else {
            return Ok(self.target.clone());
        };
        let staged = temp.keep();
        list.retain(|q| q != &staged);
        let fail = |e: std::io::Error| OutputError::Rename {
            path: self.target.display().to_string(),
            reason: e.to_string(),
        };
        let outcome = if self.target.exists() {
            let old = self.target.with_file_name(format!(
                ".{}.old-{}",
                name_of(&self.target),
                std::process::id()
            ));
            let _ = fs::remove_dir_all(&old);
            match fs::rename(&self.target, &old) {
                Err(e) => Err(fail(e)),
                Ok(()) => match fs::rename(&staged, &self.target) {
                    Err(e) => {
                        let _ = fs::rename(&old, &self.target);
                        Err(fail(e))
                    }
                    Ok(()) => {
                        let _ = fs::remove_dir_all(&old);
                        Ok(())
                    }
                },
            }
        } else {
            fs::rename(&staged, &self.target).map_err(fail)
        };
        if outcome.is_err() {
            let _ = fs::remove_dir_all(&staged);
        }
        drop(list);
        outcome.map(|()| self.target.clone())
    }
}

impl Drop for Staging {
    /// A staging folder not committed is removed (under the registry's lock, so an interrupt
    /// never sees it half removed).
    fn drop(&mut self) {
        if let Some(temp) = self.temp.take() {
            let mut list = live();
            let p = temp.path().to_path_buf();
            let _ = temp.close();
            list.retain(|q| q != &p);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_foreign_folder_is_refused_and_ours_replaced() {
        let root = tempfile::tempdir().expect("temp");
        let mine = root.path().join("mine");
        fs::create_dir(&mine).expect("mkdir");
        fs::write(mine.join("notes.txt"), b"keep me").expect("write");
        let e = Staging::prepare(&mine, "run", false).expect_err("refused");
        assert!(e.to_string().contains("notes.txt"), "{e}");
        assert!(e.to_string().contains("--force"), "{e}");
        assert_eq!(fs::read(mine.join("notes.txt")).expect("kept"), b"keep me");

        let ours = root.path().join("ours");
        let s = Staging::prepare(&ours, "run", false).expect("new folder");
        s.write("trace.csv", b"a\n").expect("write");
        s.commit().expect("commit");
        assert!(has_marker(&ours));
        let s = Staging::prepare(&ours, "run", false).expect("ours is replaceable");
        s.write("summary.json", b"{}").expect("write");
        s.commit().expect("commit");
        assert!(!ours.join("trace.csv").exists(), "old files replaced");
        let left: Vec<_> = fs::read_dir(root.path())
            .expect("list")
            .flatten()
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with('.'))
            .collect();
        assert!(left.is_empty(), "staging left behind: {left:?}");
    }

    #[test]
    fn an_older_run_folder_without_marker_is_recognised_by_its_file_names() {
        let root = tempfile::tempdir().expect("temp");
        let d = root.path().join("old");
        fs::create_dir(&d).expect("mkdir");
        for f in ["trace.csv", "events.csv", "summary.json"] {
            fs::write(d.join(f), b"x").expect("write");
        }
        assert_eq!(replaceable(&d), Ok(()));
        fs::create_dir(d.join("sub")).expect("mkdir");
        assert!(replaceable(&d).is_err(), "a sub-folder is not ours");
    }

    #[test]
    fn a_dropped_staging_folder_is_removed_and_unregistered() {
        let root = tempfile::tempdir().expect("temp");
        let s = Staging::prepare(&root.path().join("x"), "run", false).expect("prepare");
        let p = s.dir().to_path_buf();
        assert!(p.exists() && live().contains(&p));
        drop(s);
        assert!(!p.exists() && !live().contains(&p));
    }

    #[test]
    fn stale_staging_of_a_dead_process_is_cleaned_and_a_killed_swap_restored() {
        if process_alive(1).is_none() {
            return; // no /proc: the age rule applies instead
        }
        let root = tempfile::tempdir().expect("temp");
        let target = root.path().join("run");
        // A process id above the kernel's largest (2^22) cannot be running.
        let dead = 4_194_304 + 17;
        let stale = root.path().join(format!(".run.partial-{dead}-abc"));
        fs::create_dir(&stale).expect("mkdir");
        let swapped = root.path().join(format!(".run.old-{dead}"));
        fs::create_dir(&swapped).expect("mkdir");
        fs::write(swapped.join("summary.json"), b"{}").expect("write");
        let mine = root
            .path()
            .join(format!(".run.partial-{}-xyz", std::process::id()));
        fs::create_dir(&mine).expect("mkdir");
        clean_stale(&target);
        assert!(!stale.exists(), "a dead process's staging is removed");
        assert!(
            target.join("summary.json").exists(),
            "the previous run moved aside by a killed swap is put back"
        );
        assert!(mine.exists(), "a live process's staging is kept");
    }
}
