//! The study sub-commands on the real binary: `compare`, `sweep`, `montecarlo`, `check` and
//! `fit-generator`. Each test runs in its own temp folder; sessions are kept short (30 s) so the
//! whole file takes seconds.
//!
//! Values the checks need from the shipped setups are read here with the `ron` crate into small
//! structs of this file, never through the crate's own scenario code; expected statistics are
//! computed here from the written CSV files.

use std::collections::BTreeSet;
use std::path::Path;

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use serde::Deserialize;
use serde_json::Value;

use crate::common::{column, read_csv, repo, run_code, run_env, run_ok, WorkDir};

// ---------------------------------------------------------------------------------------------
// Helpers
// ---------------------------------------------------------------------------------------------

/// Short sessions keep the suite fast.
const SHORT: &str = "30";

/// The summary scalars every study CSV carries after its key columns (a few of them).
const SOME_SCALARS: [&str; 6] = [
    "duration_s",
    "soc_end",
    "charge_delivered_ah",
    "in_regulation_fraction",
    "mean_operator_power_w",
    "verdict",
];

fn read_json(path: &Path) -> Value {
    let text =
        std::fs::read_to_string(path).unwrap_or_else(|e| panic!("read {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{} is not JSON: {e}", path.display()))
}

fn num(v: &Value, path: &str) -> f64 {
    let mut cur = v;
    for k in path.split('.') {
        cur = &cur[k];
    }
    cur.as_f64()
        .unwrap_or_else(|| panic!("`{path}` is not a number: {cur}"))
}

/// The same number read from CSV and from JSON. serde_json's default float parser may be one
/// unit in the last place off, so allow a relative 1e-14.
fn assert_same(a: f64, b: f64) {
    assert!((a - b).abs() <= 1e-14 * a.abs().max(b.abs()), "{a} vs {b}");
}

fn text_col(header: &[String], rows: &[Vec<String>], name: &str) -> Vec<String> {
    let k = header
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name} in {header:?}"));
    rows.iter().map(|r| r[k].clone()).collect()
}

/// Asserts a chart pair exists: a PNG with its signature and an SVG document.
fn assert_chart(dir: &Path, stem: &str) {
    let png = std::fs::read(dir.join(format!("{stem}.png")))
        .unwrap_or_else(|e| panic!("{stem}.png: {e}"));
    // Source: the PNG specification (ISO/IEC 15948), §5.2: the eight-byte file signature.
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n", "{stem}.png signature");
    let svg = std::fs::read_to_string(dir.join(format!("{stem}.svg")))
        .unwrap_or_else(|e| panic!("{stem}.svg: {e}"));
    assert!(svg.contains("<svg"), "{stem}.svg is not an SVG document");
}

/// Percentile by linear interpolation between order statistics, written here independently.
/// The notes `check --json` gives for `setup` with the `--set` overrides.
fn check_notes(wd: &WorkDir, setup: &str, sets: &[&str]) -> Vec<String> {
    let mut args = vec!["check", setup, "--json"];
    for s in sets {
        args.extend(["--set", s]);
    }
    let v: Value = serde_json::from_str(&run_ok(wd, &args)).expect("JSON");
    v["notes"]
        .as_array()
        .expect("notes")
        .iter()
        .map(|n| n.as_str().unwrap_or_default().to_string())
        .collect()
}

fn percentile_here(values: &[f64], q: f64) -> f64 {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let pos = (v.len() - 1) as f64 * q / 100.0;
    let (i, frac) = (pos.floor() as usize, pos - pos.floor());
    if i + 1 < v.len() {
        v[i] * (1.0 - frac) + v[i + 1] * frac
    } else {
        v[i]
    }
}

/// The parts of a setup file these tests need (other fields are ignored).
#[derive(Debug, Deserialize)]
struct SetupFile {
    drive: DriveFile,
    generator: GeneratorFile,
    converter: ConverterFile,
    battery: BatteryFile,
}

#[derive(Debug, Deserialize)]
struct DriveFile {
    stages: Vec<StageFile>,
    #[serde(default)]
    coulomb_friction_n_m: f64,
    #[serde(default)]
    viscous_friction_n_m_s: f64,
}

#[derive(Debug, Deserialize)]
struct StageFile {
    ratio: f64,
    efficiency: f64,
}

#[derive(Debug, Deserialize)]
struct GeneratorFile {
    back_emf_v_per_krpm: f64,
    #[serde(default)]
    hysteresis_loss_w_per_krpm: f64,
    #[serde(default)]
    eddy_loss_w_per_krpm2: f64,
}

#[derive(Debug, Deserialize)]
struct ConverterFile {
    #[serde(default)]
    input_overvoltage_v: Option<f64>,
}

#[derive(Debug, Deserialize)]
struct BatteryFile {
    cells_series: u32,
    #[serde(default)]
    temp_comp_mv_per_c_per_cell: Option<f64>,
}

/// The parts of a crank profile these tests need.
#[derive(Debug, Deserialize)]
struct ProfileFile {
    segments: Vec<SegmentFile>,
    operator: OperatorFile,
}

#[derive(Debug, Deserialize)]
struct SegmentFile {
    cadence_rpm: f64,
}

