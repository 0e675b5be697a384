//! `compare`: every setup with every crank profile side by side; for each profile every setup
//! meets the same operator (the profile's own jitter seed, or `--seed` for all).
//! Cost: one session per setup × profile pair (run in parallel), then one overlay chart.
//!
//! Writes `compare.csv` (one row a run: `setup, profile, seed`, then the summary scalars),
//! `compare.png`/`compare.svg` (SOC and crank cadence overlaid) and prints an aligned table.
//! All inputs are loaded and checked before the first session runs.

use std::path::PathBuf;

use anyhow::anyhow;
use clap::Args;
use rayon::prelude::*;

use super::digest::reruns_note;
use super::outcome::{parse_duration, say, Failure, EXIT_OK, EXIT_SIM};
use crate::analysis::summary::{Summary, SCALAR_KEYS};
use crate::output::csv::table_csv;
use crate::output::rundir::Staging;
use crate::output::{plot, report};
use crate::scenario::load::Override;
use crate::scenario::Scenario;

use super::args::{scenario_from, session_or_failure, settings_from, FidelityArg, SessionArgs};
use super::check::build_plant;
use super::pages;
use super::session::Session;

/// Arguments of `compare`.
#[derive(Debug, Clone, Args)]
pub struct CompareArgs {
    /// Setup files (.ron) or shipped names; none compares the embedded demo.
    pub setups: Vec<String>,
    /// Crank profile, repeatable: a .ron path or a shipped name (default: steady).
    #[arg(long = "profile", short = 'p', value_name = "PROFILE")]
    pub profiles: Vec<String>,
    /// Jitter seed for every run (default: each profile's own seed).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Session length, e.g. 600, 10min (default: each profile's segments).
    #[arg(long, value_parser = parse_duration)]
    pub duration: Option<f64>,
    /// Override a field in every setup or profile, e.g. battery.soc_start=0.5.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<Override>,
    /// Model fidelity: fast (default) or detailed.
    #[arg(long, value_enum, default_value = "fast")]
    pub fidelity: FidelityArg,
    /// Output folder (default: outputs/compare).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the chart.
    #[arg(long)]
    pub no_plot: bool,
    /// Replace the output folder even if crankcharge did not write it (its files are lost).
    #[arg(long)]
    pub force: bool,
    /// No progress bar (it is drawn only on a terminal, for work longer than about 2 s).
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

impl CompareArgs {
    fn session_args(&self, profile: Option<&String>, seed: Option<u64>) -> SessionArgs {
        SessionArgs {
            profile: profile.cloned(),
            seed,
            duration: self.duration,
            set: self.set.clone(),
            fidelity: self.fidelity,
            force: self.force,
            quiet: self.quiet,
        }
    }
}

/// One planned run of the comparison.
struct Job {
    scenario: Scenario,
    settings: SessionArgs,
}

/// Executes `compare`.
pub fn run(a: &CompareArgs) -> Result<i32, Failure> {
    let setups: Vec<Option<&String>> = if a.setups.is_empty() {
        vec![None]
    } else {
        a.setups.iter().map(Some).collect()
    };
    let profiles: Vec<Option<&String>> = if a.profiles.is_empty() {
        vec![None]
    } else {
        a.profiles.iter().map(Some).collect()
    };
    let mut jobs = Vec::with_capacity(setups.len() * profiles.len());
    for s in &setups {
        for p in &profiles {
            let sa = a.session_args(*p, a.seed);
            let scenario = scenario_from(s.map(String::as_str), &sa)?;
            build_plant(&scenario)?;
            jobs.push(Job {
                scenario,
                settings: sa,
            });
        }
    }
    // One operator per profile: every setup meets the same jitter for a profile (its own seed,
    // or --seed for all), so differences between setups are the designs'.
    for j in &mut jobs {
        j.settings.seed = Some(a.seed.unwrap_or(j.scenario.profile.seed));
    }
    let mut seeds: Vec<String> = Vec::new();
    for j in &jobs {
        let s = format!(
            "{} {}",
            j.scenario.profile.name,
            j.settings.seed.unwrap_or_default()
        );
        if !seeds.contains(&s) {
            seeds.push(s);
        }
    }
    let seed = seeds.join(", ");
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("compare"));
    let staging =
        Staging::prepare(&out, "compare", a.force).map_err(|e| Failure::Input(e.into()))?;

