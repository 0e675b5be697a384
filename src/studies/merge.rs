//! `merge`: joins the parts of a sharded search (`search --shard K/N`) into one study, then
//! refines and writes it exactly as the unsharded search would: the same `points.csv`,
//! `search.json` and `best.ron`, byte for byte. Cost: reading the parts, then the refinement's
//! sessions (the design points are not run again).

use std::collections::BTreeSet;
use std::fs;
use std::path::{Path, PathBuf};

use anyhow::anyhow;
use clap::Args;

use super::outcome::{Failure, EXIT_OK};

use super::search::open_folder;
use super::search_finish;
use super::search_study::{Settings, Study, POINTS_FILE, SETTINGS_FILE};
use super::search_table::{self, Journal, Row};
use super::space::parse_shard;

/// Arguments of `merge`.
#[derive(Debug, Clone, Args)]
pub struct MergeArgs {
    /// The folders of the parts (each written by `search --shard K/N`), in any order.
    #[arg(required = true, value_name = "DIR")]
    pub dirs: Vec<PathBuf>,
    /// Folder for the joined study.
    #[arg(long)]
    pub out: PathBuf,
    /// Skip the charts.
    #[arg(long)]
    pub no_plot: bool,
    /// Replace an output folder that crankcharge did not write (its files are lost).
    #[arg(long)]
    pub force: bool,
}

fn input(e: impl std::fmt::Display) -> Failure {
    Failure::Input(anyhow!("{e}"))
}

fn read_settings(dir: &Path) -> Result<Settings, Failure> {
    let path = dir.join(SETTINGS_FILE);
    let text = fs::read_to_string(&path).map_err(|e| {
        input(format!(
            "'{}' is not a search folder: '{}' cannot be read ({e})",
            dir.display(),
            path.display()
        ))
    })?;
    serde_json::from_str(&text).map_err(|e| {
        input(format!(
            "'{}' is not a search's settings file: {e}",
            path.display()
        ))
    })
}

/// Executes `merge`.
pub fn run(a: &MergeArgs) -> Result<i32, Failure> {
    let mut parts = Vec::with_capacity(a.dirs.len());
    for d in &a.dirs {
        let s = read_settings(d)?;
        let shard = match s.shard.as_deref() {
            Some(t) => parse_shard(t).map_err(|e| input(format!("{}: {e}", d.display())))?,
            None => {
                return Err(input(format!(
                    "'{}' holds a whole study, not a part (--shard K/N); there is nothing to merge",
                    d.display()
                )))
            }
        };
        parts.push((d.clone(), s, shard));
    }
    let whole = parts[0].1.with_shard(None);
    for (d, s, _) in &parts[1..] {
        let diff = s.with_shard(None).differences(&whole);
        if !diff.is_empty() {
            return Err(input(format!(
                "'{}' is a part of another study than '{}' ({} differ)",
                d.display(),
                parts[0].0.display(),
                diff.join(", ")
            )));
        }
    }
    let n = parts[0].2.n;
    let mut seen = BTreeSet::new();
    for (d, _, shard) in &parts {
        if shard.n != n {
            return Err(input(format!(
                "'{}' is part {shard}, but '{}' is part {} (cut into {n})",
                d.display(),
                parts[0].0.display(),
                parts[0].2
            )));
        }
        if !seen.insert(shard.k) {
            return Err(input(format!("part {shard} is given twice")));
        }
    }
    let missing: Vec<String> = (1..=n)
        .filter(|k| !seen.contains(k))
        .map(|k| format!("{k}/{n}"))
        .collect();
    if !missing.is_empty() {
        return Err(input(format!(
            "part(s) {} missing; give every part's folder",
            missing.join(", ")
        )));
    }
    let out_real = fs::canonicalize(&a.out).ok();
    for (d, _, _) in &parts {
        if out_real.is_some() && fs::canonicalize(d).ok() == out_real {
            return Err(input(format!(
                "--out '{}' is one of the parts; write the joined study to another folder",
                a.out.display()
            )));
        }
    }

    let study = Study::new(whole)?;
    let header = study.header();
    let origin = study.design_origin();
    let mut rows: Vec<Row> = Vec::with_capacity(study.points.len());
    for (d, _, shard) in &parts {
        let got = search_table::read_rows(&d.join(POINTS_FILE), &header, study.axes.len())
            .map_err(|e| input(format!("{e:#}")))?;
        let mut have = BTreeSet::new();
        for r in got {
            let ok = r.origin == origin
                && shard.owns(r.point)
                && study.points.get(r.point) == Some(&r.values);
            if ok && have.insert(r.point) {
                rows.push(r);
            }
        }
        let owned = (0..study.points.len()).filter(|&i| shard.owns(i)).count();
        if have.len() != owned {
            return Err(input(format!(
                "part {shard} in '{}' is not finished ({} of {owned} points); continue it with `crankcharge search ... --shard {shard} --resume`",
                d.display(),
                have.len()
            )));
        }
    }
    rows.sort_by_key(|r| r.point);
    open_folder(&study, &a.out, false, a.force)?;
    let journal = Journal::create(
        &a.out.join(POINTS_FILE),
        &header,
        &rows
            .iter()
            .map(|r| study.journal_cells(r))
            .collect::<Vec<_>>(),
    )
    .map_err(Failure::Other)?;
    search_finish::finish(&study, rows, journal, &a.out, !a.no_plot)?;
    Ok(EXIT_OK)
}
