//! The end of a search (and of `merge`): refinement when the whole design is done, then the best
//! point, the constraint that binds there, the Pareto front, and the files: `points.csv` in
//! point order, `search.json`, `best.ron` (and `best-profile.ron`), and the charts.
//!
//! Everything here is computed from the rows alone (their figures as written), so a merged
//! study writes the same bytes as the unsharded one.

use std::collections::BTreeMap;
use std::path::Path;

use anyhow::anyhow;
use serde::Serialize;

use super::outcome::{say, Failure};
use crate::analysis::pareto::non_dominated;
use crate::output::plot::design::{self as charts, AxisPanel, ParetoData, PointsData};
use crate::scenario::load::PROFILE_PREFIX;
use crate::scenario::ronpath;
use crate::scenario::{load_scenario, SourceText};

use super::goal::{Binding, Constraint};
use super::refine::{self, cost};
use super::search_study::{is_profile_key, write_atomic, Study, POINTS_FILE};
use super::search_table::{self, cells, Journal, Origin, Row};
use super::space::{Axis, AxisKind, Design};

/// Files a search writes besides `settings.json` (an earlier study's are removed at a fresh start).
pub const OUTPUT_FILES: [&str; 9] = [
    POINTS_FILE,
    "search.json",
    "report.html",
    "best.ron",
    "best-profile.ron",
    "points.png",
    "points.svg",
    "pareto.png",
    "pareto.svg",
];

/// A varied key and its value.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct KeyValue {
    pub key: String,
    pub value: String,
}

/// The best point in `search.json`.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct BestPoint {
    pub point: usize,
    pub origin: Origin,
    pub feasible: bool,
    pub values: Vec<KeyValue>,
    /// Every figure (null where it does not apply).
    pub figures: BTreeMap<String, Option<f64>>,
    pub objective: String,
    pub objective_value: Option<f64>,
}

/// A constraint at the best point.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ConstraintAtBest {
    pub require: String,
    pub value: Option<f64>,
    /// How far inside the bound (negative: violated).
    pub slack: Option<f64>,
    pub met: bool,
}

/// The study's settings as `search.json` echoes them.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Echo {
    pub axes: Vec<Axis>,
    pub design: Design,
    pub operators: usize,
    pub seed: u64,
    pub duration_s: Option<f64>,
    pub fidelity: String,
    pub set: Vec<String>,
    pub require: Vec<Constraint>,
    pub objective: String,
    pub pareto: Option<String>,
    pub refine_starts: usize,
    pub refine_evals: usize,
    pub shard: Option<String>,
}

/// `search.json`.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Report {
    pub setup: String,
    pub profile: String,
    pub settings: Echo,
    /// Every design point of this part is done (false for an interrupted study).
    pub complete: bool,
    pub design_points: usize,
    pub refined_points: usize,
    pub feasible_points: usize,
    /// Points at which every operator's session failed.
    pub failed_points: usize,
    pub best: Option<BestPoint>,
    pub binding: Option<Binding>,
    pub constraints_at_best: Vec<ConstraintAtBest>,
    /// Point numbers of the non-dominated feasible points (with `--pareto`), best first on the
    /// objective.
    pub pareto_points: Option<Vec<usize>>,
    /// The files written for the best point.
    pub best_setup_file: Option<String>,
    pub best_profile_file: Option<String>,
    pub note: String,
}

