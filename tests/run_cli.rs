//! `crankcharge run` on the real binary: the demo's contract files, physics checks on the trace,
//! `--set` cadence and ambient overrides, bad input, atomic outputs, determinism and exit codes.
//!
//! Parameters the checks need (k_e, resistance, ratios, compensation coefficient, operator
//! capacities) are read from the shipped RON files here, with the `ron` crate into small structs
//! of this file, never through the crate's own scenario code.

use std::collections::BTreeMap;
use std::path::Path;
use std::time::Duration;

use serde::Deserialize;
use serde_json::Value;

use crate::common::{column, read_csv, repo, run_code, run_ok, WorkDir, RUN_FILES};

// ---------------------------------------------------------------------------------------------
// Helpers
// ---------------------------------------------------------------------------------------------

/// The contract's trace columns, in order (DESIGN §4).
const TRACE_COLUMNS: [&str; 16] = [
    "time_s",
    "crank_rpm",
    "target_rpm",
    "generator_rpm",
    "emf_v",
    "generator_current_a",
    "input_v",
    "duty",
    "output_v",
    "battery_v",
    "battery_current_a",
    "soc",
    "battery_temp_c",
    "operator_power_w",
    "mode",
    "charge_limit_v",
];

/// The contract's events.csv columns, in order.
const EVENT_COLUMNS: [&str; 10] = [
    "kind",
    "start_s",
    "end_s",
    "duration_s",
    "quantity",
    "unit",
    "threshold",
    "worst",
    "affects_verdict",
    "detail",
];

/// The contract's summary.json keys.
const SUMMARY_KEYS: [&str; 23] = [
    "setup",
    "profile",
    "seed",
    "duration_s",
    "fidelity",
    "soc_start",
    "soc_end",
    "charge_delivered_ah",
    "energy_to_battery_wh",
    "operator_work_j",
    "mean_operator_power_w",
    "peak_operator_power_w",
    "in_regulation_fraction",
    "regulation_loss_s",
    "overcharge_s",
    "max_battery_v",
    "charge_limit_v",
    "energy_balance_error",
    "alerts",
    "verdict",
    "wall_time_s",
    "overcharge_margin_v",
    "cadence_margin_rpm",
];

/// Copper's temperature coefficient of resistance near 20 °C, 1/K.
// Source: Dellinger, "The temperature coefficient of resistance of copper", Bulletin of the
// Bureau of Standards 7(1), 1911: annealed copper, α20 = 0.00393 /K.
const COPPER_ALPHA_PER_K: f64 = 0.00393;

/// The parts of a setup file these tests need (other fields are ignored).
#[derive(Debug, Deserialize)]
struct SetupFile {
    drive: DriveFile,
    generator: GeneratorFile,
    battery: BatteryFile,
}

#[derive(Debug, Deserialize)]
struct DriveFile {
    stages: Vec<StageFile>,
    freewheel: bool,
}

#[derive(Debug, Deserialize)]
struct StageFile {
    ratio: f64,
}

#[derive(Debug, Deserialize)]
struct GeneratorFile {
    back_emf_v_per_krpm: f64,
    resistance_ohm: f64,
    #[serde(default)]
    brush_drop_v: f64,
    /// The file must state it for the checks that use it (the product's default is not read).
    #[serde(default)]
    back_emf_tempco_pct_per_k: Option<f64>,
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
    operator: OperatorFile,
    jitter: JitterFile,
}

#[derive(Debug, Deserialize)]
struct OperatorFile {
    max_cadence_rpm: f64,
    peak_power_w: f64,
    critical_power_w: f64,
    w_prime_j: f64,
}

#[derive(Debug, Deserialize)]
struct JitterFile {
    ripple_fraction: f64,
}

/// Reads a shipped RON file of the repository into one of the small structs above.
fn shipped<T: for<'de> Deserialize<'de>>(rel: &str) -> T {
    let path = repo().join(rel);
    let text =
        std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("read {}: {e}", path.display()));
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str(&text)
        .unwrap_or_else(|e| panic!("parse {} with the test's own structs: {e}", path.display()))
}

/// A trace.csv read into memory.
struct Trace {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
}

impl Trace {
    fn read(dir: &Path) -> Self {
        let (header, rows) = read_csv(&dir.join("trace.csv"));
        assert!(!rows.is_empty(), "empty trace in {}", dir.display());
        Self { header, rows }
    }

    fn col(&self, name: &str) -> Vec<f64> {
        column(&self.header, &self.rows, name)
    }

    fn text(&self, name: &str) -> Vec<String> {
        let k = self
            .header
            .iter()
            .position(|h| h == name)
            .unwrap_or_else(|| panic!("no column {name}"));
        self.rows.iter().map(|r| r[k].clone()).collect()
    }
}

/// An events.csv row.
#[derive(Debug)]
struct Event {
    kind: String,
    start_s: f64,
    end_s: f64,
    duration_s: f64,
    threshold: f64,
    worst: f64,
    affects_verdict: bool,
}

fn read_events(dir: &Path) -> Vec<Event> {
    let (header, rows) = read_csv(&dir.join("events.csv"));
    assert_eq!(header, EVENT_COLUMNS, "events.csv header");
    let num = |r: &Vec<String>, k: usize| -> f64 {
        r[k].parse::<f64>()
            .unwrap_or_else(|_| panic!("events.csv {}: not a number: {}", EVENT_COLUMNS[k], r[k]))
    };
    rows.iter()
        .map(|r| Event {
            kind: r[0].clone(),
            start_s: num(r, 1),
            end_s: num(r, 2),
            duration_s: num(r, 3),
            threshold: num(r, 6),
            worst: num(r, 7),
            affects_verdict: match r[8].as_str() {
                "true" => true,
                "false" => false,
                other => panic!("events.csv affects_verdict: not a boolean: {other}"),
            },
        })
        .collect()
}

fn read_summary(dir: &Path) -> Value {
    let p = dir.join("summary.json");
    let text = std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("read {}: {e}", p.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("parse {}: {e}", p.display()))
}

fn num(summary: &Value, key: &str) -> f64 {
    summary[key]
        .as_f64()
        .unwrap_or_else(|| panic!("summary.json `{key}` is not a number: {}", summary[key]))
}

