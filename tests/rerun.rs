//! The automatic rerun: a session whose energy ledger alone does not close at the setup's
//! tolerance is run once more at a tighter one (rtol / 10, half the largest step), and the run,
//! its summary and the studies say so. The rule's other branches (a ledger still open after the
//! rerun, a rerun that fails otherwise, the floors of the tolerance, failures that are not
//! rerun) are unit tests in `studies::session`, where a stand-in integration can fail on demand.

use serde::Deserialize;
use serde_json::Value;

use crate::common::{column, read_csv, repo, WorkDir};

/// An in-range setup whose ledger does not close at the shipped tolerance: the USB phone charger
/// under the uneven profile with its cadence wander near the top of its 0–100 rpm range (found
/// with the release binary; every seed tried failed at the shipped tolerance).
const OPEN_AT_SHIPPED: [&str; 7] = [
    "usb-phone",
    "--profile",
    "uneven",
    "--set",
    "profile.jitter.wander_rpm=95",
    "--no-plot",
    "--quiet",
];

#[derive(Debug, Deserialize)]
struct SetupFile {
    #[serde(default)]
    solver: Option<SolverFile>,
}

#[derive(Debug, Deserialize)]
struct SolverFile {
    #[serde(default)]
    rtol: Option<f64>,
    #[serde(default)]
    max_step_s: Option<f64>,
}