#[derive(Debug, Deserialize)]
struct OperatorFile {
    critical_power_w: f64,
}

fn shipped<T: for<'de> Deserialize<'de>>(rel: &str) -> T {
    let path = repo().join(rel);
    let text =
        std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("read {}: {e}", path.display()));
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str(&text)
        .unwrap_or_else(|e| panic!("parse {} with the test's own structs: {e}", path.display()))
}

fn total_ratio(s: &SetupFile) -> f64 {
    s.drive.stages.iter().map(|st| st.ratio).product()
}

// ---------------------------------------------------------------------------------------------
// compare
// ---------------------------------------------------------------------------------------------

#[test]
fn compare_one_setup_two_profiles_gives_two_rows_each_on_its_profiles_seed() {
    let wd = WorkDir::new();
    let stdout = run_ok(
        &wd,
        &[
            "compare",
            "demo",
            "-p",
            "steady",
            "-p",
            "tiring",
            "--duration",
            SHORT,
            "--out",
            "cmp",
        ],
    );
    let (header, rows) = read_csv(&wd.path("cmp/compare.csv"));
    assert_eq!(&header[..3], ["setup", "profile", "seed"]);
    for k in SOME_SCALARS {
        assert!(header.iter().any(|h| h == k), "compare.csv lacks {k}");
    }
    assert_eq!(rows.len(), 2, "one row a run");
    assert_eq!(text_col(&header, &rows, "profile"), ["steady", "tiring"]);
    // Each profile brings its own operator (steady.ron seed 7, tiring.ron seed 11); --seed puts
    // every run on one.
    let seeds = text_col(&header, &rows, "seed");
    assert_eq!(seeds, ["7", "11"], "each profile on its own seed");
    assert_chart(&wd.path("cmp"), "compare");
    run_ok(
        &wd,
        &[
            "compare",
            "demo",
            "-p",
            "steady",
            "-p",
            "tiring",
            "--duration",
            SHORT,
            "--seed",
            "5",
            "--no-plot",
            "--out",
            "cmp5",
        ],
    );
    let (header5, rows5) = read_csv(&wd.path("cmp5/compare.csv"));
    assert_eq!(text_col(&header5, &rows5, "seed"), ["5", "5"]);
    // The aligned table: units in the headers, one line a run.
    for h in ["charge [Ah]", "in-regulation [%]", "mean [W]", "verdict"] {
        assert!(stdout.contains(h), "table header lacks {h}:\n{stdout}");
    }
    let table: Vec<&str> = stdout.lines().take(3).collect();
    assert!(
        table[1].contains("steady") && table[2].contains("tiring"),
        "{stdout}"
    );
    let col = table[0].find("charge [Ah]").expect("charge column") + "charge [Ah]".len();
    for line in &table[1..] {
        let b = line.as_bytes();
        // Numbers are right-aligned under their header: the charge value ends where it does.
        assert!(
            b[col - 1].is_ascii_digit(),
            "rows line up with the header: {line:?}"
        );
        assert_eq!(
            b.get(col),
            Some(&b' '),
            "rows line up with the header: {line:?}"
        );
    }

    // The tiring row is the same session `run` gives with that seed and profile.
    let seed = seeds[1].clone();
    run_ok(
        &wd,
        &[
            "run",
            "demo",
            "-p",
            "tiring",
            "--seed",
            &seed,
            "--duration",
            SHORT,
            "--out",
            "single",
            "--no-plot",
        ],
    );
    let single = read_json(&wd.path("single/summary.json"));
    let compared = column(&header, &rows, "charge_delivered_ah")[1];
    assert_same(compared, num(&single, "charge_delivered_ah"));
}

#[test]
fn compare_without_setup_uses_the_demo_and_every_pair_is_run() {
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "compare",
            "demo",
            "lead-acid-direct",
            "--duration",
            SHORT,
            "--seed",
            "99",
            "--no-plot",
        ],
    );
    let (header, rows) = read_csv(&wd.path("outputs/compare/compare.csv"));
    assert_eq!(rows.len(), 2);
    assert_eq!(
        text_col(&header, &rows, "setup"),
        ["demo-liion-buck", "lead-acid-direct"]
    );
    assert_eq!(text_col(&header, &rows, "seed"), ["99", "99"]);
    assert!(!wd.path("outputs/compare/compare.png").exists());

    let wd = WorkDir::new();
    run_ok(&wd, &["compare", "--duration", SHORT, "--no-plot"]);
    let (header, rows) = read_csv(&wd.path("outputs/compare/compare.csv"));
    assert_eq!(rows.len(), 1);
    assert_eq!(text_col(&header, &rows, "setup"), ["demo-liion-buck"]);
}

#[test]
fn compare_refuses_a_bad_profile_before_running_anything() {
    let wd = WorkDir::new();
    let err = run_code(
        &wd,
        &[
            "compare",
            "demo",
            "-p",
            "steady",
            "-p",
            "no-such-profile",
            "--duration",
            SHORT,
        ],
        2,
    );
    assert!(err.contains("no-such-profile"), "{err}");
    assert!(!wd.path("outputs").exists(), "nothing written");
}

// ---------------------------------------------------------------------------------------------
// sweep
// ---------------------------------------------------------------------------------------------

