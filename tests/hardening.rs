//! Hardening: random mutations of shipped files, degenerate designs and long sessions either run
//! correctly (finite outputs, closed ledger) or are refused with a message; never a panic.

use std::time::Duration;

use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, TestRng, TestRunner};

use crate::common::{read_csv, repo, WorkDir};

/// Every numeric cell of a CSV must be finite (text cells such as `mode` are skipped).
fn assert_finite_csv(path: &std::path::Path) {
    let (header, rows) = read_csv(path);
    for (r, row) in rows.iter().enumerate() {
        for (c, cell) in row.iter().enumerate() {
            if let Ok(v) = cell.parse::<f64>() {
                assert!(
                    v.is_finite(),
                    "{}: row {r} column {} = {cell}",
                    path.display(),
                    header[c]
                );
            } else {
                let lower = cell.to_ascii_lowercase();
                assert!(
                    !(lower.contains("nan") || lower.contains("inf")),
                    "{}: row {r} column {} = {cell}",
                    path.display(),
                    header[c]
                );
            }
        }
    }
}

/// Byte ranges of the numeric literals of a RON text.
fn number_spans(text: &str) -> Vec<(usize, usize)> {
    let b = text.as_bytes();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        let starts = b[i].is_ascii_digit()
            && (i == 0 || !(b[i - 1].is_ascii_alphanumeric() || b[i - 1] == b'_'));
        if starts {
            let s = if i > 0 && b[i - 1] == b'-' { i - 1 } else { i };
            let mut j = i;
            while j < b.len()
                && (b[j].is_ascii_digit() || matches!(b[j], b'.' | b'e' | b'E' | b'-' | b'+'))
            {
                j += 1;
            }
            out.push((s, j));
            i = j;
        } else {
            i += 1;
        }
    }
    out
}

/// One mutation of a text.
#[derive(Debug, Clone)]
enum Mutation {
    /// Replace the k-th number with a new literal.
    Number(usize, String),
    /// Delete `len` bytes at a position (fraction of the length).
    Delete(f64, usize),
    /// Insert a token at a position.
    Insert(f64, String),
}

fn mutation() -> impl Strategy<Value = Mutation> {
    let literal = prop_oneof![
        (-1e6f64..1e6).prop_map(|v| format!("{v}")),
        (-10.0f64..10.0).prop_map(|v| format!("{v:.3}")),
        Just("0".to_string()),
        Just("0.0".to_string()),
        Just("-1".to_string()),
        Just("1e30".to_string()),
        Just("-1e-30".to_string()),
        Just("NaN".to_string()),
        Just("inf".to_string()),
        Just("\"text\"".to_string()),
        Just("true".to_string()),
    ];
    prop_oneof![
        4 => (0usize..200, literal).prop_map(|(k, v)| Mutation::Number(k, v)),
        1 => (0.0f64..1.0, 1usize..6).prop_map(|(p, n)| Mutation::Delete(p, n)),
        1 => (0.0f64..1.0, prop_oneof![Just(")"), Just("("), Just(","), Just("x: 1,"), Just("["), Just("\"")])
            .prop_map(|(p, t)| Mutation::Insert(p, t.to_string())),
    ]
}

fn apply(text: &str, m: &Mutation) -> String {
    let at = |p: f64| {
        let mut k = ((text.len() as f64) * p) as usize;
        while k < text.len() && !text.is_char_boundary(k) {
            k += 1;
        }
        k.min(text.len())
    };
    match m {
        Mutation::Number(k, v) => {
            let spans = number_spans(text);
            if spans.is_empty() {
                return text.to_string();
            }
            let (s, e) = spans[k % spans.len()];
            format!("{}{}{}", &text[..s], v, &text[e..])
        }
        Mutation::Delete(p, n) => {
            let s = at(*p);
            let mut e = (s + n).min(text.len());
            while e < text.len() && !text.is_char_boundary(e) {
                e += 1;
            }
            format!("{}{}", &text[..s], &text[e..])
        }
        Mutation::Insert(p, t) => {
            let s = at(*p);
            format!("{}{}{}", &text[..s], t, &text[s..])
        }
    }
}