/// The relative tolerance and largest step a shipped setup runs with: its `solver` section, else
/// the documented defaults (README, setup files: rtol 1e-4, largest step 0.1 s).
fn shipped_tolerance(name: &str) -> (f64, f64) {
    let rel = format!("profiles/setups/{name}.ron");
    let text = std::fs::read_to_string(repo().join(&rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    let f: SetupFile = ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str(&text)
        .unwrap_or_else(|e| panic!("parse {rel} with the test's own structs: {e}"));
    let s = f.solver.unwrap_or(SolverFile {
        rtol: None,
        max_step_s: None,
    });
    (s.rtol.unwrap_or(1e-4), s.max_step_s.unwrap_or(0.1))
}

/// Runs `crankcharge ARGS`, asserts exit 0, returns (stdout, stderr).
fn run(wd: &WorkDir, args: &[&str]) -> (String, String) {
    let out = wd.cmd().args(args).output().expect("spawn crankcharge");
    let (stdout, stderr) = (
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    );
    assert!(
        out.status.success(),
        "crankcharge {args:?}: {:?}\nstdout:\n{stdout}\nstderr:\n{stderr}",
        out.status
    );
    (stdout, stderr)
}

fn open_at_shipped_into(out: &str) -> Vec<&str> {
    let mut a = vec!["run"];
    a.extend(OPEN_AT_SHIPPED);
    a.extend(["--out", out]);
    a
}

fn summary(wd: &WorkDir, dir: &str) -> Value {
    serde_json::from_str(&wd.read(&format!("{dir}/summary.json"))).expect("summary is JSON")
}

fn num(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} is not a number: {v}"))
}

#[test]
fn a_ledger_open_at_the_setup_tolerance_is_run_again_tighter_and_published() {
    let wd = WorkDir::new();
    let (stdout, stderr) = run(&wd, &open_at_shipped_into("o"));
    let s = summary(&wd, "o");
    let solver = &s["solver"];
    let first = &solver["first_attempt"];
    let (rtol, step) = shipped_tolerance("usb-phone");
    assert_eq!(solver["tolerance_reruns"].as_u64(), Some(1), "{solver}");
    // The first attempt ran at the setup's tolerance, and its ledger really was open.
    assert_eq!(num(first, "rtol"), rtol);
    assert_eq!(num(first, "max_step_s"), step);
    let before = num(first, "energy_balance_error");
    // Source: DESIGN.md §3, the ledger's closure bound (0.1 %).
    assert!(before > 1e-3, "the first attempt closed to {before}");
    // The rerun: a tenth of the tolerance, half the largest step (the documented rule).
    assert_eq!(num(solver, "rtol"), rtol / 10.0);
    assert_eq!(num(solver, "max_step_s"), step / 2.0);
    let after = num(&s, "energy_balance_error");
    // Common practice: an integration's closure error falls with its tolerance (each Dopri5
    // step holds its error to about rtol, so the drift of the ledger's quadratures scales about
    // with it): a tenth of the tolerance leaves well under a third of the closure, and under
    // the bound of DESIGN.md §3.
    assert!(after < 1e-3 && after < before / 3.0, "{before} -> {after}");
    // Said on stderr, on the run's ledger line and in its report.
    assert!(
        stderr.contains("crankcharge: note: the energy ledger closed only to")
            && stderr.contains(&format!(
                "run again at solver.rtol {:e} and solver.max_step_s {} s",
                rtol / 10.0,
                step / 2.0
            )),
        "{stderr}"
    );
    assert_eq!(stderr.lines().count(), 1, "one line: {stderr}");
    let ledger_line = stdout
        .lines()
        .find(|l| l.trim_start().starts_with("energy ledger"))
        .expect("a ledger line");
    assert!(ledger_line.contains("run again once"), "{ledger_line}");
    assert!(
        wd.read("o/report.html")
            .contains("run again once after it closed only to"),
        "report names the rerun"
    );
}

#[test]
fn a_default_demo_run_needs_no_rerun_and_reports_the_shipped_tolerance() {
    let wd = WorkDir::new();
    let (stdout, stderr) = run(&wd, &["run", "--no-plot", "--out", "o"]);
    let s = summary(&wd, "o");
    let solver = &s["solver"];
    let (rtol, step) = shipped_tolerance("demo");
    assert_eq!(solver["tolerance_reruns"].as_u64(), Some(0), "{solver}");
    assert!(solver.get("first_attempt").is_none(), "{solver}");
    assert_eq!(num(solver, "rtol"), rtol);
    assert_eq!(num(solver, "max_step_s"), step);
    assert!(!stderr.contains("note:"), "{stderr}");
    assert!(!stdout.contains("run again"), "{stdout}");
}

#[test]
fn a_run_again_session_gives_the_same_bytes_every_time() {
    let wd = WorkDir::new();
    run(&wd, &open_at_shipped_into("a"));
    run(&wd, &open_at_shipped_into("b"));
    assert_eq!(
        summary(&wd, "a")["solver"]["tolerance_reruns"].as_u64(),
        Some(1),
        "the case under test is a rerun"
    );
    let without_wall = |dir: &str| -> String {
        let text = wd.read(&format!("{dir}/summary.json"));
        assert!(text.contains("\"wall_time_s\""), "{text}");
        text.lines()
            .filter(|l| !l.contains("\"wall_time_s\""))
            .collect::<Vec<_>>()
            .join("\n")
    };
    assert_eq!(without_wall("a"), without_wall("b"));
    for f in ["trace.csv", "events.csv"] {
        assert_eq!(
            wd.read(&format!("a/{f}")),
            wd.read(&format!("b/{f}")),
            "{f} differs"
        );
    }
}

#[test]
fn studies_mark_the_sessions_that_were_run_again_and_montecarlo_counts_them() {
    let wd = WorkDir::new();
    // A sweep over the wander: the ordinary value closes at the shipped tolerance, the extreme
    // one needs the rerun.
    let (_, stderr) = run(
        &wd,
        &[
            "sweep",
            "usb-phone",
            "--profile",
            "uneven",
            "--param",
            "profile.jitter.wander_rpm",
            "--values",
            "8,95",
            "--no-plot",
            "--quiet",
            "--out",
            "sw",
        ],
    );
    let (h, rows) = read_csv(&wd.path("sw/sweep.csv"));
    assert_eq!(column(&h, &rows, "tolerance_reruns"), vec![0.0, 1.0]);
    assert!(
        stderr.contains("crankcharge: note: 1 of 2 session(s) were run again once"),
        "{stderr}"
    );

    let (_, stderr) = run(
        &wd,
        &[
            "montecarlo",
            "usb-phone",
            "--profile",
            "uneven",
            "--set",
            "profile.jitter.wander_rpm=95",
            "--runs",
            "3",
            "--no-plot",
            "--quiet",
            "--out",
            "mc",
        ],
    );
    let (h, rows) = read_csv(&wd.path("mc/runs.csv"));
    let marked = column(&h, &rows, "tolerance_reruns");
    let reruns = marked.iter().filter(|&&r| r == 1.0).count();
    assert!(reruns > 0, "the case under test has reruns: {marked:?}");
    assert!(marked.iter().all(|&r| r == 0.0 || r == 1.0), "{marked:?}");
    let mc: Value = serde_json::from_str(&wd.read("mc/montecarlo.json")).expect("json");
    assert_eq!(mc["tolerance_reruns"].as_u64(), Some(reruns as u64));
    assert!(
        stderr.contains(&format!(
            "crankcharge: note: {reruns} of {} session(s) were run again once",
            rows.len()
        )),
        "{stderr}"
    );
}