#[test]
fn sweep_of_the_first_ratio_gives_one_row_a_value_keyed_by_the_parameter() {
    let wd = WorkDir::new();
    let key = "drive.stages.0.ratio";
    let stdout = run_ok(
        &wd,
        &[
            "sweep",
            "demo",
            "--param",
            key,
            "--values",
            "3,4,5,6",
            "--duration",
            SHORT,
            "--out",
            "sw",
        ],
    );
    let (header, rows) = read_csv(&wd.path("sw/sweep.csv"));
    assert_eq!(header[0], key, "first column is the swept key");
    for k in SOME_SCALARS {
        assert!(header.iter().any(|h| h == k), "sweep.csv lacks {k}");
    }
    assert_eq!(rows.len(), 4);
    assert_eq!(column(&header, &rows, key), [3.0, 4.0, 5.0, 6.0]);
    assert_chart(&wd.path("sw"), "sweep");
    assert!(stdout.contains(key), "{stdout}");
    // A slower generator (lower ratio) gives less voltage at the same cadence, so the converter
    // holds regulation for less of the time at ratio 3 than at ratio 6.
    let reg = column(&header, &rows, "in_regulation_fraction");
    assert!(reg[0] < reg[3], "in regulation {reg:?}");
    let charge = column(&header, &rows, "charge_delivered_ah");

    // The sweep's value-5 row is the run with the same `--set`.
    run_ok(
        &wd,
        &[
            "run",
            "demo",
            "--set",
            &format!("{key}=5"),
            "--duration",
            SHORT,
            "--out",
            "r5",
            "--no-plot",
        ],
    );
    let single = read_json(&wd.path("r5/summary.json"));
    assert_same(charge[2], num(&single, "charge_delivered_ah"));
}

#[test]
fn sweep_range_includes_both_ends_and_profile_keys_work() {
    let wd = WorkDir::new();
    let key = "profile.cadence_scale";
    run_ok(
        &wd,
        &[
            "sweep",
            "--param",
            key,
            "--range",
            "0.8:1.2:3",
            "--duration",
            SHORT,
            "--no-plot",
        ],
    );
    let (header, rows) = read_csv(&wd.path("outputs/sweep/sweep.csv"));
    assert_eq!(header[0], key);
    assert_eq!(text_col(&header, &rows, key), ["0.8", "1", "1.2"]);
    // Cranking faster takes more work from the operator in the same time.
    let work = column(&header, &rows, "operator_work_j");
    assert!(work[0] < work[2], "operator work {work:?}");
}