/// Finishes a study whose design rows (and, after an interruption, earlier refined rows) are in
/// `rows` and on disk in `journal`.
pub fn finish(
    study: &Study,
    rows: Vec<Row>,
    mut journal: Journal,
    out: &Path,
    plots: bool,
) -> Result<(), Failure> {
    let (mut design, earlier): (Vec<Row>, Vec<Row>) =
        rows.into_iter().partition(|r| r.origin != Origin::Refine);
    design.sort_by_key(|r| r.point);
    let owned = (0..study.points.len()).filter(|&i| study.owns(i)).count();
    let complete = design.len() == owned;
    let refined = if study.shard.is_none() && complete {
        refine::refine(study, &design, earlier, &mut journal)?
    } else {
        Vec::new()
    };
    drop(journal);
    let mut all = design;
    let design_points = all.len();
    all.extend(refined);

    let feasible: Vec<bool> = all.iter().map(|r| study.feasible(r)).collect();
    let pareto: Option<Vec<bool>> = study.pareto.as_ref().map(|p| {
        let pts: Vec<(f64, f64)> = all
            .iter()
            .zip(&feasible)
            .map(|(r, &f)| {
                let a = study.value(r, &study.objective.figure);
                let b = study.value(r, &p.figure);
                match (f, a, b) {
                    (true, Some(a), Some(b)) => (study.objective.sense.cost(a), p.sense.cost(b)),
                    _ => (f64::NAN, f64::NAN),
                }
            })
            .collect();
        non_dominated(&pts)
    });
    let best = all
        .iter()
        .enumerate()
        .min_by(|(_, a), (_, b)| {
            cost(study, a)
                .total_cmp(&cost(study, b))
                .then(a.point.cmp(&b.point))
        })
        .map(|(i, _)| i);

    let table: Vec<Vec<String>> = all
        .iter()
        .enumerate()
        .map(|(i, r)| cells(r, pareto.as_ref().map(|p| Some(p[i])), feasible[i]))
        .collect();
    let csv = search_table::table(&study.header(), &table).map_err(Failure::Other)?;
    write_atomic(&out.join(POINTS_FILE), &csv)?;

    let mut best_setup_file = None;
    let mut best_profile_file = None;
    if let Some(b) = best {
        let (setup, profile) = best_texts(study, &all[b])?;
        write_atomic(&out.join("best.ron"), setup.as_bytes())?;
        best_setup_file = Some("best.ron".to_string());
        if let Some(p) = profile {
            write_atomic(&out.join("best-profile.ron"), p.as_bytes())?;
            best_profile_file = Some("best-profile.ron".to_string());
        }
    }
    let report = Report {
        setup: study.base.setup.name.clone(),
        profile: study.base.profile.name.clone(),
        settings: echo(study),
        complete,
        design_points,
        refined_points: all.len() - design_points,
        feasible_points: feasible.iter().filter(|&&f| f).count(),
        failed_points: all
            .iter()
            .filter(|r| r.figures.get("operators") == Some(0.0))
            .count(),
        best: best.map(|b| best_point(study, &all[b], feasible[b])),
        binding: best.map(|b| binding(study, &all, &feasible, b)),
        constraints_at_best: best.map_or_else(Vec::new, |b| {
            study
                .constraints
                .iter()
                .map(|c| {
                    let v = study.value(&all[b], &c.figure);
                    ConstraintAtBest {
                        require: c.text(),
                        value: v,
                        slack: c.slack(v),
                        met: c.met(v),
                    }
                })
                .collect()
        }),
        pareto_points: pareto.as_ref().map(|p| {
            let mut front: Vec<usize> = (0..all.len()).filter(|&i| p[i]).collect();
            front.sort_by(|&a, &b| {
                cost(study, &all[a])
                    .total_cmp(&cost(study, &all[b]))
                    .then(all[a].point.cmp(&all[b].point))
            });
            front.into_iter().map(|i| all[i].point).collect()
        }),
        best_setup_file,
        best_profile_file,
        note: note(study, complete),
    };
    let json = crate::output::json::to_json(&report)
        .map_err(|e| Failure::Other(anyhow!("could not format search.json: {e}")))?;
    write_atomic(&out.join("search.json"), &json)?;
    let charts = if plots && !all.is_empty() {
        write_charts(study, &all, &feasible, pareto.as_deref(), best, out)?
    } else {
        Vec::new()
    };
    let lines = report_lines(study, &report, &all, pareto.as_deref());
    for l in &lines {
        say(l);
    }
    say(&format!("  wrote {}", out.display()));
    let total = |figure: &str| -> usize {
        all.iter()
            .filter_map(|r| r.figures.get(figure))
            .sum::<f64>() as usize
    };
    super::progress::note(super::digest::reruns_note(
        total("tolerance_reruns"),
        total("operators"),
        POINTS_FILE,
    ));
    let page = super::pages::study_page(
        &[&study.base],
        "crankcharge search",
        &format!("Search: {} / {}", report.setup, report.profile),
        (study.header(), table),
        charts,
        lines,
    );
    write_atomic(
        &out.join("report.html"),
        crate::output::report::render(&page).as_bytes(),
    )?;
    Ok(())
}

