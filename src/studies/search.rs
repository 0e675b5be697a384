//! `search`: many setup or profile fields varied at once, a population of operators at every
//! point, constraints and an objective, the best feasible setup written out. Cost: points ×
//! operators sessions (in parallel), plus the refinement's evaluations.
//!
//! The points are a full grid of the `--vary` axes (default up to 3 axes) or a seeded
//! Latin-hypercube sample (default beyond 3). Every point runs the same N operators (common
//! random numbers: montecarlo's runs 0 … N−1 of the base seed), so differences between points are
//! differences of design, not of luck. Rows reach `DIR/points.csv` as points finish; `DIR/settings.json`
//! records the arguments and the input texts, so `--resume` runs only the missing points and
//! `merge` can join the parts of a sharded study. After the design points, the best feasible
//! points are refined with Nelder–Mead (argmin) on the continuous axes; then `points.csv` is
//! rewritten in point order and `search.json`, `best.ron` and the charts are written.

use std::collections::HashSet;
use std::fs;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use anyhow::anyhow;
use rayon::prelude::*;

use super::outcome::{Failure, EXIT_OK};
use crate::output::rundir;
use crate::scenario::Scenario;

use super::progress::CountBar;
use super::search_finish;
use super::search_study::input;
use super::search_table::{self, Journal, Origin, Row};

pub use super::search_study::{
    is_profile_key, write_atomic, DesignArg, SearchArgs, Settings, Study, POINTS_FILE,
    SETTINGS_FILE,
};

/// Executes `search`.
pub fn run(a: &SearchArgs) -> Result<i32, Failure> {
    let settings = Study::settings_from_args(a)?;
    let study = Study::new(settings)?;
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("search"));
    let known = open_folder(&study, &out, a.resume, a.session.force)?;
    // Validate every point this part runs before any session.
    let todo: Vec<usize> = (0..study.points.len())
        .filter(|&i| study.owns(i) && !known.iter().any(|r| r.point == i))
        .collect();
    let scenarios: Vec<(usize, Scenario)> = todo
        .iter()
        .map(|&i| study.scenario(&study.points[i]).map(|sc| (i, sc)))
        .collect::<Result<_, _>>()?;
    let mut rows = known;
    let journal = Journal::create(
        &out.join(POINTS_FILE),
        &study.header(),
        &rows
            .iter()
            .map(|r| study.journal_cells(r))
            .collect::<Vec<_>>(),
    )
    .map_err(Failure::Other)?;
    let journal = Mutex::new(journal);
    let sessions = (scenarios.len() * study.settings.operators) as u64;
    let bar = CountBar::new(sessions, "search", "sessions", a.session.quiet);
    let origin = study.design_origin();
    let done: Vec<anyhow::Result<Row>> = scenarios
        .par_iter()
        .map(|(i, sc)| {
            let figures = study.evaluate(sc, &|| bar.inc());
            let row = Row {
                point: *i,
                origin,
                values: study.points[*i].clone(),
                figures,
            };
            journal
                .lock()
                .unwrap_or_else(std::sync::PoisonError::into_inner)
                .add(&study.journal_cells(&row))?;
            Ok(row)
        })
        .collect();
    bar.finish();
    for r in done {
        rows.push(r.map_err(Failure::Other)?);
    }
    let journal = journal
        .into_inner()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    search_finish::finish(&study, rows, journal, &out, !a.no_plot)?;
    Ok(EXIT_OK)
}

/// Prepares the output folder: on `--resume` checks that it holds this study and returns the
/// design rows already done (refined rows are kept only as known values); otherwise clears an
/// earlier search's files. Writes `settings.json`.
pub fn open_folder(
    study: &Study,
    out: &Path,
    resume: bool,
    force: bool,
) -> Result<Vec<Row>, Failure> {
    if out.exists() && !out.is_dir() {
        return Err(input(format!(
            "cannot write to '{}': it exists and is not a folder",
            out.display()
        )));
    }
    // Only a folder crankcharge wrote (or an empty or new one) is written into, unless --force.
    rundir::claim(out, force).map_err(|e| Failure::Input(e.into()))?;
    let settings_path = out.join(SETTINGS_FILE);
    let mut rows = Vec::new();
    // `--resume` on a folder that holds no study yet starts it (so a batch job can always pass it).
    if resume && settings_path.exists() {
        let text = fs::read_to_string(&settings_path).map_err(|e| {
            input(format!(
                "--resume: '{}' cannot be read ({e})",
                settings_path.display()
            ))
        })?;
        let old: Settings = serde_json::from_str(&text).map_err(|e| {
            input(format!(
                "--resume: '{}' is not a search's settings file: {e}",
                settings_path.display()
            ))
        })?;
        let diff = old.differences(&study.settings);
        if !diff.is_empty() {
            return Err(input(format!(
                "--resume: the study in '{}' was run with other settings ({} differ); give the same arguments, or drop --resume to start afresh",
                out.display(),
                diff.join(", ")
            )));
        }
        let points = out.join(POINTS_FILE);
        if points.exists() {
            let mut seen = HashSet::new();
            for r in search_table::read_rows(&points, &study.header(), study.axes.len())
                .map_err(|e| input(format!("--resume: {e:#}")))?
            {
                let design = r.point < study.points.len()
                    && r.origin == study.design_origin()
                    && study.points[r.point] == r.values
                    && study.owns(r.point);
                let refined = r.origin == Origin::Refine;
                if (design || refined) && seen.insert((r.point, r.origin)) {
                    rows.push(r);
                }
            }
        }
    } else {
        fs::create_dir_all(out)
            .map_err(|e| input(format!("could not create '{}': {e}", out.display())))?;
        for stale in search_finish::OUTPUT_FILES {
            let p = out.join(stale);
            if p.exists() {
                fs::remove_file(&p).map_err(|e| {
                    Failure::Other(anyhow!("could not remove '{}': {e}", p.display()))
                })?;
            }
        }
    }
    write_atomic(&out.join(rundir::MARKER), &rundir::marker_text("search"))?;
    let json = serde_json::to_vec_pretty(&study.settings)
        .map_err(|e| Failure::Other(anyhow!("could not format the settings: {e}")))?;
    write_atomic(&settings_path, &json)?;
    Ok(rows)
}