/// The verdict as a list of words (`"ok"` or a list of flags).
fn verdict_words(summary: &Value) -> Vec<String> {
    match &summary["verdict"] {
        Value::String(s) => vec![s.clone()],
        Value::Array(a) => a
            .iter()
            .map(|v| v.as_str().expect("verdict list of strings").to_string())
            .collect(),
        other => panic!("verdict is neither a word nor a list: {other}"),
    }
}

/// Trapezoid integral of `y` over `t`.
fn trapezoid(t: &[f64], y: &[f64]) -> f64 {
    t.windows(2)
        .zip(y.windows(2))
        .map(|(tw, yw)| (tw[1] - tw[0]) * 0.5 * (yw[0] + yw[1]))
        .sum()
}

/// Every file of a folder (recursively) by relative path, with its bytes.
fn snapshot(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<String, Vec<u8>>) {
        for entry in std::fs::read_dir(dir).expect("read_dir") {
            let p = entry.expect("entry").path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                let rel = p.strip_prefix(root).unwrap().display().to_string();
                out.insert(rel, std::fs::read(&p).expect("read file"));
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, dir, &mut out);
    out
}

/// The demo session of 600 s (no charts), run in a fresh work dir; returns the dir and its run folder.
fn demo_600(extra: &[&str]) -> (WorkDir, std::path::PathBuf) {
    let wd = WorkDir::new();
    let mut args = vec!["run", "--no-plot", "--out", "outputs/d"];
    args.extend_from_slice(extra);
    run_ok(&wd, &args);
    let d = wd.path("outputs/d");
    (wd, d)
}

