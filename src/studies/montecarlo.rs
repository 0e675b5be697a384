//! `montecarlo`: a population of operators on one design. Cost: N sessions, run in parallel on
//! every core (rayon), then the histograms.
//!
//! Run i gets its own seed, the (i + 1)-th output of a SplitMix64 stream started at `--seed S`
//! (default: the profile's seed); it seeds the jitter and, through a second mixed seed, the draws
//! of the operator's capacities where the profile gives spreads (`operator.spread`): critical
//! power and W′ from normal laws clamped into their valid ranges (peak power lifted to at least the
//! drawn CP), and an own cadence offset added to every target. Results are gathered in run order,
//! so `runs.csv` and `montecarlo.json` are the same for the same seed whatever the thread count.
//! A run that fails is counted and listed; the study fails (exit 3) only if every run fails.

use std::io::Write;
use std::path::PathBuf;

use anyhow::anyhow;
use clap::Args;
use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::Serialize;

use super::outcome::{say, Failure, EXIT_OK};
use crate::analysis::stats;
use crate::analysis::summary::{fmt, Summary, MARGINAL, SCALAR_KEYS};
use crate::output::csv::table_csv;
use crate::output::json::to_json;
use crate::output::rundir::Staging;
use crate::output::{plot, report};
use crate::scenario::Scenario;

use super::args::{scenario_from, session_or_failure, settings_from, SessionArgs};
use super::check::build_plant;
use super::pages;

/// Most runs one study may have.
pub const MAX_RUNS: usize = 100_000;

/// Valid ranges of the drawn capacities (as validated for a profile), and the offset bound.
const CP_RANGE_W: (f64, f64) = (5.0, 500.0);
const W_PRIME_RANGE_J: (f64, f64) = (0.0, 100_000.0);
const CADENCE_OFFSET_LIMIT_RPM: f64 = 100.0;
/// Mixed into a run's seed to seed its capacity draws apart from its jitter stream.
const CAPACITY_STREAM: u64 = 0x6f70_6572_6174_6f72;

/// Arguments of `montecarlo`.
#[derive(Debug, Clone, Args)]
pub struct MontecarloArgs {
    /// Setup file (.ron) or shipped name; none uses the embedded demo.
    pub setup: Option<String>,
    /// Number of operators (sessions), 1 ..= 100000.
    #[arg(long, value_parser = parse_runs)]
    pub runs: usize,
    #[command(flatten)]
    pub session: SessionArgs,
    /// Output folder (default: outputs/montecarlo).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the histograms.
    #[arg(long)]
    pub no_plot: bool,
}

fn parse_runs(s: &str) -> Result<usize, String> {
    let n: usize = s
        .trim()
        .parse()
        .map_err(|_| format!("'{s}' is not a whole number of runs (1 ..= {MAX_RUNS})"))?;
    if (1..=MAX_RUNS).contains(&n) {
        Ok(n)
    } else {
        Err(format!(
            "{n} runs is out of range; allowed 1 ..= {MAX_RUNS}"
        ))
    }
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014): a bijection of u64 with good avalanche.
pub fn splitmix64_mix(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// Seed of run `index`: the (index + 1)-th output of SplitMix64 seeded with `base`. Distinct runs
/// of one study always get distinct seeds.
pub fn run_seed(base: u64, index: u64) -> u64 {
    splitmix64_mix(base.wrapping_add(0x9e37_79b9_7f4a_7c15_u64.wrapping_mul(index + 1)))
}

/// The operator drawn for one run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Draw {
    pub critical_power_w: f64,
    pub w_prime_j: f64,
    pub cadence_offset_rpm: f64,
}

/// Draws the operator's capacities for a run seed: mean + spread·z, clamped into range. Three
/// normals are always drawn, so a zero spread simply gives the profile's value.
pub fn draw_operator(sc: &Scenario, seed: u64) -> Draw {
    let o = &sc.profile.operator;
    let mut rng = StdRng::seed_from_u64(splitmix64_mix(seed ^ CAPACITY_STREAM));
    let mut z = || -> f64 { StandardNormal.sample(&mut rng) };
    let (z1, z2, z3) = (z(), z(), z());
    Draw {
        critical_power_w: (o.critical_power_w + o.spread.critical_power_w * z1)
            .clamp(CP_RANGE_W.0, CP_RANGE_W.1),
        w_prime_j: (o.w_prime_j + o.spread.w_prime_j * z2)
            .clamp(W_PRIME_RANGE_J.0, W_PRIME_RANGE_J.1),
        cadence_offset_rpm: (o.spread.cadence_rpm * z3)
            .clamp(-CADENCE_OFFSET_LIMIT_RPM, CADENCE_OFFSET_LIMIT_RPM),
    }
}