#[test]
fn random_mutations_of_a_shipped_setup_run_or_are_refused_clearly() {
    mutate_and_run("profiles/setups/demo.ron", 150, 0);
}

#[test]
fn random_mutations_of_a_shipped_profile_run_or_are_refused_clearly() {
    mutate_and_run("profiles/cranking/uneven.ron", 60, 99);
}

/// The manual fuzzing run (documented in DEVELOPERS.md): many more mutations of every shipped
/// setup, a different stream per setup:
/// `cargo test --release --test integration -- --ignored fuzz_shipped_setups_long`
#[test]
#[ignore = "long: a manual fuzzing run of several minutes"]
fn fuzz_shipped_setups_long() {
    let dir = repo().join("profiles/setups");
    let mut names: Vec<_> = std::fs::read_dir(&dir)
        .expect("setups folder")
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "ron"))
        .collect();
    names.sort();
    for (k, p) in names.iter().enumerate() {
        let rel = p.strip_prefix(repo()).expect("inside the repo");
        mutate_and_run(&rel.to_string_lossy(), 1000, k as u64 + 1);
    }
}

/// Runs `cases` random mutations of a shipped setup through the binary (stream `stream`).
fn mutate_and_run(rel: &str, cases: u32, stream: u64) {
    let original = std::fs::read_to_string(repo().join(rel)).expect("shipped setup");
    let mut seed = [0u8; 32];
    seed[..8].copy_from_slice(&stream.to_le_bytes());
    let config = Config {
        cases,
        failure_persistence: None,
        ..Config::default()
    };
    let mut runner =
        TestRunner::new_with_rng(config, TestRng::from_seed(RngAlgorithm::ChaCha, &seed));
    let wd = WorkDir::new();
    let counts = std::cell::RefCell::new([0usize; 4]);
    let result = runner.run(&mutation(), |m| {
        let text = apply(&original, &m);
        std::fs::write(wd.path("mutated.ron"), &text).expect("write");
        // A profile is mutated in place of the demo's steady profile; a setup is run as SETUP.
        let args: Vec<&str> = if rel.contains("/cranking/") {
            vec![
                "run",
                "--profile",
                "mutated.ron",
                "--duration",
                "15",
                "--no-plot",
                "--out",
                "out",
            ]
        } else {
            vec![
                "run",
                "mutated.ron",
                "--duration",
                "15",
                "--no-plot",
                "--out",
                "out",
            ]
        };
        let out = wd
            .cmd()
            .args(&args)
            .timeout(Duration::from_secs(60))
            .output()
            .expect("binary runs");
        let code = out.status.code().unwrap_or(-1);
        let stderr = String::from_utf8_lossy(&out.stderr);
        prop_assert!(
            (0..=3).contains(&code),
            "exit {code} for {m:?}; stderr: {stderr}"
        );
        counts.borrow_mut()[code as usize] += 1;
        if code >= 2 {
            prop_assert!(
                stderr.contains("error"),
                "silent refusal (exit {code}) for {m:?}"
            );
        } else {
            assert_finite_csv(&wd.path("out/trace.csv"));
            assert_finite_csv(&wd.path("out/events.csv"));
            let summary = std::fs::read_to_string(wd.path("out/summary.json")).expect("summary");
            let v: serde_json::Value = serde_json::from_str(&summary).expect("summary is JSON");
            prop_assert!(
                !summary.contains("null"),
                "null (non-finite) in summary for {m:?}"
            );
            let err = v["energy_balance_error"].as_f64().unwrap_or(1.0);
            prop_assert!(err < 1e-3, "ledger error {err} for {m:?}");
        }
        Ok(())
    });
    result.unwrap_or_else(|e| panic!("{e}"));
    let counts = counts.into_inner();
    // The mutations must exercise both outcomes, or the test proves little.
    assert!(
        counts[0] + counts[1] > (cases / 15) as usize,
        "too few accepted runs: {counts:?}"
    );
    assert!(
        counts[2] > (cases / 15) as usize,
        "too few refusals: {counts:?}"
    );
}