fn assert_refusal_keeps(prepare: impl Fn(&WorkDir), bad: &[&str], expect_in_stderr: &[&str]) {
    let wd = WorkDir::new();
    prepare(&wd);
    run_ok(&wd, &["run", "--duration", "120", "--out", "outputs/keep"]);
    let before = snapshot(&wd.path("outputs/keep"));
    assert!(
        before.contains_key("trace.csv") && before.contains_key("session.png"),
        "first run wrote {:?}",
        before.keys().collect::<Vec<_>>()
    );
    let mut args = bad.to_vec();
    args.extend_from_slice(&["--duration", "120", "--out", "outputs/keep"]);
    let stderr = run_code(&wd, &args, 2);
    for needle in expect_in_stderr {
        assert!(
            stderr.contains(needle),
            "stderr of {args:?} should name `{needle}`:\n{stderr}"
        );
    }
    assert!(
        !stderr.contains("panicked"),
        "panic on bad input:\n{stderr}"
    );
    let after = snapshot(&wd.path("outputs/keep"));
    assert_eq!(
        before.keys().collect::<Vec<_>>(),
        after.keys().collect::<Vec<_>>(),
        "the refused run changed the file list of outputs/keep"
    );
    for (name, bytes) in &before {
        assert!(
            after[name] == *bytes,
            "the refused run changed outputs/keep/{name}"
        );
    }
    // No half-written sibling folders left behind either.
    let leftovers: Vec<_> = std::fs::read_dir(wd.path("outputs"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n != "keep")
        .collect();
    assert!(leftovers.is_empty(), "left in outputs/: {leftovers:?}");
}

// ---------------------------------------------------------------------------------------------
// The demo run and its contract files
// ---------------------------------------------------------------------------------------------

#[test]
fn demo_run_writes_every_contract_file() {
    let wd = WorkDir::new();
    let stdout = run_ok(&wd, &["run"]);
    let d = wd.path("outputs/demo");
    for f in RUN_FILES {
        let len = std::fs::metadata(d.join(f))
            .unwrap_or_else(|e| panic!("outputs/demo/{f} missing: {e}\nstdout:\n{stdout}"))
            .len();
        assert!(len > 0, "outputs/demo/{f} is empty");
    }
    let png = std::fs::read(d.join("session.png")).unwrap();
    // Source: the PNG specification (ISO/IEC 15948), §5.2: the eight-byte file signature.
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n", "session.png is not a PNG");
    let svg = wd.read("outputs/demo/session.svg");
    assert!(svg.contains("<svg"), "session.svg has no <svg element");

    let s = read_summary(&d);
    for key in SUMMARY_KEYS {
        assert!(s.get(key).is_some(), "summary.json lacks `{key}`");
    }
    assert!(
        (num(&s, "duration_s") - 600.0).abs() < 1e-9,
        "duration {}",
        s["duration_s"]
    );
    assert_eq!(s["fidelity"], "fast");
    assert!(s["alerts"].is_array(), "alerts is not a list");
}

#[test]
fn demo_trace_has_contract_columns_and_a_full_grid() {
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    assert!(tr.header.len() >= 16, "only {} columns", tr.header.len());
    assert_eq!(
        &tr.header[..16],
        &TRACE_COLUMNS[..],
        "first 16 trace columns"
    );

    let t = tr.col("time_s");
    assert!(t[0].abs() < 1e-9, "first row at {} s", t[0]);
    for w in t.windows(2) {
        assert!(
            (w[1] - w[0] - 0.1).abs() < 1e-6,
            "grid step {} s between {} and {}",
            w[1] - w[0],
            w[0],
            w[1]
        );
    }
    assert!(
        (t[t.len() - 1] - 600.0).abs() < 1e-6,
        "last row at {} s",
        t[t.len() - 1]
    );
    assert_eq!(t.len(), 6001, "rows of a 600-s trace on a 0.1-s grid");

    // The last row is a real sample, not an extrapolation: it continues its neighbours smoothly.
    let soc = tr.col("soc");
    let n = soc.len();
    let step_last = soc[n - 1] - soc[n - 2];
    let step_before = soc[n - 2] - soc[n - 3];
    assert!(
        (step_last - step_before).abs() <= 1e-4,
        "soc jumps at the last row: {step_before:e} then {step_last:e}"
    );
}

#[test]
fn demo_outputs_hold_no_non_finite_number() {
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    for (i, row) in tr.rows.iter().enumerate() {
        for (h, cell) in tr.header.iter().zip(row) {
            if h == "mode" {
                assert!(!cell.is_empty(), "row {i}: empty mode");
                continue;
            }
            let v: f64 = cell
                .parse()
                .unwrap_or_else(|_| panic!("row {i} column {h}: not a number: {cell:?}"));
            assert!(v.is_finite(), "row {i} column {h}: {cell}");
        }
    }
    for e in read_events(&d) {
        for v in [e.start_s, e.end_s, e.duration_s] {
            assert!(v.is_finite(), "event {e:?}");
        }
    }
    // serde_json writes NaN and infinities as null, so a null anywhere means a non-finite value.
    fn walk(v: &Value, path: &str) {
        match v {
            Value::Null => panic!("summary.json {path} is null (a non-finite number?)"),
            Value::Number(n) => assert!(
                n.as_f64().is_some_and(f64::is_finite),
                "summary.json {path} = {n}"
            ),
            Value::Array(a) => a
                .iter()
                .enumerate()
                .for_each(|(i, x)| walk(x, &format!("{path}[{i}]"))),
            Value::Object(m) => m.iter().for_each(|(k, x)| walk(x, &format!("{path}.{k}"))),
            _ => {}
        }
    }
    walk(&read_summary(&d), "");
}

// ---------------------------------------------------------------------------------------------
// Physics checks on the demo trace (parameters from profiles/setups/demo.ron)
// ---------------------------------------------------------------------------------------------

#[test]
fn trace_emf_is_back_emf_constant_times_speed() {
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    let ke_v_per_rpm = setup.generator.back_emf_v_per_krpm / 1000.0;
    let tempco = setup
        .generator
        .back_emf_tempco_pct_per_k
        .expect("demo.ron states its magnets' temperature coefficient");
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let rpm = tr.col("generator_rpm");
    let emf = tr.col("emf_v");
    let t_wind = tr.col("winding_temp_c");
    let mut checked = 0;
    let mut warmest: f64 = 20.0;
    for (i, (&n, &e)) in rpm.iter().zip(&emf).enumerate() {
        // From memory: permanent magnets lose remanence, and a PMDC machine its k_e, linearly
        // with temperature near room temperature (magnet makers' data); the winding's
        // temperature stands in for the magnets' (the model's choice, stated in setup.rs).
        let expected = ke_v_per_rpm * n * (1.0 + tempco / 100.0 * (t_wind[i] - 20.0));
        warmest = warmest.max(t_wind[i]);
        if expected.abs() < 0.5 {
            continue; // below 0.5 V the printed digits dominate the ratio
        }
        checked += 1;
        assert!(
            (e - expected).abs() <= 0.005 * expected.abs(),
            "row {i}: emf {e} V vs k_e·n = {expected} V at {n} rpm"
        );
    }
    assert!(checked > 3000, "only {checked} rows with a measurable EMF");
    // The winding warmed enough for the coefficient to matter beyond the tolerance.
    assert!(
        (tempco / 100.0 * (warmest - 20.0)).abs() > 0.005,
        "winding only reached {warmest} °C"
    );
}

#[test]
fn trace_speed_ratio_is_the_product_of_the_stages() {
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    assert!(
        !setup.drive.freewheel,
        "this check needs the demo's freewheel off"
    );
    let ratio: f64 = setup.drive.stages.iter().map(|s| s.ratio).product();
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let crank = tr.col("crank_rpm");
    let gen = tr.col("generator_rpm");
    let mut checked = 0;
    for (i, (&c, &g)) in crank.iter().zip(&gen).enumerate() {
        if c.abs() < 5.0 {
            continue; // tiny speeds: printed digits dominate
        }
        checked += 1;
        let r = g / c;
        assert!(
            (r - ratio).abs() <= 0.005 * ratio,
            "row {i}: generator/crank = {g}/{c} = {r}, stages give {ratio}"
        );
    }
    assert!(checked > 3000, "only {checked} rows with the crank turning");
}

#[test]
fn trace_input_drop_is_a_diode_drop() {
    let setup: SetupFile = shipped("profiles/setups/demo.ron");
    let r20 = setup.generator.resistance_ohm;
    let brush_v = setup.generator.brush_drop_v;
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let emf = tr.col("emf_v");
    let vin = tr.col("input_v");
    let i_gen = tr.col("generator_current_a");
    let t_wind = tr.col("winding_temp_c");
    let mut checked = 0;
    for k in 0..emf.len() {
        // The diode blocks reverse current: the battery never drives the generator.
        assert!(
            i_gen[k] >= -1e-6,
            "row {k}: generator current {} A flows backwards",
            i_gen[k]
        );
        if i_gen[k] < 1.0 {
            continue;
        }
        checked += 1;
        let r = r20 * (1.0 + COPPER_ALPHA_PER_K * (t_wind[k] - 20.0));
        // The brushes take their full drop at these currents (it levels off above a few tenths
        // of an ampere).
        let drop = emf[k] - vin[k] - i_gen[k] * r - brush_v;
        // From memory: rectifier datasheets give Schottky 0.3–0.6 V and silicon at most 1.1 V
        // at about 1 A; 0–1.3 V leaves room for the series resistance at 2 A.
        assert!(
            (0.0..=1.3).contains(&drop),
            "row {k}: emf {} − input {} − {} A × {r:.4} Ω = {drop} V is not a diode drop",
            emf[k],
            vin[k],
            i_gen[k]
        );
    }
    assert!(checked > 3000, "only {checked} rows with current flowing");
}

#[test]
fn buck_never_steps_up_while_it_delivers() {
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let mode = tr.text("mode");
    let vin = tr.col("input_v");
    let vout = tr.col("output_v");
    let ibat = tr.col("battery_current_a");
    let duty = tr.col("duty");
    let mut checked = 0;
    for k in 0..vin.len() {
        if mode[k] == "lockout" || mode[k] == "direct" || ibat[k] <= 1e-3 {
            continue;
        }
        checked += 1;
        assert!(
            vout[k] <= vin[k] + 1e-4,
            "row {k} ({}): a buck delivering {} A puts out {} V from {} V",
            mode[k],
            ibat[k],
            vout[k],
            vin[k]
        );
        assert!((0.0..=1.0).contains(&duty[k]), "row {k}: duty {}", duty[k]);
    }
    assert!(
        checked > 3000,
        "only {checked} rows with the buck delivering"
    );
}

#[test]
fn buck_output_not_above_input_whenever_it_runs() {
    // The stricter reading: in every converter mode except lock-out, output_v ≤ input_v.
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let mode = tr.text("mode");
    let vin = tr.col("input_v");
    let vout = tr.col("output_v");
    let bad: Vec<String> = (0..vin.len())
        .filter(|&k| mode[k] != "lockout" && mode[k] != "direct" && vout[k] > vin[k] + 1e-4)
        .map(|k| {
            format!(
                "t={} {} in {} out {}",
                tr.rows[k][0], mode[k], vin[k], vout[k]
            )
        })
        .collect();
    assert!(bad.is_empty(), "{} rows step up: {:?}", bad.len(), bad);
}

#[test]
fn trace_integrals_match_the_summary() {
    let (_wd, d) = demo_600(&[]);
    let tr = Trace::read(&d);
    let s = read_summary(&d);
    let t = tr.col("time_s");
    let p_op = tr.col("operator_power_w");
    let vb = tr.col("battery_v");
    let ib = tr.col("battery_current_a");
    let p_bat: Vec<f64> = vb.iter().zip(&ib).map(|(v, i)| v * i).collect();

    let checks = [
        ("operator_work_j", trapezoid(&t, &p_op)),
        ("energy_to_battery_wh", trapezoid(&t, &p_bat) / 3600.0),
        ("charge_delivered_ah", trapezoid(&t, &ib) / 3600.0),
    ];
    for (key, from_trace) in checks {
        let reported = num(&s, key);
        assert!(reported > 0.0, "{key} = {reported}: the demo should charge");
        assert!(
            (from_trace - reported).abs() <= 0.02 * reported.abs(),
            "{key}: summary {reported} vs trapezoid of the trace {from_trace}"
        );
    }
    let err = num(&s, "energy_balance_error");
    assert!(err.abs() < 1e-3, "energy_balance_error {err}");
    // Peaks: `peak_operator_power_w` is the revolution-averaged power's, the instantaneous one
    // (ripple on top) has its own key.
    let mean = num(&s, "mean_operator_power_w");
    let peak = num(&s, "peak_operator_power_w");
    let peak_inst = num(&s, "peak_instant_operator_power_w");
    let p_max = p_op.iter().cloned().fold(f64::MIN, f64::max);
    let p_mean_max = tr
        .col("operator_mean_power_w")
        .into_iter()
        .fold(f64::MIN, f64::max);
    assert!(mean > 0.0 && mean <= peak, "mean {mean} W, peak {peak} W");
    assert!(
        (peak - p_mean_max).abs() < 0.01,
        "summary peak {peak} W vs trace max {p_mean_max} W"
    );
    assert!(
        (peak_inst - p_max).abs() < 0.01,
        "summary instantaneous peak {peak_inst} W vs trace max {p_max} W"
    );
    assert!(peak_inst > peak, "the ripple rides on the mean");
}

// ---------------------------------------------------------------------------------------------
// Cadence overrides
// ---------------------------------------------------------------------------------------------

/// Fraction of rows where the crank runs below 85 % of its target.
fn fraction_well_below(tr: &Trace) -> f64 {
    let c = tr.col("crank_rpm");
    let tg = tr.col("target_rpm");
    let n = c.iter().zip(&tg).filter(|(c, t)| **c < 0.85 * **t).count();
    n as f64 / c.len() as f64
}

#[test]
fn impossible_cadence_is_not_reached_and_effort_stays_in_the_envelope() {
    let profile: ProfileFile = shipped("profiles/cranking/steady.ron");
    let envelope_w = profile.operator.peak_power_w * (1.0 + profile.jitter.ripple_fraction);

    let wd = WorkDir::new();
    run_ok(
        &wd,
        &["run", "--duration", "120", "--no-plot", "--out", "o/base"],
    );
    run_ok(
        &wd,
        &[
            "run",
            "--duration",
            "120",
            "--no-plot",
            "--out",
            "o/fast",
            "--set",
            "profile.cadence_scale=4",
        ],
    );
    let base = Trace::read(&wd.path("o/base"));
    let fast = Trace::read(&wd.path("o/fast"));

    // The override took effect: the target is about four times the steady 70 rpm.
    let mut tg = fast.col("target_rpm");
    tg.sort_by(f64::total_cmp);
    let median_target = tg[tg.len() / 2];
    assert!(
        median_target > 200.0,
        "median target {median_target} rpm after cadence_scale=4"
    );

    let below_fast = fraction_well_below(&fast);
    let below_base = fraction_well_below(&base);
    assert!(
        below_base < 0.2,
        "at the normal target the operator should mostly keep up ({below_base:.2} below)"
    );
    assert!(
        below_fast > 0.5,
        "an impossible target should mostly be missed ({below_fast:.2} of rows well below)"
    );

    let crank = fast.col("crank_rpm");
    let max_crank = crank.iter().cloned().fold(f64::MIN, f64::max);
    assert!(
        max_crank <= profile.operator.max_cadence_rpm * 1.02,
        "crank reached {max_crank} rpm past the operator's {} rpm",
        profile.operator.max_cadence_rpm
    );
    let p = fast.col("operator_power_w");
    let p_max = p.iter().cloned().fold(f64::MIN, f64::max);
    assert!(
        p_max <= envelope_w,
        "operator power {p_max} W beyond peak × (1 + ripple) = {envelope_w} W"
    );
    let s = read_summary(&wd.path("o/fast"));
    assert!(num(&s, "peak_operator_power_w") <= envelope_w);
}

#[test]
fn revolution_averaged_power_stays_under_the_peak_while_the_ripple_rides_on_top() {
    // A hard case for the power cap: a direct lead-acid battery from SOC 0.3 (a heavy load) and
    // sprint-and-rest at 1.5× its cadence.
    let profile: ProfileFile = shipped("profiles/cranking/sprint-and-rest.ron");
    let peak_w = profile.operator.peak_power_w;
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "run",
            "lead-acid-direct",
            "--profile",
            "sprint-and-rest",
            "--no-plot",
            "--out",
            "o",
            "--set",
            "battery.soc_start=0.3",
            "--set",
            "profile.cadence_scale=1.5",
        ],
    );
    let tr = Trace::read(&wd.path("o"));
    let s = read_summary(&wd.path("o"));
    let mean = tr.col("operator_mean_power_w");
    let inst = tr.col("operator_power_w");
    let max_mean = mean.iter().cloned().fold(f64::MIN, f64::max);
    // The operator presses against the cap (the case tests something) …
    assert!(
        max_mean > 0.95 * peak_w,
        "mean power only reached {max_mean} W"
    );
    // … the revolution-averaged power never passes the configured peak …
    assert!(
        max_mean <= peak_w * (1.0 + 1e-9),
        "revolution-averaged power {max_mean} W above the peak {peak_w} W"
    );
    assert!(num(&s, "peak_operator_power_w") <= peak_w * (1.0 + 1e-9));
    // … while the instantaneous power, ripple on top, does, and says so under its own name.
    let max_inst = inst.iter().cloned().fold(f64::MIN, f64::max);
    assert!(max_inst > peak_w, "instantaneous peak {max_inst} W");
    assert!((num(&s, "peak_instant_operator_power_w") - max_inst).abs() < 1e-3);
    // The revolution average carries the work: its time integral is the ledger's operator work
    // (the trace's trapezoids on a 0.1-s grid against the integrated work, within 1 %).
    let t = tr.col("time_s");
    let work: f64 = (1..t.len())
        .map(|k| 0.5 * (mean[k] + mean[k - 1]) * (t[k] - t[k - 1]))
        .sum();
    let w = num(&s, "operator_work_j");
    assert!((work - w).abs() < 0.01 * w, "{work} J vs ledger {w} J");
}

