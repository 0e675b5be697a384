//! A design search's settings and its study: the axes and points, the constraints and the
//! objective, and how one point becomes a scenario and its figures. The `search` and `merge`
//! commands, the refinement and the finishing step all work on a [`Study`].

use std::fs;
use std::path::{Path, PathBuf};

use anyhow::anyhow;
use clap::{Args, ValueEnum};
use serde::{Deserialize, Serialize};

use super::outcome::Failure;
use crate::output::rundir;
use crate::scenario::load::{InputKind, Override, PROFILE_PREFIX};
use crate::scenario::{load_scenario, InputError, Scenario, SourceText};
use crate::simulate::Fidelity;

use super::args::{FidelityArg, SessionArgs};
use super::check::build_plant;
use super::goal::{parse_constraint, parse_pareto, Constraint, Objective, Sense};
use super::montecarlo::MAX_RUNS;
use super::population::{self, figure_index, Figures, FIGURES};
use super::search_table::{self, Origin, Row};
use super::session::RunSettings;
use super::space::{
    self, grid_size, parse_axis, parse_shard, Axis, AxisKind, Design, Shard, MAX_AXES,
    MAX_GRID_POINTS, MAX_SAMPLES,
};

/// Name of the settings file in a search folder.
pub const SETTINGS_FILE: &str = "settings.json";
/// Name of the rows file.
pub const POINTS_FILE: &str = "points.csv";
/// Version of the settings file's layout.
const SETTINGS_FORMAT: u32 = 1;

/// How points are chosen, as a command-line word.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DesignArg {
    Grid,
    Lhs,
}

/// Arguments of `search`.
#[derive(Debug, Clone, Args)]
pub struct SearchArgs {
    /// Setup file (.ron) or shipped name; none searches around the embedded demo.
    pub setup: Option<String>,
    /// An axis: KEY=A..B:N (N values from A to B) or KEY=V1,V2,... (numbers or words such as
    /// nmc,lfp); KEY as for --set. Repeat for more axes.
    #[arg(long = "vary", value_name = "KEY=SPEC", required = true)]
    pub vary: Vec<String>,
    /// Operators per point, 1 ..= 100000 (montecarlo's runs 0 … N−1: the same people at every point).
    #[arg(long, default_value_t = 1, value_parser = parse_operators)]
    pub operators: usize,
    /// A constraint on a figure of points.csv, e.g. p_overcharge<=0.01 or charge_p10_ah>=0.3. Repeatable.
    #[arg(long = "require", value_name = "FIGURE<=VALUE")]
    pub require: Vec<String>,
    /// The figure (or numeric --vary key) to make as small as possible.
    #[arg(
        long,
        value_name = "FIGURE",
        visible_alias = "minimize",
        conflicts_with = "maximise"
    )]
    pub minimise: Option<String>,
    /// The figure (or numeric --vary key) to make as large as possible (default: charge_mean_ah).
    #[arg(long, value_name = "FIGURE", visible_alias = "maximize")]
    pub maximise: Option<String>,
    /// A second objective for a Pareto view: [min:|max:]FIGURE.
    #[arg(long, value_name = "[min:|max:]FIGURE")]
    pub pareto: Option<String>,
    /// grid (every combination; default up to 3 axes) or lhs (Latin-hypercube sample; default beyond).
    #[arg(long, value_enum)]
    pub design: Option<DesignArg>,
    /// Points of a Latin-hypercube sample (default 10 per axis), 2 ..= 10000.
    #[arg(long)]
    pub samples: Option<usize>,
    /// Best feasible points from which Nelder–Mead refines the continuous axes (0: none).
    #[arg(long, default_value_t = 2)]
    pub refine_starts: usize,
    /// New points each refinement may evaluate, 3 ..= 1000.
    #[arg(long, default_value_t = 20)]
    pub refine_evals: usize,
    /// Run only part K of N (points whose number mod N is K−1); join the parts with `merge`.
    #[arg(long, value_parser = parse_shard, value_name = "K/N")]
    pub shard: Option<Shard>,
    /// Continue the study in --out: points already in its points.csv are not run again (a folder
    /// without a study starts one).
    #[arg(long)]
    pub resume: bool,
    #[command(flatten)]
    pub session: SessionArgs,
    /// Output folder (default: outputs/search).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Skip the charts.
    #[arg(long)]
    pub no_plot: bool,
}