/// The scenario of one run: the profile's operator with the drawn capacities.
pub fn with_draw(sc: &Scenario, d: &Draw) -> Scenario {
    let mut s = sc.clone();
    let o = &mut s.profile.operator;
    o.critical_power_w = d.critical_power_w;
    o.w_prime_j = d.w_prime_j;
    o.peak_power_w = o.peak_power_w.max(d.critical_power_w);
    s
}

/// Percentiles and range of one metric over the completed runs.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Spread {
    pub p5: f64,
    pub p50: f64,
    pub p95: f64,
    pub mean: f64,
    pub min: f64,
    pub max: f64,
}

impl Spread {
    fn of(v: &[f64]) -> Self {
        let p = |q| stats::percentile(v, q).unwrap_or(0.0);
        let (min, max) = stats::min_max(v).unwrap_or((0.0, 0.0));
        Self {
            p5: p(5.0),
            p50: p(50.0),
            p95: p(95.0),
            mean: stats::mean(v).unwrap_or(0.0),
            min,
            max,
        }
    }
}

/// A failed run, as listed in `montecarlo.json`.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct FailedRun {
    pub run: usize,
    pub seed: u64,
    pub error: String,
}

/// `montecarlo.json`.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Report {
    pub setup: String,
    pub profile: String,
    /// Completed runs (the sample behind every figure below).
    pub runs: usize,
    pub runs_requested: usize,
    pub runs_failed: usize,
    pub base_seed: u64,
    pub duration_s: f64,
    pub fidelity: String,
    pub charge_delivered_ah: Spread,
    /// `null` for a direct design (nothing regulates).
    pub in_regulation_fraction: Option<Spread>,
    pub operator_work_j: Spread,
    pub mean_operator_power_w: Spread,
    pub max_battery_v: Spread,
    /// Fraction of completed runs that overcharged ([`Summary::overcharged`]).
    pub overcharge_probability: f64,
    /// Wilson 95 % interval of that fraction.
    pub overcharge_probability_95: (f64, f64),
    /// Fraction of completed runs in regulation less than `alerts.min_in_regulation_fraction`
    /// of their cranking time (`null` for a direct design), and its Wilson 95 % interval.
    pub regulation_failure_probability: Option<f64>,
    pub regulation_failure_probability_95: Option<(f64, f64)>,
    /// Fraction of completed runs whose verdict is `marginal` (a figure too close to its
    /// threshold for one operator to decide; the spread above decides it).
    pub marginal_probability: f64,
    /// Fraction of completed runs with verdict `ok`.
    pub ok_probability: f64,
    /// Completed runs that were run again at a tighter tolerance because their energy ledger did
    /// not close at the setup's (`tolerance_reruns` in `runs.csv`).
    pub tolerance_reruns: usize,
    /// Spreads used for the operator draws (standard deviations).
    pub spread_critical_power_w: f64,
    pub spread_w_prime_j: f64,
    pub spread_cadence_rpm: f64,
    pub failures: Vec<FailedRun>,
}