#[test]
fn w_prime_stays_flat_when_the_operator_is_held_at_critical_power() {
    // Peak power set to CP: whatever W′ holds, the cap is CP, and a heavy load (a direct
    // lead-acid battery) at twice the steady cadence keeps the operator pressed against it, so
    // the revolution-averaged power sits at CP while the ripple swings the instantaneous power
    // 30 % either side.
    let profile: ProfileFile = shipped("profiles/cranking/steady.ron");
    let (cp, w0) = (
        profile.operator.critical_power_w,
        profile.operator.w_prime_j,
    );
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "run",
            "lead-acid-direct",
            "--no-plot",
            "--out",
            "o",
            "--set",
            &format!("profile.operator.peak_power_w={cp}"),
            "--set",
            "profile.cadence_scale=2",
        ],
    );
    let tr = Trace::read(&wd.path("o"));
    let mean = tr.col("operator_mean_power_w");
    let at_cp = mean.iter().filter(|p| (**p - cp).abs() < 1e-3 * cp).count();
    assert!(
        at_cp as f64 > 0.8 * mean.len() as f64,
        "only {at_cp} of {} rows at CP",
        mean.len()
    );
    let inst_max = tr
        .col("operator_power_w")
        .into_iter()
        .fold(f64::MIN, f64::max);
    assert!(inst_max > 1.2 * cp, "ripple peak {inst_max} W");
    // Source: Skiba et al., Med Sci Sports Exerc 44(8):1526–1532, 2012 — at P = CP the W′
    // balance neither drains nor recovers (REFERENCES §8): W′ stays within 1 % of full.
    let w_min = tr
        .col("w_prime_balance_j")
        .into_iter()
        .fold(f64::MAX, f64::min);
    assert!(w_min >= 0.99 * w0, "W′ fell to {w_min} J of {w0} J");
}