#[test]
fn sweep_with_a_bad_key_or_value_exits_2_naming_it_before_any_run() {
    let wd = WorkDir::new();
    let err = run_code(
        &wd,
        &[
            "sweep",
            "--param",
            "drive.stages.7.ratio",
            "--values",
            "3,4",
        ],
        2,
    );
    assert!(err.contains("drive.stages.7.ratio"), "{err}");
    assert!(!wd.path("outputs").exists(), "nothing written: {err}");

    let err = run_code(
        &wd,
        &[
            "sweep",
            "--param",
            "drive.stages.0.ratio",
            "--values",
            "4,-2",
        ],
        2,
    );
    assert!(err.contains("drive.stages.0.ratio"), "{err}");
    assert!(err.contains("-2"), "{err}");
    assert!(
        !wd.path("outputs").exists(),
        "a late bad value is caught before any run"
    );

    let err = run_code(
        &wd,
        &["sweep", "--param", "drive.stages.0.ratio", "--range", "3:6"],
        2,
    );
    assert!(err.contains("FROM:TO:STEPS"), "{err}");
    let err = run_code(&wd, &["sweep", "--param", "drive.stages.0.ratio"], 2);
    assert!(err.contains("--values") && err.contains("--range"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// montecarlo
// ---------------------------------------------------------------------------------------------

#[test]
fn montecarlo_of_24_runs_is_distinct_ordered_and_thread_independent() {
    let wd = WorkDir::new();
    let args = [
        "montecarlo",
        "--runs",
        "24",
        "--duration",
        SHORT,
        "--out",
        "mc",
    ];
    let stdout = run_ok(&wd, &args);
    assert!(stdout.contains("p50"), "{stdout}");
    let dir = wd.path("mc");
    let (header, rows) = read_csv(&dir.join("runs.csv"));
    assert_eq!(header[0], "seed");
    for k in SOME_SCALARS {
        assert!(header.iter().any(|h| h == k), "runs.csv lacks {k}");
    }
    assert_eq!(rows.len(), 24);
    let seeds: BTreeSet<String> = text_col(&header, &rows, "seed").into_iter().collect();
    assert_eq!(seeds.len(), 24, "every run has its own seed");
    let distinct: BTreeSet<&Vec<String>> = rows.iter().collect();
    assert_eq!(distinct.len(), 24, "24 distinct rows");
    assert_chart(&dir, "montecarlo");

    let report = read_json(&dir.join("montecarlo.json"));
    assert_eq!(report["runs"].as_u64(), Some(24));
    for metric in [
        "charge_delivered_ah",
        "in_regulation_fraction",
        "operator_work_j",
    ] {
        let (p5, p50, p95) = (
            num(&report, &format!("{metric}.p5")),
            num(&report, &format!("{metric}.p50")),
            num(&report, &format!("{metric}.p95")),
        );
        assert!(p5 <= p50 && p50 <= p95, "{metric}: {p5} {p50} {p95}");
        let values = column(&header, &rows, metric);
        // Common practice: percentiles by linear interpolation between order statistics
        // (numpy's default), recomputed here from runs.csv.
        for (q, got) in [(5.0, p5), (50.0, p50), (95.0, p95)] {
            let want = percentile_here(&values, q);
            assert!(
                (got - want).abs() <= 1e-9 * want.abs().max(1e-12),
                "{metric} p{q}: json {got}, from runs.csv {want}"
            );
        }
    }
    // The probabilities count the runs from their figures: an overcharge row (alert_kinds), a
    // regulation fraction below the setup's minimum (0.9 by default); `marginal` verdicts count
    // by their figure like the others.
    let kinds = text_col(&header, &rows, "alert_kinds");
    let regulation = column(&header, &rows, "in_regulation_fraction");
    let verdicts = text_col(&header, &rows, "verdict");
    for (key, count) in [
        (
            "overcharge_probability",
            kinds
                .iter()
                .filter(|v| v.split('+').any(|w| w == "overcharge"))
                .count(),
        ),
        (
            "regulation_failure_probability",
            regulation.iter().filter(|&&f| f < 0.9).count(),
        ),
        (
            "marginal_probability",
            verdicts
                .iter()
                .filter(|v| v.split('+').any(|w| w == "marginal"))
                .count(),
        ),
    ] {
        let p = num(&report, key);
        assert!((0.0..=1.0).contains(&p), "{key} = {p}");
        assert!(
            (p - count as f64 / 24.0).abs() < 1e-12,
            "{key} = {p}, {count} of 24 rows"
        );
    }

    // Same seed, same file: again, and on one thread versus two.
    let first = std::fs::read(dir.join("runs.csv")).expect("runs.csv");
    run_ok(&wd, &args);
    assert_eq!(
        std::fs::read(dir.join("runs.csv")).expect("runs.csv"),
        first
    );
    run_env(&wd, &args, &[("RAYON_NUM_THREADS", "1")]);
    let one = std::fs::read(dir.join("runs.csv")).expect("runs.csv");
    run_env(&wd, &args, &[("RAYON_NUM_THREADS", "2")]);
    let two = std::fs::read(dir.join("runs.csv")).expect("runs.csv");
    assert_eq!(one, first, "one thread");
    assert_eq!(two, first, "two threads");

    // Another base seed, other operators.
    run_ok(
        &wd,
        &[
            "montecarlo",
            "--runs",
            "24",
            "--duration",
            SHORT,
            "--out",
            "mc2",
            "--seed",
            "1234",
            "--no-plot",
        ],
    );
    let other = std::fs::read(wd.path("mc2/runs.csv")).expect("runs.csv");
    assert_ne!(other, first);
}

#[test]
fn montecarlo_draws_capacities_from_the_profile_spreads_only() {
    let wd = WorkDir::new();
    let profile: ProfileFile = shipped("profiles/cranking/steady.ron");
    let cp = profile.operator.critical_power_w;
    run_ok(
        &wd,
        &[
            "montecarlo",
            "--runs",
            "8",
            "--duration",
            "10",
            "--out",
            "spread",
            "--no-plot",
        ],
    );
    let (header, rows) = read_csv(&wd.path("spread/runs.csv"));
    let drawn = column(&header, &rows, "critical_power_w");
    let kinds: BTreeSet<String> = drawn.iter().map(|v| v.to_string()).collect();
    assert!(
        kinds.len() > 1,
        "critical power varies across runs: {drawn:?}"
    );
    assert!(drawn.iter().all(|v| (5.0..=500.0).contains(v)), "{drawn:?}");
    let offsets = column(&header, &rows, "cadence_offset_rpm");
    assert!(offsets.iter().any(|&o| o != 0.0), "{offsets:?}");

    run_ok(
        &wd,
        &[
            "montecarlo",
            "--runs",
            "8",
            "--duration",
            "10",
            "--out",
            "flat",
            "--no-plot",
            "--set",
            "profile.operator.spread.critical_power_w=0",
            "--set",
            "profile.operator.spread.cadence_rpm=0",
        ],
    );
    let (header, rows) = read_csv(&wd.path("flat/runs.csv"));
    assert!(column(&header, &rows, "critical_power_w")
        .iter()
        .all(|&v| v == cp));
    assert!(column(&header, &rows, "cadence_offset_rpm")
        .iter()
        .all(|&v| v == 0.0));
}

#[test]
fn montecarlo_on_a_diode_only_lead_acid_counts_overcharges() {
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "montecarlo",
            "lead-acid-direct",
            "--runs",
            "6",
            // Five minutes: the battery's polarisation builds up over a minute or more.
            "--duration",
            "300",
            "--out",
            "la",
            "--no-plot",
        ],
    );
    let (header, rows) = read_csv(&wd.path("la/runs.csv"));
    let report = read_json(&wd.path("la/montecarlo.json"));
    let over = text_col(&header, &rows, "verdict")
        .iter()
        .filter(|v| v.contains("overcharge"))
        .count();
    assert!(
        over > 0,
        "a diode-only 12 V block cranked at 70 rpm for five minutes is pushed past its limit"
    );
    assert!((num(&report, "overcharge_probability") - over as f64 / 6.0).abs() < 1e-12);
}

#[test]
fn montecarlo_refuses_zero_runs() {
    let wd = WorkDir::new();
    let err = run_code(&wd, &["montecarlo", "--runs", "0"], 2);
    assert!(err.contains("--runs") && err.contains("1 ..="), "{err}");
    assert!(!wd.path("outputs").exists());
}

// ---------------------------------------------------------------------------------------------
// check
// ---------------------------------------------------------------------------------------------

#[test]
fn check_json_is_valid_and_its_figures_follow_the_files() {
    let wd = WorkDir::new();
    let out = run_ok(&wd, &["check", "--json"]);
    let v: Value = serde_json::from_str(&out).unwrap_or_else(|e| panic!("not JSON: {e}\n{out}"));
    assert!(!wd.path("outputs").exists(), "check writes nothing");
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    let profile: ProfileFile = shipped("profiles/cranking/steady.ron");
    let n = total_ratio(&setup);
    let eta: f64 = setup.drive.stages.iter().map(|s| s.efficiency).product();
    let k_v_per_rpm = setup.generator.back_emf_v_per_krpm / 1000.0;

    assert!((num(&v, "drive.total_ratio") - n).abs() < 1e-12);
    // Open-circuit voltage is the back-EMF constant times generator speed.
    let cadence = profile.segments[0].cadence_rpm;
    let at = &v["at_profile_cadence"];
    assert!((num(at, "crank_rpm") - cadence).abs() < 1e-12);
    assert!((num(at, "open_circuit_v") - k_v_per_rpm * n * cadence).abs() < 1e-9);
    // The input limit is reached where the open-circuit voltage equals it.
    let v_ov = setup
        .converter
        .input_overvoltage_v
        .expect("demo sets input_overvoltage_v");
    let want = v_ov / (k_v_per_rpm * n);
    assert!((num(&v, "converter.input_limit_cadence_rpm") - want).abs() < 1e-9 * want);
    // Crank power = (E·I + friction and iron-loss power at the generator shaft) / drive
    // efficiency; the iron loss is k_h·(n/1000 rpm) + k_e·(n/1000 rpm)² as the file states it.
    let omega_g = cadence * n * std::f64::consts::PI / 30.0;
    let friction_w = setup.drive.coulomb_friction_n_m * omega_g
        + setup.drive.viscous_friction_n_m_s * omega_g * omega_g;
    let krpm = cadence * n / 1000.0;
    let iron_w = setup.generator.hysteresis_loss_w_per_krpm * krpm
        + setup.generator.eddy_loss_w_per_krpm2 * krpm * krpm;
    assert!(iron_w > 0.0, "the demo states its iron loss");
    let want_p =
        (num(at, "open_circuit_v") * num(at, "generator_current_a") + friction_w + iron_w) / eta;
    assert!(
        (num(at, "crank_power_w") - want_p).abs() < 1e-6 * want_p,
        "{at}"
    );
    assert!(num(at, "crank_power_w") > num(at, "battery_v") * num(at, "battery_current_a"));
    // Source: DESIGN.md §2 and common Li-ion practice: CV 4.20 V per NMC cell, times N_s.
    let limit = 4.20 * f64::from(setup.battery.cells_series);
    assert!((num(&v, "battery.charge_limit_at_ambient_v") - limit).abs() < 1e-9);
    // Holding the charge current with the battery at its CV voltage needs at least the cadence
    // that holds it at the lower start voltage, which needs at least the unlock cadence.
    let unlock = num(&v, "converter.unlock_cadence_rpm");
    let start = num(&v, "converter.regulation_cadence_at_start_rpm");
    let cv = num(&v, "converter.regulation_cadence_at_cv_rpm");
    assert!(
        0.0 < unlock && unlock <= start && start <= cv,
        "{unlock} {start} {cv}"
    );
    let cautions = v["cautions"].as_array().expect("cautions list");
    assert!(cautions.len() >= 3);
    assert!(cautions
        .iter()
        .all(|c| c.as_str().is_some_and(|s| !s.is_empty())));

    // The network sees only the generator speed: doubling the first ratio halves every cadence.
    let out2 = run_ok(
        &wd,
        &["check", "--json", "--set", "drive.stages.0.ratio=10"],
    );
    let v2: Value = serde_json::from_str(&out2).expect("JSON");
    for key in [
        "converter.regulation_cadence_at_start_rpm",
        "converter.regulation_cadence_at_cv_rpm",
        "converter.input_limit_cadence_rpm",
    ] {
        let (a, b) = (num(&v, key), num(&v2, key));
        assert!((b - a / 2.0).abs() < 0.01, "{key}: {a} then {b}");
    }
}

#[test]
fn check_counts_the_input_floor_in_its_regulation_cadences() {
    // A charger that trims its current to keep its input above a floor only holds its full
    // current where the input stays above the floor at that current: a higher floor needs a
    // faster crank, and the first figure can never be below the cadence whose open circuit
    // reaches the floor (the input is the EMF less the source drops).
    let wd = WorkDir::new();
    let figures = |sets: &[&str]| -> (f64, f64) {
        let mut args = vec!["check", "--json"];
        for s in sets {
            args.extend(["--set", s]);
        }
        let v: Value = serde_json::from_str(&run_ok(&wd, &args)).expect("JSON");
        (
            num(&v, "converter.regulation_cadence_at_start_rpm"),
            num(&v, "generator.open_circuit_v_per_crank_rpm"),
        )
    };
    let (none, v_per_rpm) = figures(&[]);
    let (low, _) = figures(&["converter.input_floor_v=10.5"]);
    let (f14, _) = figures(&["converter.input_floor_v=14"]);
    let (f16, _) = figures(&["converter.input_floor_v=16"]);
    assert!(
        (low - none).abs() < 0.01,
        "a floor at UVLO-off changes nothing: {low} vs {none}"
    );
    assert!(f14 > none + 1.0, "14 V floor {f14} vs none {none}");
    assert!(f16 > f14 + 1.0, "16 V floor {f16} vs 14 V {f14}");
    assert!(f16 >= 16.0 / v_per_rpm, "{f16} rpm vs open circuit at 16 V");
}

#[test]
fn a_session_below_the_checked_cadence_is_held_at_its_floor_out_of_regulation() {
    // `check` holds a floored charger in regulation only where it passes its full current with
    // the input above the floor; a session cranked steadily (no jitter) a few rpm below that
    // cadence spends its time trimmed at the floor and out of regulation, and one above it is
    // regulating once spun up. The static solve and the time-domain session must agree.
    let wd = WorkDir::new();
    let floor = "converter.input_floor_v=14";
    let v: Value =
        serde_json::from_str(&run_ok(&wd, &["check", "--json", "--set", floor])).expect("JSON");
    let need = num(&v, "converter.regulation_cadence_at_start_rpm");
    let session = |rpm: f64, out: &str| -> (f64, Vec<String>) {
        let cadence = format!("profile.segments.0.cadence_rpm={rpm}");
        run_ok(
            &wd,
            &[
                "run",
                "demo",
                "--duration",
                "60",
                "--no-plot",
                "-q",
                "--set",
                floor,
                "--set",
                "profile.jitter.enabled=false",
                "--set",
                &cadence,
                "--out",
                out,
            ],
        );
        let dir = wd.path(out);
        let summary = read_json(&dir.join("summary.json"));
        let (header, rows) = read_csv(&dir.join("events.csv"));
        let losses = text_col(&header, &rows, "kind")
            .into_iter()
            .zip(text_col(&header, &rows, "detail"))
            .filter(|(k, _)| k == "regulation_loss")
            .map(|(_, d)| d)
            .collect();
        (num(&summary, "in_regulation_fraction"), losses)
    };
    let (below, losses) = session(need - 6.0, "below");
    assert!(
        below < 0.05,
        "{below} in regulation {} rpm under {need}",
        6.0
    );
    assert!(!losses.is_empty());
    assert!(
        losses.iter().all(|d| d.contains("14.00 V floor")),
        "{losses:?}"
    );
    let (above, _) = session(need + 8.0, "above");
    assert!(above > 0.9, "{above} in regulation 8 rpm over {need}");
}

#[test]
fn check_names_a_lossy_buck_boosts_fold_short_of_its_current() {
    // The shipped buck-boost passes its charge current at its floor well before its output folds
    // over; with half an ohm in each switch it cannot (the fold's current is short of 2 A), and
    // `check` says so, with the fold's duty below D_max.
    let wd = WorkDir::new();
    let notes = |sets: &[&str]| check_notes(&wd, "demo-buck-boost", sets);
    assert!(!notes(&[]).iter().any(|n| n.contains("fold")));
    let lossy = notes(&["converter.switch_resistance_ohm=0.5"]);
    let fold = lossy
        .iter()
        .find(|n| n.contains("fold"))
        .unwrap_or_else(|| panic!("no fold note in {lossy:?}"));
    assert!(fold.contains("short of its 2.000 A"), "{fold}");
    assert!(fold.contains("9.50 V"), "{fold}");
}

#[test]
fn check_warns_of_a_set_point_past_the_charge_limit() {
    // Source: Battery University BU-409 (REFERENCES.md): 4.20 V/cell ± 50 mV for NMC, so the
    // demo's 3S pack allows 12.60 V + 0.15 V: 13.0 V is past it, 12.70 V within the tolerance.
    let wd = WorkDir::new();
    let notes = |set: &str| check_notes(&wd, "demo", &[set]);
    let past = notes("converter.cv_setpoint_v=13.0");
    assert!(
        past.iter()
            .any(|n| n.contains("set point 13.000 V") && n.contains("overcharge")),
        "{past:?}"
    );
    let within = notes("converter.cv_setpoint_v=12.70");
    assert!(
        !within.iter().any(|n| n.contains("set point")),
        "{within:?}"
    );
}

#[test]
fn montecarlo_counts_a_charger_set_past_the_limit_as_overcharging_every_run() {
    // The set-point flag has no row of its own: the population's overcharge share must still
    // count it (a design that overcharges every operator's battery once full is not at 0 %).
    // Source: Battery University BU-409 (REFERENCES.md): 4.20 V/cell ± 50 mV, so 13 V on the
    // demo's 3S pack is past its limit.
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "montecarlo",
            "demo",
            "--runs",
            "4",
            "--duration",
            "30",
            "-q",
            "--set",
            "converter.cv_setpoint_v=13",
            "--out",
            "mc",
        ],
    );
    let r = read_json(&wd.path("mc/montecarlo.json"));
    assert_eq!(num(&r, "overcharge_probability"), 1.0);
}