/// Executes `montecarlo`.
pub fn run(a: &MontecarloArgs) -> Result<i32, Failure> {
    let sc = scenario_from(a.setup.as_deref(), &a.session)?;
    build_plant(&sc)?;
    let base = a.session.seed.unwrap_or(sc.profile.seed);
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("montecarlo"));
    let staging = Staging::prepare(&out, "montecarlo", a.session.force)
        .map_err(|e| Failure::Input(e.into()))?;
    let base_settings = settings_from(&a.session);

    let bar = super::progress::CountBar::new(a.runs as u64, "montecarlo", "runs", a.session.quiet);
    let results: Vec<(u64, Draw, Result<Summary, Failure>)> = (0..a.runs)
        .into_par_iter()
        .map(|i| {
            let seed = run_seed(base, i as u64);
            let draw = draw_operator(&sc, seed);
            let run_sc = with_draw(&sc, &draw);
            let mut rs = base_settings;
            rs.seed = Some(seed);
            rs.cadence_offset_rpm = draw.cadence_offset_rpm;
            let r = session_or_failure(&run_sc, &rs).map(|s| s.summary);
            bar.inc();
            (seed, draw, r)
        })
        .collect();
    bar.finish();

    let mut header = vec!["seed".to_string()];
    header.extend(SCALAR_KEYS.iter().map(|k| k.to_string()));
    header.extend(
        [
            "run",
            "critical_power_w",
            "w_prime_j",
            "cadence_offset_rpm",
            "setup",
            "profile",
        ]
        .map(String::from),
    );
    let mut rows = Vec::new();
    let mut done: Vec<&Summary> = Vec::new();
    let mut failures = Vec::new();
    for (i, (seed, d, r)) in results.iter().enumerate() {
        match r {
            Ok(m) => {
                let mut row = vec![seed.to_string()];
                row.extend(m.scalar_values());
                row.extend([
                    i.to_string(),
                    fmt(d.critical_power_w),
                    fmt(d.w_prime_j),
                    fmt(d.cadence_offset_rpm),
                    m.setup.clone(),
                    m.profile.clone(),
                ]);
                rows.push(row);
                done.push(m);
            }
            Err(e) => failures.push(FailedRun {
                run: i,
                seed: *seed,
                error: e.to_string(),
            }),
        }
    }
    if done.is_empty() {
        let first = failures.first().map_or(String::new(), |f| f.error.clone());
        return Err(Failure::Sim(anyhow!(
            "all {} runs failed; the first (run 0, seed {}): {first}",
            a.runs,
            results[0].0
        )));
    }

    let metric = |f: fn(&Summary) -> f64| -> Vec<f64> { done.iter().map(|m| f(m)).collect() };
    let charge = metric(|m| m.charge_delivered_ah);
    let reg: Vec<f64> = done
        .iter()
        .filter_map(|m| m.in_regulation_fraction)
        .collect();
    let work = metric(|m| m.operator_work_j);
    let n = done.len();
    let over = done.iter().filter(|m| m.overcharged()).count();
    let min_reg = sc.setup.alerts.min_in_regulation_fraction;
    let fails = reg.iter().filter(|&&f| f < min_reg).count();
    let regulated = !reg.is_empty();
    let marginal = done.iter().filter(|m| m.verdict.has(MARGINAL)).count();
    let ok = done.iter().filter(|m| !m.verdict.flagged()).count();
    let ci = |k| stats::wilson_interval(k, n, 1.96).unwrap_or((0.0, 1.0));
    let spread = &sc.profile.operator.spread;
    let report = Report {
        setup: sc.setup.name.clone(),
        profile: sc.profile.name.clone(),
        runs: n,
        runs_requested: a.runs,
        runs_failed: failures.len(),
        base_seed: base,
        duration_s: done[0].duration_s,
        fidelity: done[0].fidelity.clone(),
        charge_delivered_ah: Spread::of(&charge),
        in_regulation_fraction: regulated.then(|| Spread::of(&reg)),
        operator_work_j: Spread::of(&work),
        mean_operator_power_w: Spread::of(&metric(|m| m.mean_operator_power_w)),
        max_battery_v: Spread::of(&metric(|m| m.max_battery_v)),
        overcharge_probability: over as f64 / n as f64,
        overcharge_probability_95: ci(over),
        regulation_failure_probability: regulated.then_some(fails as f64 / n as f64),
        regulation_failure_probability_95: regulated.then(|| ci(fails)),
        marginal_probability: marginal as f64 / n as f64,
        ok_probability: ok as f64 / n as f64,
        tolerance_reruns: done
            .iter()
            .filter(|m| m.solver.tolerance_reruns > 0)
            .count(),
        spread_critical_power_w: spread.critical_power_w,
        spread_w_prime_j: spread.w_prime_j,
        spread_cadence_rpm: spread.cadence_rpm,
        failures,
    };

    let other = |e: &dyn std::fmt::Display| Failure::Other(anyhow!("{e}"));
    let csv = table_csv(&header, &rows).map_err(|e| other(&e))?;
    staging.write("runs.csv", &csv).map_err(|e| other(&e))?;
    let json = to_json(&report).map_err(|e| other(&e))?;
    staging
        .write("montecarlo.json", &json)
        .map_err(|e| other(&e))?;
    let mut charts = Vec::new();
    if !a.no_plot {
        let mut panels: Vec<(&str, &str, &[f64])> = vec![("charge delivered", "Ah", &charge)];
        let mut marks = vec![None];
        if regulated {
            panels.push(("in-regulation fraction", "1", &reg));
            marks.push(Some(sc.setup.alerts.min_in_regulation_fraction));
        }
        panels.push(("operator work", "J", &work));
        marks.push(None);
        let chart = plot::histogram_chart_marked(
            &panels,
            &marks,
            &format!("{} operators: {} / {}", n, report.setup, report.profile),
        )
        .map_err(|e| other(&e))?;
        staging
            .write("montecarlo.png", &chart.png)
            .map_err(|e| other(&e))?;
        staging
            .write("montecarlo.svg", chart.svg.as_bytes())
            .map_err(|e| other(&e))?;
        charts.push((
            chart.svg,
            "Histograms over the operators of the charge delivered, the time in regulation and the operator's work.".to_string(),
        ));
    }
    let mut notes = vec![
        format!(
            "{} of {} runs done, base seed {}, {:.0}-s sessions, {} fidelity.",
            report.runs,
            report.runs_requested,
            report.base_seed,
            report.duration_s,
            report.fidelity
        ),
        probabilities_line(&report),
    ];
    notes.extend(report.failures.iter().map(|f| {
        format!(
            "Run {} (seed {}) failed and is left out: {}",
            f.run, f.seed, f.error
        )
    }));
    notes.extend(rerun_note(&report).map(|n| format!("Note: {n}.")));
    let page = pages::study_page(
        &[&sc],
        "crankcharge montecarlo",
        &format!("{} operators: {} / {}", n, report.setup, report.profile),
        (
            SPREAD_HEADER.map(String::from).to_vec(),
            spread_rows(&report),
        ),
        charts,
        notes,
    );
    staging
        .write("report.html", report::render(&page).as_bytes())
        .map_err(|e| other(&e))?;
    let dir = staging.commit().map_err(|e| other(&e))?;
    print_report(&report, &dir);
    Ok(EXIT_OK)
}

