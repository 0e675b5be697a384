//! Breadth: every topology and chemistry among the shipped setups, temperature rules, the
//! buck-boost twin of the demo, the linear charger, the buck-boost conversion ratio, and the 5 V
//! USB output (demo end to end, a bus that sags under a slow crank, its checks).

use std::path::{Path, PathBuf};

use crankcharge::analysis::events::EventKind;
use crankcharge::analysis::summary::Verdict;
use crankcharge::analysis::trace::Mode;
use crankcharge::model::battery::Terminal;
use crankcharge::model::converter::{buck_boost_conversion_ratio, BuckBoostModel, Overhead};
use crankcharge::model::jitter::JitterTrack;
use crankcharge::model::network;
use crankcharge::scenario::demo::SETUPS;
use crankcharge::scenario::Scenario;
use crankcharge::simulate::engine::{initial_discrete, initial_state};
use crankcharge::simulate::plant::{Discrete, Plant};
use crankcharge::simulate::state::{CRANK_SPEED, E_COGGING, GEN_SPEED, OP_INTEGRATOR, ROTOR_ANGLE};
use crankcharge::simulate::Fidelity;
use crankcharge::studies::session::Session;
use crankcharge::units::rpm_to_rad_s;

use crate::common::{
    load_paths, read_csv, repo, run_code, run_ok, session_of, source_at, WorkDir, RUN_FILES,
};

// ---------------------------------------------------------------------------------------------
// Helpers (no expectations in here)
// ---------------------------------------------------------------------------------------------

/// The scenario's plant without jitter.
fn quiet_plant(sc: &Scenario) -> Plant {
    Plant::new(&sc.setup, &sc.profile, JitterTrack::default(), 0.0).expect("plant")
}

/// The battery terminal and the mode at the scenario's start state (SOC and ambient of the
/// setup), for operating points solved by hand.
fn start_point<'a>(plant: &'a Plant, sc: &Scenario) -> (Terminal<'a>, Discrete) {
    let y = initial_state(plant, sc.setup.battery.soc_start, sc.setup.ambient_c);
    let term = plant.battery.terminal(&Plant::battery_state(&y));
    (term, initial_discrete(plant, &y))
}

fn setup_path(name: &str) -> PathBuf {
    repo().join(format!("profiles/setups/{name}.ron"))
}

fn load(setup: &Path, sets: &[(&str, &str)]) -> Scenario {
    load_paths(setup, &repo().join("profiles/cranking/steady.ron"), sets)
}

fn run(sc: &Scenario, duration_s: Option<f64>, fidelity: Fidelity) -> Session {
    session_of(sc, duration_s, fidelity)
}

/// Names of the shipped setup files in profiles/setups.
fn shipped_names() -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(repo().join("profiles/setups"))
        .expect("profiles/setups")
        .filter_map(|e| {
            let p = e.ok()?.path();
            (p.extension()? == "ron").then(|| p.file_stem()?.to_str().map(String::from))?
        })
        .collect();
    v.sort();
    v
}

fn ideal_buck_boost(inductance_h: f64, switching_frequency_hz: f64) -> BuckBoostModel {
    BuckBoostModel {
        max_duty: 0.95,
        switch_drop_v: 0.0,
        switch_resistance_ohm: 0.0,
        diode_drop_v: 0.0,
        inductor_resistance_ohm: 0.0,
        inductance_h,
        switching_frequency_hz,
        switch_transition_s: 0.0,
        quiescent_current_a: 0.0,
        overhead: Overhead::default(),
    }
}

// ---------------------------------------------------------------------------------------------
// Shipped setups
// ---------------------------------------------------------------------------------------------

#[test]
fn shipped_setups_cover_every_topology_and_the_chemistries() {
    let names = shipped_names();
    let mut embedded: Vec<String> = SETUPS.iter().map(|e| e.name.to_string()).collect();
    embedded.sort();
    assert_eq!(names, embedded, "every shipped setup file is embedded");
    let mut topologies = Vec::new();
    let mut chemistries = Vec::new();
    for n in &names {
        let text = std::fs::read_to_string(setup_path(n)).expect("setup text");
        assert!(
            text.contains("INVENTED DEMO DATA"),
            "{n}: the shipped file says its data is invented"
        );
        let sc = load(&setup_path(n), &[]);
        topologies.push(sc.setup.converter.topology.as_str());
        chemistries.push(sc.setup.battery.chemistry.as_str());
    }
    for t in ["buck", "buck_boost", "linear", "direct"] {
        assert!(
            topologies.contains(&t),
            "no shipped setup with topology {t}"
        );
    }
    for c in ["nmc", "lfp", "lead_acid", "nimh", "supercap"] {
        assert!(
            chemistries.contains(&c),
            "no shipped setup with chemistry {c}"
        );
    }
    let kinds: Vec<&str> = names
        .iter()
        .map(|n| load(&setup_path(n), &[]).setup.generator.kind.as_str())
        .collect();
    for k in ["brushed_dc", "three_phase_pm"] {
        assert!(kinds.contains(&k), "no shipped setup with generator {k}");
    }
    // The contract's names: one shipped setup at least of each new kind.
    for prefix in ["alternator-", "nimh-", "supercap-"] {
        assert!(
            names.iter().any(|n| n.starts_with(prefix)),
            "no shipped setup named {prefix}*"
        );
    }
    let outputs: Vec<&str> = names
        .iter()
        .map(|n| load(&setup_path(n), &[]).setup.output_word())
        .collect();
    for o in ["battery", "usb_5v"] {
        assert!(outputs.contains(&o), "no shipped setup with output {o}");
    }
}