fn parse_operators(s: &str) -> Result<usize, String> {
    match s.trim().parse::<usize>() {
        Ok(n) if (1..=MAX_RUNS).contains(&n) => Ok(n),
        _ => Err(format!(
            "'{s}' is not a number of operators; allowed 1 ..= {MAX_RUNS}"
        )),
    }
}

/// Everything that decides a study's results (and nothing that does not, such as the output
/// folder), with the input texts: `DIR/settings.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Settings {
    pub format: u32,
    pub setup: String,
    pub setup_text: String,
    pub profile: String,
    pub profile_text: String,
    pub set: Vec<String>,
    pub vary: Vec<String>,
    pub design: DesignArg,
    pub samples: Option<usize>,
    pub operators: usize,
    pub seed: u64,
    pub duration_s: Option<f64>,
    pub fidelity: String,
    pub require: Vec<String>,
    pub objective: Objective,
    pub pareto: Option<Objective>,
    pub refine_starts: usize,
    pub refine_evals: usize,
    pub shard: Option<String>,
}

impl Settings {
    /// The same study with another shard (None: the whole study).
    pub fn with_shard(&self, shard: Option<Shard>) -> Self {
        let mut s = self.clone();
        s.shard = shard.map(|s| s.to_string());
        s
    }

    /// Names of the fields in which two settings differ.
    pub fn differences(&self, other: &Settings) -> Vec<&'static str> {
        let a = serde_json::to_value(self).unwrap_or_default();
        let b = serde_json::to_value(other).unwrap_or_default();
        let mut v = Vec::new();
        for k in [
            "format",
            "setup",
            "setup_text",
            "profile",
            "profile_text",
            "set",
            "vary",
            "design",
            "samples",
            "operators",
            "seed",
            "duration_s",
            "fidelity",
            "require",
            "objective",
            "pareto",
            "refine_starts",
            "refine_evals",
            "shard",
        ] {
            if a.get(k) != b.get(k) {
                v.push(k);
            }
        }
        v
    }
}

/// A study ready to run: the settings parsed.
pub struct Study {
    pub settings: Settings,
    pub axes: Vec<Axis>,
    pub design: Design,
    pub constraints: Vec<Constraint>,
    pub objective: Objective,
    pub pareto: Option<Objective>,
    pub shard: Option<Shard>,
    pub setup_src: SourceText,
    pub profile_src: SourceText,
    pub base_set: Vec<Override>,
    pub run_settings: RunSettings,
    /// The design's points (values per axis), numbered from 0.
    pub points: Vec<Vec<String>>,
    /// The base scenario (the files with `--set` only).
    pub base: Scenario,
}

pub(super) fn input(e: impl std::fmt::Display) -> Failure {
    Failure::Input(anyhow!("{e}"))
}

impl Study {
    /// The cells of a row while the study runs (the Pareto cell is filled at the end).
    pub fn journal_cells(&self, row: &Row) -> Vec<String> {
        search_table::cells(row, self.pareto.as_ref().map(|_| None), self.feasible(row))
    }
}

