//! The figures of one design over a population of operators: N sessions with common random
//! numbers (operator i is the same person at every design point: montecarlo's run i, the same
//! jitter seed and the same standard-normal draws of capacity and cadence), reduced to
//! probabilities with Wilson intervals and charge percentiles. Cost: N sessions, in parallel.

use rayon::prelude::*;

use super::outcome::Failure;
use crate::analysis::events::EventKind;
use crate::analysis::stats;
use crate::scenario::Scenario;
use crate::units::v_per_krpm_to_v_s_per_rad;

use super::args::session_or_failure;
use super::goal::Sense;
use super::montecarlo::{draw_operator, run_seed, with_draw};
use super::session::RunSettings;

/// The normal quantile of a two-sided 95 % interval.
const Z95: f64 = 1.959_963_984_540_054;

/// One figure of a design point (a column of `points.csv`).
#[derive(Debug, Clone, Copy)]
pub struct FigureDef {
    pub name: &'static str,
    /// Which way is better, for `--pareto` without a sense and for the charts.
    pub better: Sense,
    pub about: &'static str,
}

const fn fig(name: &'static str, better: Sense, about: &'static str) -> FigureDef {
    FigureDef {
        name,
        better,
        about,
    }
}

/// The figures, in `points.csv` column order.
pub const FIGURES: [FigureDef; 19] = [
    fig("operators", Sense::Max, "operators whose session completed"),
    fig("runs_failed", Sense::Min, "operators whose session failed (left out of the figures)"),
    fig("p_overcharge", Sense::Min, "share of operators whose session overcharged"),
    fig("p_overcharge_lo", Sense::Min, "Wilson 95 % interval of p_overcharge, lower end"),
    fig("p_overcharge_hi", Sense::Min, "Wilson 95 % interval of p_overcharge, upper end"),
    fig(
        "p_fail_regulation",
        Sense::Min,
        "share of operators in regulation less than alerts.min_in_regulation_fraction of their cranking time (empty for a direct design)",
    ),
    fig("p_fail_regulation_lo", Sense::Min, "Wilson 95 % interval, lower end"),
    fig("p_fail_regulation_hi", Sense::Min, "Wilson 95 % interval, upper end"),
    fig(
        "p_operator_overload",
        Sense::Min,
        "share of operators with at least one operator_overload row",
    ),
    fig("p_operator_overload_lo", Sense::Min, "Wilson 95 % interval, lower end"),
    fig("p_operator_overload_hi", Sense::Min, "Wilson 95 % interval, upper end"),
    fig("charge_mean_ah", Sense::Max, "mean charge delivered, Ah"),
    fig("charge_p10_ah", Sense::Max, "10th percentile of charge delivered (R-7), Ah"),
    fig("energy_mean_wh", Sense::Max, "mean energy into the battery, Wh"),
    fig("mean_operator_power_w", Sense::Min, "mean over operators of their mean crank power, W"),
    fig(
        "in_regulation_p10",
        Sense::Max,
        "10th percentile of the in-regulation fraction (empty for a direct design)",
    ),
    fig(
        "regulation_cadence_rpm",
        Sense::Min,
        "crank cadence from which the converter holds its start target (as check computes it), rpm",
    ),
    fig(
        "generator_mass_proxy_n2m2_per_w",
        Sense::Min,
        "generator size proxy k_t²/R (the motor constant squared), N²·m²/W",
    ),
    fig(
        "tolerance_reruns",
        Sense::Min,
        "operators whose session was run again at a tighter tolerance (its energy ledger did not close at the setup's)",
    ),
];

/// Index of a figure by name.
pub fn figure_index(name: &str) -> Option<usize> {
    FIGURES.iter().position(|f| f.name == name)
}

/// The figures of one point, in [`FIGURES`] order (None: does not apply, or no run completed).
#[derive(Debug, Clone, PartialEq)]
pub struct Figures(pub Vec<Option<f64>>);

impl Figures {
    /// A figure by name.
    pub fn get(&self, name: &str) -> Option<f64> {
        figure_index(name).and_then(|i| self.0.get(i).copied().flatten())
    }
}

/// Generator size proxy: the motor constant squared, k_m² = k_t²/R (k_t = k_e in SI, R the
/// armature resistance at 20 °C), N²·m²/W.
///
/// From memory: for permanent-magnet machines of one construction (same air-gap flux density,
/// same current loading), the motor constant squared grows in proportion to the active volume,
/// so k_t²/R ranks machines by active volume and hence by mass (motor design texts, e.g. Hughes &
/// Drury, Electric Motors and Drives, on the motor constant; Hendershot & Miller on sizing by
/// torque per rotor volume). A ranking proxy only: not a mass in kilograms.
pub fn generator_mass_proxy(back_emf_v_per_krpm: f64, resistance_ohm: f64) -> f64 {
    let kt = v_per_krpm_to_v_s_per_rad(back_emf_v_per_krpm);
    kt * kt / resistance_ohm
}

/// What one operator's session left for the figures.
struct RunFigures {
    overcharge: bool,
    overload: bool,
    in_regulation: Option<f64>,
    charge_ah: f64,
    energy_wh: f64,
    power_w: f64,
    regulation_cadence_rpm: Option<f64>,
    rerun: bool,
}