/// Runs the demo with overrides for 30 s; returns (exit code, stderr, summary if written).
fn demo_with(sets: &[&str]) -> (i32, String, Option<serde_json::Value>) {
    let wd = WorkDir::new();
    let mut args = vec!["run", "--duration", "30", "--no-plot", "--out", "out"];
    for s in sets {
        args.push("--set");
        args.push(s);
    }
    let out = wd
        .cmd()
        .args(&args)
        .timeout(Duration::from_secs(120))
        .output()
        .expect("runs");
    let code = out.status.code().unwrap_or(-1);
    let summary = std::fs::read_to_string(wd.path("out/summary.json"))
        .ok()
        .and_then(|s| serde_json::from_str(&s).ok());
    if code <= 1 {
        assert_finite_csv(&wd.path("out/trace.csv"));
    }
    (
        code,
        String::from_utf8_lossy(&out.stderr).into_owned(),
        summary,
    )
}

#[test]
fn degenerate_designs_are_refused_with_a_reason_or_simulated() {
    // Refused: the message names the field.
    for (set, field) in [
        ("generator.resistance_ohm=0", "generator.resistance_ohm"),
        ("drive.crank_inertia_kg_m2=0", "drive.crank_inertia_kg_m2"),
        ("generator.inertia_kg_m2=0", "generator.inertia_kg_m2"),
        ("drive.stages.0.ratio=0", "drive.stages.0.ratio"),
        ("drive.stages.0.ratio=1000", "drive.stages.0.ratio"),
        ("battery.capacity_ah=0", "battery.capacity_ah"),
        ("battery.soc_start=1.5", "battery.soc_start"),
        ("converter.uvlo_off_v=20", "converter.uvlo_off_v"),
    ] {
        let (code, stderr, _) = demo_with(&[set]);
        assert_eq!(code, 2, "{set}: {stderr}");
        assert!(
            stderr.contains(field),
            "{set}: message does not name {field}: {stderr}"
        );
    }
    // Simulated: edge values inside the ranges give finite outputs and a closed ledger.
    for sets in [
        vec!["battery.soc_start=0"],
        vec!["battery.soc_start=1"],
        vec!["battery.capacity_ah=0.01"],
        vec!["drive.stages.0.ratio=0.05"],
        vec!["drive.stages.0.ratio=60"],
        vec!["generator.resistance_ohm=0.001"],
        vec!["generator.back_emf_v_per_krpm=0.5"],
        vec![
            "drive.flywheel_inertia_kg_m2=0",
            "generator.inertia_kg_m2=1e-7",
        ],
        vec!["drive.freewheel=true"],
    ] {
        let (code, stderr, summary) = demo_with(&sets);
        assert!(
            code == 0 || code == 1 || code == 3,
            "{sets:?}: exit {code}: {stderr}"
        );
        if code == 3 {
            assert!(
                stderr.contains("t = "),
                "{sets:?}: a failure must say when: {stderr}"
            );
            continue;
        }
        let s = summary.expect("summary written");
        let err = s["energy_balance_error"].as_f64().expect("number");
        assert!(err < 1e-3, "{sets:?}: ledger error {err}");
    }
    // A generator that never reaches the battery voltage charges nothing and says so.
    let (code, _, summary) = demo_with(&["generator.back_emf_v_per_krpm=0.5"]);
    assert_eq!(code, 0);
    let s = summary.expect("summary");
    assert!(s["charge_delivered_ah"].as_f64().unwrap().abs() < 1e-6);
    assert!(s["regulation_loss_s"].as_f64().unwrap() > 20.0, "{s}");
}

#[test]
fn a_two_hour_session_completes_with_its_ledger_closed_and_its_grid_intact() {
    let wd = WorkDir::new();
    wd.cmd()
        .args(["run", "--duration", "2h", "--no-plot", "--out", "long"])
        .timeout(Duration::from_secs(300))
        .assert()
        .success();
    let (header, rows) = read_csv(&wd.path("long/trace.csv"));
    let t = crate::common::column(&header, &rows, "time_s");
    assert_eq!(t.len(), 72_001, "0.1 s grid over 7200 s");
    assert!((t[t.len() - 1] - 7200.0).abs() < 1e-9);
    for w in t.windows(2) {
        assert!((w[1] - w[0] - 0.1).abs() < 1e-6, "grid broken at {}", w[0]);
    }
    let s: serde_json::Value = serde_json::from_str(&wd.read("long/summary.json")).expect("json");
    assert!(s["energy_balance_error"].as_f64().unwrap() < 1e-3);
    // Common practice: a CC/CV charger terminates in CV below its termination current (C/10 by
    // default), which leaves a Li-ion cell roughly 95-99 % full, never past full.
    let soc_end = s["soc_end"].as_f64().unwrap();
    assert!(soc_end > 0.9 && soc_end <= 1.0, "soc_end {soc_end}");
}

