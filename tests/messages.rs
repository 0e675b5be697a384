//! Messages are part of the contract: each case below with its exact text (exit code 2, the
//! place, the field path, and the way out), and the shipped names resolving to the files a user
//! can see and edit.

use crate::common::{run_code, run_ok, WorkDir};

/// The first line of stderr.
fn first_line(s: &str) -> &str {
    s.lines().next().unwrap_or("")
}

#[test]
fn a_value_with_a_unit_the_field_does_not_take_lists_the_units_it_does() {
    let wd = WorkDir::new();
    let err = run_code(
        &wd,
        &["run", "--set", "battery.capacity_ah=20C", "--out", "o"],
        2,
    );
    assert_eq!(
        first_line(&err),
        "crankcharge: error: --set battery.capacity_ah: `20C`: unit `C` is not one `capacity_ah` takes; accepted: Ah, mAh (or a plain number in Ah)"
    );
    let err = run_code(
        &wd,
        &["run", "--set", "drive.stages.0.ratio=5x", "--out", "o"],
        2,
    );
    assert_eq!(
        first_line(&err),
        "crankcharge: error: --set drive.stages.0.ratio: `5x`: `ratio` takes a plain number (no unit)"
    );
    assert!(!wd.path("o").exists(), "nothing written");
}

#[test]
fn a_value_with_a_unit_the_field_takes_is_converted() {
    let wd = WorkDir::new();
    let out = run_ok(
        &wd,
        &["check", "--json", "--set", "battery.capacity_ah=2500mAh"],
    );
    let j: serde_json::Value = serde_json::from_str(&out).expect("json");
    assert_eq!(j["battery"]["capacity_ah"].as_f64(), Some(2.5));
}

#[test]
fn an_unknown_field_gets_the_nearest_name() {
    let wd = WorkDir::new();
    let err = run_code(
        &wd,
        &["run", "--set", "drive.stages.0.ratioo=3", "--out", "o"],
        2,
    );
    assert_eq!(
        first_line(&err),
        "crankcharge: error: --set drive.stages.0.ratioo=3: field `drive.stages.0.ratioo`: unknown field `ratioo`: did you mean `ratio`? (fields here: `ratio` or `efficiency`)"
    );
    // A misspelt key whose value also carries a unit: the field comes first.
    let err = run_code(
        &wd,
        &["run", "--set", "battery.capacity=20C", "--out", "o"],
        2,
    );
    assert!(
        first_line(&err).starts_with(
            "crankcharge: error: --set battery.capacity=20C: field `battery.capacity`: unknown field `capacity`: did you mean `capacity_ah`? (fields here: `chemistry`, "
        ),
        "{err}"
    );
    // Words are kept apart (the parser's own text ran two together).
    assert!(!err.contains("`in"), "{err}");
}

#[test]
fn an_unknown_field_in_a_file_is_placed_at_its_line_and_column() {
    let wd = WorkDir::new();
    let text = std::fs::read_to_string(crate::common::repo().join("profiles/setups/demo.ron"))
        .expect("demo");
    let bad = text.replacen(
        "(ratio: 5.0, efficiency: 0.97)",
        "(ratoi: 5.0, efficiency: 0.97)",
        1,
    );
    assert_ne!(bad, text, "the demo's first stage as expected");
    let line = bad.lines().position(|l| l.contains("ratoi")).expect("line") + 1;
    let col = bad.lines().nth(line - 1).unwrap().find("ratoi").unwrap() + 1;
    std::fs::write(wd.path("typo.ron"), bad).expect("write");
    let err = run_code(&wd, &["run", "typo.ron", "--out", "o"], 2);
    assert_eq!(
        first_line(&err),
        format!("crankcharge: error: typo.ron:{line}:{col}: field `drive.stages.0.ratoi`: unknown field `ratoi`: did you mean `ratio`? (fields here: `ratio` or `efficiency`)")
    );
}

#[test]
fn an_unknown_value_gets_the_nearest_allowed_one() {
    let wd = WorkDir::new();
    let err = run_code(
        &wd,
        &["run", "--set", "battery.chemistry=nmcc", "--out", "o"],
        2,
    );
    assert_eq!(
        first_line(&err),
        "crankcharge: error: --set battery.chemistry=nmcc: field `battery.chemistry`: unknown value `nmcc`: did you mean `nmc`? (allowed: `nmc`, `lco`, `nca`, `lfp`, `lead_acid`, `nimh` or `supercap`)"
    );
    let err = run_code(&wd, &["run", "deom", "--out", "o"], 2);
    assert!(
        first_line(&err).ends_with("; did you mean `demo`?"),
        "{err}"
    );
}

#[test]
fn an_unwritable_output_is_named_as_given_never_by_its_staging_folder() {
    let wd = WorkDir::new();
    // A plain file where a folder is needed on the way: nothing can be created below it.
    std::fs::write(wd.path("blocker"), "x").expect("write");
    let err = run_code(&wd, &["run", "--out", "blocker/run", "--no-plot"], 2);
    assert!(
        first_line(&err).starts_with("crankcharge: error: cannot write to 'blocker/run': "),
        "{err}"
    );
    assert!(!err.contains("partial"), "{err}");
}

#[test]
fn a_shipped_name_reads_the_users_copy_in_profiles_when_there_is_one() {
    let wd = WorkDir::new();
    // Without a profiles/ folder: the copy built into the binary.
    let out = run_ok(
        &wd,
        &["run", "demo", "--duration", "10", "--no-plot", "--out", "a"],
    );
    assert!(
        out.starts_with("setup file profiles/setups/demo.ron (built-in) (sha256 "),
        "{out}"
    );
    // A folder named like the setup does not shadow it.
    std::fs::create_dir(wd.path("demo")).expect("dir");
    let out = run_ok(
        &wd,
        &["run", "demo", "--duration", "10", "--no-plot", "--out", "b"],
    );
    assert!(out.contains("(built-in)"), "{out}");
    // The user's edited copy in profiles/ is the one read, and the digest says so.
    let text = std::fs::read_to_string(crate::common::repo().join("profiles/setups/demo.ron"))
        .expect("demo");
    let edited = text.replacen("soc_start: 0.3,", "soc_start: 0.55,", 1);
    assert_ne!(edited, text);
    std::fs::create_dir_all(wd.path("profiles/setups")).expect("dirs");
    std::fs::write(wd.path("profiles/setups/demo.ron"), edited).expect("write");
    let out = run_ok(
        &wd,
        &["run", "demo", "--duration", "10", "--no-plot", "--out", "c"],
    );
    let first = out.lines().next().unwrap_or("");
    let setup_part = first.split(';').next().unwrap_or("");
    assert!(
        setup_part.starts_with("setup file profiles/setups/demo.ron (sha256 ")
            && !setup_part.contains("built-in"),
        "{out}"
    );
    let s: serde_json::Value = serde_json::from_str(&wd.read("c/summary.json")).expect("json");
    assert_eq!(s["soc_start"].as_f64(), Some(0.55));
    assert_eq!(s["setup_file"], "profiles/setups/demo.ron");
    assert_eq!(s["setup_sha256"].as_str().map(str::len), Some(12));
    // The digest's second line lists the overrides.
    let out = run_ok(
        &wd,
        &[
            "run",
            "demo",
            "--duration",
            "10",
            "--no-plot",
            "--out",
            "d",
            "--set",
            "ambient_c=15",
        ],
    );
    assert_eq!(out.lines().nth(1), Some("overrides: ambient_c=15"), "{out}");
}