#[test]
fn the_overreach_operator_tires_by_itself_and_w_prime_follows_skiba() {
    // The shipped profile asks for one constant cadence; its operator's critical power is below
    // what the demo takes at that cadence.
    #[derive(Deserialize)]
    struct Overreach {
        segments: Vec<SegmentFile>,
        operator: OperatorFile,
    }
    #[derive(Deserialize)]
    struct SegmentFile {
        cadence_rpm: f64,
        #[serde(default)]
        end_cadence_rpm: Option<f64>,
    }
    let p: Overreach = shipped("profiles/cranking/overreach.ron");
    let target = p.segments[0].cadence_rpm;
    assert!(
        p.segments
            .iter()
            .all(|s| s.cadence_rpm == target && s.end_cadence_rpm.unwrap_or(target) == target),
        "overreach scripts no sag: one cadence throughout"
    );
    let (cp, w0) = (p.operator.critical_power_w, p.operator.w_prime_j);
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &["run", "--profile", "overreach", "--no-plot", "--out", "o"],
    );
    let tr = Trace::read(&wd.path("o"));
    let t = tr.col("time_s");
    let crank = tr.col("crank_rpm");
    let goal = tr.col("target_rpm");
    let p_mean = tr.col("operator_mean_power_w");
    let w = tr.col("w_prime_balance_j");
    let mean_over = |v: &[f64], a: f64, b: f64| {
        let sel: Vec<f64> = (0..t.len())
            .filter(|&k| t[k] >= a && t[k] < b)
            .map(|k| v[k])
            .collect();
        sel.iter().sum::<f64>() / sel.len() as f64
    };
    // Fresh, the operator holds the target (30–120 s) …
    let early = mean_over(&crank, 30.0, 120.0) / mean_over(&goal, 30.0, 120.0);
    assert!(early > 0.95, "early cadence only {early:.3} of the target");
    // … above critical power, so W′ runs down …
    assert!(
        mean_over(&p_mean, 30.0, 120.0) > cp,
        "early power not above CP"
    );
    let w_end = *w.last().expect("rows");
    assert!(w_end < 0.1 * w0, "W′ only fell to {w_end} J of {w0} J");
    // … and the cadence falls by itself in the last two minutes, with the target unchanged.
    let late = mean_over(&crank, 480.0, 600.0) / mean_over(&goal, 480.0, 600.0);
    assert!(late < 0.75, "late cadence still {late:.3} of the target");
    assert!(
        (mean_over(&goal, 480.0, 600.0) / mean_over(&goal, 30.0, 120.0) - 1.0).abs() < 0.05,
        "the target itself must not sag"
    );
    // Source: Skiba et al., Med Sci Sports Exerc 44(8):1526–1532, 2012 — the W′ balance in
    // differential form (REFERENCES §8), integrated here over the trace's revolution-averaged
    // power (0.1-s steps): it follows the product's W′ to within 1 % of W′0.
    let mut w_ref = w0;
    let mut worst: f64 = 0.0;
    for k in 1..t.len() {
        let p = p_mean[k - 1];
        let rate = if p > cp {
            if w_ref > 0.0 {
                -(p - cp)
            } else {
                0.0
            }
        } else {
            (w0 - w_ref) * (cp - p) / w0
        };
        w_ref += rate * (t[k] - t[k - 1]);
        worst = worst.max((w_ref - w[k]).abs());
    }
    assert!(
        worst < 0.01 * w0,
        "W′ differs from Skiba's balance by {worst} J"
    );
    // The exhausted reserve is reported.
    let events = read_events(&wd.path("o"));
    assert!(
        events.iter().any(|e| e.kind == "operator_overload"),
        "no operator_overload event"
    );
}