    let bar = super::progress::CountBar::new(jobs.len() as u64, "compare", "runs", a.quiet);
    let results: Vec<Result<Session, Failure>> = jobs
        .par_iter()
        .map(|j| {
            let r = session_or_failure(&j.scenario, &settings_from(&j.settings));
            bar.inc();
            r
        })
        .collect();
    bar.finish();

    let mut done: Vec<(&Job, Session)> = Vec::new();
    let mut failed: Vec<String> = Vec::new();
    for (j, r) in jobs.iter().zip(results) {
        match r {
            Ok(s) => done.push((j, s)),
            Err(Failure::Input(e)) => return Err(Failure::Input(e)),
            Err(e) => failed.push(format!(
                "{} / {}: {e}",
                j.scenario.setup.name, j.scenario.profile.name
            )),
        }
    }
    if done.is_empty() {
        return Err(Failure::Sim(anyhow!(
            "every run of the comparison failed:\n  {}",
            failed.join("\n  ")
        )));
    }

    let mut header: Vec<String> = ["setup", "profile", "seed"].map(String::from).to_vec();
    header.extend(SCALAR_KEYS.iter().map(|k| k.to_string()));
    let rows: Vec<Vec<String>> = done
        .iter()
        .map(|(_, s)| {
            let m = &s.summary;
            let mut row = vec![m.setup.clone(), m.profile.clone(), m.seed.to_string()];
            row.extend(m.scalar_values());
            row
        })
        .collect();
    let csv = table_csv(&header, &rows).map_err(|e| Failure::Other(e.into()))?;
    staging
        .write("compare.csv", &csv)
        .map_err(|e| Failure::Other(e.into()))?;
    let mut charts = Vec::new();
    if !a.no_plot {
        let runs: Vec<(String, &crate::analysis::trace::Trace)> = done
            .iter()
            .map(|(_, s)| {
                (
                    format!("{} / {}", s.summary.setup, s.summary.profile),
                    &s.result.trace,
                )
            })
            .collect();
        let chart = plot::compare_chart(&runs, &format!("Comparison, seeds: {seed}"))
            .map_err(|e| Failure::Other(e.into()))?;
        staging
            .write("compare.png", &chart.png)
            .map_err(|e| Failure::Other(e.into()))?;
        staging
            .write("compare.svg", chart.svg.as_bytes())
            .map_err(|e| Failure::Other(e.into()))?;
        charts.push((
            chart.svg,
            "State of charge and crank cadence of every run, overlaid.".to_string(),
        ));
    }
    let summaries: Vec<&Summary> = done.iter().map(|(_, s)| &s.summary).collect();
    let (th, tr, _) = summary_rows(&summaries);
    let scenarios: Vec<&Scenario> = done.iter().map(|(j, _)| &j.scenario).collect();
    let reruns = summaries
        .iter()
        .filter(|m| m.solver.tolerance_reruns > 0)
        .count();
    let rerun_note = reruns_note(reruns, summaries.len(), "compare.csv");
    let page = pages::study_page(
        &scenarios,
        "crankcharge compare",
        &format!("Comparison of {} run(s), seeds: {seed}", done.len()),
        (th.iter().map(|h| h.to_string()).collect(), tr),
        charts,
        failed
            .iter()
            .map(|f| format!("Failed and left out: {f}"))
            .chain(rerun_note.iter().map(|n| format!("Note: {n}.")))
            .collect(),
    );
    staging
        .write("report.html", report::render(&page).as_bytes())
        .map_err(|e| Failure::Other(e.into()))?;
    let dir = staging.commit().map_err(|e| Failure::Other(e.into()))?;

