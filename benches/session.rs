//! Session benchmark: wall time, steps, evaluations and real-time factor per 10-minute session for
//! shipped setups at both fidelities. Prints a table; run with `cargo bench --bench session`.
//!
//! Integrator choice (detailed fidelity): explicit Dopri5 from ode_solvers. Its step is set by
//! stability (output capacitor against the battery's R0: τ ≈ 5 µs), about 16 µs, so a detailed
//! session costs ~60 000 steps per simulated second. The figures below are the measurement a
//! stiff-capable integrator would have to beat; none is adopted yet.

use std::time::Instant;

use crankcharge::scenario::load::{InputKind, Override, SourceText};
use crankcharge::scenario::load_scenario;
use crankcharge::simulate::Fidelity;
use crankcharge::studies::session::{run_session, RunSettings};

/// One measured case.
struct Case {
    setup: &'static str,
    fidelity: Fidelity,
    duration_s: f64,
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick");
    let cases = [
        Case {
            setup: "demo",
            fidelity: Fidelity::Fast,
            duration_s: 600.0,
        },
        Case {
            setup: "lead-acid-direct",
            fidelity: Fidelity::Fast,
            duration_s: 600.0,
        },
        Case {
            setup: "demo",
            fidelity: Fidelity::Detailed,
            duration_s: if quick { 2.0 } else { 10.0 },
        },
        Case {
            setup: "lead-acid-direct",
            fidelity: Fidelity::Detailed,
            duration_s: if quick { 2.0 } else { 10.0 },
        },
        Case {
            setup: "usb-phone",
            fidelity: Fidelity::Fast,
            duration_s: 600.0,
        },
        Case {
            setup: "usb-phone",
            fidelity: Fidelity::Detailed,
            duration_s: if quick { 2.0 } else { 10.0 },
        },
    ];
    println!(
        "{:<18} {:<9} {:>9} {:>10} {:>10} {:>9} {:>12} {:>9} {:>12}",
        "setup",
        "fidelity",
        "sim [s]",
        "wall [ms]",
        "accepted",
        "rejected",
        "evaluations",
        "ns/eval",
        "real-time x"
    );
    for c in &cases {
        let setup = SourceText::resolve(Some(c.setup), InputKind::Setup).expect("shipped setup");
        let profile = SourceText::resolve(None, InputKind::Profile).expect("shipped profile");
        let sc = load_scenario(&setup, &profile, &Vec::<Override>::new()).expect("valid scenario");
        let rs = RunSettings {
            duration_s: Some(c.duration_s),
            fidelity: c.fidelity,
            ..RunSettings::default()
        };
        let repeats = if c.fidelity == Fidelity::Fast { 3 } else { 1 };
        let mut best = f64::INFINITY;
        let mut stats = None;
        for _ in 0..repeats {
            let t0 = Instant::now();
            let s = run_session(&sc, &rs).expect("session runs");
            best = best.min(t0.elapsed().as_secs_f64());
            stats = Some(s.summary.solver);
        }
        let st = stats.expect("at least one run");
        println!(
            "{:<18} {:<9} {:>9.0} {:>10.1} {:>10} {:>9} {:>12} {:>9.0} {:>12.0}",
            c.setup,
            c.fidelity.as_str(),
            c.duration_s,
            best * 1e3,
            st.accepted_steps,
            st.rejected_steps,
            st.evaluations,
            best * 1e9 / st.evaluations.max(1) as f64,
            c.duration_s / best
        );
    }
}
