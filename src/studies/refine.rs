//! Refinement of a search's best feasible points on its continuous axes with the Nelder–Mead
//! simplex method (Nelder & Mead 1965) from the `argmin` crate. Cost: up to `--refine-evals` new
//! points per start, each a population of sessions on the same operators as the design points.
//!
//! The simplex moves in the unit cube of the continuous axes (each axis' range mapped to [0, 1]),
//! starting at a design point and one grid step (a sample's stratum) along each axis. Discrete
//! axes (integer, listed, categorical) keep the start's values. Points outside the ranges are not
//! run. The function handed to the method ranks every feasible point before every infeasible
//! one: a feasible point costs its objective (negated to maximise), an infeasible one
//! [`PENALTY`]·(1 + its total violation). Nelder–Mead compares costs only, so this ranking is
//! all it uses. Values are put on the axis lattice ([`super::space::QUANTUM`]), and a point met
//! again (or already in `points.csv` from an interrupted run) is not run again.

use std::cell::RefCell;
use std::collections::HashMap;

use argmin::core::{CostFunction, Executor};
use argmin::solver::neldermead::NelderMead;

use super::outcome::Failure;

use super::progress::CountBar;
use super::search_study::Study;
use super::search_table::{Journal, Origin, Row};
use super::space::{Design, QUANTUM};

/// Cost of an infeasible point per unit of (1 + violation): above any objective value.
pub const PENALTY: f64 = 1e12;
/// The simplex is done when its costs agree this closely (e.g. it has shrunk onto one lattice point).
const SD_TOLERANCE: f64 = 1e-10;

/// The rank of a row for the refinement (and for picking the best point): smaller is better.
pub fn cost(study: &Study, row: &Row) -> f64 {
    if study.feasible(row) {
        let v = study
            .value(row, &study.objective.figure)
            .unwrap_or(f64::NAN);
        study.objective.sense.cost(v)
    } else {
        PENALTY * (1.0 + study.violation(row))
    }
}

/// What the refinement has met so far, shared by its starts.
struct Memory<'j> {
    /// Every evaluated point by its values (design rows and refined rows).
    known: HashMap<Vec<String>, Row>,
    /// Refined rows of an interrupted run, not yet met again.
    earlier: HashMap<Vec<String>, Row>,
    /// Refined rows of this run, in the order they were first met.
    rows: Vec<Row>,
    next_point: usize,
    journal: &'j mut Journal,
    bar: CountBar,
    error: Option<Failure>,
}

/// The function Nelder–Mead minimises for one start.
struct Objective<'a, 'j> {
    study: &'a Study,
    start: Vec<String>,
    continuous: Vec<usize>,
    memory: &'a RefCell<Memory<'j>>,
    budget: usize,
    calls: std::cell::Cell<usize>,
    new_points: std::cell::Cell<usize>,
}

impl CostFunction for Objective<'_, '_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, u: &Self::Param) -> Result<f64, argmin::core::Error> {
        let calls = self.calls.get() + 1;
        self.calls.set(calls);
        let outside: f64 = u.iter().map(|x| (-x).max(0.0) + (x - 1.0).max(0.0)).sum();
        if outside > 0.0 || u.iter().any(|x| !x.is_finite()) {
            return Ok(PENALTY * (1.0 + super::goal::UNDEFINED_VIOLATION + outside.min(1e6)));
        }
        let mut values = self.start.clone();
        for (k, &a) in self.continuous.iter().enumerate() {
            values[a] = self.study.axes[a].value_at(u[k]);
        }
        let mut m = self.memory.borrow_mut();
        if let Some(r) = m.known.get(&values) {
            return Ok(cost(self.study, r));
        }
        // The initial simplex is always evaluated (argmin cannot stop during its set-up).
        if calls > self.continuous.len() + 1 && self.new_points.get() >= self.budget {
            return Err(argmin::core::Error::msg("evaluation budget spent"));
        }
        self.new_points.set(self.new_points.get() + 1);
        let point = m.next_point;
        let row = if let Some(mut r) = m.earlier.remove(&values) {
            r.point = point;
            r
        } else {
            let sc = match self.study.scenario(&values) {
                Ok(sc) => sc,
                // A combination the files do not accept (a range rule between fields): not run.
                Err(_) => return Ok(PENALTY * (1.0 + 2.0 * super::goal::UNDEFINED_VIOLATION)),
            };
            let bar = m.bar.clone();
            drop(m);
            let figures = self.study.evaluate(&sc, &|| bar.inc());
            m = self.memory.borrow_mut();
            let r = Row {
                point,
                origin: Origin::Refine,
                values: values.clone(),
                figures,
            };
            let cells = self.study.journal_cells(&r);
            if let Err(e) = m.journal.add(&cells) {
                m.error.get_or_insert(Failure::Other(e));
            }
            r
        };
        m.next_point += 1;
        let c = cost(self.study, &row);
        m.known.insert(values, row.clone());
        m.rows.push(row);
        Ok(c)
    }
}