/// Runs `operators` sessions of a scenario (operator i as montecarlo's run i from `base_seed`)
/// and reduces them to [`Figures`]; `tick` is called after each session. Fails only when every
/// session fails (with the first failure).
pub fn evaluate(
    sc: &Scenario,
    settings: &RunSettings,
    base_seed: u64,
    operators: usize,
    tick: &(dyn Fn() + Sync),
) -> Result<Figures, Failure> {
    let runs: Vec<Result<RunFigures, Failure>> = (0..operators)
        .into_par_iter()
        .map(|i| {
            let seed = run_seed(base_seed, i as u64);
            let draw = draw_operator(sc, seed);
            let run_sc = with_draw(sc, &draw);
            let mut rs = *settings;
            rs.seed = Some(seed);
            rs.cadence_offset_rpm = draw.cadence_offset_rpm;
            let r = session_or_failure(&run_sc, &rs).map(|s| {
                let m = s.summary;
                let events = m.events();
                RunFigures {
                    overcharge: m.overcharged(),
                    overload: events.iter().any(|e| e.kind == EventKind::OperatorOverload),
                    in_regulation: m.in_regulation_fraction,
                    charge_ah: m.charge_delivered_ah,
                    energy_wh: m.energy_to_battery_wh,
                    power_w: m.mean_operator_power_w,
                    regulation_cadence_rpm: m.regulation_cadence_rpm,
                    rerun: m.solver.tolerance_reruns > 0,
                }
            });
            tick();
            r
        })
        .collect();
    let failed = runs.iter().filter(|r| r.is_err()).count();
    let done: Vec<&RunFigures> = runs.iter().filter_map(|r| r.as_ref().ok()).collect();
    if done.is_empty() {
        return Err(runs
            .into_iter()
            .find_map(Result::err)
            .unwrap_or_else(|| Failure::Sim(anyhow::anyhow!("no operator ran"))));
    }
    let n = done.len();
    let share = |k: usize| -> [Option<f64>; 3] {
        let p = k as f64 / n as f64;
        let (lo, hi) = stats::wilson_interval(k, n, Z95).unwrap_or((0.0, 1.0));
        // The interval holds p̂; rounding can leave an end a few ulp on the wrong side of it.
        [Some(p), Some(lo.min(p)), Some(hi.max(p))]
    };
    let over = done.iter().filter(|r| r.overcharge).count();
    let overload = done.iter().filter(|r| r.overload).count();
    let regulation: Vec<f64> = done.iter().filter_map(|r| r.in_regulation).collect();
    let min_reg = sc.setup.alerts.min_in_regulation_fraction;
    let p_reg = if regulation.len() == n {
        share(regulation.iter().filter(|&&f| f < min_reg).count())
    } else {
        [None; 3]
    };
    let charge: Vec<f64> = done.iter().map(|r| r.charge_ah).collect();
    let energy: Vec<f64> = done.iter().map(|r| r.energy_wh).collect();
    let power: Vec<f64> = done.iter().map(|r| r.power_w).collect();
    let g = &sc.setup.generator;
    let mut v = vec![Some(n as f64), Some(failed as f64)];
    v.extend(share(over));
    v.extend(p_reg);
    v.extend(share(overload));
    v.extend([
        stats::mean(&charge),
        stats::percentile(&charge, 10.0),
        stats::mean(&energy),
        stats::mean(&power),
        if regulation.len() == n {
            stats::percentile(&regulation, 10.0)
        } else {
            None
        },
        done[0].regulation_cadence_rpm,
        Some(generator_mass_proxy(
            g.back_emf_v_per_krpm,
            g.resistance_ohm,
        )),
        Some(done.iter().filter(|r| r.rerun).count() as f64),
    ]);
    debug_assert_eq!(v.len(), FIGURES.len());
    Ok(Figures(v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mass_proxy_is_the_motor_constant_squared() {
        // Source: SI definition of the back-EMF constant: 1 V/krpm = 60/(2π·1000) V·s/rad; with
        // k_t = k_e in SI, k_m² = k_t²/R. 12 V/krpm and 1.5 Ω: k_t = 0.114592 V·s/rad.
        let kt = 12.0 * 60.0 / (2.0 * std::f64::consts::PI * 1000.0);
        let p = generator_mass_proxy(12.0, 1.5);
        assert!((p - kt * kt / 1.5).abs() < 1e-15, "{p}");
        assert!((p - 0.008_754_3).abs() < 1e-6, "{p}");
        // Same winding in a doubled stack: twice the EMF constant and twice the resistance.
        assert!((generator_mass_proxy(24.0, 3.0) / p - 2.0).abs() < 1e-12);
    }

    #[test]
    fn figure_names_are_unique_and_unit_suffixed_where_they_have_units() {
        for (i, f) in FIGURES.iter().enumerate() {
            assert_eq!(figure_index(f.name), Some(i), "{} twice", f.name);
        }
        assert!(figure_index("charge_p10_ah").is_some());
        assert!(figure_index("nonsense").is_none());
    }
}