#[test]
fn a_restart_delay_holds_the_charger_off_after_each_lockout() {
    let wd = WorkDir::new();
    wd.cmd()
        .args([
            "run",
            // The buck-boost twin near its generator's power limit, without its input floor
            // (which would idle it instead), hiccups: without a delay its lock-outs last well
            // under a millisecond.
            "demo-buck-boost",
            "--duration",
            "120",
            "--no-plot",
            "--out",
            "o",
            "--set",
            "profile.cadence_scale=0.7",
            "--set",
            "profile.jitter.rest_interval_s=0",
            "--set",
            "converter.restart_delay_s=0.5",
            "--set",
            "converter.input_floor_v=None",
            // Each lock-out a row of its own, however close the next.
            "--set",
            "alerts.lockout.merge_gap_s=0",
        ])
        .assert()
        .success();
    let (header, rows) = read_csv(&wd.path("o/events.csv"));
    let kind = header.iter().position(|h| h == "kind").expect("kind");
    let lockouts: Vec<&Vec<String>> = rows.iter().filter(|r| r[kind] == "lockout").collect();
    assert!(
        lockouts.len() >= 2,
        "the slow crank should lock the charger out repeatedly"
    );
    let start = crate::common::column(&header, &rows, "start_s");
    let dur = crate::common::column(&header, &rows, "duration_s");
    for (k, r) in rows.iter().enumerate() {
        // The first lock-out is the start-up (nothing to restart from); the last may be cut by the end.
        if r[kind] != "lockout" || start[k] < 1e-9 || start[k] + dur[k] >= 120.0 - 1e-6 {
            continue;
        }
        assert!(
            dur[k] >= 0.5 - 1e-4,
            "lock-out at {} s lasted only {} s",
            start[k],
            dur[k]
        );
    }
}

#[test]
fn an_eight_hour_session_keeps_a_bounded_trace_on_a_regular_grid() {
    let wd = WorkDir::new();
    wd.cmd()
        .args(["run", "--duration", "8h", "--no-plot", "--out", "long"])
        .timeout(Duration::from_secs(600))
        .assert()
        .success();
    let s: serde_json::Value = serde_json::from_str(&wd.read("long/summary.json")).expect("json");
    let dt = s["trace_interval_s"]
        .as_f64()
        .expect("trace interval in the summary");
    assert!(
        dt > 0.1 && dt <= 0.5,
        "an 8-h session widens the grid to bound memory: {dt}"
    );
    let (header, rows) = read_csv(&wd.path("long/trace.csv"));
    let t = crate::common::column(&header, &rows, "time_s");
    assert!(t.len() <= 72_001, "{} rows", t.len());
    assert!((t[t.len() - 1] - 28_800.0).abs() < 1e-9);
    for w in t.windows(2) {
        assert!((w[1] - w[0] - dt).abs() < 1e-6, "grid broken at {}", w[0]);
    }
    assert!(s["energy_balance_error"].as_f64().unwrap() < 1e-3);
}

/// A setting the property test may draw: its `--set` key and the range its field accepts
/// (from the field's `///` documentation in src/scenario/setup.rs and profile.rs), drawn
/// log-uniformly when `log`.
struct Field {
    key: &'static str,
    lo: f64,
    hi: f64,
    log: bool,
}

const fn f(key: &'static str, lo: f64, hi: f64, log: bool) -> Field {
    Field { key, lo, hi, log }
}