fn echo(study: &Study) -> Echo {
    let s = &study.settings;
    Echo {
        axes: study.axes.clone(),
        design: study.design,
        operators: s.operators,
        seed: s.seed,
        duration_s: s.duration_s,
        fidelity: s.fidelity.clone(),
        set: s.set.clone(),
        require: study.constraints.clone(),
        objective: study.objective.text(),
        pareto: study.pareto.as_ref().map(|p| p.text()),
        refine_starts: s.refine_starts,
        refine_evals: s.refine_evals,
        shard: s.shard.clone(),
    }
}

fn note(study: &Study, complete: bool) -> String {
    match (study.shard, complete) {
        (Some(s), true) => format!(
            "part {s} of a sharded study: its own points only, not refined; join the parts with `crankcharge merge`"
        ),
        (Some(s), false) => format!(
            "part {s} of a sharded study, interrupted: continue it with --resume"
        ),
        (None, false) => "interrupted: continue with --resume".to_string(),
        (None, true) => "complete".to_string(),
    }
}

fn best_point(study: &Study, row: &Row, feasible: bool) -> BestPoint {
    BestPoint {
        point: row.point,
        origin: row.origin,
        feasible,
        values: study
            .axes
            .iter()
            .zip(&row.values)
            .map(|(a, v)| KeyValue {
                key: a.key.clone(),
                value: v.clone(),
            })
            .collect(),
        figures: super::population::FIGURES
            .iter()
            .zip(&row.figures.0)
            .map(|(f, v)| (f.name.to_string(), *v))
            .collect(),
        objective: study.objective.text(),
        objective_value: study.value(row, &study.objective.figure),
    }
}

/// Normalised distance between two points in the design space: range fraction on a continuous
/// axis, level steps over the level count on a listed or integer one, 0 or 1 for categories.
fn distance(study: &Study, a: &Row, b: &Row) -> f64 {
    study
        .axes
        .iter()
        .enumerate()
        .map(|(k, ax)| {
            let (x, y) = (&a.values[k], &b.values[k]);
            match ax.kind {
                AxisKind::Continuous => {
                    let (fx, fy) = (ax.fraction_of(x), ax.fraction_of(y));
                    fx.zip(fy).map_or(1.0, |(p, q)| (p - q).abs())
                }
                AxisKind::Categories => f64::from(u8::from(x != y)),
                AxisKind::Integer | AxisKind::Numbers => {
                    let (p, q) = (x.parse::<f64>(), y.parse::<f64>());
                    let lv: Vec<f64> = ax.levels.iter().filter_map(|l| l.parse().ok()).collect();
                    let (lo, hi) = lv
                        .iter()
                        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| {
                            (l.min(v), h.max(v))
                        });
                    match (p, q) {
                        (Ok(p), Ok(q)) if hi > lo => (p - q).abs() / (hi - lo),
                        (Ok(p), Ok(q)) => f64::from(u8::from(p != q)),
                        _ => 1.0,
                    }
                }
            }
        })
        .map(|d| d * d)
        .sum::<f64>()
        .sqrt()
}

