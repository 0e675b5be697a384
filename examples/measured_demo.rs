//! Writes the invented "measured" demo logs in `profiles/measured/` (or the folder given):
//! `generator-vrpm.csv` for `fit-generator`, `crank-log.csv` for `--profile` and `fit-operator`,
//! `bench-log.csv` for `compare-measured`. Nothing in them was measured: each is made here from a
//! stated scenario plus seeded gaussian noise, and says so in its header.
//!
//! ```sh
//! cargo run --release --example measured_demo -- profiles/measured
//! ```

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

use crankcharge::scenario::load::{InputKind, Override};
use crankcharge::scenario::{load_scenario, SourceText};
use crankcharge::studies::session::{run_session, RunSettings};

/// The invented operator behind the crank log.
const OPERATOR: &str = r#"(
    name: "demo-crank-log-operator",
    description: "Invented: 10 min at 72 rpm, ordinary wander, two-handed ripple, a short rest every 90 s or so",
    seed: 2024,
    segments: [(duration_s: 600.0, cadence_rpm: 72.0)],
    jitter: (
        enabled: true,
        wander_rpm: 4.0,
        wander_time_s: 5.0,
        ripple_fraction: 0.3,
        ripple_peaks_per_rev: 2,
        rest_interval_s: 90.0,
        rest_length_s: 3.0,
    ),
)
"#;

/// How the invented bench rig differs from the demo setup (an aged pack, a warm winding).
const BENCH_RIG: [(&str, &str); 3] = [
    ("battery.capacity_ah", "4.6"),
    ("battery.cell_r0_ohm", "0.05"),
    ("generator.resistance_ohm", "1.8"),
];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let dir = PathBuf::from(
        std::env::args()
            .nth(1)
            .unwrap_or_else(|| "profiles/measured".into()),
    );
    std::fs::create_dir_all(&dir)?;
    generator_table(&dir)?;
    let crank = crank_log(&dir)?;
    bench_log(&dir, &crank)?;
    Ok(())
}

/// V = k_e·ω − R·I for the demo setup's generator, with noise on the voltage and the speed.
fn generator_table(dir: &Path) -> Result<(), Box<dyn std::error::Error>> {
    let demo = load_scenario(
        &setup()?,
        &SourceText::resolve(None, InputKind::Profile)?,
        &[],
    )?;
    let g = &demo.setup.generator;
    let (ke_v_per_krpm, r_ohm) = (g.back_emf_v_per_krpm, g.resistance_ohm);
    let mut rng = StdRng::seed_from_u64(11);
    let dv = Normal::new(0.0, 0.03)?;
    let drpm = Normal::new(0.0, 2.0)?;
    let mut s = String::new();
    writeln!(
        s,
        "# INVENTED DEMO DATA, not a measurement: made by `cargo run --example measured_demo`."
    )?;
    writeln!(s, "# Scenario: the demo setup's PMDC generator on a test bench at 20 C, k_e = {ke_v_per_krpm} V/krpm,")?;
    writeln!(s, "# R = {r_ohm} ohm; open-circuit points (current 0) and resistive loads; V = k_e*speed - R*I")?;
    writeln!(
        s,
        "# plus gaussian noise (sigma 30 mV on the voltage, 2 rpm on the speed), seed 11."
    )?;
    writeln!(s, "rpm,voltage_v,current_a")?;
    for k in 0..11 {
        let rpm_set = 500.0 + 250.0 * f64::from(k);
        for current in [0.0, 0.5, 1.0, 1.5] {
            let v = ke_v_per_krpm * rpm_set / 1000.0 - r_ohm * current + dv.sample(&mut rng);
            let rpm = rpm_set + drpm.sample(&mut rng);
            if v > 0.5 {
                writeln!(s, "{rpm:.1},{v:.3},{current:.2}")?;
            }
        }
    }
    std::fs::write(dir.join("generator-vrpm.csv"), s)?;
    Ok(())
}