#[test]
fn every_shipped_setup_closes_its_ledger_and_the_fidelities_agree_on_20_s() {
    let names = shipped_names();
    let results: Vec<(String, Session, Session)> = std::thread::scope(|s| {
        let handles: Vec<_> = names
            .iter()
            .map(|n| {
                s.spawn(move || {
                    let sc = load(&setup_path(n), &[]);
                    let fast = run(&sc, Some(20.0), Fidelity::Fast);
                    let detailed = run(&sc, Some(20.0), Fidelity::Detailed);
                    (n.clone(), fast, detailed)
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().expect("run thread"))
            .collect()
    });
    for (n, fast, detailed) in &results {
        for s in [fast, detailed] {
            let e = s.summary.energy_balance_error;
            assert!(
                e.is_finite() && e < 1e-3,
                "{n} ({}): ledger closes to {e}",
                s.summary.fidelity
            );
            // At the shipped tolerance, without the automatic rerun at a tighter one.
            assert_eq!(
                s.summary.solver.tolerance_reruns, 0,
                "{n} ({}): {:?}",
                s.summary.fidelity, s.summary.solver
            );
        }
        let qf = fast.summary.charge_delivered_ah;
        let qd = detailed.summary.charge_delivered_ah;
        assert!(qf > 0.0, "{n}: the shipped setup charges in its first 20 s");
        assert!(
            (qf - qd).abs() <= 0.005 * qf,
            "{n}: fast {qf} Ah vs detailed {qd} Ah differ by more than 0.5 %"
        );
    }
}

#[test]
fn every_shipped_setup_runs_a_full_session_in_the_fast_fidelity() {
    for n in shipped_names() {
        let sc = load(&setup_path(&n), &[]);
        let s = run(&sc, None, Fidelity::Fast);
        assert!(
            s.summary.energy_balance_error < 1e-3,
            "{n}: full session ledger {}",
            s.summary.energy_balance_error
        );
        assert_eq!(
            s.summary.solver.tolerance_reruns, 0,
            "{n}: closes at the shipped tolerance"
        );
        assert!(s.summary.charge_delivered_ah > 0.0, "{n}: delivers charge");
        assert!(
            s.summary.max_battery_v <= s.summary.charge_limit_v + 1e-3 || n == "lead-acid-direct",
            "{n}: a charger holds the battery at or below its limit ({} V > {} V)",
            s.summary.max_battery_v,
            s.summary.charge_limit_v
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Temperature rules (NMC demo)
// ---------------------------------------------------------------------------------------------

#[test]
fn nmc_demo_below_freezing_refuses_charge_and_logs_the_window() {
    let sc = load(&setup_path("demo"), &[("ambient_c", "-5")]);
    assert_eq!(sc.setup.battery.chemistry.as_str(), "nmc");
    let s = run(&sc, Some(60.0), Fidelity::Fast);
    // Common practice: JEITA-style windows allow no Li-ion charge below 0 °C.
    assert!(
        s.summary.charge_delivered_ah.abs() < 1e-9,
        "charge at −5 °C: {} Ah",
        s.summary.charge_delivered_ah
    );
    assert!(
        s.result
            .runs
            .iter()
            .any(|e| e.kind == EventKind::ChargeTempWindow),
        "a charge_temp_window event is logged"
    );
    // The same design at 25 °C does charge (so the refusal is the window, not the design).
    let warm = run(
        &load(&setup_path("demo"), &[("ambient_c", "25")]),
        Some(60.0),
        Fidelity::Fast,
    );
    assert!(warm.summary.charge_delivered_ah > 1e-3);
}

#[test]
fn nmc_demo_in_the_warm_band_has_a_lower_charge_limit() {
    let at = |t: &str| {
        let sc = load(&setup_path("demo"), &[("ambient_c", t)]);
        run(&sc, Some(30.0), Fidelity::Fast).summary.charge_limit_v
    };
    let (v25, v48) = (at("25"), at("48"));
    // Common practice: JEITA-style warm band (45 … 60 °C) lowers the CV voltage (REFERENCES §2).
    assert!(v48 < v25 - 0.05, "limit at 48 °C {v48} V vs 25 °C {v25} V");
}

// ---------------------------------------------------------------------------------------------
// Buck-boost
// ---------------------------------------------------------------------------------------------

#[test]
fn buck_boost_twin_holds_regulation_where_the_buck_drops_out() {
    let slow = [("profile.cadence_scale", "0.8")];
    let buck = run(&load(&setup_path("demo"), &slow), None, Fidelity::Fast);
    let bb = run(
        &load(&setup_path("demo-buck-boost"), &slow),
        None,
        Fidelity::Fast,
    );
    let (fb, fbb) = (
        buck.summary.in_regulation_fraction.unwrap(),
        bb.summary.in_regulation_fraction.unwrap(),
    );
    assert!(fb < 0.5, "the buck drops out at 0.8 × cadence: {fb}");
    // Below the battery the buck-boost still regulates; what it loses is its soft-start restarts
    // when a ripple trough pulls the generator under its UVLO. (With realistic brush drop and
    // iron loss the source's power limit at a 45-rpm trough, about 30 W, sits just above the 2-A
    // charge's 27 W, so a trough folds it more often than it did: about 70 % in regulation here,
    // held as more than 65 %.)
    assert!(
        fbb > 0.65,
        "the buck-boost holds regulation most of the time: {fbb}"
    );
    assert!(fbb > fb + 0.25, "buck-boost {fbb} vs buck {fb}");
    assert!(
        bb.summary.charge_delivered_ah > buck.summary.charge_delivered_ah,
        "and delivers more charge: {} vs {} Ah",
        bb.summary.charge_delivered_ah,
        buck.summary.charge_delivered_ah
    );
    assert_eq!(bb.summary.topology, "buck_boost");
    // Regulating, it delivers the charge current while the input sits below the battery.
    let below = bb
        .result
        .trace
        .rows
        .iter()
        .filter(|r| r.mode == Mode::Cc && r.input_v < r.battery_v)
        .count();
    assert!(
        below > 0,
        "CC with the input below the battery happens at this cadence"
    );
    let sc = load(&setup_path("demo-buck-boost"), &[]);
    for r in &bb.result.trace.rows {
        assert!(
            r.duty <= sc.setup.converter.max_duty + 1e-12,
            "duty {} above D_max",
            r.duty
        );
    }
}

#[test]
fn a_converter_that_keeps_restarting_is_not_counted_in_regulation() {
    // Common practice: a charger in its soft-start ramp is not yet holding its set current or
    // voltage; one that keeps locking out and restarting (hiccup) delivers only ramps, and a
    // regulation figure must not call that regulated.
    // Without its input floor the shipped buck-boost hiccups at 0.7 of the cadence.
    let sc = load(
        &setup_path("demo-buck-boost"),
        &[
            ("profile.cadence_scale", "0.7"),
            ("converter.input_floor_v", "None"),
        ],
    );
    let s = run(&sc, Some(120.0), Fidelity::Fast);
    // Each lock-out is over within the same instant here (the input recovers at once with the
    // load gone, and the restart is immediate), so the restarts show as soft-start periods.
    let ev = &s.result.runs;
    let restarts = ev
        .iter()
        .filter(|e| e.kind == EventKind::RegulationLoss && e.detail.contains("soft-start"))
        .count();
    let ramping: f64 = ev
        .iter()
        .filter(|e| e.kind == EventKind::RegulationLoss && e.detail.contains("soft-start"))
        .map(|e| e.duration_s)
        .sum();
    let lost: f64 = ev
        .iter()
        .filter(|e| e.kind == EventKind::RegulationLoss)
        .map(|e| e.duration_s)
        .sum();
    assert!(
        restarts > 100,
        "the converter hiccups at 0.7 x cadence: {restarts} restarts"
    );
    assert!(
        ramping > 30.0,
        "most of the lost time is spent ramping: {ramping} s"
    );
    assert!(
        (s.summary.regulation_loss_s.unwrap() - lost).abs() < 1e-6,
        "regulation_loss_s {} is the sum of the periods {lost}",
        s.summary.regulation_loss_s.unwrap()
    );
    // Thousands of located switching times must not open the energy ledger (each segment
    // starts from an integrated state, not an interpolated one).
    assert!(
        s.summary.energy_balance_error < 1e-4,
        "energy_balance_error {}",
        s.summary.energy_balance_error
    );
    assert!(
        s.summary.in_regulation_fraction.unwrap() < 0.5,
        "in_regulation_fraction {}",
        s.summary.in_regulation_fraction.unwrap()
    );
    assert_eq!(
        s.summary.verdict,
        Verdict::One("fails_regulation".to_string()),
        "the verdict flags it"
    );
}

#[test]
fn buck_boost_ccm_ratio_is_d_over_one_minus_d() {
    // From memory: Erickson & Maksimović ch. 2, buck-boost M(D) = D/(1 − D) (magnitude).
    assert!((buck_boost_conversion_ratio(0.5) - 1.0).abs() < 1e-12);
    assert!((buck_boost_conversion_ratio(0.75) - 3.0).abs() < 1e-12);
    assert!((buck_boost_conversion_ratio(0.2) - 0.25).abs() < 1e-12);
    // The lossless averaged model's duty for (V_in, V_o) is V_o/(V_in + V_o): 12 → 12 V at 0.5,
    // 6 → 12 V at 2/3, 24 → 12 V at 1/3 (hand values of the closed form).
    let bb = ideal_buck_boost(47e-6, 150e3);
    for (v_in, v_o, d) in [
        (12.0, 12.0, 0.5),
        (6.0, 12.0, 2.0 / 3.0),
        (24.0, 12.0, 1.0 / 3.0),
    ] {
        let got = bb.ccm_duty(v_in, v_o, 1.0);
        assert!(
            (got - d).abs() < 1e-9,
            "{v_in} → {v_o} V: duty {got}, want {d}"
        );
    }
    // With drops the duty is higher than the ideal one, and the losses close the power balance.
    let lossy = BuckBoostModel {
        switch_resistance_ohm: 0.05,
        diode_drop_v: 0.45,
        inductor_resistance_ohm: 0.06,
        ..bb
    };
    let d = lossy.ccm_duty(12.0, 12.0, 1.0);
    assert!(d > 0.5 && d < 0.6, "lossy duty {d}");
    let p_in = 12.0 * lossy.input_current_a(d, 1.0, 12.0);
    let p_out = 12.0 * 1.0;
    let loss = lossy.losses(d, 1.0, 12.0).total_w();
    assert!((p_in - p_out - loss).abs() < 1e-9 * p_in);
}

#[test]
fn buck_boost_dcm_ratio_matches_the_table() {
    // From memory: Erickson & Maksimović Table 5.2, buck-boost DCM |M| = D/√K, K = 2L/(R·T_s),
    // DCM when K < (1 − D)². Hand values: L = 10 µH, f_s = 100 kHz, R = 10 Ω → K = 0.2;
    // D = 0.3 → M = 0.670820, V_o = 8.04984 V from 12 V, I = 0.804984 A.
    let bb = ideal_buck_boost(10e-6, 100e3);
    let (v_in, v_o, i) = (12.0, 8.04984, 0.804984);
    let d_ccm = bb.ccm_duty(v_in, v_o, i);
    let (d, dcm) = bb.reported_duty(v_in, i, d_ccm);
    assert!(dcm, "K = 0.2 < (1 − D)² = 0.49 is discontinuous");
    assert!((d - 0.3).abs() < 1e-4, "DCM duty {d}");
    // From memory: same table. R = 0.3 Ω gives K = 0.667 > (1 − 0.5)² = 0.25 at 12 → 12 V:
    // continuous, duty 0.5.
    let (v_o, r) = (12.0, 0.3);
    let d_ccm = bb.ccm_duty(v_in, v_o, v_o / r);
    let (d, dcm) = bb.reported_duty(v_in, v_o / r, d_ccm);
    assert!(!dcm && (d - 0.5).abs() < 1e-9, "CCM duty {d}");
}

#[test]
fn buck_boost_duty_limit_has_its_own_range() {
    let w = WorkDir::new();
    w.cmd()
        .args([
            "check",
            "demo-buck-boost",
            "--set",
            "converter.max_duty=0.97",
        ])
        .assert()
        .code(2);
    w.cmd()
        .args([
            "check",
            "demo-buck-boost",
            "--set",
            "converter.max_duty=0.9",
        ])
        .assert()
        .code(0);
    // A buck may run to 0.97.
    w.cmd()
        .args(["check", "demo", "--set", "converter.max_duty=0.97"])
        .assert()
        .code(0);
}

// ---------------------------------------------------------------------------------------------
// Linear charger
// ---------------------------------------------------------------------------------------------

#[test]
fn linear_charger_efficiency_is_about_vo_over_vin_and_it_drops_out_below_the_headroom() {
    let sc = load(&setup_path("lfp-linear"), &[]);
    assert_eq!(sc.setup.converter.topology.as_str(), "linear");
    assert_eq!(sc.setup.battery.chemistry.as_str(), "lfp");
    let dropout_v = sc
        .setup
        .converter
        .dropout_v
        .expect("the shipped file sets it");
    let i_cc = sc.setup.converter.charge_current_a;
    let s = run(&sc, Some(120.0), Fidelity::Fast);
    let mut checked = 0;
    for r in &s.result.trace.rows {
        if r.mode == Mode::Cc && r.generator_current_a > 0.1 {
            let eta = r.battery_v * r.battery_current_a / (r.input_v * r.generator_current_a);
            // Common practice: a linear regulator's efficiency is V_o/V_in (less its quiescent draw).
            let ratio = r.battery_v / r.input_v;
            assert!(
                (eta - ratio).abs() < 0.01 * ratio && eta <= ratio,
                "t = {}: efficiency {eta} vs V_o/V_in {ratio}",
                r.time_s
            );
            assert!(
                r.input_v - r.battery_v >= dropout_v * r.battery_current_a / i_cc - 1e-6,
                "regulating with less headroom than the dropout"
            );
            checked += 1;
        }
        if r.mode == Mode::Dropout {
            assert!(
                r.input_v - r.battery_v < dropout_v + 1e-6,
                "t = {}: dropout with {} V of headroom",
                r.time_s,
                r.input_v - r.battery_v
            );
        }
    }
    assert!(checked > 100, "only {checked} CC rows");
    // Slower cranking drops it out (the input falls below V_o + dropout).
    let slow = run(
        &load(
            &setup_path("lfp-linear"),
            &[("profile.cadence_scale", "0.75")],
        ),
        Some(120.0),
        Fidelity::Fast,
    );
    assert!(
        slow.summary.in_regulation_fraction.unwrap() < s.summary.in_regulation_fraction.unwrap()
    );
}

#[test]
fn linear_pass_element_settles_at_ambient_plus_power_times_theta() {
    // A smooth operator and a small heat capacity (θ·C = 1.6 s) so the junction follows the
    // slowly changing dissipation; θ, C and ambient are set here.
    let (theta, ambient) = (8.0, 20.0);
    let sc = load(
        &setup_path("lfp-linear"),
        &[
            ("converter.pass_theta_ja_k_per_w", "8"),
            ("converter.pass_heat_capacity_j_per_k", "0.2"),
            ("ambient_c", "20"),
            ("profile.jitter.enabled", "false"),
        ],
    );
    let s = run(&sc, Some(60.0), Fidelity::Fast);
    let mut checked = 0;
    for r in s.result.trace.rows.iter().filter(|r| r.time_s >= 30.0) {
        let p = (r.input_v - r.battery_v) * r.battery_current_a;
        // Source: the lumped thermal model, ΔT_ss = P·R_th (Incropera & DeWitt; Çengel, Heat
        // Transfer; REFERENCES §9) with R_th = θ_ja.
        let want = ambient + p * theta;
        assert!(
            (r.junction_temp_c - want).abs() <= 0.02 * (want - ambient) + 1e-6,
            "t = {}: junction {} °C vs {want} °C at {p} W",
            r.time_s,
            r.junction_temp_c
        );
        checked += 1;
    }
    assert!(checked > 200, "only {checked} rows");
    // The pass element really dissipates: the check is not made on a cold junction.
    let hottest = s
        .result
        .trace
        .rows
        .iter()
        .map(|r| r.junction_temp_c)
        .fold(f64::MIN, f64::max);
    assert!(
        hottest > ambient + 10.0,
        "junction only reached {hottest} °C"
    );
    // Its heat is a ledger term of its own, and the ledger closes with it.
    assert!(s.result.ledger.pass_heat_j > 100.0);
    assert!(s.summary.energy_balance_error < 1e-3);
}

#[test]
fn linear_charger_folds_back_without_a_heatsink_and_says_so() {
    // The pass element in free air (62.5 K/W, 1 J/K) against the shipped heatsink; foldback
    // from 120 °C to zero at 150 °C, set here.
    let common = [
        ("converter.pass_foldback_c", "120"),
        ("converter.pass_shutdown_c", "150"),
    ];
    let with = |theta: &'static str, cap: &'static str| {
        let mut sets = vec![
            ("converter.pass_theta_ja_k_per_w", theta),
            ("converter.pass_heat_capacity_j_per_k", cap),
        ];
        sets.extend(common);
        run(
            &load(&setup_path("lfp-linear"), &sets),
            Some(300.0),
            Fidelity::Fast,
        )
    };
    let bare = with("62.5", "1");
    let sink = with("8", "40");
    let i_cc = load(&setup_path("lfp-linear"), &[])
        .setup
        .converter
        .charge_current_a;
    // Informational rows (they do not decide the verdict): the summary's episodes.
    let folds = |s: &Session| {
        s.summary
            .events()
            .iter()
            .filter(|e| e.kind == EventKind::ThermalFoldback)
            .count()
    };
    assert!(folds(&bare) > 0, "no thermal_foldback alert in free air");
    assert_eq!(
        folds(&sink),
        0,
        "the heatsinked pass element should not fold back"
    );
    let mut cut = 0;
    for r in &bare.result.trace.rows {
        // The current limit follows the foldback line: full at 120 °C, none at 150 °C.
        let allowed = i_cc * ((150.0 - r.junction_temp_c) / 30.0).clamp(0.0, 1.0);
        assert!(
            r.battery_current_a <= allowed + 1e-6,
            "t = {}: {} A at a {} °C junction (allowed {allowed} A)",
            r.time_s,
            r.battery_current_a,
            r.junction_temp_c
        );
        assert!(r.junction_temp_c < 150.0, "junction reached the cut-off");
        cut += usize::from(r.junction_temp_c > 125.0);
    }
    assert!(
        cut > 100,
        "the foldback hardly acted ({cut} rows above 125 °C)"
    );
    assert!(
        bare.summary.charge_delivered_ah < 0.9 * sink.summary.charge_delivered_ah,
        "folding back should cost charge: {} vs {} Ah",
        bare.summary.charge_delivered_ah,
        sink.summary.charge_delivered_ah
    );
    // `check` warns of it from the static figures.
    let wd = WorkDir::new();
    let out = run_ok(
        &wd,
        &[
            "check",
            "lfp-linear",
            "--set",
            "converter.pass_theta_ja_k_per_w=62.5",
        ],
    );
    assert!(out.contains("foldback"), "{out}");
    let out = run_ok(&wd, &["check", "lfp-linear"]);
    assert!(!out.contains("foldback"), "{out}");
}

// ---------------------------------------------------------------------------------------------
// Generator cogging, buck-boost buck mode, gate drive and core loss
// ---------------------------------------------------------------------------------------------

#[test]
fn cogging_is_conservative_and_the_ledger_closes_with_it() {
    // T_c = 0.02 N·m, n = 10 periods a turn, set here.
    let (tc, n) = (0.02, 10.0);
    let cog = [
        ("generator.cogging_torque_n_m", "0.02"),
        ("generator.cogging_periods_per_rev", "10"),
    ];
    let sc = load(&setup_path("demo"), &cog);
    // It acts: a quarter period either side of a potential minimum the rotor feels ∓T_c, and
    // through the rigid belt (forward power flow) the shaft's acceleration changes by
    // N·(N/η)·2·T_c/(J_c + N²·J_s/η).
    let plant = Plant::new(&sc.setup, &sc.profile, JitterTrack::default(), 0.0).expect("plant");
    let mut y = initial_state(&plant, sc.setup.battery.soc_start, sc.setup.ambient_c);
    let t = 100.0;
    let wc = rpm_to_rad_s(plant.planned_rpm(t).0);
    y[CRANK_SPEED] = wc;
    y[GEN_SPEED] = wc * plant.drive.ratio;
    y[OP_INTEGRATOR] = 8.0;
    let d = initial_discrete(&plant, &y);
    let accel = |angle: f64| {
        let mut y = y;
        y[ROTOR_ANGLE] = angle;
        plant.eval(t, &y, &d).gen_accel
    };
    let quarter = std::f64::consts::FRAC_PI_2 / n;
    let (nn, eta) = (plant.drive.ratio, plant.drive.efficiency);
    let (jc, js) = (
        plant.drive.crank_inertia_kg_m2,
        plant.drive.shaft_inertia_kg_m2,
    );
    // Common practice: a torque ∓T_c on the rotor of a rigidly belted drive (Newton's second law
    // about the crank, the belt's efficiency on the forward power).
    let want = nn * (nn / eta) * 2.0 * tc / (jc + nn * nn * js / eta);
    let got = accel(-quarter) - accel(quarter);
    assert!(
        (got - want).abs() < 1e-6 * want,
        "Δ acceleration {got} rad/s² vs {want} rad/s²"
    );

    let fast = run(&sc, Some(20.0), Fidelity::Fast);
    let detailed = run(&sc, Some(20.0), Fidelity::Detailed);
    let plain = run(&load(&setup_path("demo"), &[]), Some(20.0), Fidelity::Fast);
    for s in [&fast, &detailed] {
        let l = &s.result.ledger;
        // Common practice: a conservative torque, −dU/dθ, does no net work; what the rotor did
        // against it is the change of U = (T_c/n)·(1 − cos(n·θ)), never more than 2·T_c/n.
        assert!(
            l.cogging_change_j.abs() <= 2.0 * tc / n + 1e-12,
            "{}: {} J in the cogging potential",
            s.summary.fidelity,
            l.cogging_change_j
        );
        assert!(
            s.summary.energy_balance_error < 1e-3,
            "{}: ledger closes to {}",
            s.summary.fidelity,
            s.summary.energy_balance_error
        );
    }
    // The work against cogging integrated along the fast run is that change too, to within the
    // tolerance (1e-4) of the energy cycled through the potential: 2·(2·T_c/n) a period, n·θ/2π
    // periods.
    let work = fast.result.final_state[E_COGGING];
    let periods = n * fast.result.final_state[ROTOR_ANGLE] / (2.0 * std::f64::consts::PI);
    assert!(periods > 1000.0, "only {periods} cogging periods");
    let cycled = periods * 4.0 * tc / n;
    assert!(
        (work - fast.result.ledger.cogging_change_j).abs() < 1e-4 * cycled,
        "work {work} J vs potential change {} J ({cycled} J cycled)",
        fast.result.ledger.cogging_change_j
    );
    // Zero on average, it leaves the charge as it was, in both fidelities.
    let q0 = plain.summary.charge_delivered_ah;
    for s in [&fast, &detailed] {
        let q = s.summary.charge_delivered_ah;
        assert!(
            (q - q0).abs() < 0.005 * q0,
            "{}: {q} Ah with cogging vs {q0} Ah without",
            s.summary.fidelity
        );
    }
}

#[test]
fn buck_boost_runs_as_a_buck_above_the_battery_and_saves_losses() {
    let sc = load(&setup_path("demo-buck-boost"), &[]);
    let plant = quiet_plant(&sc);
    let c = &sc.setup.converter;
    let (term, mut d) = start_point(&plant, &sc);
    let src = source_at(&plant, 24.0);
    d.buck_mode = false;
    let both = network::solve(&src, plant.converters(&d).charging(2.0), &term);
    d.buck_mode = true;
    let buck = network::solve(&src, plant.converters(&d).charging(2.0), &term);
    for p in [&both, &buck] {
        assert!((p.battery_current_a - 2.0).abs() < 1e-9 && !p.dropout);
    }
    // Source: Erickson & Maksimović, Fundamentals of Power Electronics, 2nd ed., ch. 2–3 —
    // inductor volt-second balance of a buck with switch, freewheel-diode and DCR drops; in buck
    // mode the output diode conducts all the time, one more V_D in series with V_o:
    // d·(V_in − V_sw − I·R_on + V_D) = V_o + 2·V_D + I·R_L.
    let i = buck.battery_current_a;
    let want = (buck.battery_v + 2.0 * c.catch_diode_drop_v + i * c.inductor_resistance_ohm)
        / (buck.input_v - c.switch_drop_v - i * c.switch_resistance_ohm + c.catch_diode_drop_v);
    assert!(
        (buck.balance_duty - want).abs() < 1e-9,
        "buck-mode duty {} vs {want}",
        buck.balance_duty
    );
    // The inductor carries I instead of I/(1 − d) and one switch switches: less input for the
    // same charge current.
    let p_in = |p: &crankcharge::model::network::NetworkPoint| p.input_v * p.generator_current_a;
    assert!(
        p_in(&buck) < p_in(&both) - 0.5,
        "input power {} W in buck mode vs {} W switching both",
        p_in(&buck),
        p_in(&both)
    );

    // Over a session the buck mode's savings show in the efficiency; the charger still holds its
    // current (regulation as good or better), and the ledger closes in both fidelities.
    let with = run(&sc, Some(120.0), Fidelity::Fast);
    let without = run(
        &load(
            &setup_path("demo-buck-boost"),
            &[("converter.buck_mode_max_duty", "0")],
        ),
        Some(120.0),
        Fidelity::Fast,
    );
    assert!(
        with.summary.efficiency_crank_to_battery
            > without.summary.efficiency_crank_to_battery + 0.01,
        "efficiency {} with buck mode vs {} without",
        with.summary.efficiency_crank_to_battery,
        without.summary.efficiency_crank_to_battery
    );
    assert!(
        with.summary.in_regulation_fraction.unwrap()
            >= without.summary.in_regulation_fraction.unwrap() - 0.01
    );
    let detailed = run(&sc, Some(20.0), Fidelity::Detailed);
    let fast20 = run(&sc, Some(20.0), Fidelity::Fast);
    for s in [&with, &detailed] {
        assert!(s.summary.energy_balance_error < 1e-3);
    }
    let (qf, qd) = (
        fast20.summary.charge_delivered_ah,
        detailed.summary.charge_delivered_ah,
    );
    assert!(
        (qf - qd).abs() < 0.005 * qf,
        "fast {qf} Ah vs detailed {qd} Ah"
    );
}

#[test]
fn switching_overhead_is_the_core_loss_while_switching_and_the_gate_drive() {
    // The demo's buck has a bipolar switch (no gate charge) and a core loss; give it a gate
    // charge too, Q_g = 20 nC at its f_sw (read from the file).
    let sc = load(&setup_path("demo"), &[("converter.gate_charge_c", "20e-9")]);
    let c = &sc.setup.converter;
    assert!(c.core_loss_w > 0.0, "the demo states its core loss");
    let s = run(&sc, Some(120.0), Fidelity::Fast);
    // Common practice: a gate driver fed from the input draws Q_g·f_sw (the charge of each gate,
    // every cycle), so it dissipates V_in·Q_g·f_sw; the core loses its fixed loss while the
    // stage switches. Summed over the trace's switching samples (0.1-s trapezoids).
    let gate_a = 20e-9 * c.switching_frequency_hz;
    let p = |r: &crankcharge::analysis::trace::TraceRow| {
        if r.mode == Mode::Lockout {
            0.0
        } else {
            c.core_loss_w + r.input_v * gate_a
        }
    };
    let rows = &s.result.trace.rows;
    let traced: f64 = rows
        .windows(2)
        .map(|w| 0.5 * (p(&w[0]) + p(&w[1])) * (w[1].time_s - w[0].time_s))
        .sum();
    let booked = s.result.ledger.overhead_loss_j;
    assert!(booked > 5.0, "overhead {booked} J");
    assert!(
        (traced - booked).abs() < 0.02 * booked,
        "ledger {booked} J vs trace {traced} J"
    );
    assert!(s.summary.energy_balance_error < 1e-3);
}

// ---------------------------------------------------------------------------------------------
// Lead-acid behind a buck
// ---------------------------------------------------------------------------------------------

#[test]
fn lead_acid_buck_goes_through_absorption_to_float() {
    let sc = load(&setup_path("lead-acid-buck"), &[]);
    assert_eq!(sc.setup.battery.chemistry.as_str(), "lead_acid");
    let s = run(&sc, None, Fidelity::Fast);
    let rows = &s.result.trace.rows;
    let first_cv = rows.iter().position(|r| r.mode == Mode::Cv);
    let first_float = rows.iter().position(|r| r.mode == Mode::Float);
    let (Some(a), Some(f)) = (first_cv, first_float) else {
        panic!("absorption {first_cv:?} and float {first_float:?} both happen");
    };
    assert!(a < f, "absorption comes before float");
    // In float the set point is the float voltage, below the absorption limit. Absorption leaves
    // the battery's polarisation (surface charge) above it: the charger passes nothing until that
    // has relaxed, then holds the float voltage.
    let float_rows: Vec<_> = rows[f..].iter().filter(|r| r.mode == Mode::Float).collect();
    let (first, last) = (float_rows[0], *float_rows.last().unwrap());
    assert!(
        last.time_s - first.time_s > 60.0,
        "float lasts {} s",
        last.time_s - first.time_s
    );
    assert!(
        last.battery_v < last.charge_limit_v - 0.5,
        "float holds {} V, well below the absorption limit {} V",
        last.battery_v,
        last.charge_limit_v
    );
    assert!(
        float_rows
            .iter()
            .all(|r| r.battery_v <= first.battery_v + 1e-3),
        "nothing in float pushes the battery up"
    );
}

// ---------------------------------------------------------------------------------------------
// Input-voltage floor on the switching chargers
// ---------------------------------------------------------------------------------------------

#[test]
fn input_floor_keeps_a_slow_operator_out_of_lockout_cycling() {
    let slow = ("profile.cadence_scale", "0.6");
    // The shipped buck-boost holds a 9.5-V floor; the free-running charger is the same design
    // without it.
    let free = run(
        &load(
            &setup_path("demo-buck-boost"),
            &[slow, ("converter.input_floor_v", "None")],
        ),
        None,
        Fidelity::Fast,
    );
    let floored = run(
        &load(
            &setup_path("demo-buck-boost"),
            &[slow, ("converter.input_floor_v", "8.0")],
        ),
        None,
        Fidelity::Fast,
    );
    let count = |s: &Session, k: EventKind| s.result.runs.iter().filter(|e| e.kind == k).count();
    // Each lock-out cycle ends in a soft-start restart. (Counted by its restarts: when the input
    // collapses at the source's power limit, the fast fidelity's algebraic input node is back
    // above UVLO the same instant the charger lets go, so a cycle's lock-out can last no time and
    // leave no `lockout` row.)
    let restarts = |s: &Session| {
        s.result
            .runs
            .iter()
            .filter(|e| e.kind == EventKind::RegulationLoss && e.detail.contains("restarting"))
            .count()
    };
    let (lf, lt) = (restarts(&free), restarts(&floored));
    let (rf, rt) = (
        count(&free, EventKind::RegulationLoss),
        count(&floored, EventKind::RegulationLoss),
    );
    assert!(10 * lt < lf, "restarts {lt} with the floor vs {lf} without");
    assert!(
        10 * rt < rf,
        "regulation losses {rt} with the floor vs {rf} without"
    );
    assert!(
        floored.summary.charge_delivered_ah > free.summary.charge_delivered_ah,
        "the floor delivers more charge ({} vs {} Ah)",
        floored.summary.charge_delivered_ah,
        free.summary.charge_delivered_ah
    );
    assert!(floored.summary.energy_balance_error < 1e-3);
    // While charging, the input never sits below the floor.
    for r in &floored.result.trace.rows {
        if matches!(r.mode, Mode::Cc | Mode::Cv) && r.battery_current_a > 0.0 {
            assert!(
                r.input_v >= 8.0 - 1e-6,
                "t = {}: input {} V under the floor",
                r.time_s,
                r.input_v
            );
        }
    }
}

#[test]
fn input_floor_fidelities_agree_and_close_the_ledger() {
    let sc = load(&setup_path("demo"), &[("converter.input_floor_v", "13.0")]);
    let fast = run(&sc, Some(20.0), Fidelity::Fast);
    let detailed = run(&sc, Some(20.0), Fidelity::Detailed);
    for s in [&fast, &detailed] {
        assert!(s.summary.energy_balance_error < 1e-3);
    }
    // The floor is active in this run (the demo's input sags below 13 V without it), and while
    // it trims the current the charger is not holding its set point: out of regulation, in both
    // fidelities, for about the same time.
    assert!(fast
        .result
        .trace
        .rows
        .iter()
        .any(|r| r.mode == Mode::InputFloor && (r.input_v - 13.0).abs() < 1e-6));
    for s in [&fast, &detailed] {
        let rows = &s.result.trace.rows;
        assert!(rows.iter().any(|r| r.mode == Mode::InputFloor));
        assert!(rows
            .iter()
            .filter(|r| r.mode == Mode::InputFloor)
            .all(|r| !r.in_regulation));
    }
    let (rf, rd) = (
        fast.summary.in_regulation_fraction.unwrap(),
        detailed.summary.in_regulation_fraction.unwrap(),
    );
    assert!(
        rf < 0.99,
        "the floor's time counts against regulation: {rf}"
    );
    assert!((rf - rd).abs() <= 0.02, "fast {rf} vs detailed {rd}");
    let (qf, qd) = (
        fast.summary.charge_delivered_ah,
        detailed.summary.charge_delivered_ah,
    );
    assert!(
        (qf - qd).abs() <= 0.005 * qf,
        "fast {qf} vs detailed {qd} Ah"
    );
}

#[test]
fn input_floor_is_checked() {
    let w = WorkDir::new();
    // Below the UVLO off threshold it could never act.
    w.cmd()
        .args(["check", "demo", "--set", "converter.input_floor_v=9.0"])
        .assert()
        .code(2);
    // A linear charger has no floor.
    w.cmd()
        .args([
            "check",
            "lfp-linear",
            "--set",
            "converter.input_floor_v=13.0",
        ])
        .assert()
        .code(2);
    w.cmd()
        .args(["check", "demo", "--set", "converter.input_floor_v=12.0"])
        .assert()
        .code(0);
}

// ---------------------------------------------------------------------------------------------
// 5 V USB output
// ---------------------------------------------------------------------------------------------

/// The device figures of the shipped USB setup, read with the test's own parser.
#[derive(serde::Deserialize)]
struct UsbFile {
    usb: UsbSection,
}

#[derive(serde::Deserialize)]
struct UsbSection {
    device_current_a: f64,
    device_cutoff_v: f64,
    device_reconnect_delay_s: f64,
}

fn usb_file() -> UsbSection {
    let text = std::fs::read_to_string(setup_path("usb-phone")).expect("usb-phone.ron");
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str::<UsbFile>(&text)
        .expect("usb section")
        .usb
}

#[test]
fn usb_phone_demo_runs_end_to_end() {
    let w = WorkDir::new();
    let setup = setup_path("usb-phone");
    run_ok(&w, &["run", setup.to_str().expect("utf-8"), "--out", "usb"]);
    for f in RUN_FILES {
        assert!(w.path("usb").join(f).is_file(), "{f} written");
    }
    let m: serde_json::Value =
        serde_json::from_str(&w.read("usb/summary.json")).expect("summary.json");
    assert_eq!(m["output"], "usb_5v");
    let err = m["energy_balance_error"].as_f64().expect("ledger closure");
    assert!(err < 1e-3, "ledger closes to {err}");
    let (soc0, soc1) = (
        m["soc_start"].as_f64().expect("soc_start"),
        m["soc_end"].as_f64().expect("soc_end"),
    );
    assert!(
        soc1 > soc0 + 0.01,
        "the phone's cell charges: {soc0} -> {soc1}"
    );
    assert!(m["usb"]["energy_to_bus_wh"].as_f64().expect("bus energy") > 0.0);
    // The pass element's heat is in the ledger: bus energy = cell energy + device loss.
    let (bus, cell, loss) = (
        m["usb"]["energy_to_bus_wh"].as_f64().unwrap(),
        m["energy_to_battery_wh"].as_f64().unwrap(),
        m["usb"]["device_loss_wh"].as_f64().unwrap(),
    );
    assert!(loss > 0.0 && (bus - cell - loss).abs() < 1e-9 * bus);

    // trace.csv: the bus columns follow the contract ones, and output_v is the bus.
    let (header, rows) = read_csv(&w.path("usb/trace.csv"));
    assert_eq!(header[8], "output_v");
    assert!(header[16..].contains(&"bus_v".to_string()));
    assert!(header[16..].contains(&"bus_current_a".to_string()));
    let output = crate::common::column(&header, &rows, "output_v");
    let bus = crate::common::column(&header, &rows, "bus_v");
    let cell = crate::common::column(&header, &rows, "battery_v");
    assert_eq!(output, bus);
    // While the device charges at its full current, the bus sits above its cell.
    let i_bus = crate::common::column(&header, &rows, "bus_current_a");
    let charging: Vec<usize> = (0..rows.len()).filter(|&k| i_bus[k] > 0.5).collect();
    assert!(
        charging.len() > 1000,
        "the device draws for most of the session"
    );
    assert!(charging.iter().all(|&k| bus[k] > cell[k]));
}

/// A crank profile of the test's own: brisk, slowing down, too slow for the port, then brisk
/// again (a smooth operator, so the outcome does not hang on the wander).
const SLOW_MIDDLE: &str = r#"(
    name: "slow-middle",
    description: "test profile: 15 s brisk, 15 s slowing, 50 s too slow for the port, 20 s brisk",
    seed: 7,
    segments: [
        (duration_s: 15.0, cadence_rpm: 70.0),
        (duration_s: 15.0, cadence_rpm: 70.0, end_cadence_rpm: 42.0),
        (duration_s: 50.0, cadence_rpm: 42.0),
        (duration_s: 20.0, cadence_rpm: 70.0),
    ],
    operator: (
        peak_torque_n_m: 30.0,
        max_cadence_rpm: 220.0,
        critical_power_w: 65.0,
        w_prime_j: 9000.0,
        peak_power_w: 140.0,
        tracking_gain_n_m_per_rpm: 0.25,
        tracking_time_s: 1.5,
    ),
    jitter: (enabled: false),
)"#;

/// The usb-phone setup under the [`SLOW_MIDDLE`] profile, with overrides.
fn slow_usb_scenario(w: &WorkDir, sets: &[(&str, &str)]) -> Scenario {
    std::fs::write(w.path("slow.ron"), SLOW_MIDDLE).expect("profile");
    load_paths(&setup_path("usb-phone"), &w.path("slow.ron"), sets)
}

#[test]
fn usb_device_regulates_its_input_and_takes_what_a_slow_crank_can_give() {
    let w = WorkDir::new();
    let sc = slow_usb_scenario(&w, &[]);
    let dev = usb_file();
    let (fast, detailed) = std::thread::scope(|t| {
        let d = t.spawn(|| run(&sc, None, Fidelity::Detailed));
        (
            run(&sc, None, Fidelity::Fast),
            d.join().expect("detailed run"),
        )
    });
    for s in [&fast, &detailed] {
        let f = &s.summary.fidelity;
        let rows = &s.result.trace.rows;
        // In the slow stretch (42 rpm, 30–80 s) the port cannot hold the band at the full draw:
        // the device cuts its draw instead of letting go, the bus settles just above its input
        // regulation threshold (4.5 V, within the 50-mV span of its line), never at the cut-off.
        let slow: Vec<_> = rows
            .iter()
            .filter(|r| r.time_s > 40.0 && r.time_s < 80.0)
            .collect();
        assert!(!slow.is_empty());
        for r in &slow {
            assert!(
                r.bus_v >= 4.5 - 1e-3 && r.bus_v <= 4.55 + 1e-3 && r.bus_v < 4.75,
                "{f}: bus {} V at {} s",
                r.bus_v,
                r.time_s
            );
            assert!(
                r.bus_current_a > 0.05 && r.bus_current_a < dev.device_current_a,
                "{f}: {} A at {} s",
                r.bus_current_a,
                r.time_s
            );
        }
        assert_eq!(s.summary.usb.as_ref().unwrap().device_cutoffs, 0, "{f}");
        // Out of the band, so out of regulation there; back in it at the end.
        assert!(s.summary.in_regulation_fraction.unwrap() < 0.7, "{f}");
        assert!(rows
            .iter()
            .filter(|r| r.time_s > 90.0)
            .all(|r| r.in_regulation && (4.75..=5.25).contains(&r.bus_v)));
    }
    let (qf, qd) = (
        fast.summary.charge_delivered_ah,
        detailed.summary.charge_delivered_ah,
    );
    assert!(
        (qf - qd).abs() <= 0.005 * qd,
        "fast {qf} vs detailed {qd} Ah"
    );
}

#[test]
fn usb_bus_sags_under_a_slow_crank_and_the_device_cuts_off_and_reconnects() {
    let w = WorkDir::new();
    // A device without input regulation (its threshold below its cut-off): it draws its full
    // current until the bus reaches the cut-off.
    let sc = slow_usb_scenario(&w, &[("usb.device_input_regulation_v", "3.0")]);
    let dev = usb_file();
    let (fast, detailed) = std::thread::scope(|t| {
        let d = t.spawn(|| run(&sc, None, Fidelity::Detailed));
        (
            run(&sc, None, Fidelity::Fast),
            d.join().expect("detailed run"),
        )
    });
    for s in [&fast, &detailed] {
        let f = &s.summary.fidelity;
        let ev = &s.result.runs;
        // The bus sags out of the band first (the device still draws), then the device lets go.
        assert!(
            ev.iter().any(|e| e.kind == EventKind::RegulationLoss
                && e.detail.starts_with("bus outside the band")),
            "{f}: a regulation_loss for the sagging bus"
        );
        let cuts: Vec<&crankcharge::analysis::events::Event> = ev
            .iter()
            .filter(|e| e.kind == EventKind::DeviceCutoff)
            .collect();
        assert!(cuts.len() >= 2, "{f}: cut-offs {}", cuts.len());
        // Hysteresis: one cut-off per reconnect delay at most, never a burst at one instant.
        for pair in cuts.windows(2) {
            assert!(
                pair[1].start_s - pair[0].start_s >= dev.device_reconnect_delay_s - 1e-6,
                "{f}: cut-offs at {} and {} s",
                pair[0].start_s,
                pair[1].start_s
            );
        }
        assert!(
            cuts.len() as f64 <= 60.0 / dev.device_reconnect_delay_s + 2.0,
            "{f}: {} cut-offs in a 60-s slow stretch",
            cuts.len()
        );
        let first_cut = cuts[0].start_s;
        assert_eq!(s.summary.usb.as_ref().unwrap().device_cutoffs, cuts.len());
        assert!(s.summary.in_regulation_fraction.unwrap() < 0.5, "{f}");
        let rows = &s.result.trace.rows;
        // It reconnects: in the last brisk stretch it draws again from a bus inside the band.
        let back: Vec<_> = rows.iter().filter(|r| r.time_s > 90.0).collect();
        assert!(!back.is_empty());
        assert!(
            back.iter().all(|r| r.in_regulation
                && r.bus_current_a > 0.5
                && (4.75..=5.25).contains(&r.bus_v)),
            "{f}: the device is back on a good bus at the end"
        );
        // While the bus sags as the crank slows (converter saturated, device still on and long
        // since ramped up), the device keeps its full current: a current sink, unlike a battery
        // whose current falls with the voltage.
        let sagging: Vec<_> = rows
            .iter()
            .filter(|r| r.time_s < first_cut && r.time_s > 15.0)
            .filter(|r| r.mode == Mode::Dropout && r.bus_v < 4.75)
            .collect();
        assert!(sagging.len() >= 5, "{f}: {} sagging samples", sagging.len());
        for r in &sagging {
            // A device still on the bus sees it at or above its cut-off.
            assert!(r.bus_v >= dev.device_cutoff_v - 1e-6, "{f}: {} V", r.bus_v);
            assert!(
                (r.bus_current_a - dev.device_current_a).abs() < 1e-6,
                "{f}: {} A at {} V",
                r.bus_current_a,
                r.bus_v
            );
        }
        // Off the bus, the device draws nothing.
        assert!(rows
            .iter()
            .filter(|r| r.mode == Mode::DeviceOff)
            .all(|r| r.bus_current_a.abs() < 1e-9));
    }
    // The two fidelities agree on the cut-offs and on the charge.
    let n = |s: &Session| s.summary.usb.as_ref().unwrap().device_cutoffs as f64;
    assert!((n(&fast) - n(&detailed)).abs() <= 1.0);
    let (qf, qd) = (
        fast.summary.charge_delivered_ah,
        detailed.summary.charge_delivered_ah,
    );
    assert!(
        (qf - qd).abs() <= 0.005 * qd,
        "fast {qf} vs detailed {qd} Ah"
    );
}

#[test]
fn usb_port_is_checked() {
    let w = WorkDir::new();
    let setup = setup_path("usb-phone");
    let setup = setup.to_str().expect("utf-8");
    for (set, words) in [
        // A linear converter cannot hold a bus for a device.
        ("converter.topology=linear", "buck or buck_boost"),
        // The device needs hysteresis between letting go and coming back.
        ("usb.device_reconnect_v=4.3", "usb.device_reconnect_v"),
        // A two-cell pack's charge limit lies above a 5 V bus: it could never be charged.
        ("battery.cells_series=2", "charge limit"),
        (
            "usb.device_reconnect_delay_s=0",
            "usb.device_reconnect_delay_s",
        ),
    ] {
        let err = run_code(&w, &["check", setup, "--set", set], 2);
        assert!(err.contains(words), "--set {set}: {err}");
    }
    let out = run_ok(&w, &["check", setup]);
    assert!(out.contains("bus holds 4.75 V"), "{out}");
}

#[test]
fn usb_check_figures_are_ordered_and_scale_with_the_drive_ratio() {
    let w = WorkDir::new();
    let setup = setup_path("usb-phone");
    let setup = setup.to_str().expect("utf-8");
    let figures = |sets: &[&str]| -> serde_json::Value {
        let mut args = vec!["check", setup, "--json"];
        for s in sets {
            args.extend(["--set", s]);
        }
        let v: serde_json::Value = serde_json::from_str(&run_ok(&w, &args)).expect("json");
        v["usb"].clone()
    };
    let a = figures(&[]);
    let cad = |v: &serde_json::Value, k: &str| v[k].as_f64().unwrap_or_else(|| panic!("{k}: {v}"));
    let (cut, band, set) = (
        cad(&a, "cutoff_cadence_rpm"),
        cad(&a, "band_cadence_rpm"),
        cad(&a, "setpoint_cadence_rpm"),
    );
    // A lower bus voltage needs less cadence: cut-off (4.4 V) < band edge (4.75 V) < set point.
    assert!(0.0 < cut && cut < band && band < set, "{cut} {band} {set}");
    // The network sees only the generator speed: doubling the first ratio halves each cadence.
    let b = figures(&["drive.stages.0.ratio=7.0"]);
    for k in [
        "cutoff_cadence_rpm",
        "band_cadence_rpm",
        "setpoint_cadence_rpm",
    ] {
        assert!(
            (cad(&b, k) - cad(&a, k) / 2.0).abs() < 2e-3,
            "{k}: {} vs {}",
            cad(&b, k),
            cad(&a, k)
        );
    }
}

/// A buck-boost with large switch resistance holding its input floor: its output folds over
/// below D_max (more duty, more conduction loss, less current out), so at the floor no duty on
/// the rising side draws what the generator gives there. The operating point is taken past the
/// fold, where the input current still rises with duty; it must hold the floor and balance.
#[test]
fn a_lossy_buck_boost_holds_its_input_floor_past_the_fold_and_balances() {
    let sc = load(
        &setup_path("demo-buck-boost"),
        &[("converter.switch_resistance_ohm", "0.5")],
    );
    let floor_v = sc
        .setup
        .converter
        .input_floor_v
        .expect("demo-buck-boost ships an input floor");
    let plant = quiet_plant(&sc);
    let (term, mut d) = start_point(&plant, &sc);
    d.enabled = true;
    d.buck_mode = false;
    let target = 2.0;
    let mut past_fold = 0;
    for emf in [15.0, 16.0, 17.6, 19.0, 21.0] {
        let src = source_at(&plant, emf);
        let load = network::Load::Floored {
            conv: plant.converters(&d),
            target_a: target,
            floor_v,
        };
        let p = network::solve(&src, load, &term);
        let full = network::solve(&src, plant.converters(&d).charging(target), &term);
        if full.input_v >= floor_v {
            continue;
        }
        // The floor is held: the source's node sits at it.
        assert!(
            (p.input_v - floor_v).abs() < 1e-5,
            "EMF {emf} V: input {} V, floor {floor_v} V",
            p.input_v
        );
        // Source: Erickson & Maksimović, Fundamentals of Power Electronics, 2nd ed., ch. 3 — the
        // averaged converter's volt-second balance times the inductor current is its power
        // balance: what it draws at its input equals what it delivers plus its losses.
        let p_in = p.input_v * p.generator_current_a;
        let p_out = p.battery_v * p.battery_current_a + p.losses.total_w();
        assert!(
            (p_in - p_out).abs() < 1e-6 * p_in,
            "EMF {emf} V: {p_in} W in, {p_out} W out and lost"
        );
        assert!(p.battery_current_a < target, "EMF {emf} V: {p:?}");
        // Past the fold: more duty than the rising side's (smaller-root) duty for this current.
        let bb = plant.converters(&d).buck_boost;
        if bb.ccm_duty(floor_v, p.battery_v, p.battery_current_a) < p.balance_duty - 1e-6 {
            past_fold += 1;
        }
    }
    assert!(
        past_fold > 0,
        "no EMF put the floor past the fold; the check proves nothing"
    );

    // Over a minute of cranking the energy ledger closes (it was open by 7e-3 when the point
    // was taken at the fold with the input above the floor).
    let s = run(&sc, Some(60.0), Fidelity::Fast);
    // Common practice: an integration whose every evaluation balances its power closes the
    // ledger to about its tolerance times the energy moved (rtol 1e-4 here).
    assert!(
        s.summary.energy_balance_error < 3e-4,
        "ledger {}",
        s.summary.energy_balance_error
    );
    assert_eq!(s.summary.solver.tolerance_reruns, 0);
}

/// The detailed fidelity's buck-boost feed-forward past the same fold: where no duty delivers the
/// current reference, it takes the duty of the most current the input gives (where the balance's
/// two roots meet), so it runs on continuously instead of jumping to D_max (the jump made the
/// right-hand side switch faster than the solver could follow: such setups stopped with exit 3).
#[test]
fn a_lossy_buck_boost_feed_forward_runs_on_through_the_fold() {
    let sc = load(
        &setup_path("demo-buck-boost"),
        &[("converter.switch_resistance_ohm", "0.75")],
    );
    let plant = quiet_plant(&sc);
    let (_, mut d) = start_point(&plant, &sc);
    d.buck_mode = false;
    let bb = plant.converters(&d).buck_boost;
    let c = &sc.setup.converter;
    let (v_in, v_o) = (9.5, 11.0);
    // The current each duty delivers at this input and output, straight from the volt-second
    // balance d·(V_in − 2V_sw − 2·I_L·R_on) = (1 − d)·(V_o + 2V_D) + I_L·R_L with I = (1 − d)·I_L
    // (Erickson & Maksimović, 2nd ed., ch. 3, with the drops of both switches and diodes), on a
    // fine grid of duties: the most it gives, and where.
    let current_at = |dd: f64| {
        let drive =
            dd * (v_in - 2.0 * c.switch_drop_v) - (1.0 - dd) * (v_o + 2.0 * c.catch_diode_drop_v);
        (1.0 - dd) * drive / (2.0 * dd * c.switch_resistance_ohm + c.inductor_resistance_ohm)
    };
    let (d_peak, i_peak) = (1..100_000)
        .map(|k| f64::from(k) * 1e-5)
        .map(|dd| (dd, current_at(dd)))
        .fold(
            (0.0, f64::MIN),
            |best, p| if p.1 > best.1 { p } else { best },
        );
    assert!(
        d_peak < bb.max_duty,
        "the fold {d_peak} must lie below D_max for this check"
    );
    // Just short of the most current: the rising-side duty; just past it: the fold's duty.
    let below = bb.feed_forward_duty(v_in, v_o, i_peak * (1.0 - 1e-6));
    let past = bb.feed_forward_duty(v_in, v_o, i_peak * (1.0 + 1e-6));
    assert!(
        (below - d_peak).abs() < 2e-3,
        "{below} vs the fold at {d_peak}"
    );
    assert!(
        (past - d_peak).abs() < 2e-3,
        "{past} vs the fold at {d_peak}"
    );
    assert!(bb.feed_forward_duty(v_in, v_o, 2.0 * i_peak) < bb.max_duty);

    // Ten seconds of the detailed fidelity through the lock-out, soft start and floor now run.
    let s = run(&sc, Some(10.0), Fidelity::Detailed);
    // Common practice: every evaluation balances its power, so the ledger closes to about the
    // tolerance times the energy moved.
    assert!(
        s.summary.energy_balance_error < 1e-4,
        "{}",
        s.summary.energy_balance_error
    );
}

/// Where a lossy buck-boost's output folds over: the duty of the most output, from the published
/// conversion ratio of a buck-boost with inductor winding resistance on a resistive load.
#[test]
fn the_fold_duty_is_where_the_published_conversion_ratio_peaks() {
    // From memory: Erickson & Maksimović, Fundamentals of Power Electronics, 2nd ed. (2001),
    // ch. 3 (steady-state equivalent circuits with losses): a buck-boost with inductor
    // resistance R_L into a load R has M(D) = D/(1 − D) · 1/(1 + R_L/((1 − D)²·R)); unlike the
    // ideal D/(1 − D) it has a maximum below D = 1, the sharper the larger R_L/R. Valid for CCM
    // with ideal switches and diodes (as set here).
    let r_load = 10.0;
    for r_l in [0.2, 0.5, 1.0] {
        let bb = BuckBoostModel {
            inductor_resistance_ohm: r_l,
            ..ideal_buck_boost(1e-4, 100e3)
        };
        let term = Terminal::Linear {
            rest_v: 0.0,
            r_ohm: r_load,
        };
        let m = |d: f64| d / (1.0 - d) / (1.0 + r_l / ((1.0 - d).powi(2) * r_load));
        let (d_peak, _) = (1..1_000_000)
            .map(|k| f64::from(k) * 1e-6)
            .map(|d| (d, m(d)))
            .fold((0.0, f64::MIN), |b, p| if p.1 > b.1 { p } else { b });
        let (got, i_fold) = network::bb_fold(&bb, &term, 12.0).expect("folds below D_max");
        // The current there is the load's: M(D)·V_in/R.
        assert!((i_fold - m(got) * 12.0 / r_load).abs() < 1e-6 * i_fold);
        assert!(
            (got - d_peak).abs() < 1e-5,
            "R_L {r_l} Ω: fold at {got}, M(D) peaks at {d_peak}"
        );
    }
    // A converter whose output still rises at D_max has no fold to report.
    let term = Terminal::Linear {
        rest_v: 0.0,
        r_ohm: r_load,
    };
    let small = BuckBoostModel {
        inductor_resistance_ohm: 0.01,
        ..ideal_buck_boost(1e-4, 100e3)
    };
    assert_eq!(network::bb_fold(&small, &term, 12.0), None);
}

/// An input floor the generator cannot reach yet (spin-up, a slow crank) idles the charger: its
/// floor loop asks for no current, so the input stays near the EMF, above UVLO. The fast fidelity
/// used to ask for the full current there, pull the input under UVLO and restart it again and
/// again, every millisecond or so (215 mode changes in the first 5 s of the buck-boost twin,
/// where the detailed fidelity, whose floor loop acts on its current reference, has 5).
#[test]
fn an_input_floor_above_the_emf_idles_the_charger_instead_of_cycling_it() {
    let sc = load(&setup_path("demo-buck-boost"), &[]);
    let c = &sc.setup.converter;
    let floor_v = c
        .input_floor_v
        .expect("demo-buck-boost ships an input floor");
    let plant = quiet_plant(&sc);
    let (term, mut d) = start_point(&plant, &sc);
    d.enabled = true;
    for emf in [
        c.uvlo_on_v + 0.1,
        0.5 * (c.uvlo_on_v + floor_v),
        floor_v - 0.01,
    ] {
        let src = source_at(&plant, emf);
        let p = network::solve(
            &src,
            network::Load::Floored {
                conv: plant.converters(&d),
                target_a: 2.0,
                floor_v,
            },
            &term,
        );
        assert!(p.battery_current_a.abs() < 1e-9, "EMF {emf} V: {p:?}");
        assert!(
            p.input_v > c.uvlo_off_v && p.input_v > emf - 0.5,
            "EMF {emf} V: the idle input sags to {} V",
            p.input_v
        );
    }
    // Through the spin-up the two fidelities now change mode alike.
    let fast = run(&sc, Some(5.0), Fidelity::Fast);
    let detailed = run(&sc, Some(5.0), Fidelity::Detailed);
    let (mf, md) = (
        fast.summary.solver.mode_changes,
        detailed.summary.solver.mode_changes,
    );
    assert!(mf <= 2 * md + 2, "{mf} mode changes fast, {md} detailed");
}