#[test]
fn slow_cranking_loses_regulation_and_the_events_add_up() {
    let wd = WorkDir::new();
    run_ok(
        &wd,
        &[
            "run",
            "--duration",
            "120",
            "--no-plot",
            "--out",
            "o/slow",
            "--set",
            "profile.cadence_scale=0.8",
        ],
    );
    let d = wd.path("o/slow");
    let s = read_summary(&d);
    let lost = num(&s, "regulation_loss_s");
    assert!(
        lost > 30.0,
        "regulation_loss_s {lost} s at 0.8 of the cadence"
    );
    assert!(
        num(&s, "in_regulation_fraction") < 0.75,
        "in_regulation_fraction {}",
        s["in_regulation_fraction"]
    );
    assert!(
        verdict_words(&s).iter().any(|w| w == "fails_regulation"),
        "verdict {:?}",
        s["verdict"]
    );

    // Default rules: each row lasts at least its dwell, rows of one kind lie further apart than
    // the merge gap, and the regulation rows count towards the verdict (it fails on them).
    let events = read_events(&d);
    let loss: Vec<&Event> = events
        .iter()
        .filter(|e| e.kind == "regulation_loss" || e.kind == "lockout")
        .collect();
    assert!(!loss.is_empty(), "no regulation_loss rows in events.csv");
    for e in &loss {
        assert!(
            (e.end_s - e.start_s - e.duration_s).abs() < 1e-3 && e.duration_s >= 0.1 - 1e-4,
            "row shorter than its dwell or inconsistent: {e:?}"
        );
        assert!(e.affects_verdict, "a failing run's regulation rows: {e:?}");
    }
    for kind in ["regulation_loss", "lockout"] {
        let of: Vec<&&Event> = loss.iter().filter(|e| e.kind == kind).collect();
        for w in of.windows(2) {
            assert!(
                w[1].start_s - w[0].end_s > 1.0 - 1e-3 || kind == "regulation_loss",
                "{kind} rows closer than the merge gap: {w:?}"
            );
        }
    }

    // With no dwell and no merge gap every run is a row: the regulation rows and the lock-out
    // rows (the cost of a lock-out is not written twice) then add up to the figure exactly.
    run_ok(
        &wd,
        &[
            "run",
            "--duration",
            "120",
            "--no-plot",
            "--out",
            "o/slow-raw",
            "--set",
            "profile.cadence_scale=0.8",
            "--set",
            "alerts.regulation_loss.dwell_s=0",
            "--set",
            "alerts.regulation_loss.merge_gap_s=0",
            "--set",
            "alerts.lockout.dwell_s=0",
            "--set",
            "alerts.lockout.merge_gap_s=0",
        ],
    );
    let d = wd.path("o/slow-raw");
    let raw = read_summary(&d);
    assert_eq!(
        num(&raw, "regulation_loss_s"),
        lost,
        "the figure does not depend on the rows"
    );
    let events = read_events(&d);
    let sum: f64 = events
        .iter()
        .filter(|e| e.kind == "regulation_loss" || e.kind == "lockout")
        .map(|e| e.duration_s)
        .sum();
    assert!(
        (sum - lost).abs() <= 1e-3,
        "regulation_loss_s {lost} vs sum of regulation and lock-out rows {sum}"
    );
    let raw_rows = events
        .iter()
        .filter(|e| e.kind == "regulation_loss" || e.kind == "lockout")
        .count();
    assert!(
        raw_rows > loss.len(),
        "the dwell and merge gap should have joined or dropped some runs: {raw_rows} vs {}",
        loss.len()
    );
    // The same rows in summary.json (the alerts list: they count towards the verdict), at
    // full precision.
    let sum_json: f64 = raw["alerts"]
        .as_array()
        .expect("alerts list")
        .iter()
        .filter(|a| a["kind"] == "regulation_loss" || a["kind"] == "lockout")
        .map(|a| a["duration_s"].as_f64().expect("duration_s"))
        .sum();
    assert!(
        (sum_json - lost).abs() <= 1e-6,
        "regulation_loss_s {lost} vs summary alerts {sum_json}"
    );
}

// ---------------------------------------------------------------------------------------------
// Lead-acid: temperature compensation and overcharge alerts
// ---------------------------------------------------------------------------------------------

#[test]
fn lead_acid_limit_follows_temperature_compensation() {
    let setup: SetupFile = shipped("profiles/setups/lead-acid-direct.ron");
    let coef_mv = setup
        .battery
        .temp_comp_mv_per_c_per_cell
        .expect("lead-acid setup gives temp_comp_mv_per_c_per_cell");
    let cells = f64::from(setup.battery.cells_series);
    // Source: Battery University BU-403 "Charging Lead Acid" (−3 mV/°C/cell) and flooded
    // deep-cycle charging guides (−5 mV/°C/cell); the test allows −2 … −6.
    assert!(
        (-6.0..=-2.0).contains(&coef_mv),
        "coefficient {coef_mv} mV/°C/cell"
    );
    let expected_drop_v = -coef_mv * 1e-3 * cells * 40.0;

    let wd = WorkDir::new();
    for a in ["0", "40"] {
        run_ok(
            &wd,
            &[
                "run",
                "lead-acid-direct",
                "--duration",
                "120",
                "--no-plot",
                "--out",
                &format!("o/a{a}"),
                "--set",
                &format!("ambient_c={a}"),
            ],
        );
    }
    let cold = Trace::read(&wd.path("o/a0")).col("charge_limit_v")[0];
    let warm = Trace::read(&wd.path("o/a40")).col("charge_limit_v")[0];
    assert!(
        ((cold - warm) - expected_drop_v).abs() < 2e-3,
        "limit {cold} V at 0 °C vs {warm} V at 40 °C: difference {} V, expected {expected_drop_v} V",
        cold - warm
    );
}