/// Refines from the best feasible design points (distinct in their discrete values); returns
/// the refined rows numbered after the design's points. `earlier` holds refined rows read back
/// from an interrupted run: met again, they are taken instead of run.
pub fn refine(
    study: &Study,
    design_rows: &[Row],
    earlier: Vec<Row>,
    journal: &mut Journal,
) -> Result<Vec<Row>, Failure> {
    let continuous: Vec<usize> = (0..study.axes.len())
        .filter(|&a| study.axes[a].continuous())
        .collect();
    let starts = starts(study, design_rows, &continuous);
    if continuous.is_empty() || starts.is_empty() {
        return Ok(Vec::new());
    }
    let budget = study.settings.refine_evals;
    let sessions = (starts.len() * budget * study.settings.operators) as u64;
    let memory = RefCell::new(Memory {
        known: design_rows
            .iter()
            .map(|r| (r.values.clone(), r.clone()))
            .collect(),
        earlier: earlier.into_iter().map(|r| (r.values.clone(), r)).collect(),
        rows: Vec::new(),
        next_point: study.points.len(),
        journal,
        bar: CountBar::new(sessions, "refine", "sessions", false),
        error: None,
    });
    for start in starts {
        let x0: Vec<f64> = continuous
            .iter()
            .map(|&a| study.axes[a].fraction_of(&start.values[a]).unwrap_or(0.5))
            .collect();
        let mut simplex = vec![x0.clone()];
        for (k, &a) in continuous.iter().enumerate() {
            let step = match study.design {
                Design::Grid => 1.0 / (study.axes[a].levels.len() - 1) as f64,
                Design::Lhs { samples } => 1.0 / samples as f64,
            }
            .max(2.0 * QUANTUM);
            let mut v = x0.clone();
            v[k] = if x0[k] + step <= 1.0 {
                x0[k] + step
            } else {
                x0[k] - step
            };
            simplex.push(v);
        }
        let problem = Objective {
            study,
            start: start.values.clone(),
            continuous: continuous.clone(),
            memory: &memory,
            budget,
            calls: std::cell::Cell::new(0),
            new_points: std::cell::Cell::new(0),
        };
        let solver = NelderMead::new(simplex)
            .with_sd_tolerance(SD_TOLERANCE)
            .map_err(|e| Failure::Other(anyhow::anyhow!("Nelder–Mead set-up: {e}")))?;
        // Ends by the budget (an error from the cost function), the tolerance or the iteration
        // cap; every point it met is already in memory, which is all that is kept.
        let _ = Executor::new(problem, solver)
            .configure(|s| s.max_iters(50 * budget as u64))
            .run();
        if let Some(e) = memory.borrow_mut().error.take() {
            return Err(e);
        }
    }
    let m = memory.into_inner();
    m.bar.finish();
    Ok(m.rows)
}

/// The design rows to start from: feasible, best first (ties: lower point number), one per
/// combination of the discrete axes' values, at most `--refine-starts`.
fn starts<'r>(study: &Study, rows: &'r [Row], continuous: &[usize]) -> Vec<&'r Row> {
    let mut feasible: Vec<(f64, &Row)> = rows
        .iter()
        .filter(|r| study.feasible(r))
        .map(|r| (cost(study, r), r))
        .collect();
    feasible.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.point.cmp(&b.1.point)));
    let discrete = |r: &Row| -> Vec<String> {
        (0..study.axes.len())
            .filter(|a| !continuous.contains(a))
            .map(|a| r.values[a].clone())
            .collect()
    };
    let mut chosen: Vec<&Row> = Vec::new();
    for (_, r) in feasible {
        if chosen.len() >= study.settings.refine_starts {
            break;
        }
        if !chosen.iter().any(|c| discrete(c) == discrete(r)) {
            chosen.push(r);
        }
    }
    chosen
}
