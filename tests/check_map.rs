//! `check --out DIR`: the cadence operating map over the whole cadence range a profile produces.
//! Expected values come from the shipped files (read here with this file's own structs) and from
//! closed forms; no simulation runs.

use serde::Deserialize;
use serde_json::Value;

use crate::common::{column, read_csv, repo, run_ok, WorkDir};

#[derive(Debug, Deserialize)]
struct SetupFile {
    drive: DriveFile,
    generator: GeneratorFile,
    converter: ConverterFile,
}

#[derive(Debug, Deserialize)]
struct DriveFile {
    stages: Vec<StageFile>,
}

#[derive(Debug, Deserialize)]
struct StageFile {
    ratio: f64,
}

#[derive(Debug, Deserialize)]
struct GeneratorFile {
    back_emf_v_per_krpm: f64,
}

#[derive(Debug, Deserialize)]
struct ConverterFile {
    charge_current_a: f64,
    uvlo_on_v: f64,
}

#[derive(Debug, Deserialize)]
struct ProfileFile {
    segments: Vec<SegmentFile>,
}

#[derive(Debug, Deserialize)]
struct SegmentFile {
    cadence_rpm: f64,
    #[serde(default)]
    end_cadence_rpm: Option<f64>,
}

fn shipped<T: for<'de> Deserialize<'de>>(rel: &str) -> T {
    let path = repo().join(rel);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("read {rel}: {e}"));
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str(&text)
        .unwrap_or_else(|e| panic!("parse {rel} with the test's own structs: {e}"))
}

#[test]
fn check_out_maps_the_profiles_whole_cadence_range_with_its_limits() {
    let wd = WorkDir::new();
    let json: Value = serde_json::from_str(&run_ok(
        &wd,
        &[
            "check",
            "demo",
            "--profile",
            "tiring",
            "--json",
            "--out",
            "m",
        ],
    ))
    .expect("json");
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    let profile: ProfileFile = shipped("profiles/cranking/tiring.ron");
    let (h, rows) = read_csv(&wd.path("m/operating_map.csv"));
    assert_eq!(
        h[..5],
        ["crank_rpm", "emf_v", "input_v", "charge_current_a", "limit"]
    );
    assert!(wd.path("m/operating_map.png").exists());
    let rpm = column(&h, &rows, "crank_rpm");
    let emf = column(&h, &rows, "emf_v");
    let input = column(&h, &rows, "input_v");
    let current = column(&h, &rows, "charge_current_a");
    let k = h.iter().position(|c| c == "limit").expect("limit");
    let limit: Vec<&str> = rows.iter().map(|r| r[k].as_str()).collect();

    // The whole profile, not its first segment: the tiring ramp ends at 52 rpm, well below the
    // first segment's 80, and the map reaches beyond both ends (wander and population spread).
    let planned: Vec<f64> = profile
        .segments
        .iter()
        .flat_map(|s| [s.cadence_rpm, s.end_cadence_rpm.unwrap_or(s.cadence_rpm)])
        .collect();
    let lowest = planned.iter().copied().fold(f64::INFINITY, f64::min);
    let highest = planned.iter().copied().fold(0.0, f64::max);
    assert!(
        rpm[0] < lowest && *rpm.last().expect("rows") > highest,
        "{rpm:?}"
    );
    let range = &json["cadence_range"];
    assert_eq!(range["planned_low_rpm"].as_f64(), Some(lowest));
    assert_eq!(range["planned_high_rpm"].as_f64(), Some(highest));

    // Source: PMDC generator, E = k_e·ω (k_e from the datasheet habit V/krpm), with the
    // generator at crank speed times the product of the stage ratios.
    let ratio: f64 = setup.drive.stages.iter().map(|s| s.ratio).product();
    let ke = setup.generator.back_emf_v_per_krpm / 1000.0;
    for i in 0..rows.len() {
        assert!((emf[i] - ke * rpm[i] * ratio).abs() < 1e-9, "row {i}");
        // A passive source: the input never exceeds the open circuit.
        assert!(input[i] <= emf[i] + 1e-9, "row {i}");
    }
    // The causes in order: locked out below the UVLO release (open circuit below uvlo_on_v),
    // the duty limit until check's regulation cadence, then the charge current itself.
    let unlock = setup.converter.uvlo_on_v / (ke * ratio);
    let onset = json["converter"]["regulation_cadence_at_start_rpm"]
        .as_f64()
        .expect("onset");
    let mut seen = [false; 3];
    for i in 0..rows.len() {
        if rpm[i] < unlock {
            assert_eq!(limit[i], "uvlo", "{} rpm", rpm[i]);
            assert_eq!(current[i], 0.0);
            seen[0] = true;
        } else if rpm[i] < onset - 1e-3 {
            assert_eq!(limit[i], "duty_limit", "{} rpm", rpm[i]);
            assert!(current[i] < setup.converter.charge_current_a);
            seen[1] = true;
        } else if rpm[i] > onset + 1e-3 {
            assert_eq!(limit[i], "current_limit", "{} rpm", rpm[i]);
            assert!((current[i] - setup.converter.charge_current_a).abs() < 1e-6);
            seen[2] = true;
        }
    }
    assert_eq!(seen, [true; 3], "every cause appears");
    let notes = json["notes"].to_string();
    assert!(notes.contains("low end is"), "{notes}");
}

#[test]
fn check_map_of_a_diode_only_design_marks_the_charge_limit() {
    let wd = WorkDir::new();
    let json: Value = serde_json::from_str(&run_ok(
        &wd,
        &[
            "check",
            "lead-acid-direct",
            "--json",
            "--out",
            "m",
            "--no-plot",
        ],
    ))
    .expect("json");
    assert!(!wd.path("m/operating_map.png").exists(), "--no-plot");
    let (h, rows) = read_csv(&wd.path("m/operating_map.csv"));
    let rpm = column(&h, &rows, "crank_rpm");
    let k = h.iter().position(|c| c == "limit").expect("limit");
    let from = json["direct"]["charge_limit_cadence_rpm"]
        .as_f64()
        .expect("charge limit cadence");
    let mut past = 0;
    for (i, r) in rows.iter().enumerate() {
        if rpm[i] > from + 1e-3 {
            assert_eq!(r[k], "charge_limit", "{} rpm", rpm[i]);
            past += 1;
        } else if rpm[i] < from - 1e-3 {
            assert_ne!(r[k], "charge_limit", "{} rpm", rpm[i]);
        }
    }
    assert!(
        past > 0,
        "the map reaches past the charge limit cadence ({from} rpm)"
    );
}