fn print_report(r: &Report, dir: &std::path::Path) {
    say(&format!(
        "montecarlo: {} / {}, {} of {} runs done, base seed {}, {:.0} s sessions",
        r.setup, r.profile, r.runs, r.runs_requested, r.base_seed, r.duration_s
    ));
    let rows = spread_rows(r);
    let header = SPREAD_HEADER;
    for line in
        super::compare::aligned_table(&header, &rows, &[false, true, true, true, true, true])
    {
        say(&format!("  {line}"));
    }
    say(&format!("  {}", probabilities_line(r)));
    if !r.failures.is_empty() {
        let mut err = std::io::stderr().lock();
        let _ = writeln!(
            err,
            "crankcharge: {} run(s) failed and are left out of the figures:",
            r.failures.len()
        );
        for f in &r.failures {
            let _ = writeln!(err, "  run {} (seed {}): {}", f.run, f.seed, f.error);
        }
    }
    say(&format!("  wrote {}", dir.display()));
    super::progress::note(rerun_note(r));
}

/// The note on the runs that were run again at a tighter tolerance (None when none was).
fn rerun_note(r: &Report) -> Option<String> {
    super::digest::reruns_note(r.tolerance_reruns, r.runs, "runs.csv")
}

/// Columns of the spread table.
const SPREAD_HEADER: [&str; 6] = ["figure", "p5", "p50", "p95", "min", "max"];

/// The spread table: one row a figure (in-regulation left out for a direct design).
fn spread_rows(r: &Report) -> Vec<Vec<String>> {
    let mut rows = vec![row("charge delivered [Ah]", &r.charge_delivered_ah, 4)];
    if let Some(reg) = &r.in_regulation_fraction {
        rows.push(row("in-regulation fraction", reg, 3));
    }
    rows.extend([
        row("operator work [J]", &r.operator_work_j, 0),
        row("mean operator power [W]", &r.mean_operator_power_w, 1),
        row("max battery [V]", &r.max_battery_v, 3),
    ]);
    rows
}

/// The probabilities in one line, with their intervals.
fn probabilities_line(r: &Report) -> String {
    let regulation = match (
        r.regulation_failure_probability,
        r.regulation_failure_probability_95,
    ) {
        (Some(p), Some((lo, hi))) => format!(
            "fails regulation in {:.1} % ({:.1} … {:.1} %)",
            100.0 * p,
            100.0 * lo,
            100.0 * hi
        ),
        _ => "regulation n/a (direct)".to_string(),
    };
    format!(
        "overcharge in {:.1} % of runs (95 % interval {:.1} … {:.1} %); {regulation}; marginal in {:.1} %",
        100.0 * r.overcharge_probability,
        100.0 * r.overcharge_probability_95.0,
        100.0 * r.overcharge_probability_95.1,
        100.0 * r.marginal_probability,
    )
}

fn row(name: &str, s: &Spread, decimals: usize) -> Vec<String> {
    let f = |v: f64| format!("{v:.decimals$}");
    vec![
        name.to_string(),
        f(s.p5),
        f(s.p50),
        f(s.p95),
        f(s.min),
        f(s.max),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn run_seeds_are_distinct_and_reproducible() {
        let seeds: Vec<u64> = (0..1000).map(|i| run_seed(7, i)).collect();
        let mut sorted = seeds.clone();
        sorted.sort_unstable();
        sorted.dedup();
        assert_eq!(sorted.len(), seeds.len());
        assert_eq!(run_seed(7, 3), seeds[3]);
        assert_ne!(run_seed(8, 0), run_seed(7, 0));
    }

    #[test]
    fn splitmix_matches_its_reference_stream() {
        // From memory: the first output of the reference SplitMix64 generator seeded with 0 is
        // 0xe220a8397b1dcdaf (the seeding routine of the xoshiro generators uses this stream).
        assert_eq!(run_seed(0, 0), 0xe220_a839_7b1d_cdaf);
    }
}
