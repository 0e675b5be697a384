//! Shared helpers for the integration tests: a temp work dir per test and the real binary.

#![allow(dead_code)]

use std::path::{Path, PathBuf};

use assert_cmd::Command;

/// A fresh working directory for one test (removed when dropped).
pub struct WorkDir {
    pub dir: tempfile::TempDir,
}

impl WorkDir {
    /// Creates an empty temporary folder.
    pub fn new() -> Self {
        Self {
            dir: tempfile::tempdir().expect("temp dir"),
        }
    }

    /// Path inside the work dir.
    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.path().join(rel)
    }

    /// The crankcharge binary, run in this folder.
    pub fn cmd(&self) -> Command {
        let mut c = Command::cargo_bin("crankcharge").expect("binary built");
        c.current_dir(self.dir.path());
        c
    }

    /// Reads a file of the work dir as text.
    pub fn read(&self, rel: &str) -> String {
        std::fs::read_to_string(self.path(rel)).unwrap_or_else(|e| panic!("read {rel}: {e}"))
    }
}

/// Root of the repository (for shipped files).
/// The files a run folder holds (DESIGN.md §4, the interface contract).
pub const RUN_FILES: [&str; 6] = [
    "trace.csv",
    "events.csv",
    "summary.json",
    "session.png",
    "session.svg",
    "report.html",
];

pub fn repo() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// Parses a CSV file into a header and rows of strings.
pub fn read_csv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let mut r =
        csv::Reader::from_path(path).unwrap_or_else(|e| panic!("csv {}: {e}", path.display()));
    let header = r
        .headers()
        .expect("header")
        .iter()
        .map(String::from)
        .collect();
    let rows = r
        .records()
        .map(|rec| rec.expect("record").iter().map(String::from).collect())
        .collect();
    (header, rows)
}

/// Column of a CSV as f64 by name.
pub fn column(header: &[String], rows: &[Vec<String>], name: &str) -> Vec<f64> {
    let k = header
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    rows.iter()
        .map(|r| {
            r[k].parse::<f64>()
                .unwrap_or_else(|_| panic!("{name}: not a number: {}", r[k]))
        })
        .collect()
}

/// Runs `crankcharge` with `args` in `wd` and asserts exit code 0; returns stdout.
pub fn run_ok(wd: &WorkDir, args: &[&str]) -> String {
    run_env(wd, args, &[])
}

/// As [`run_ok`] with extra environment variables.
pub fn run_env(wd: &WorkDir, args: &[&str], env: &[(&str, &str)]) -> String {
    let mut cmd = wd.cmd();
    cmd.args(args);
    for (k, v) in env {
        cmd.env(k, v);
    }
    let out = cmd.output().expect("spawn crankcharge");
    assert!(
        out.status.success(),
        "crankcharge {args:?} (env {env:?}) in {} failed: {:?}\nstdout:\n{}\nstderr:\n{}",
        wd.dir.path().display(),
        out.status,
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Runs `crankcharge` with `args`, asserts the exit code, and returns stderr.
pub fn run_code(wd: &WorkDir, args: &[&str], code: i32) -> String {
    let out = wd.cmd().args(args).output().expect("spawn crankcharge");
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(
        out.status.code(),
        Some(code),
        "crankcharge {args:?} in {}: expected exit {code}\nstdout:\n{}\nstderr:\n{stderr}",
        wd.dir.path().display(),
        String::from_utf8_lossy(&out.stdout),
    );
    stderr
}

/// Every shipped setup file, sorted by name.
pub fn shipped_setups() -> Vec<PathBuf> {
    let dir = repo().join("profiles/setups");
    let mut v: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("read {}: {e}", dir.display()))
        .map(|e| e.expect("dir entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "ron"))
        .collect();
    v.sort();
    v
}

/// A buck with every drop and loss set to zero: the converter of the textbook tables.
pub fn ideal_buck(
    inductance_h: f64,
    switching_frequency_hz: f64,
) -> crankcharge::model::converter::BuckModel {
    crankcharge::model::converter::BuckModel {
        max_duty: 1.0,
        switch_drop_v: 0.0,
        switch_resistance_ohm: 0.0,
        catch_drop_v: 0.0,
        output_diode_v: 0.0,
        inductor_resistance_ohm: 0.0,
        inductance_h,
        switching_frequency_hz,
        switch_transition_s: 0.0,
        quiescent_current_a: 0.0,
        overhead: crankcharge::model::converter::Overhead::default(),
    }
}

/// Loads a setup and a profile (paths) through the scenario loader with `--set`-style overrides
/// given as (key, value) pairs; panics with the file on failure.
pub fn load_paths(
    setup: &Path,
    profile: &Path,
    sets: &[(&str, &str)],
) -> crankcharge::scenario::Scenario {
    use crankcharge::scenario::load::{InputKind, Override};
    use crankcharge::scenario::{load_scenario, SourceText};
    let s = SourceText::resolve(Some(setup.to_str().expect("utf-8 path")), InputKind::Setup)
        .unwrap_or_else(|e| panic!("setup {}: {e}", setup.display()));
    let p = SourceText::resolve(
        Some(profile.to_str().expect("utf-8 path")),
        InputKind::Profile,
    )
    .unwrap_or_else(|e| panic!("profile {}: {e}", profile.display()));
    let ov: Vec<Override> = sets
        .iter()
        .map(|(k, v)| Override {
            key: (*k).to_string(),
            value: (*v).to_string(),
        })
        .collect();
    load_scenario(&s, &p, &ov).unwrap_or_else(|e| panic!("{}: {e}", setup.display()))
}

/// A shipped setup and a shipped crank profile, by file stem, with overrides.
pub fn shipped_scenario(
    setup: &str,
    profile: &str,
    sets: &[(&str, &str)],
) -> crankcharge::scenario::Scenario {
    load_paths(
        &repo().join(format!("profiles/setups/{setup}.ron")),
        &repo().join(format!("profiles/cranking/{profile}.ron")),
        sets,
    )
}

/// Runs one session (the profile's seed, no cadence offset); `duration_s` None is the profile's
/// own length. Panics with the setup's name on failure.
pub fn session_of(
    sc: &crankcharge::scenario::Scenario,
    duration_s: Option<f64>,
    fidelity: crankcharge::simulate::Fidelity,
) -> crankcharge::studies::session::Session {
    use crankcharge::studies::session::{run_session, RunSettings};
    let rs = RunSettings {
        duration_s,
        seed: None,
        fidelity,
        cadence_offset_rpm: 0.0,
    };
    run_session(sc, &rs).unwrap_or_else(|e| panic!("{}: {e}", sc.setup.name))
}

/// The plant's generator and diode as a network source at back-EMF `emf_v`, winding at 20 °C
/// (a DC machine: no commutation resistance).
pub fn source_at(
    plant: &crankcharge::simulate::plant::Plant,
    emf_v: f64,
) -> crankcharge::model::network::Source<'_> {
    crankcharge::model::network::Source {
        generator: &plant.generator,
        diode: &plant.diode,
        emf_v,
        resistance_ohm: plant.generator.resistance_ohm(20.0),
        commutation_ohm: 0.0,
    }
}