#[test]
fn check_prints_figures_and_the_cautions() {
    let wd = WorkDir::new();
    let out = run_ok(&wd, &["check"]);
    for s in [
        "input limit",
        "open-circuit voltage",
        "crank torque",
        "charge limit",
        "Cautions",
        "vent",
        "certified charge controller",
        "battery management system",
        "local electrical codes",
        "battery maker",
        "pinch points",
    ] {
        assert!(out.contains(s), "check output lacks `{s}`:\n{out}");
    }
    let la = run_ok(&wd, &["check", "lead-acid-direct"]);
    assert!(la.contains("hydrogen"), "{la}");
    assert!(la.contains("nothing but the operator"), "{la}");
}

#[test]
fn check_of_a_diode_only_design_gives_its_own_cadences() {
    let wd = WorkDir::new();
    let out = run_ok(&wd, &["check", "lead-acid-direct", "--json"]);
    let v: Value = serde_json::from_str(&out).expect("JSON");
    assert!(v["converter"].is_null());
    let setup: SetupFile = shipped("profiles/setups/lead-acid-direct.ron");
    let n = total_ratio(&setup);
    let k_v_per_rpm = setup.generator.back_emf_v_per_krpm / 1000.0;
    let conduct = num(&v, "direct.conduction_cadence_rpm");
    let limit = num(&v, "direct.charge_limit_cadence_rpm");
    // Current flows only once the EMF is above the battery's rest voltage, and the terminal
    // voltage only rises to the charge limit at a higher cadence still.
    let rest_cadence = num(&v, "battery.rest_v_at_start") / (k_v_per_rpm * n);
    assert!(
        rest_cadence < conduct && conduct < limit,
        "{rest_cadence} {conduct} {limit}"
    );

    // Common practice: lead-acid limits fall by the compensation coefficient per °C per cell.
    let coef = setup
        .battery
        .temp_comp_mv_per_c_per_cell
        .expect("coefficient")
        * 1e-3;
    let warm = run_ok(
        &wd,
        &[
            "check",
            "lead-acid-direct",
            "--json",
            "--set",
            "ambient_c=35",
        ],
    );
    let v35: Value = serde_json::from_str(&warm).expect("JSON");
    let drop = num(&v35, "battery.charge_limit_at_ambient_v")
        - num(&v, "battery.charge_limit_at_ambient_v");
    let want = coef * 10.0 * f64::from(setup.battery.cells_series);
    assert!(
        (drop - want).abs() < 1e-9,
        "limit change {drop} V, expected {want} V"
    );
}