fn setup() -> Result<SourceText, Box<dyn std::error::Error>> {
    Ok(SourceText::resolve(Some("demo"), InputKind::Setup)?)
}

/// A session of the demo setup with the invented operator, logged at 10 Hz with sensor noise.
fn crank_log(dir: &Path) -> Result<PathBuf, Box<dyn std::error::Error>> {
    let profile = SourceText {
        name: "demo-crank-log-operator.ron".into(),
        text: OPERATOR.into(),
        built_in: false,
    };
    let sc = load_scenario(&setup()?, &profile, &[])?;
    let s = run_session(&sc, &RunSettings::default()).map_err(|e| e.to_string())?;
    let mut rng = StdRng::seed_from_u64(12);
    let dw = Normal::new(0.0, 0.3)?;
    let dq = Normal::new(0.0, 0.05)?;
    let mut out = String::new();
    writeln!(
        out,
        "# INVENTED DEMO DATA, not a measurement: made by `cargo run --example measured_demo`."
    )?;
    writeln!(out, "# Scenario: crankcharge's demo setup (relief-camp radio kit) cranked by an invented operator:")?;
    for line in OPERATOR.lines().filter(|l| l.contains(':')) {
        writeln!(out, "#   {}", line.trim())?;
    }
    writeln!(out, "# simulated at the fast fidelity and logged every 0.1 s, with gaussian sensor noise (sigma")?;
    writeln!(
        out,
        "# 0.3 rpm on the cadence, 0.05 N*m on the torque), seed 12."
    )?;
    writeln!(out, "time_s,crank_rpm,operator_torque_n_m")?;
    for r in &s.result.trace.rows {
        let w = (r.crank_rpm + dw.sample(&mut rng)).max(0.0);
        let q = r.operator_torque_n_m + dq.sample(&mut rng);
        writeln!(out, "{:.1},{w:.2},{q:.3}", r.time_s)?;
    }
    let path = dir.join("crank-log.csv");
    std::fs::write(&path, out)?;
    Ok(path)
}

/// The crank log replayed on an invented bench rig that differs from the demo setup, its battery
/// logged every second with meter noise.
fn bench_log(dir: &Path, crank: &Path) -> Result<(), Box<dyn std::error::Error>> {
    let profile = SourceText::resolve(Some(&crank.display().to_string()), InputKind::Profile)?;
    let sets: Vec<Override> = BENCH_RIG
        .iter()
        .map(|(k, v)| Override {
            key: (*k).into(),
            value: (*v).into(),
        })
        .collect();
    let sc = load_scenario(&setup()?, &profile, &sets)?;
    let s = run_session(&sc, &RunSettings::default()).map_err(|e| e.to_string())?;
    let mut rng = StdRng::seed_from_u64(13);
    let dv = Normal::new(0.0, 0.005)?;
    let di = Normal::new(0.0, 0.01)?;
    let mut out = String::new();
    writeln!(
        out,
        "# INVENTED DEMO DATA, not a measurement: made by `cargo run --example measured_demo`."
    )?;
    writeln!(out, "# Scenario: crank-log.csv replayed on an invented bench rig that differs from the demo setup:")?;
    let rig: Vec<String> = BENCH_RIG
        .iter()
        .map(|(k, v)| format!("{k} = {v}"))
        .collect();
    writeln!(
        out,
        "#   {} (an aged pack, a warm winding);",
        rig.join(", ")
    )?;
    writeln!(
        out,
        "# battery logged every 1 s with gaussian meter noise (sigma 5 mV, 10 mA), seed 13."
    )?;
    writeln!(out, "time_s,battery_v,battery_current_a")?;
    for r in s.result.trace.rows.iter().step_by(10) {
        let v = r.battery_v + dv.sample(&mut rng);
        let i = r.battery_current_a + di.sample(&mut rng);
        writeln!(out, "{:.1},{v:.4},{i:.4}", r.time_s)?;
    }
    std::fs::write(dir.join("bench-log.csv"), out)?;
    Ok(())
}