    for line in summary_table(&summaries) {
        say(&line);
    }
    say(&format!(
        "{} run(s), seeds: {seed}; wrote {}",
        done.len(),
        dir.display()
    ));
    super::progress::note(rerun_note);
    if failed.is_empty() {
        Ok(EXIT_OK)
    } else {
        let mut err = std::io::stderr().lock();
        use std::io::Write;
        let _ = writeln!(
            err,
            "crankcharge: {} run(s) of the comparison failed (the others were written):",
            failed.len()
        );
        for f in &failed {
            let _ = writeln!(err, "  {f}");
        }
        Ok(EXIT_SIM)
    }
}

/// The terminal table of several runs: one line a run, units in the headers.
pub fn summary_table(runs: &[&Summary]) -> Vec<String> {
    let (header, rows, right) = summary_rows(runs);
    aligned_table(&header, &rows, &right)
}

/// The cells of [`summary_table`]: header, rows, and which columns are numbers.
#[allow(clippy::type_complexity)]
pub fn summary_rows(runs: &[&Summary]) -> (Vec<&'static str>, Vec<Vec<String>>, Vec<bool>) {
    let header = [
        "setup",
        "profile",
        "SOC start>end",
        "charge [Ah]",
        "energy [Wh]",
        "in-regulation [%]",
        "mean [W]",
        "peak [W]",
        "crank>battery [%]",
        "max battery [V]",
        "limit [V]",
        "alerts+episodes",
        "verdict",
    ];
    let right = [
        false, false, true, true, true, true, true, true, true, true, true, true, false,
    ];
    let rows: Vec<Vec<String>> = runs
        .iter()
        .map(|m| {
            vec![
                m.setup.clone(),
                m.profile.clone(),
                format!("{:.3}>{:.3}", m.soc_start, m.soc_end),
                format!("{:.4}", m.charge_delivered_ah),
                format!("{:.3}", m.energy_to_battery_wh),
                crate::analysis::summary::percent_or_na(m.in_regulation_fraction),
                format!("{:.1}", m.mean_operator_power_w),
                format!("{:.1}", m.peak_operator_power_w),
                format!("{:.1}", 100.0 * m.efficiency_crank_to_battery),
                format!("{:.3}", m.max_battery_v),
                format!("{:.3}", m.charge_limit_v),
                format!("{}+{}", m.alerts.len(), m.episodes.len()),
                m.verdict.words().join("+"),
            ]
        })
        .collect();
    (header.to_vec(), rows, right.to_vec())
}

/// Lays out a table in columns two spaces apart; `right[k]` right-aligns column k (numbers).
pub fn aligned_table(header: &[&str], rows: &[Vec<String>], right: &[bool]) -> Vec<String> {
    let mut widths: Vec<usize> = header.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (k, cell) in r.iter().enumerate() {
            if k < widths.len() {
                widths[k] = widths[k].max(cell.chars().count());
            }
        }
    }
    let line = |cells: &mut dyn Iterator<Item = &str>| {
        let parts: Vec<String> = cells
            .enumerate()
            .map(|(k, c)| {
                let w = widths.get(k).copied().unwrap_or(0);
                if right.get(k).copied().unwrap_or(false) {
                    format!("{c:>w$}")
                } else {
                    format!("{c:<w$}")
                }
            })
            .collect();
        parts.join("  ").trim_end().to_string()
    };
    let mut out = vec![line(&mut header.iter().copied())];
    out.extend(rows.iter().map(|r| line(&mut r.iter().map(String::as_str))));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_columns_line_up() {
        let rows = vec![
            vec!["a".to_string(), "1.5".to_string()],
            vec!["longer".to_string(), "22.25".to_string()],
        ];
        let t = aligned_table(&["name", "x [V]"], &rows, &[false, true]);
        assert_eq!(t.len(), 3);
        // Every line has its second column ending at the same place.
        let ends: Vec<usize> = t.iter().map(|l| l.chars().count()).collect();
        assert!(ends.iter().all(|&e| e == ends[0]), "{t:?}");
        assert!(t[1].starts_with("a     "), "{t:?}");
        assert!(t[1].ends_with("  1.5"), "{t:?}");
    }
}