#[test]
fn check_bad_input_exits_2_naming_the_problem() {
    let wd = WorkDir::new();
    let err = run_code(&wd, &["check", "--set", "generator.resistance_ohm=-1"], 2);
    assert!(err.contains("generator.resistance_ohm"), "{err}");
    let err = run_code(&wd, &["check", "no-such-setup.ron"], 2);
    assert!(err.contains("no-such-setup.ron"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// fit-generator
// ---------------------------------------------------------------------------------------------

/// Writes a measurement file from chosen k_e (V/krpm) and R (Ω), with Gaussian noise of
/// `noise_v` (seeded). V = k_e·rpm/1000 − R·I.
fn synthetic(wd: &WorkDir, name: &str, ke_v_per_krpm: f64, r_ohm: f64, noise_v: f64, seed: u64) {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, noise_v.max(f64::MIN_POSITIVE)).expect("normal");
    let mut text = String::from("# synthetic points for a test\nrpm,voltage_v,current_a\n");
    for rpm in [400.0, 800.0, 1200.0, 1600.0, 2000.0, 2400.0, 2800.0] {
        for i in [0.0, 0.4, 0.9, 1.6, 2.5] {
            let e: f64 = if noise_v > 0.0 {
                noise.sample(&mut rng)
            } else {
                0.0
            };
            let v = ke_v_per_krpm * rpm / 1000.0 - r_ohm * i + e;
            text.push_str(&format!("{rpm},{v:e},{i}\n"));
        }
    }
    std::fs::write(wd.path(name), text).expect("write measurements");
}

/// The number after `key:` on the RON fragment's line.
fn fragment_value(stdout: &str, key: &str) -> f64 {
    let line = stdout
        .lines()
        .find(|l| l.trim_start().starts_with(&format!("{key}:")))
        .unwrap_or_else(|| panic!("no `{key}:` line:\n{stdout}"));
    line.split(':')
        .nth(1)
        .expect("value")
        .trim()
        .trim_end_matches(',')
        .parse()
        .expect("number")
}

#[test]
fn fit_recovers_exact_synthetic_generator() {
    let wd = WorkDir::new();
    let (ke, r) = (9.5, 2.2);
    synthetic(&wd, "exact.csv", ke, r, 0.0, 0);
    let out = run_ok(&wd, &["fit-generator", "exact.csv", "--json"]);
    let v: Value = serde_json::from_str(&out).unwrap_or_else(|e| panic!("not JSON: {e}\n{out}"));
    assert!(
        (num(&v, "back_emf_v_per_krpm") - ke).abs() < 1e-9 * ke,
        "{v}"
    );
    assert!((num(&v, "resistance_ohm") - r).abs() < 1e-9 * r, "{v}");
    assert!(num(&v, "rms_residual_v") < 1e-9);
    assert_eq!(v["n"].as_u64(), Some(35));
}

#[test]
fn fit_recovers_noisy_synthetic_generator_within_2_percent() {
    let wd = WorkDir::new();
    let (ke, r) = (14.0, 1.3);
    synthetic(&wd, "noisy.csv", ke, r, 0.05, 2024);
    let out = run_ok(&wd, &["fit-generator", "noisy.csv", "--json"]);
    let v: Value = serde_json::from_str(&out).expect("JSON");
    let (ke_fit, r_fit) = (num(&v, "back_emf_v_per_krpm"), num(&v, "resistance_ohm"));
    assert!((ke_fit - ke).abs() < 0.02 * ke, "k_e {ke_fit}");
    assert!((r_fit - r).abs() < 0.02 * r, "R {r_fit}");
    // The standard errors are honest: the chosen values lie within a few of them.
    let (ke_se, r_se) = (
        num(&v, "back_emf_se_v_per_krpm"),
        num(&v, "resistance_se_ohm"),
    );
    assert!(ke_se > 0.0 && r_se > 0.0);
    assert!((ke_fit - ke).abs() < 5.0 * ke_se, "k_e {ke_fit} ± {ke_se}");
    assert!((r_fit - r).abs() < 5.0 * r_se, "R {r_fit} ± {r_se}");
    // The rms residual estimates the noise level.
    let rms = num(&v, "rms_residual_v");
    assert!(rms > 0.025 && rms < 0.1, "rms {rms}");

    // The text form prints the same numbers as a RON fragment.
    let text = run_ok(&wd, &["fit-generator", "noisy.csv"]);
    assert!(text.contains("generator: ("), "{text}");
    assert!((fragment_value(&text, "back_emf_v_per_krpm") - ke_fit).abs() < 1e-3);
    assert!((fragment_value(&text, "resistance_ohm") - r_fit).abs() < 1e-4);
    assert!(text.contains('±'), "standard errors printed:\n{text}");
}

#[test]
fn fit_refers_a_warm_resistance_to_20_c() {
    let wd = WorkDir::new();
    synthetic(&wd, "warm.csv", 10.0, 2.0, 0.0, 0);
    let out = run_ok(
        &wd,
        &["fit-generator", "warm.csv", "--json", "--winding-c", "45"],
    );
    let v: Value = serde_json::from_str(&out).expect("JSON");
    // Common practice: copper's resistance rises by 0.393 %/K near 20 °C.
    let want = 2.0 / (1.0 + 0.00393 * 25.0);
    assert!((num(&v, "resistance_ohm") - want).abs() < 1e-9, "{v}");
}

#[test]
fn fit_bad_measurements_exit_2_naming_the_problem() {
    let wd = WorkDir::new();
    let cases: [(&str, &str, &[&str]); 7] = [
        (
            "few.csv",
            "rpm,voltage_v,current_a\n1000,10,0\n2000,19,1\n",
            &["2 measurement point", "at least 3"],
        ),
        (
            "cols.csv",
            "rpm,volts,current_a\n1000,10,0\n",
            &["voltage_v"],
        ),
        (
            "word.csv",
            "rpm,voltage_v,current_a\n1000,10,0\n2000,ten,1\n3000,30,0\n",
            &["word.csv:3", "voltage_v", "ten"],
        ),
        (
            "same.csv",
            "rpm,voltage_v,current_a\n1000,10,1\n2000,20,1\n3000,30,1\n",
            &["same current"],
        ),
        (
            "still.csv",
            "rpm,voltage_v,current_a\n0,0,0\n0,-1,1\n0,-2,2\n",
            &["zero speed"],
        ),
        (
            "neg.csv",
            "rpm,voltage_v,current_a\n1000,10,0\n-2000,20,1\n3000,30,0\n",
            &["neg.csv:3", "rpm", "negative"],
        ),
        (
            "load.csv",
            "rpm,voltage_v,current_a\n1000,10,1\n2000,20,2\n3000,30,3\n",
            &["proportional"],
        ),
    ];
    for (name, text, expect) in cases {
        std::fs::write(wd.path(name), text).expect("write");
        let err = run_code(&wd, &["fit-generator", name], 2);
        for e in expect {
            assert!(err.contains(e), "{name}: stderr lacks `{e}`:\n{err}");
        }
    }
    let err = run_code(&wd, &["fit-generator", "missing.csv"], 2);
    assert!(err.contains("missing.csv"), "{err}");
}