/// Which constraint binds at the best point: among the evaluated points that do better on the
/// objective (all infeasible, or the best would be one of them), the nearest one in the design
/// space names it: the constraint it fails by the most.
fn binding(study: &Study, all: &[Row], feasible: &[bool], b: usize) -> Binding {
    let best = &all[b];
    let at_range_end: Vec<String> = study
        .axes
        .iter()
        .enumerate()
        .filter_map(|(k, ax)| {
            let v: f64 = best.values[k].parse().ok()?;
            let lv: Vec<f64> = ax.levels.iter().filter_map(|l| l.parse().ok()).collect();
            if !ax.numeric() || lv.len() < 2 {
                return None;
            }
            let lo = lv.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = lv.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            if v <= lo {
                Some(format!("{} (lower end, {})", ax.key, best.values[k]))
            } else if v >= hi {
                Some(format!("{} (upper end, {})", ax.key, best.values[k]))
            } else {
                None
            }
        })
        .collect();
    if !feasible[b] {
        let failing: Vec<String> = study
            .constraints
            .iter()
            .filter(|c| !c.met(study.value(best, &c.figure)))
            .map(Constraint::text)
            .collect();
        return Binding {
            constraint: None,
            nearest_better_point: None,
            better_points: 0,
            better_points_failing: vec![0; study.constraints.len()],
            at_range_end,
            note: format!(
                "no point meets every constraint; point {} violates them least (fails {})",
                best.point,
                if failing.is_empty() {
                    "none: its objective is undefined".to_string()
                } else {
                    failing.join(", ")
                }
            ),
        };
    }
    let obj = |r: &Row| {
        study
            .value(r, &study.objective.figure)
            .filter(|v| v.is_finite())
            .map(|v| study.objective.sense.cost(v))
    };
    let best_cost = obj(best).unwrap_or(f64::INFINITY);
    let better: Vec<&Row> = all
        .iter()
        .filter(|r| obj(r).is_some_and(|c| c < best_cost))
        .collect();
    let failing: Vec<usize> = study
        .constraints
        .iter()
        .map(|c| {
            better
                .iter()
                .filter(|r| !c.met(study.value(r, &c.figure)))
                .count()
        })
        .collect();
    let nearest = better.iter().min_by(|x, y| {
        distance(study, best, x)
            .total_cmp(&distance(study, best, y))
            .then(x.point.cmp(&y.point))
    });
    let Some(near) = nearest else {
        let note = if at_range_end.is_empty() {
            format!(
                "no evaluated point does better on {}: no constraint binds",
                study.objective.text()
            )
        } else {
            format!(
                "no evaluated point does better on {}: no constraint binds; {} sits at the end of its range, so the range may be what stops it",
                study.objective.text(),
                at_range_end.join(", ")
            )
        };
        return Binding {
            constraint: None,
            nearest_better_point: None,
            better_points: 0,
            better_points_failing: failing,
            at_range_end,
            note,
        };
    };
    let worst = study
        .constraints
        .iter()
        .map(|c| (c, c.violation(study.value(near, &c.figure))))
        .filter(|(_, v)| *v > 0.0)
        .fold(None::<(&Constraint, f64)>, |acc, (c, v)| match acc {
            Some((_, w)) if w >= v => acc,
            _ => Some((c, v)),
        });
    let (constraint, note) = match worst {
        Some((c, _)) => (
            Some(c.text()),
            format!(
                "{} binds: point {} ({}), the nearest that does better on {}, fails it",
                c.text(),
                near.point,
                study.describe(&near.values),
                study.objective.text()
            ),
        ),
        None => (
            None,
            format!(
                "the nearest point that does better on {} (point {}) did not run to the end of its sessions",
                study.objective.text(),
                near.point
            ),
        ),
    };
    Binding {
        constraint,
        nearest_better_point: Some(near.point),
        better_points: better.len(),
        better_points_failing: failing,
        at_range_end,
        note,
    }
}