/// The numeric fields of setups and profiles with their documented ranges.
const FIELDS: &[Field] = &[
    f("ambient_c", -30.0, 60.0, false),
    f("drive.stages.0.ratio", 0.05, 100.0, true),
    f("drive.stages.0.efficiency", 0.5, 1.0, false),
    f("drive.crank_inertia_kg_m2", 1e-4, 1.0, true),
    f("drive.flywheel_inertia_kg_m2", 0.0, 0.1, false),
    f("drive.coulomb_friction_n_m", 0.0, 1.0, false),
    f("drive.viscous_friction_n_m_s", 0.0, 0.01, false),
    f("generator.back_emf_v_per_krpm", 0.1, 500.0, true),
    f("generator.resistance_ohm", 0.001, 100.0, true),
    f("generator.inductance_h", 0.0, 1.0, false),
    f("generator.inertia_kg_m2", 1e-7, 0.1, true),
    f("generator.brush_drop_v", 0.0, 3.0, false),
    f("generator.pole_pairs", 1.0, 100.0, true),
    f(
        "generator.winding_heat_capacity_j_per_k",
        0.1,
        10_000.0,
        true,
    ),
    f("generator.winding_to_ambient_w_per_k", 0.001, 100.0, true),
    f("diode.series_resistance_ohm", 0.0, 10.0, false),
    f("converter.charge_current_a", 0.001, 50.0, true),
    f("converter.max_duty", 0.1, 0.95, false),
    f("converter.switch_drop_v", 0.0, 3.0, false),
    f("converter.switch_resistance_ohm", 0.0, 5.0, false),
    f("converter.catch_diode_drop_v", 0.0, 2.0, false),
    f("converter.inductor_resistance_ohm", 0.0, 5.0, false),
    f("converter.inductance_h", 1e-7, 0.1, true),
    f("converter.switching_frequency_hz", 1e3, 5e6, true),
    f("converter.switch_transition_s", 0.0, 1e-5, false),
    f("converter.quiescent_current_a", 0.0, 0.5, false),
    f("converter.uvlo_on_v", 0.0, 200.0, false),
    f("converter.uvlo_off_v", 0.0, 200.0, false),
    f("converter.soft_start_s", 0.0, 10.0, false),
    f("converter.restart_delay_s", 0.0, 10.0, false),
    f("converter.input_overvoltage_v", 1.0, 1000.0, true),
    f("converter.input_floor_v", 0.5, 1000.0, true),
    f("converter.input_capacitance_f", 1e-7, 1.0, true),
    f("converter.output_capacitance_f", 1e-7, 1.0, true),
    f("converter.cv_setpoint_v", 0.5, 1000.0, true),
    f("converter.float_setpoint_v", 0.5, 1000.0, true),
    f("converter.termination_current_a", 0.0, 50.0, false),
    f("converter.absorption_exit_current_a", 0.0, 50.0, false),
    f("converter.absorption_max_s", 1.0, 1e6, true),
    f("converter.end_voltage_drop_mv_per_cell", 0.0, 50.0, false),
    f("converter.end_temp_rise_c_per_min", 0.0, 10.0, false),
    f("converter.end_holdoff_s", 0.0, 3600.0, false),
    f("converter.trickle_current_a", 0.0, 50.0, false),
    f("battery.cells_series", 1.0, 200.0, true),
    f("battery.cells_parallel", 1.0, 100.0, true),
    f("battery.capacity_ah", 0.01, 2000.0, true),
    f("battery.soc_start", 0.0, 1.0, false),
    f("battery.cell_r0_ohm", 0.0, 1.0, false),
    f("battery.cell_r1_ohm", 1e-6, 1.0, true),
    f("battery.cell_c1_f", 1.0, 1e6, true),
    f("battery.resistance_activation_k", 0.0, 10_000.0, false),
    f("battery.coulombic_efficiency", 0.5, 1.0, false),
    f("battery.charge_v_per_cell", 2.0, 4.5, false),
    f("battery.float_v_per_cell", 2.0, 2.5, false),
    f("battery.temp_comp_mv_per_c_per_cell", -10.0, 0.0, false),
    f("battery.max_compensated_v_per_cell", 2.0, 2.8, false),
    f("battery.min_compensated_v_per_cell", 1.9, 2.6, false),
    f("battery.mass_kg", 0.001, 1000.0, true),
    f("battery.specific_heat_j_per_kg_k", 100.0, 5000.0, true),
    f("battery.surface_area_m2", 1e-4, 10.0, true),
    f("battery.heat_transfer_w_per_m2_k", 0.1, 100.0, true),
    f("battery.temp_start_c", -40.0, 80.0, false),
    f("battery.capacitance_f", 0.01, 1e5, true),
    f("battery.leakage_current_a", 0.0, 1.0, false),
    f("battery.min_v_per_cell", 0.0, 4.0, false),
    f(
        "alerts.missed_end_of_charge.stored_fraction",
        0.01,
        0.99,
        false,
    ),
    f(
        "alerts.temperature_rise.threshold_c_per_min",
        0.01,
        100.0,
        true,
    ),
    f("alerts.battery_overtemp_c", -40.0, 150.0, false),
    f("alerts.min_in_regulation_fraction", 0.0, 1.0, false),
    f("solver.rtol", 1e-10, 2e-4, true),
    f("solver.atol", 1e-12, 1e-2, true),
    f("solver.max_step_s", 1e-3, 1.0, true),
    f("solver.trace_interval_s", 1e-3, 60.0, true),
    f("profile.cadence_scale", 0.0, 10.0, false),
    f("profile.segments.0.cadence_rpm", 0.0, 400.0, false),
    f("profile.operator.peak_torque_n_m", 1.0, 200.0, true),
    f("profile.operator.max_cadence_rpm", 30.0, 600.0, true),
    f("profile.operator.critical_power_w", 5.0, 500.0, true),
    f("profile.operator.w_prime_j", 0.0, 100_000.0, false),
    f("profile.operator.peak_power_w", 5.0, 2000.0, true),
    f(
        "profile.operator.tracking_gain_n_m_per_rpm",
        0.001,
        10.0,
        true,
    ),
    f("profile.operator.tracking_time_s", 0.05, 100.0, true),
    f("profile.operator.spin_up_s", 0.0, 30.0, false),
    f("profile.jitter.wander_rpm", 0.0, 100.0, false),
    f("profile.jitter.wander_time_s", 0.5, 600.0, true),
    f("profile.jitter.ripple_fraction", 0.0, 1.0, false),
    f("profile.jitter.rest_length_s", 0.0, 600.0, false),
];