impl Study {
    /// Builds the settings of a `search` command line.
    pub fn settings_from_args(a: &SearchArgs) -> Result<Settings, Failure> {
        let setup = SourceText::resolve(a.setup.as_deref(), InputKind::Setup).map_err(input)?;
        let profile =
            SourceText::resolve(a.session.profile.as_deref(), InputKind::Profile).map_err(input)?;
        let base = load_scenario(&setup, &profile, &a.session.set).map_err(input)?;
        let objective = match (&a.minimise, &a.maximise) {
            (Some(f), _) => Objective {
                figure: f.trim().to_string(),
                sense: Sense::Min,
            },
            (None, Some(f)) => Objective {
                figure: f.trim().to_string(),
                sense: Sense::Max,
            },
            (None, None) => Objective {
                figure: "charge_mean_ah".into(),
                sense: Sense::Max,
            },
        };
        let axes_n = a.vary.len();
        let design = a.design.unwrap_or(if axes_n > 3 {
            DesignArg::Lhs
        } else {
            DesignArg::Grid
        });
        let known_axes: Vec<String> = a.vary.iter().map(|v| v.trim().to_string()).collect();
        let pareto = match &a.pareto {
            Some(p) => {
                let axes: Vec<Axis> = known_axes
                    .iter()
                    .map(|v| parse_axis(v))
                    .collect::<Result<_, _>>()
                    .map_err(input)?;
                let known = |f: &str| is_known(f, &axes);
                let natural = |f: &str| figure_index(f).map(|i| FIGURES[i].better);
                Some(parse_pareto(p, &known, &natural).map_err(input)?)
            }
            None => None,
        };
        Ok(Settings {
            format: SETTINGS_FORMAT,
            setup: setup.name.clone(),
            setup_text: setup.text.clone(),
            profile: profile.name.clone(),
            profile_text: profile.text.clone(),
            set: a
                .session
                .set
                .iter()
                .map(|o| format!("{}={}", o.key, o.value))
                .collect(),
            vary: known_axes,
            design,
            samples: match design {
                DesignArg::Lhs => Some(a.samples.unwrap_or(10 * axes_n)),
                DesignArg::Grid => None,
            },
            operators: a.operators,
            seed: a.session.seed.unwrap_or(base.profile.seed),
            duration_s: a.session.duration,
            fidelity: match a.session.fidelity {
                FidelityArg::Fast => "fast".into(),
                FidelityArg::Detailed => "detailed".into(),
            },
            require: a.require.iter().map(|r| r.trim().to_string()).collect(),
            objective,
            pareto,
            refine_starts: a.refine_starts,
            refine_evals: a.refine_evals,
            shard: a.shard.map(|s| s.to_string()),
        })
    }