/// The user's setup text (and profile text when profile keys were set or varied) with the
/// `--set` values and the best point's values put in by dotted path, so comments and layout stay;
/// checked to load before it is written.
fn best_texts(study: &Study, row: &Row) -> Result<(String, Option<String>), Failure> {
    let mut setup = study.setup_src.text.clone();
    let mut profile = study.profile_src.text.clone();
    let mut profile_touched = false;
    // A recorded log (`--profile LOG.csv`) has no RON text to write its keys into: they stay
    // `--set` options, named in best.ron's header.
    let log_profile = crate::scenario::replay::is_log(&study.profile_src);
    let mut log_sets: Vec<crate::scenario::load::Override> = Vec::new();
    let pairs = study
        .base_set
        .iter()
        .map(|o| (o.key.clone(), o.value.clone()))
        .chain(
            study
                .axes
                .iter()
                .zip(&row.values)
                .map(|(a, v)| (a.key.clone(), v.clone())),
        );
    let edit = |text: &str, key: &str, value: &str| -> Result<String, Failure> {
        let path = ronpath::parse_path(key).map_err(|e| Failure::Other(anyhow!("{key}: {e}")))?;
        ronpath::set(text, &path, value)
            .map(|e| e.text)
            .map_err(|e| Failure::Other(anyhow!("writing best.ron: {e}")))
    };
    for (key, value) in pairs {
        if is_profile_key(&key) && log_profile {
            log_sets.push(crate::scenario::load::Override { key, value });
        } else if is_profile_key(&key) {
            profile = edit(&profile, &key[PROFILE_PREFIX.len()..], &value)?;
            profile_touched = true;
        } else {
            let k = key.strip_prefix("setup.").unwrap_or(&key);
            setup = edit(&setup, k, &value)?;
        }
    }
    let what = if study.feasible(row) {
        "best feasible point"
    } else {
        "point that violates the constraints least (none meets them all)"
    };
    let head = format!(
        "// crankcharge search: the {what}, point {} ({}), written from {}.\n// Values: {}.\n// Check it with `crankcharge run` and `crankcharge check` before you build anything.\n",
        row.point,
        row.origin.word(),
        study.setup_src.name,
        study.describe(&row.values)
    );
    let head = if log_sets.is_empty() {
        head
    } else {
        let sets: Vec<String> = log_sets
            .iter()
            .map(|o| format!("--set {}={}", o.key, o.value))
            .collect();
        format!(
            "{head}// Profile: the log {} with {}.\n",
            study.profile_src.name,
            sets.join(" ")
        )
    };
    let setup = format!("{head}{setup}");
    let profile = profile_touched.then(|| {
        format!(
            "// crankcharge search: the profile of point {} ({}), written from {}.\n{profile}",
            row.point,
            study.describe(&row.values),
            study.profile_src.name
        )
    });
    let check = load_scenario(
        &SourceText {
            name: "best.ron".into(),
            text: setup.clone(),
            built_in: false,
        },
        &match &profile {
            Some(text) => SourceText {
                name: "best-profile.ron".into(),
                text: text.clone(),
                built_in: false,
            },
            None => study.profile_src.clone(),
        },
        &log_sets,
    );
    if let Err(e) = check {
        return Err(Failure::Other(anyhow!(
            "the best point's setup does not load back ({e}); please report this"
        )));
    }
    Ok((setup, profile))
}

fn write_charts(
    study: &Study,
    all: &[Row],
    feasible: &[bool],
    pareto: Option<&[bool]>,
    best: Option<usize>,
    out: &Path,
) -> Result<Vec<(String, String)>, Failure> {
    let mut svgs = Vec::new();
    let ys: Vec<f64> = all
        .iter()
        .map(|r| study.value(r, &study.objective.figure).unwrap_or(f64::NAN))
        .collect();
    let panels: Vec<AxisPanel> = study
        .axes
        .iter()
        .enumerate()
        .map(|(k, a)| {
            let categorical = a.kind == AxisKind::Categories;
            AxisPanel {
                key: a.key.clone(),
                xs: all
                    .iter()
                    .map(|r| {
                        if categorical {
                            a.levels
                                .iter()
                                .position(|l| *l == r.values[k])
                                .map_or(f64::NAN, |i| i as f64)
                        } else {
                            r.values[k].parse().unwrap_or(f64::NAN)
                        }
                    })
                    .collect(),
                categories: categorical.then(|| a.levels.clone()),
            }
        })
        .collect();
    let title = format!(
        "Search: {} / {}, {} operator(s) a point",
        study.base.setup.name, study.base.profile.name, study.settings.operators
    );
    let refined: Vec<bool> = all.iter().map(|r| r.origin == Origin::Refine).collect();
    let data = PointsData {
        objective: &study.objective.text(),
        ys: &ys,
        feasible,
        refined: &refined,
        best,
        panels: &panels,
    };
    let chart = charts::points_chart(&data, &title).map_err(|e| Failure::Other(e.into()))?;
    write_atomic(&out.join("points.png"), &chart.png)?;
    write_atomic(&out.join("points.svg"), chart.svg.as_bytes())?;
    svgs.push((
        chart.svg,
        "The objective at every point against each varied key (feasible points filled, the best marked).".to_string(),
    ));
    if let (Some(p), Some(front)) = (&study.pareto, pareto) {
        let xs2: Vec<f64> = all
            .iter()
            .map(|r| study.value(r, &p.figure).unwrap_or(f64::NAN))
            .collect();
        let data = ParetoData {
            x_label: &study.objective.text(),
            y_label: &p.text(),
            xs: &ys,
            ys: &xs2,
            feasible,
            front,
            best,
        };
        let chart = charts::pareto_chart(&data, &format!("Pareto view: {title}"))
            .map_err(|e| Failure::Other(e.into()))?;
        write_atomic(&out.join("pareto.png"), &chart.png)?;
        write_atomic(&out.join("pareto.svg"), chart.svg.as_bytes())?;
        svgs.push((
            chart.svg,
            "The two objectives of the feasible points; the non-dominated ones joined.".to_string(),
        ));
    }
    Ok(svgs)
}