#[test]
fn overcharge_row_exactly_when_the_battery_stays_past_its_threshold() {
    let wd = WorkDir::new();
    let mut runs: Vec<(String, Vec<String>)> = Vec::new();
    for profile in ["steady", "tiring", "uneven", "sprint-and-rest", "overreach"] {
        for soc in ["0.9", "0.3"] {
            runs.push((
                format!("la-{profile}-{soc}"),
                [
                    "lead-acid-direct",
                    "--profile",
                    profile,
                    "--set",
                    &format!("battery.soc_start={soc}"),
                ]
                .map(String::from)
                .to_vec(),
            ));
        }
    }
    runs.push(("demo".into(), vec![]));
    let (mut with, mut without) = (0, 0);
    for (name, extra) in &runs {
        let out = format!("o/{name}");
        let mut args = vec!["run", "--duration", "120", "--no-plot", "--out", &out];
        args.extend(extra.iter().map(String::as_str));
        run_ok(&wd, &args);
        let d = wd.path(&out);
        let s = read_summary(&d);
        let rules = &s["alert_rules"]["overcharge"];
        let tolerance = rules["tolerance_v_per_cell"].as_f64().expect("tolerance");
        let dwell = rules["dwell_s"].as_f64().expect("dwell");
        let cells = if name.starts_with("la-") { 6.0 } else { 3.0 };
        let tr = Trace::read(&d);
        let vb = tr.col("battery_v");
        let lim = tr.col("charge_limit_v");
        // The longest stretch of trace samples past the threshold, s (0.1-s grid).
        let (mut run, mut longest) = (0usize, 0usize);
        for (v, l) in vb.iter().zip(&lim) {
            run = if *v > l + tolerance * cells {
                run + 1
            } else {
                0
            };
            longest = longest.max(run);
        }
        let held_s = 0.1 * longest.saturating_sub(1) as f64;
        let events = read_events(&d);
        let over: Vec<&Event> = events.iter().filter(|e| e.kind == "overcharge").collect();
        let verdict = verdict_words(&s);
        if held_s >= dwell + 0.1 {
            assert!(
                !over.is_empty(),
                "{name}: past the threshold for {held_s} s but no row"
            );
        }
        if longest == 0 {
            assert!(
                over.is_empty(),
                "{name}: a row but no sample past the threshold"
            );
        }
        for e in &over {
            assert!(
                e.duration_s >= dwell,
                "{name}: row shorter than the dwell {e:?}"
            );
            assert!(
                e.worst > e.threshold,
                "{name}: worst not past the threshold {e:?}"
            );
            assert!(
                e.affects_verdict,
                "{name}: overcharge rows decide the verdict"
            );
        }
        if verdict == ["ok"] {
            assert!(over.is_empty(), "{name}: verdict ok with overcharge rows");
        }
        if over.iter().any(|e| e.worst - e.threshold >= 0.05) {
            assert!(
                verdict.iter().any(|w| w == "overcharge"),
                "{name}: overcharge rows but verdict {verdict:?}"
            );
            assert!(num(&s, "overcharge_s") > 0.0, "{name}: overcharge_s");
            assert!(num(&s, "overcharge_margin_v") < 0.0, "{name}: margin");
            with += 1;
        } else {
            without += 1;
        }
    }
    assert!(
        with >= 2 && without >= 2,
        "the runs should include both cases: {with} with overcharge, {without} without"
    );
}

// ---------------------------------------------------------------------------------------------
// Bad input: exit 2, a message that points at the fault, previous outputs untouched
// ---------------------------------------------------------------------------------------------

#[test]
fn ron_syntax_error_exits_2_with_file_line_col_and_keeps_outputs() {
    let demo = std::fs::read_to_string(repo().join("profiles/setups/demo.ron")).unwrap();
    let (line_idx, line) = demo
        .lines()
        .enumerate()
        .find(|(_, l)| l.contains("ratio:"))
        .expect("demo has a ratio field");
    let line_no = line_idx + 1;
    let broken_line = line.replacen("ratio:", "ratio", 1);
    let broken = demo.replacen(line, &broken_line, 1);
    assert_ne!(broken, demo);
    let prepare = move |wd: &WorkDir| std::fs::write(wd.path("broken.ron"), &broken).unwrap();
    let wd = WorkDir::new();
    prepare(&wd);
    let stderr = run_code(&wd, &["run", "broken.ron", "--no-plot", "--out", "x"], 2);
    let at = format!("broken.ron:{line_no}:");
    let pos = stderr
        .find(&at)
        .unwrap_or_else(|| panic!("stderr should point at {at}<col>:\n{stderr}"));
    assert!(
        stderr[pos + at.len()..].starts_with(|c: char| c.is_ascii_digit()),
        "no column after {at}:\n{stderr}"
    );
    assert_refusal_keeps(prepare, &["run", "broken.ron"], &[&at]);
}

#[test]
fn negative_resistance_exits_2_naming_the_field_and_range() {
    assert_refusal_keeps(
        |_| {},
        &["run", "--set", "generator.resistance_ohm=-0.5"],
        &["generator.resistance_ohm", "-0.5", "allowed"],
    );
}

#[test]
fn new_loss_and_operator_keys_are_checked_with_their_paths_and_ranges() {
    // Each new key, set out of its range through --set, is refused with exit 2 naming its path,
    // the value and the allowed range; nothing is written.
    let cases: [(&str, &[&str], &str); 9] = [
        ("generator.back_emf_tempco_pct_per_k=0.5", &[], "-1 ..= 0"),
        ("generator.hysteresis_loss_w_per_krpm=-1", &[], "0 ..= 50"),
        ("generator.eddy_loss_w_per_krpm2=51", &[], "0 ..= 50"),
        ("generator.cogging_periods_per_rev=0", &[], "1 ..= 200"),
        ("converter.core_loss_w=11", &[], "0 ..= 10"),
        ("converter.gate_charge_c=1e-3", &[], "0 ..= 0.000001"),
        (
            "converter.buck_mode_max_duty=0.9",
            &["demo-buck-boost"],
            "max_duty − 0.01",
        ),
        ("converter.pass_shutdown_c=100", &["lfp-linear"], "> 120"),
        ("profile.jitter.ripple_peaks_per_rev=5", &[], "1 ..= 4"),
    ];
    let wd = WorkDir::new();
    for (k, (set, setup, allowed)) in cases.iter().enumerate() {
        let out = format!("x{k}");
        let mut args: Vec<&str> = vec!["run"];
        args.extend_from_slice(setup);
        args.extend_from_slice(&["--no-plot", "--out", &out, "--set", set]);
        let stderr = run_code(&wd, &args, 2);
        let (path, value) = set.split_once('=').unwrap();
        let path = path.trim_start_matches("profile.");
        for needle in [path, value, allowed] {
            assert!(
                stderr.contains(needle),
                "{set}: stderr should contain `{needle}`:\n{stderr}"
            );
        }
        assert!(!wd.path(&out).exists(), "{set}: a refused run wrote {out}");
    }
    // In range, the same keys are taken.
    run_ok(
        &wd,
        &[
            "run",
            "--duration",
            "5",
            "--no-plot",
            "--out",
            "ok",
            "--set",
            "generator.cogging_torque_n_m=0.01",
            "--set",
            "generator.cogging_periods_per_rev=6",
            "--set",
            "profile.jitter.ripple_peaks_per_rev=1",
            "--set",
            "converter.core_loss_w=0.2",
        ],
    );
}