    /// Parses and checks the settings: axes (an axis over a whole-number field becomes an
    /// integer axis), constraints, objectives, the design's points; then every point this part
    /// runs is loaded and validated, so a bad key or value exits 2 before any session.
    pub fn new(settings: Settings) -> Result<Self, Failure> {
        let setup_src = SourceText {
            name: settings.setup.clone(),
            text: settings.setup_text.clone(),
            built_in: false,
        };
        let profile_src = SourceText {
            name: settings.profile.clone(),
            text: settings.profile_text.clone(),
            built_in: false,
        };
        let base_set: Vec<Override> = settings
            .set
            .iter()
            .map(|s| s.parse::<Override>())
            .collect::<Result<_, _>>()
            .map_err(input)?;
        let base = load_scenario(&setup_src, &profile_src, &base_set).map_err(input)?;
        build_plant(&base)?;
        if settings.vary.len() > MAX_AXES {
            return Err(input(format!(
                "--vary: {} axes; allowed at most {MAX_AXES}",
                settings.vary.len()
            )));
        }
        let mut axes: Vec<Axis> = Vec::with_capacity(settings.vary.len());
        for v in &settings.vary {
            let axis = parse_axis(v).map_err(input)?;
            if axes.iter().any(|a| a.key == axis.key) {
                return Err(input(format!(
                    "--vary {}: that key is varied twice",
                    axis.key
                )));
            }
            if base_set.iter().any(|o| o.key == axis.key) {
                return Err(input(format!(
                    "--vary {}: that key is also given with --set; give it once",
                    axis.key
                )));
            }
            axes.push(axis);
        }
        if settings.design == DesignArg::Grid {
            let n = grid_size(&axes);
            if n > MAX_GRID_POINTS {
                return Err(input(format!(
                    "--vary: the grid has {n} points; allowed at most {MAX_GRID_POINTS} (use fewer values, or --design lhs --samples N)"
                )));
            }
        }
        for axis in &mut axes {
            // Every level alone on the base, so a bad key or value is named as such.
            for level in &axis.levels {
                let sc = scenario_with(&setup_src, &profile_src, &base_set, &[(&axis.key, level)])
                    .map_err(|e| input(format!("--vary {}={}: {e}", axis.key, level)))?;
                build_plant(&sc)
                    .map_err(|e| input(format!("--vary {}={}: {e}", axis.key, level)))?;
            }
            if axis.kind == AxisKind::Continuous
                && is_whole_number_field(axis, &setup_src, &profile_src, &base_set)
            {
                axis.kind = AxisKind::Integer;
            }
        }
        let known = |f: &str| is_known(f, &axes);
        let constraints: Vec<Constraint> = settings
            .require
            .iter()
            .map(|r| parse_constraint(r, &known))
            .collect::<Result<_, _>>()
            .map_err(input)?;
        let objective = settings.objective.clone();
        if !known(&objective.figure) {
            return Err(input(format!(
                "--{} {}: neither a figure of points.csv ({}) nor a numeric --vary key",
                objective.sense.word(),
                objective.figure,
                FIGURES
                    .iter()
                    .map(|f| f.name)
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
        let design = match settings.design {
            DesignArg::Grid => Design::Grid,
            DesignArg::Lhs => {
                let n = settings.samples.unwrap_or(0);
                if !(2..=MAX_SAMPLES).contains(&n) {
                    return Err(input(format!("--samples {n}: allowed 2 ..= {MAX_SAMPLES}")));
                }
                Design::Lhs { samples: n }
            }
        };
        if !(3..=1000).contains(&settings.refine_evals) {
            return Err(input(format!(
                "--refine-evals {}: allowed 3 ..= 1000",
                settings.refine_evals
            )));
        }
        if settings.refine_starts > 100 {
            return Err(input(format!(
                "--refine-starts {}: allowed 0 ..= 100",
                settings.refine_starts
            )));
        }
        let shard = settings
            .shard
            .as_deref()
            .map(parse_shard)
            .transpose()
            .map_err(|e| input(format!("--shard {e}")))?;
        let fidelity = match settings.fidelity.as_str() {
            "fast" => Fidelity::Fast,
            "detailed" => Fidelity::Detailed,
            other => return Err(input(format!("fidelity '{other}': fast or detailed"))),
        };
        let points = space::points(&axes, design, settings.seed);
        let run_settings = RunSettings {
            duration_s: settings.duration_s,
            seed: None,
            fidelity,
            cadence_offset_rpm: 0.0,
        };
        let study = Self {
            pareto: settings.pareto.clone(),
            settings,
            axes,
            design,
            constraints,
            objective,
            shard,
            setup_src,
            profile_src,
            base_set,
            run_settings,
            points,
            base,
        };
        Ok(study)
    }

    /// The scenario of a point (values per axis).
    pub fn scenario(&self, values: &[String]) -> Result<Scenario, Failure> {
        let pairs: Vec<(&str, &String)> = self
            .axes
            .iter()
            .map(|a| a.key.as_str())
            .zip(values.iter())
            .collect();
        let sc = scenario_with(&self.setup_src, &self.profile_src, &self.base_set, &pairs)
            .map_err(|e| input(format!("{}: {e}", self.describe(values))))?;
        build_plant(&sc).map_err(|e| input(format!("{}: {e}", self.describe(values))))?;
        Ok(sc)
    }

    /// `key=value, key=value`.
    pub fn describe(&self, values: &[String]) -> String {
        self.axes
            .iter()
            .zip(values)
            .map(|(a, v)| format!("{}={v}", a.key))
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// The origin of the design's points.
    pub fn design_origin(&self) -> Origin {
        match self.design {
            Design::Grid => Origin::Grid,
            Design::Lhs { .. } => Origin::Sample,
        }
    }

    /// Whether this run owns design point `i`.
    pub fn owns(&self, i: usize) -> bool {
        self.shard.is_none_or(|s| s.owns(i))
    }

    /// Column names of points.csv.
    pub fn header(&self) -> Vec<String> {
        let keys: Vec<String> = self.axes.iter().map(|a| a.key.clone()).collect();
        search_table::header(&keys, self.pareto.is_some())
    }

    /// Value of a figure or numeric varied key at a row.
    pub fn value(&self, row: &Row, name: &str) -> Option<f64> {
        match self.axes.iter().position(|a| a.key == name) {
            Some(k) => row.values[k].parse().ok(),
            None => row.figures.get(name),
        }
    }

    /// Whether a row ran and meets every constraint, with its objective defined.
    pub fn feasible(&self, row: &Row) -> bool {
        row.figures.get("operators").unwrap_or(0.0) > 0.0
            && self
                .constraints
                .iter()
                .all(|c| c.met(self.value(row, &c.figure)))
            && self
                .value(row, &self.objective.figure)
                .is_some_and(f64::is_finite)
    }

    /// Sum of the constraints' violations at a row (an undefined objective counts as one
    /// undefined figure).
    pub fn violation(&self, row: &Row) -> f64 {
        let mut v: f64 = self
            .constraints
            .iter()
            .map(|c| c.violation(self.value(row, &c.figure)))
            .sum();
        if !self
            .value(row, &self.objective.figure)
            .is_some_and(f64::is_finite)
        {
            v += super::goal::UNDEFINED_VIOLATION;
        }
        v
    }

    /// Runs the population at a point; a point whose every session fails gives a row of empty
    /// figures with every operator counted as failed.
    pub fn evaluate(&self, sc: &Scenario, tick: &(dyn Fn() + Sync)) -> Figures {
        let n = self.settings.operators;
        population::evaluate(sc, &self.run_settings, self.settings.seed, n, tick).unwrap_or_else(
            |_| {
                let mut v = vec![None; FIGURES.len()];
                v[0] = Some(0.0);
                v[1] = Some(n as f64);
                Figures(v)
            },
        )
    }
}

/// Whether a name is a figure or a numeric varied key.
fn is_known(name: &str, axes: &[Axis]) -> bool {
    figure_index(name).is_some() || axes.iter().any(|a| a.key == name && a.numeric())
}

/// Loads the base inputs with `--set` and the given key/value pairs.
fn scenario_with(
    setup: &SourceText,
    profile: &SourceText,
    base_set: &[Override],
    pairs: &[(&str, &String)],
) -> Result<Scenario, InputError> {
    let mut ov = base_set.to_vec();
    ov.extend(pairs.iter().map(|(k, v)| Override {
        key: k.to_string(),
        value: v.to_string(),
    }));
    load_scenario(setup, profile, &ov)
}

/// Whether a range axis whose levels are all whole numbers addresses a whole-number field: a
/// value half-way between two whole numbers then fails to parse (a type error, not a range one).
fn is_whole_number_field(
    axis: &Axis,
    setup: &SourceText,
    profile: &SourceText,
    base_set: &[Override],
) -> bool {
    let whole = axis
        .levels
        .iter()
        .all(|v| v.parse::<f64>().is_ok_and(|x| x.fract() == 0.0));
    if !whole {
        return false;
    }
    let probe = format!("{}.5", axis.levels[0]);
    matches!(
        scenario_with(setup, profile, base_set, &[(&axis.key, &probe)]),
        Err(InputError::Field { .. } | InputError::Syntax { .. })
    )
}

/// Writes a file through a temporary name in the same folder, then renames it into place.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), Failure> {
    let name = path
        .file_name()
        .map_or_else(|| "file".to_string(), |n| n.to_string_lossy().into_owned());
    let tmp = path.with_file_name(format!(".{name}.partial"));
    rundir::register(&tmp);
    let written = fs::write(&tmp, bytes).and_then(|_| fs::rename(&tmp, path));
    if written.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    rundir::unregister(&tmp);
    written.map_err(|e| Failure::Other(anyhow!("could not write '{}': {e}", path.display())))
}

/// Whether a key addresses the profile file.
pub fn is_profile_key(key: &str) -> bool {
    key.starts_with(PROFILE_PREFIX)
}