/// Integer fields: drawn values are rounded.
const INTEGER_KEYS: [&str; 3] = [
    "battery.cells_series",
    "battery.cells_parallel",
    "generator.pole_pairs",
];

/// Shipped setups the property test starts from.
const BASES: [&str; 9] = [
    "demo",
    "demo-buck-boost",
    "lead-acid-buck",
    "lead-acid-direct",
    "lfp-linear",
    "usb-phone",
    "alternator-hub",
    "nimh-aa-pack",
    "supercap-bank",
];

/// One drawn case: a base setup, up to four settings inside their ranges, and whether it runs at
/// the detailed fidelity (one case in eight, over a shorter span).
fn settings() -> impl Strategy<Value = (usize, Vec<(usize, f64)>, bool)> {
    (
        0..BASES.len(),
        prop::collection::vec((0..FIELDS.len(), 0.0f64..=1.0), 1..=4),
        prop::bool::weighted(0.125),
    )
}

/// The value of a field at fraction `u` of its range (log-uniform where the range spans decades).
fn value_at(fl: &Field, u: f64) -> String {
    let v = if fl.log && fl.lo > 0.0 {
        (fl.lo.ln() + u * (fl.hi.ln() - fl.lo.ln())).exp()
    } else {
        fl.lo + u * (fl.hi - fl.lo)
    };
    let v = v.clamp(fl.lo, fl.hi);
    if INTEGER_KEYS.contains(&fl.key) {
        format!("{}", v.round())
    } else {
        format!("{v:e}")
    }
}

/// Length of the property test's fast sessions, s: `CRANKCHARGE_PROPTEST_FAST_S` (read only by
/// this test, for a local run of whole sessions, e.g. 600), default 20 (detailed ones take 5).
fn property_fast_duration() -> String {
    std::env::var("CRANKCHARGE_PROPTEST_FAST_S")
        .ok()
        .filter(|v| v.parse::<f64>().is_ok_and(|x| x > 0.0))
        .unwrap_or_else(|| "20".to_string())
}