/// The digest of a finished search, line by line (printed, and the notes of its report page).
fn report_lines(study: &Study, r: &Report, all: &[Row], pareto: Option<&[bool]>) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    let mut say = |l: &str| lines.push(l.to_string());
    say(&format!(
        "search: {} / {}, {} axis(es), {} design point(s){} + {} refined, {} operator(s) a point; {} feasible",
        r.setup,
        r.profile,
        study.axes.len(),
        r.design_points,
        study
            .shard
            .map_or_else(String::new, |s| format!(" (part {s})")),
        r.refined_points,
        study.settings.operators,
        r.feasible_points
    ));
    match &r.best {
        Some(b) => {
            say(&format!(
                "  best{}: point {} ({}): {}",
                if b.feasible { "" } else { " (infeasible)" },
                b.point,
                b.origin.word(),
                b.values
                    .iter()
                    .map(|kv| format!("{}={}", kv.key, kv.value))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
            say(&format!(
                "  {}: {}",
                b.objective,
                b.objective_value
                    .map_or_else(|| "n/a".to_string(), |v| format!("{v:.6}"))
            ));
            for c in &r.constraints_at_best {
                say(&format!(
                    "  {}: {} ({})",
                    c.require,
                    c.value
                        .map_or_else(|| "n/a".to_string(), |v| format!("{v:.6}")),
                    if c.met { "met" } else { "NOT met" }
                ));
            }
        }
        None => say("  no point ran"),
    }
    if let Some(b) = &r.binding {
        say(&format!("  {}", b.note));
    }
    if let (Some(p), Some(front)) = (&study.pareto, pareto) {
        say(&format!(
            "  Pareto front ({} against {}): {} point(s)",
            study.objective.text(),
            p.text(),
            front.iter().filter(|&&f| f).count()
        ));
        let mut rows: Vec<&Row> = all
            .iter()
            .zip(front)
            .filter(|(_, &f)| f)
            .map(|(r, _)| r)
            .collect();
        rows.sort_by(|a, b| cost(study, a).total_cmp(&cost(study, b)));
        const SHOWN: usize = 12;
        let more = rows.len().saturating_sub(SHOWN);
        for row in rows.into_iter().take(SHOWN) {
            let v = |name: &str| {
                study
                    .value(row, name)
                    .map_or_else(|| "n/a".to_string(), |v| format!("{v:.4}"))
            };
            say(&format!(
                "    point {:>5}  {} = {}, {} = {}  ({})",
                row.point,
                study.objective.figure,
                v(&study.objective.figure),
                p.figure,
                v(&p.figure),
                study.describe(&row.values)
            ));
        }
        if more > 0 {
            say(&format!(
                "    … and {more} more (pareto = true in points.csv)"
            ));
        }
    }
    say(&format!("  {}", r.note));
    lines
}