#[test]
fn negative_resistance_in_a_file_names_file_position_and_field() {
    let demo = std::fs::read_to_string(repo().join("profiles/setups/demo.ron")).unwrap();
    let (line_idx, line) = demo
        .lines()
        .enumerate()
        .find(|(_, l)| l.trim_start().starts_with("resistance_ohm:"))
        .expect("demo has generator.resistance_ohm");
    let key_at = line.find("resistance_ohm").unwrap();
    let bad_line = format!("{}resistance_ohm: -1.5,", &line[..key_at]);
    let bad = demo.replacen(line, &bad_line, 1);
    let wd = WorkDir::new();
    std::fs::write(wd.path("neg.ron"), bad).unwrap();
    let stderr = run_code(&wd, &["run", "neg.ron", "--no-plot", "--out", "x"], 2);
    for needle in [
        format!("neg.ron:{}:", line_idx + 1),
        "generator.resistance_ohm".to_string(),
        "allowed".to_string(),
    ] {
        assert!(
            stderr.contains(&needle),
            "stderr should contain `{needle}`:\n{stderr}"
        );
    }
    assert!(
        !wd.path("x").exists(),
        "a refused run created its output folder"
    );
}

#[test]
fn unknown_set_key_exits_2_naming_the_key() {
    assert_refusal_keeps(|_| {}, &["run", "--set", "no.such.key=1"], &["no.such.key"]);
}

#[test]
fn unwritable_out_exits_2_before_simulating() {
    let wd = WorkDir::new();
    std::fs::write(wd.path("blocker"), b"a regular file").unwrap();
    // A 24-hour session takes far longer than the timeout: exiting in time proves the output
    // path was checked first.
    let out = wd
        .cmd()
        .args(["run", "--duration", "24h", "--out", "blocker/run"])
        .timeout(Duration::from_secs(20))
        .output()
        .expect("spawn crankcharge");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(
        out.status.code(),
        Some(2),
        "status {:?}\nstderr:\n{stderr}",
        out.status
    );
    assert!(
        stderr.contains("blocker"),
        "stderr should name the path:\n{stderr}"
    );
    assert!(
        std::fs::read(wd.path("blocker")).unwrap() == b"a regular file",
        "the blocking file changed"
    );
}

// ---------------------------------------------------------------------------------------------
// Determinism, --strict, --no-plot
// ---------------------------------------------------------------------------------------------

#[test]
fn same_seed_same_bytes_other_seed_other_trace() {
    let wd = WorkDir::new();
    for (out, seed) in [("o/a", "5"), ("o/b", "5"), ("o/c", "6")] {
        run_ok(
            &wd,
            &[
                "run",
                "--duration",
                "120",
                "--no-plot",
                "--seed",
                seed,
                "--out",
                out,
            ],
        );
    }
    for f in ["trace.csv", "events.csv"] {
        let a = std::fs::read(wd.path("o/a").join(f)).unwrap();
        let b = std::fs::read(wd.path("o/b").join(f)).unwrap();
        assert!(a == b, "{f} differs between two runs with seed 5");
    }
    let a = std::fs::read(wd.path("o/a/trace.csv")).unwrap();
    let c = std::fs::read(wd.path("o/c/trace.csv")).unwrap();
    assert!(a != c, "seeds 5 and 6 gave the same trace");
    assert_eq!(read_summary(&wd.path("o/a"))["seed"], 5);
    assert_eq!(read_summary(&wd.path("o/c"))["seed"], 6);
}

#[test]
fn strict_exits_1_on_a_flagged_verdict_only() {
    let wd = WorkDir::new();
    // The opening sprint pushes the diode-only block past its limit within the first minute.
    let la = [
        "run",
        "lead-acid-direct",
        "--profile",
        "sprint-and-rest",
        "--duration",
        "120",
        "--no-plot",
        "--out",
        "o/la",
    ];
    run_ok(&wd, &la);
    let s = read_summary(&wd.path("o/la"));
    assert_ne!(
        verdict_words(&s),
        ["ok"],
        "lead-acid direct should be flagged"
    );
    let mut strict = la.to_vec();
    strict.push("--strict");
    run_code(&wd, &strict, 1);
    // The flagged run still writes its outputs.
    assert!(wd.path("o/la/summary.json").exists());

    let demo = [
        "run",
        "--duration",
        "120",
        "--no-plot",
        "--out",
        "o/demo",
        "--strict",
    ];
    run_ok(&wd, &demo);
    let s = read_summary(&wd.path("o/demo"));
    assert_eq!(verdict_words(&s), ["ok"], "the 120-s demo should pass");
}

#[test]
fn no_plot_writes_no_charts() {
    let wd = WorkDir::new();
    run_ok(&wd, &["run", "--duration", "120", "--no-plot"]);
    let d = wd.path("outputs/demo");
    for f in ["trace.csv", "events.csv", "summary.json"] {
        assert!(d.join(f).exists(), "{f} missing with --no-plot");
    }
    let files: Vec<String> = std::fs::read_dir(&d)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(
        !files
            .iter()
            .any(|f| f.ends_with(".png") || f.ends_with(".svg")),
        "--no-plot wrote charts: {files:?}"
    );
}