/// Cases the property test draws: `CRANKCHARGE_PROPTEST_CASES` (read only by this test, for a
/// longer local run), default 100, a few seconds.
fn property_cases() -> u32 {
    std::env::var("CRANKCHARGE_PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(100)
}

/// Random settings, each inside its field's documented range, on random shipped setups: the run
/// never panics and exits 0, 1, 2 or 3 only; a refusal (2) names a field; a written result keeps
/// SOC in [0, 1], its ledger within 0.1 % and every figure finite; a failure (3) writes nothing.
/// Longer local run: `CRANKCHARGE_PROPTEST_CASES=2000 cargo test --release --test integration
/// random_settings_inside_their_ranges`; whole fast sessions with `CRANKCHARGE_PROPTEST_FAST_S=600`.
#[test]
fn random_settings_inside_their_ranges_never_panic_and_never_publish_a_broken_result() {
    let cases = property_cases();
    let config = Config {
        cases,
        failure_persistence: None,
        ..Config::default()
    };
    let mut runner =
        TestRunner::new_with_rng(config, TestRng::from_seed(RngAlgorithm::ChaCha, &[7u8; 32]));
    let wd = WorkDir::new();
    let counts = std::cell::RefCell::new([0usize; 4]);
    let fast_s = property_fast_duration();
    let result = runner.run(&settings(), |(base, picks, detailed)| {
        let sets: Vec<String> = picks
            .iter()
            .map(|&(k, u)| format!("{}={}", FIELDS[k].key, value_at(&FIELDS[k], u)))
            .collect();
        let _ = std::fs::remove_dir_all(wd.path("out"));
        let mut args = vec![
            "run",
            BASES[base],
            "--duration",
            if detailed { "5" } else { &fast_s },
            "--fidelity",
            if detailed { "detailed" } else { "fast" },
            "--no-plot",
            "--out",
            "out",
        ];
        for s in &sets {
            args.extend(["--set", s.as_str()]);
        }
        let out = wd
            .cmd()
            .args(&args)
            .timeout(Duration::from_secs(120))
            .output()
            .expect("binary runs");
        let code = out.status.code().unwrap_or(-1);
        let stderr = String::from_utf8_lossy(&out.stderr);
        prop_assert!(
            (0..=3).contains(&code),
            "exit {code} for {args:?}; stderr: {stderr}"
        );
        prop_assert!(
            !stderr.contains("panicked") && !stderr.contains("internal error"),
            "panic for {args:?}: {stderr}"
        );
        counts.borrow_mut()[code as usize] += 1;
        match code {
            2 => prop_assert!(
                stderr.contains("error") && stderr.contains('`'),
                "a refusal must name the field: {args:?}: {stderr}"
            ),
            3 => {
                // Printed so that a long local run lists the settings the model cannot simulate.
                eprintln!("exit 3 for {args:?}: {}", stderr.trim());
                prop_assert!(
                    !wd.path("out").exists(),
                    "a failed run wrote output: {args:?}"
                )
            }
            _ => {
                let text = std::fs::read_to_string(wd.path("out/summary.json")).expect("summary");
                let s: serde_json::Value = serde_json::from_str(&text).expect("JSON");
                let soc = s["soc_end"].as_f64().unwrap_or(f64::NAN);
                // SOC is a fraction of the capacity (definition); the ledger bound is DESIGN.md §3.
                prop_assert!((0.0..=1.0).contains(&soc), "soc_end {soc} for {args:?}");
                let err = s["energy_balance_error"].as_f64().unwrap_or(1.0);
                prop_assert!(err < 1e-3, "ledger {err} for {args:?}");
                assert_finite_csv(&wd.path("out/trace.csv"));
            }
        }
        Ok(())
    });
    result.unwrap_or_else(|e| panic!("{e}"));
    let counts = counts.into_inner();
    println!("exit codes 0/1/2/3 over {cases} cases: {counts:?}");
    // Both outcomes must occur, or the test proves little.
    assert!(
        counts[0] + counts[1] >= (cases / 5) as usize,
        "too few runs accepted: {counts:?}"
    );
    assert!(counts[2] >= 1, "no refusal at all: {counts:?}");
}
