//! The integrator loop: segments between events, Dopri5 (ode_solvers) for the fast fidelity and
//! Radau5 (differential-equations, see [`Method`]) for the detailed one. Each accepted step is
//! checked (finite, physical, a due mode change); a switching time is located by bisection on
//! the solver's dense output and the next segment restarts there, so no step crosses an event
//! blindly. The trace is sampled from the dense output on a fixed grid, independent of the steps.

use std::cell::Cell;

use ode_solvers::continuous_output_model::ContinuousOutputModel;
use ode_solvers::{Dopri5, OutputType, System};

use crate::analysis::events::Event;
pub use crate::analysis::ledger::{Ledger, SolverStats};
use crate::analysis::trace::Trace;

pub use super::fidelity::Fidelity;
use super::plant::{Discrete, Plant, Point, Stage};
use super::state::*;
use super::stiff::{self, Attempt, Implicit, Limits, StiffRhs};
use super::transitions::{apply, due, Transition};
use super::watcher::{bisect, row, StepEnd, Watcher};

/// Longest Dopri5 segment between restarts, s: the segment's continuous output is kept in memory
/// until the segment is walked, so it is bounded. The fast fidelity steps in milliseconds; Dopri5
/// on the detailed network steps in microseconds (benchmark only), hence the shorter bound.
const MAX_SEGMENT_FAST_S: f64 = 10.0;
const MAX_SEGMENT_EXPLICIT_DETAILED_S: f64 = 0.05;
/// Most Dopri5 steps in one segment: the segment's steps and continuous output are held until it
/// is walked (about 2 kB a step), so a tiny step limit or tolerance must not grow memory with
/// the step count; a segment that reaches this many steps ends there and the next one goes on
/// (a restart costs two evaluations). Shipped sessions take about 100 steps per 10-s segment.
const MAX_SEGMENT_STEPS: usize = 4096;
/// Located switching times (mode changes, which change the dynamics) are within this of the
/// true crossing, s.
const EVENT_TOL_S: f64 = 1e-7;
/// Most mode changes applied at one instant (a cascade longer than this is a modelling error).
const MAX_CASCADE: usize = 8;
/// Dopri5 step limit per segment.
const MAX_STEPS: u32 = 5_000_000;
/// Implicit methods: step attempts per segment (a segment of a long session at the 50-ms step
/// limit needs ~72 000 for 1 h; the limit only stops a solver that has stalled).
const IMPLICIT_MAX_ATTEMPTS: usize = 5_000_000;
/// Implicit methods: Newton iterations per attempt before it is retried with a shorter step
/// (Hairer & Wanner's RADAU5 default, 7).
const IMPLICIT_MAX_NEWTON: usize = 7;
/// Implicit methods: rejected attempts in a row after which the implicit solver hands over to a
/// short Dopri5 bridge. Newton needs a right-hand side smooth in the state; the averaged
/// converter has points where it is not (an empty inductor held at zero, its duty at D_max), and
/// the solution can sit on them. An explicit method
/// does not iterate, so it passes them at its (stability-bound) step; the implicit solver resumes
/// after the bridge.
const IMPLICIT_BRIDGE_AFTER_REJECTIONS: usize = 30;
/// Length of a Dopri5 bridge, s (a few hundred of its ~13-µs steps).
const BRIDGE_S: f64 = 5e-3;
/// Most Dopri5 steps in one bridge: 500 000 over 5 ms is a 10-ns average step, the same floor
/// the explicit detailed fidelity had (5 M steps per 50-ms segment); below it the run fails.
const BRIDGE_MAX_STEPS: u32 = 500_000;
/// Implicit methods: every this many step attempts the run must have advanced at least
/// [`PROGRESS_MIN_S`] (a 10-ns average step, as above), or it fails: a right-hand side that
/// switches faster than any solver can follow would otherwise run for hours. Ordinary runs
/// advance seconds per window (the slowest shipped stretch, lead-acid float, ~25 s).
const PROGRESS_WINDOW: u64 = 200_000;
const PROGRESS_MIN_S: f64 = 2e-3;
/// Implicit methods: an accepted step whose energy defect exceeds this many times rtol of the
/// energy it moved (plus [`ENERGY_DEFECT_FLOOR_J`]) is taken again from its start with an eighth
/// of the step. Ordinary steps stay below 0.06·rtol on the shipped setups; steps that landed on a
/// spurious root at the kink the lead-acid battery's current once had at its rest voltage sat near
/// 0.8 (rtol 1e-4).
const ENERGY_DEFECT_FACTOR: f64 = 10.0;
const ENERGY_DEFECT_FLOOR_J: f64 = 1e-9;

/// Integration method of a run.
///
/// Choice (measured by benches/session.rs, whose header has the reasoning): the detailed
/// fidelity uses Radau5 from `differential-equations`. Dopri5 is held there by stability to
/// ~13-µs steps (the 60-s demo: 3.3 M steps, 5–9 s); Radau5, L-stable, steps at the accuracy
/// asked or the step limit (~1 400 steps, ~45 ms at the defaults) and lands closer to the scipy
/// reference. Its one-step-at-a-time API with per-step dense output is what the per-step checks
/// and event location need. That crate's BDF lost the mode changes; `ivp`'s BDF was quicker on a smooth
/// stretch but missed its tolerance. The fast fidelity has no stiff state left and stays on
/// Dopri5, whose cheap steps win there (Radau5 was 5–13 times slower, and at rtol 1e-6 failed on
/// the demo's branch change).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    /// Explicit Dormand–Prince 5(4), ode_solvers.
    Dopri5,
    /// Radau IIA order 5, differential-equations.
    Radau5,
    /// Variable-order BDF, differential-equations (measured, not used by default).
    Bdf,
}

impl Method {
    /// The method each fidelity uses.
    pub fn for_fidelity(f: Fidelity) -> Self {
        match f {
            Fidelity::Fast => Method::Dopri5,
            Fidelity::Detailed => Method::Radau5,
        }
    }

    /// The word used in summaries and the benchmark.
    pub fn as_str(self) -> &'static str {
        match self {
            Method::Dopri5 => "dopri5",
            Method::Radau5 => "radau5",
            Method::Bdf => "bdf",
        }
    }

    /// Longest segment between restarts, s (implicit segments are walked step by step and hold
    /// no dense output, so only events end them).
    fn max_segment_s(self, f: Fidelity) -> f64 {
        match (self, f) {
            (Method::Dopri5, Fidelity::Fast) => MAX_SEGMENT_FAST_S,
            (Method::Dopri5, Fidelity::Detailed) => MAX_SEGMENT_EXPLICIT_DETAILED_S,
            _ => f64::INFINITY,
        }
    }
}

/// Numerical options of one run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SimOptions {
    pub duration_s: f64,
    pub fidelity: Fidelity,
    pub trace_interval_s: f64,
    pub rtol: f64,
    pub atol: f64,
    pub max_step_s: f64,
    /// Integration method ([`Method::for_fidelity`] unless a benchmark compares them).
    pub method: Method,
}

/// Why a simulation failed (exit code 3 at the edge).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SimError {
    #[error("the integrator stopped at t = {t_s:.6} s: {reason}; state: {state}")]
    Solver {
        t_s: f64,
        reason: String,
        state: String,
    },
    #[error("the mode keeps changing at t = {t_s:.6} s ({changes}); state: {state}")]
    Chatter {
        t_s: f64,
        changes: String,
        state: String,
    },
    #[error("the state became non-finite at t = {t_s:.6} s; state: {state}")]
    NonFinite { t_s: f64, state: String },
    #[error("the solution diverged at t = {t_s:.6} s ({what}); state: {state}")]
    Unphysical {
        t_s: f64,
        what: &'static str,
        state: String,
    },
}

/// Energy an accepted step created or lost, and the energy it moved, J: the change of the
/// ledger's imbalance W − ΣE over the step against the sum of every flow's magnitude in it. The
/// exact solution keeps the imbalance constant; a step that lands on a spurious root of its
/// stage equations (possible where the right-hand side has a kink) books energy from nowhere.
fn step_energy_defect(plant: &Plant, ya: &State, yb: &State) -> (f64, f64) {
    let across = ledger_of(plant, ya, yb);
    let before = ledger_of(plant, ya, ya);
    let moved: f64 = (0..N_STATES)
        .filter(|&k| stiff::is_ledger(k) && k != Q_BATTERY)
        .map(|k| (yb[k] - ya[k]).abs())
        .sum::<f64>()
        + across.kinetic_change_j.abs()
        + across.field_change_j.abs()
        + across.rc_change_j.abs();
    (across.imbalance_j() - before.imbalance_j(), moved)
}

/// Everything a run produced.
#[derive(Debug, Clone)]
pub struct SimResult {
    pub trace: Trace,
    /// Every run of a watched condition (`analysis::episodes` makes the rows of them).
    pub runs: Vec<Event>,
    pub ledger: Ledger,
    pub stats: SolverStats,
    pub final_state: State,
    pub duration_s: f64,
}

/// Why a segment stopped early.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Stop {
    Due,
    /// The segment holds [`MAX_SEGMENT_STEPS`] steps: it ends at the last one.
    Full,
    /// The state left the physical range at this time.
    Bad(f64, &'static str),
}

/// Per-segment record filled from the solver's callback.
#[derive(Debug, Default)]
struct Recorder {
    steps: Vec<StepEnd>,
    stop: Option<Stop>,
    last_state: Option<State>,
}

impl Recorder {
    /// Empties the recorder for the next segment, keeping its buffer.
    fn clear(&mut self) {
        self.steps.clear();
        self.stop = None;
        self.last_state = None;
    }
}

/// The right-hand side handed to ode_solvers: the plant in a fixed mode.
struct Rhs<'a> {
    plant: &'a Plant,
    disc: Discrete,
    rec: &'a mut Recorder,
    /// Point of the latest evaluation (the FSAL stage is the accepted point).
    cache: Cell<Option<(f64, Point)>>,
    evals: &'a Cell<u64>,
}

impl System<f64, State> for Rhs<'_> {
    fn system(&self, t: f64, y: &State, dy: &mut State) {
        let p = self.plant.eval(t, y, &self.disc);
        self.plant.derivatives(&p, y, &self.disc, dy);
        self.cache.set(Some((t, p)));
        self.evals.set(self.evals.get() + 1);
    }

    fn solout(&mut self, t: f64, y: &State, _dy: &State) -> bool {
        if let Some(what) = unphysical(y) {
            self.rec.stop = Some(Stop::Bad(t, what));
            self.rec.last_state = Some(*y);
            return true;
        }
        let p = match self.cache.get() {
            Some((tc, p)) if tc == t => p,
            _ => self.plant.eval(t, y, &self.disc),
        };
        self.rec.steps.push(StepEnd { t, y: *y, p });
        self.rec.last_state = Some(*y);
        if due(self.plant, &p, y, &self.disc).is_some() {
            self.rec.stop = Some(Stop::Due);
            return true;
        }
        if self.rec.steps.len() >= MAX_SEGMENT_STEPS {
            self.rec.stop = Some(Stop::Full);
            return true;
        }
        false
    }
}

/// Initial state vector of a session: at rest; in the detailed fidelity the output capacitor
/// (and, for a direct connection, the input capacitor) sits at the battery's rest voltage.
pub fn initial_state(plant: &Plant, soc_start: f64, battery_temp_c: f64) -> State {
    let mut y = State::zeros();
    y[W_PRIME] = plant.operator.w_prime_j;
    y[SOC] = soc_start;
    y[BATTERY_TEMP] = battery_temp_c;
    y[WINDING_TEMP] = plant.ambient_c;
    y[JUNCTION_TEMP] = plant.ambient_c;
    // A replayed log may start with the crank already turning.
    if let Some(r) = &plant.replay {
        y[CRANK_SPEED] = r.start_speed_rad_s();
        y[GEN_SPEED] = y[CRANK_SPEED] * plant.drive.ratio;
    }
    if plant.fidelity == Fidelity::Detailed {
        let rest = plant.battery.terminal(&Plant::battery_state(&y)).v(0.0).0;
        y[OUTPUT_V] = rest;
        if !plant.has_converter() {
            y[INPUT_V] = rest;
        }
    }
    y
}

/// Mode at the start of a session from state `y0` (before any transition is applied).
pub fn initial_discrete(plant: &Plant, y0: &State) -> Discrete {
    Discrete {
        enabled: !plant.has_converter(),
        ov_shutdown: false,
        stage: Stage::Charging,
        absorption_since_s: 0.0,
        band: plant.band(y0[BATTERY_TEMP]),
        resting: plant.jitter.resting(0.0),
        engaged: true,
        soft_done: plant.charger.soft_start_s <= 0.0,
        buck_mode: false,
        disabled_at_s: f64::NEG_INFINITY,
        device_on: false,
        device_off_at_s: f64::NEG_INFINITY,
        device_on_at_s: f64::NEG_INFINITY,
        device_cutoffs: 0,
        peak_v: 0.0,
        watch_from_s: plant.charger.end_holdoff_s,
        end_cause: 0,
    }
}

/// Runs one session.
pub fn simulate(plant: &Plant, y0: State, opts: &SimOptions) -> Result<SimResult, SimError> {
    simulate_watched(plant, y0, opts, None)
}

/// Runs one session, storing the simulated time reached in `progress` after every segment.
pub fn simulate_watched(
    plant: &Plant,
    y0: State,
    opts: &SimOptions,
    progress: Option<&super::Progress>,
) -> Result<SimResult, SimError> {
    let watcher = Watcher::new(plant, opts.trace_interval_s, opts.duration_s);
    let (Integrated { y, disc, stats }, watcher) = integrate(plant, y0, opts, progress, watcher)?;
    let t_end = opts.duration_s;
    let Watcher {
        mut sampler,
        observer,
        ..
    } = watcher;
    let runs = observer.finish(t_end);
    if sampler.rows.last().is_none_or(|r| r.time_s < t_end) {
        let p = plant.eval(t_end, &y, &disc);
        sampler.rows.push(row(plant, &p, &y, &disc));
    }
    let ledger = ledger_of(plant, &y0, &y);
    Ok(SimResult {
        trace: Trace { rows: sampler.rows },
        runs,
        ledger,
        stats,
        final_state: y,
        duration_s: t_end,
    })
}

/// Where the integration ended.
struct Integrated {
    y: State,
    disc: Discrete,
    stats: SolverStats,
}

/// The segment loop: integrates from y0 to the session's end; `watcher` observes every accepted
/// stretch and every mode change. Returns the end and the watcher.
fn integrate<'a>(
    plant: &'a Plant,
    y0: State,
    opts: &SimOptions,
    progress: Option<&super::Progress>,
    watcher: Watcher<'a>,
) -> Result<(Integrated, Watcher<'a>), SimError> {
    let t_end = opts.duration_s;
    let mut time_events: Vec<f64> = plant
        .segment_boundaries()
        .chain(plant.jitter.rests.iter().flat_map(|r| [r.start_s, r.end_s]))
        .filter(|&t| t > 0.0 && t < t_end)
        .collect();
    time_events.push(t_end);
    time_events.sort_by(f64::total_cmp);
    time_events.dedup();

    let mut disc = initial_discrete(plant, &y0);
    let mut y = y0;
    let mut t = 0.0;
    let mut stats = SolverStats {
        method: opts.method.as_str(),
        rtol: opts.rtol,
        max_step_s: opts.max_step_s,
        ..SolverStats::default()
    };
    let evals = Cell::new(0u64);

    let mut run = Walk {
        plant,
        watcher,
        progress: (0, 0.0),
    };
    cascade(plant, t, &mut y, &mut disc, &mut stats, None)?;
    run.watcher.mark(t, &disc, &y);
    let mut h_guess: f64 = 0.0;
    let mut next_event = 0usize;
    let mut rec = Recorder::default();
    while t < t_end {
        if t_end - t <= 1e-9 * t_end.max(1.0) {
            break;
        }
        while next_event < time_events.len() && time_events[next_event] <= t {
            next_event += 1;
        }
        let mut t_stop = time_events
            .get(next_event)
            .copied()
            .unwrap_or(t_end)
            .min(t + opts.method.max_segment_s(opts.fidelity));
        // Snap to a time event a rounding sliver away: a 1e-15 s segment would make the solver
        // report a step-size underflow.
        if let Some(&te) = time_events.get(next_event) {
            if te > t_stop && te - t_stop <= 1e-9 * te.abs().max(1.0) {
                t_stop = te;
            }
        }
        if disc.stage == Stage::Absorption {
            let deadline = disc.absorption_since_s + plant.charger.absorption_max_s;
            if deadline > t && deadline < t_stop {
                t_stop = deadline;
            }
        }
        let seg = SegmentStart {
            t,
            y,
            t_stop,
            h_guess,
        };
        let end = match opts.method {
            Method::Dopri5 => {
                // One recorder for all segments: its step buffer keeps its capacity.
                rec.clear();
                explicit_segment(
                    &mut run, &mut rec, &disc, &seg, opts, MAX_STEPS, &evals, &mut stats,
                )?
            }
            Method::Radau5 => implicit_segment(
                &mut run,
                &mut rec,
                &disc,
                &seg,
                opts,
                Implicit::Radau5,
                &evals,
                &mut stats,
            )?,
            Method::Bdf => implicit_segment(
                &mut run,
                &mut rec,
                &disc,
                &seg,
                opts,
                Implicit::Bdf,
                &evals,
                &mut stats,
            )?,
        };
        stats.segments += 1;
        if end.h_last > 0.0 {
            h_guess = end.h_last;
        }
        t = end.t;
        y = end.y;
        if let Some(p) = progress {
            p.set(t);
        }

        // Time events at t: rests start or end.
        let resting = plant.jitter.resting(t);
        if resting != disc.resting {
            disc.resting = resting;
            stats.mode_changes += 1;
        }
        cascade(plant, t, &mut y, &mut disc, &mut stats, end.located)?;
        run.watcher.mark(t, &disc, &y);
    }
    stats.evaluations = evals.get();
    Ok((Integrated { y, disc, stats }, run.watcher))
}

/// Where a segment starts.
struct SegmentStart {
    t: f64,
    y: State,
    t_stop: f64,
    /// Step size to start with (the previous segment's last), s; 0 lets the solver choose.
    h_guess: f64,
}

/// Where a segment ended: the located switching time or the segment end, the last step size,
/// and the transition found due at a located switching time.
struct SegmentEnd {
    t: f64,
    y: State,
    h_last: f64,
    located: Option<Transition>,
}

/// Per-step bookkeeping shared by every integrator: the location of due mode changes, and the
/// observation (trace rows, watched conditions) of every accepted stretch.
struct Walk<'a> {
    plant: &'a Plant,
    watcher: Watcher<'a>,
    /// Implicit step attempts since the last progress mark, and the time of that mark.
    progress: (u64, f64),
}

impl Walk<'_> {
    /// Handles the accepted step (a, end.t] of an implicit method, observed at once with the
    /// solver's own dense output. If a mode change is due at its end, the switching time is
    /// located and the step is used only up to there; that time and the transition found due
    /// there are returned (the segment ends; the caller supplies the state to restart from).
    fn step(
        &mut self,
        disc: &Discrete,
        a: f64,
        end: &StepEnd,
        dense: &dyn Fn(f64) -> State,
    ) -> Option<(f64, Option<Transition>)> {
        let stop = locate(self.plant, disc, a, end, dense);
        self.watcher
            .observe(disc, a, stop.map_or(end.t, |(ts, _)| ts), end, dense);
        stop
    }
}

/// The mode change due at the end of the accepted step (a, end.t], if any, located by bisection
/// on `dense`: its time and the transition found due there.
fn locate(
    plant: &Plant,
    disc: &Discrete,
    a: f64,
    end: &StepEnd,
    dense: &dyn Fn(f64) -> State,
) -> Option<(f64, Option<Transition>)> {
    due(plant, &end.p, &end.y, disc).map(|_| {
        let ts = bisect(a, end.t, EVENT_TOL_S, |tq| {
            let yq = dense(tq);
            let pq = plant.eval(tq, &yq, disc);
            due(plant, &pq, &yq, disc).is_some()
        });
        let yd = dense(ts);
        (ts, due(plant, &plant.eval(ts, &yd, disc), &yd, disc))
    })
}

/// One segment with Dopri5 (ode_solvers): the whole segment is integrated with the callback
/// stopping at the first step after which a mode change is due, then the recorded steps are
/// walked with the segment's continuous output.
#[allow(clippy::too_many_arguments)]
fn explicit_segment(
    run: &mut Walk,
    rec: &mut Recorder,
    disc: &Discrete,
    seg: &SegmentStart,
    opts: &SimOptions,
    max_steps: u32,
    evals: &Cell<u64>,
    stats: &mut SolverStats,
) -> Result<SegmentEnd, SimError> {
    let plant = run.plant;
    let (t, y, t_stop) = (seg.t, seg.y, seg.t_stop);
    let mut model = ContinuousOutputModel::new();
    let result = {
        let rhs = Rhs {
            plant,
            disc: *disc,
            rec: &mut *rec,
            cache: Cell::new(None),
            evals,
        };
        let h_max = opts.max_step_s.min(t_stop - t);
        let mut solver = Dopri5::from_param(
            rhs,
            t,
            t_stop,
            t_stop - t,
            y,
            opts.rtol,
            opts.atol,
            DOPRI5_SAFETY,
            DOPRI5_BETA,
            DOPRI5_FAC_MIN,
            DOPRI5_FAC_MAX,
            h_max,
            seg.h_guess.min(h_max),
            max_steps,
            u32::MAX,
            OutputType::Continuous,
        );
        solver.integrate_with_continuous_output_model(&mut model)
    };
    let solver_stats = result.map_err(|e| SimError::Solver {
        t_s: rec.steps.last().map_or(t, |s| s.t),
        reason: e.to_string(),
        state: describe(rec.last_state.as_ref().unwrap_or(&y)),
    })?;
    stats.accepted_steps += u64::from(solver_stats.accepted_steps);
    stats.rejected_steps += u64::from(solver_stats.rejected_steps);
    if let Some(Stop::Bad(tf, what)) = rec.stop {
        return Err(SimError::Unphysical {
            t_s: tf,
            what,
            state: describe(rec.last_state.as_ref().unwrap_or(&y)),
        });
    }
    if rec.steps.is_empty() {
        // Nothing was stepped (cannot normally happen): hold the state to the segment end.
        run.watcher.hold(disc, &y, t_stop);
        return Ok(SegmentEnd {
            t: t_stop,
            y,
            h_last: 0.0,
            located: None,
        });
    }
    // Evaluate inside the model's range: grid times a few ulps past the last step must not fall
    // back to a stale state.
    let (lo_b, hi_b) = model.bounds();
    let last_y = rec.last_state.unwrap_or(y);
    let dense = |tq: f64| model.evaluate(tq.clamp(lo_b, hi_b)).unwrap_or(last_y);
    let steps = &rec.steps;
    let n = steps.len();
    let (a, y_a) = if n >= 2 {
        (steps[n - 2].t, steps[n - 2].y)
    } else {
        (t, y)
    };
    let h_last = (steps[n - 1].t - a).max(1e-6);
    // Only the last step can end with a mode change due: the callback stopped the solver there.
    let located = locate(plant, disc, a, &steps[n - 1], &dense);
    run.watcher
        .segment(disc, t, steps, located.map(|(ts, _)| ts), &dense);
    Ok(match located {
        Some((ts, located)) => SegmentEnd {
            t: ts,
            // The state at the switching time comes from one integration step from the last
            // accepted step, not from the dense output: the dense output interpolates each state
            // on its own, and restarting from it opened the energy ledger a little at every
            // event (8.9e-4 after 24 000 restarts at rtol 1e-4; 5.5e-6 this way).
            y: step_to(plant, disc, a, y_a, ts, opts, evals).unwrap_or_else(|| dense(ts)),
            h_last,
            located,
        },
        None => SegmentEnd {
            t: if rec.stop == Some(Stop::Full) {
                steps[n - 1].t
            } else {
                t_stop
            },
            y: last_y,
            h_last,
            located: None,
        },
    })
}

/// One segment with an implicit method, one step at a time: each accepted step is checked
/// (finite and physical), walked with its own dense output, and the segment ends at a located
/// mode change or at `t_stop`.
#[allow(clippy::too_many_arguments)]
fn implicit_segment(
    run: &mut Walk,
    rec: &mut Recorder,
    disc: &Discrete,
    seg: &SegmentStart,
    opts: &SimOptions,
    method: Implicit,
    evals: &Cell<u64>,
    stats: &mut SolverStats,
) -> Result<SegmentEnd, SimError> {
    let plant = run.plant;
    let rhs = StiffRhs {
        plant,
        disc: *disc,
        evals,
        t_stop: seg.t_stop,
    };
    let limits = Limits {
        rtol: opts.rtol,
        atol: opts.atol,
        h_max: opts.max_step_s.min(seg.t_stop - seg.t),
        h0: seg.h_guess,
        max_steps: IMPLICIT_MAX_ATTEMPTS,
        max_newton_iter: IMPLICIT_MAX_NEWTON,
    };
    let fail = |t_s: f64, reason: String, y: &State| SimError::Solver {
        t_s,
        reason,
        state: describe(y),
    };
    /// Why the step loop ended without a segment end.
    enum Halt {
        Failed(SimError),
        /// Too many rejections in a row at this time and state.
        Stalled(f64, Box<State>),
    }
    use Halt::{Failed, Stalled};
    let mut solver = stiff::Segment::start(method, &rhs, seg.t, &seg.y, seg.t_stop, &limits)
        .map_err(|e| fail(seg.t, e, &seg.y))?;
    let mut y_last = seg.y;
    let mut rejected_in_a_row = 0usize;
    let mut h_last = 0.0;
    let outcome = loop {
        let (attempts, t_mark) = run.progress;
        if attempts >= PROGRESS_WINDOW {
            if solver.t() - t_mark < PROGRESS_MIN_S {
                break Err(Failed(fail(
                    solver.t(),
                    format!(
                        "{attempts} step attempts advanced only {:.3e} s (the right-hand side \
                         switches faster than the solver can follow)",
                        solver.t() - t_mark
                    ),
                    &y_last,
                )));
            }
            run.progress = (0, solver.t());
        }
        run.progress.0 += 1;
        let attempt = match solver.attempt(&rhs) {
            Ok(a) => a,
            // The crate's own guards (step-size underflow, singular matrices) also end in a
            // bridge: an explicit method may pass where Newton cannot.
            Err(_) => break Err(Stalled(solver.t(), Box::new(y_last))),
        };
        let Attempt::Accepted { t_prev, t } = attempt else {
            stats.rejected_steps += 1;
            rejected_in_a_row += 1;
            if rejected_in_a_row >= IMPLICIT_BRIDGE_AFTER_REJECTIONS {
                break Err(Stalled(solver.t(), Box::new(y_last)));
            }
            continue;
        };
        stats.accepted_steps += 1;
        h_last = t - t_prev;
        let ys = *solver.y();
        if let Some(what) = unphysical(&ys) {
            break Err(Failed(SimError::Unphysical {
                t_s: t,
                what,
                state: describe(&ys),
            }));
        }
        let (defect_j, moved_j) = step_energy_defect(plant, &y_last, &ys);
        if defect_j.abs() > ENERGY_DEFECT_FACTOR * opts.rtol * moved_j + ENERGY_DEFECT_FLOOR_J {
            // Take the step again from its start, shorter; the solver restarts there.
            stats.energy_retries += 1;
            stats.accepted_steps -= 1;
            stats.rejected_steps += 1;
            rejected_in_a_row += 1;
            if rejected_in_a_row >= IMPLICIT_BRIDGE_AFTER_REJECTIONS {
                break Err(Stalled(t_prev, Box::new(y_last)));
            }
            add_counts(stats, &solver.counts);
            let retry = Limits {
                h0: (t - t_prev) / 8.0,
                h_max: opts.max_step_s.min(seg.t_stop - t_prev),
                ..limits
            };
            match stiff::Segment::start(method, &rhs, t_prev, &y_last, seg.t_stop, &retry) {
                Ok(s) => solver = s,
                Err(_) => break Err(Stalled(t_prev, Box::new(y_last))),
            }
            continue;
        }
        rejected_in_a_row = 0;
        y_last = ys;
        let end = StepEnd {
            t,
            y: ys,
            p: plant.eval(t, &ys, disc),
        };
        let cell = std::cell::RefCell::new(&mut solver);
        let dense = |tq: f64| cell.borrow_mut().dense(tq);
        if let Some((ts, located)) = run.step(disc, t_prev, &end, &dense) {
            // The restart state: the collocation polynomial at ts with the ledger integrated to
            // ts by the same quadrature (so the ledger stays closed across events).
            break Ok((ts, solver.state_at(&rhs, ts), located));
        }
        if t >= seg.t_stop {
            break Ok((seg.t_stop, ys, None));
        }
    };
    add_counts(stats, &solver.counts);
    match outcome {
        Ok((t, y, located)) => Ok(SegmentEnd {
            t,
            y,
            h_last,
            located,
        }),
        Err(Failed(e)) => Err(e),
        Err(Stalled(t, y)) => {
            let y = *y;
            // Hand over to Dopri5 for a short stretch; the next segment is implicit again.
            let t_stop = (t + BRIDGE_S).min(seg.t_stop);
            if t_stop - t <= 1e-12 * t.abs().max(1.0) {
                // Stalled a rounding sliver short of the segment end: that end is reached.
                return Ok(SegmentEnd {
                    t: t_stop,
                    y,
                    h_last,
                    located: None,
                });
            }
            stats.explicit_bridges += 1;
            let bridge = SegmentStart {
                t,
                y,
                t_stop,
                h_guess: 0.0,
            };
            rec.clear();
            explicit_segment(
                run,
                rec,
                disc,
                &bridge,
                opts,
                BRIDGE_MAX_STEPS,
                evals,
                stats,
            )
        }
    }
}

/// Adds one implicit segment's counters to the run's.
fn add_counts(stats: &mut SolverStats, c: &stiff::ImplicitCounts) {
    stats.jacobians += c.jacobians;
    stats.lu_decompositions += c.decompositions;
    stats.newton_iterations += c.newton_iterations;
    stats.newton_failures += c.newton_failures;
}

/// Why a state is not physical, if it is not: a non-finite entry, or a magnitude no hand-cranked
/// charger reaches (these bounds are far outside any valid run and catch a diverging solution,
/// not a bad design).
fn unphysical(y: &State) -> Option<&'static str> {
    if !all_finite(y) {
        return Some("a state is not finite");
    }
    let checks: [(usize, f64, f64, &'static str); 10] = [
        (CRANK_SPEED, -1e4, 1e4, "crank speed beyond ±10 000 rad/s"),
        (GEN_SPEED, -1e6, 1e6, "generator speed beyond ±1e6 rad/s"),
        (SOC, -0.5, 1.5, "state of charge outside −0.5 … 1.5"),
        (
            BATTERY_TEMP,
            -150.0,
            1000.0,
            "battery temperature outside −150 … 1000 °C",
        ),
        (
            WINDING_TEMP,
            -150.0,
            1000.0,
            "winding temperature outside −150 … 1000 °C",
        ),
        (
            JUNCTION_TEMP,
            -150.0,
            1000.0,
            "junction temperature outside −150 … 1000 °C",
        ),
        (ARMATURE_I, -1e4, 1e4, "armature current beyond ±10 kA"),
        (INPUT_V, -1e4, 1e4, "input voltage beyond ±10 kV"),
        (INDUCTOR_I, -1e4, 1e4, "inductor current beyond ±10 kA"),
        (OUTPUT_V, -1e4, 1e4, "output voltage beyond ±10 kV"),
    ];
    checks
        .iter()
        .find(|&&(k, lo, hi, _)| !(lo..=hi).contains(&y[k]))
        .map(|c| c.3)
}

/// Applies every transition due at (t, y) until none is; `located`,
/// the transition the event search found due at t, goes first (the state handed in may sit a
/// rounding error on the other side of its threshold). A mode that keeps flipping at one instant
/// is a modelling error and is reported, not looped over.
fn cascade(
    plant: &Plant,
    t: f64,
    y: &mut State,
    disc: &mut Discrete,
    stats: &mut SolverStats,
    located: Option<Transition>,
) -> Result<(), SimError> {
    let mut applied = Vec::new();
    let mut first = located;
    for _ in 0..MAX_CASCADE {
        let p = plant.eval(t, y, disc);
        let Some(tr) = first.take().or_else(|| due(plant, &p, y, disc)) else {
            return Ok(());
        };
        apply(plant, tr, t, &p, y, disc);
        applied.push(tr);
        stats.mode_changes += 1;
    }
    let p = plant.eval(t, y, disc);
    if due(plant, &p, y, disc).is_none() {
        return Ok(());
    }
    Err(SimError::Chatter {
        t_s: t,
        changes: format!("{applied:?}"),
        state: describe(y),
    })
}

/// The plant in a fixed mode, for a short integration that must run to its end.
struct Free<'a> {
    plant: &'a Plant,
    disc: Discrete,
    evals: &'a Cell<u64>,
}

impl System<f64, State> for Free<'_> {
    fn system(&self, t: f64, y: &State, dy: &mut State) {
        let p = self.plant.eval(t, y, &self.disc);
        self.plant.derivatives(&p, y, &self.disc, dy);
        self.evals.set(self.evals.get() + 1);
    }
}

/// Dopri5's step-size control (Hairer, Nørsett & Wanner, Solving ODEs I, §II.4): safety factor,
/// the PI stabilisation β recommended for Dopri5, and the bounds on one step's change of size.
const DOPRI5_SAFETY: f64 = 0.9;
const DOPRI5_BETA: f64 = 0.04;
const DOPRI5_FAC_MIN: f64 = 0.2;
const DOPRI5_FAC_MAX: f64 = 10.0;

/// Integrates from an accepted step (t0, y0) to t1 ≤ the next step end (one step, or a few if the
/// error control asks), under the same tolerances. None if the integrator fails.
fn step_to(
    plant: &Plant,
    disc: &Discrete,
    t0: f64,
    y0: State,
    t1: f64,
    opts: &SimOptions,
    evals: &Cell<u64>,
) -> Option<State> {
    if t1 <= t0 {
        return Some(y0);
    }
    let h = t1 - t0;
    let mut solver = Dopri5::from_param(
        Free {
            plant,
            disc: *disc,
            evals,
        },
        t0,
        t1,
        h,
        y0,
        opts.rtol,
        opts.atol,
        DOPRI5_SAFETY,
        DOPRI5_BETA,
        DOPRI5_FAC_MIN,
        DOPRI5_FAC_MAX,
        h,
        h,
        1000,
        u32::MAX,
        OutputType::Sparse,
    );
    solver.integrate().ok()?;
    solver.y_out().last().copied().filter(all_finite)
}

/// Ledger totals from the initial and final states.
fn ledger_of(plant: &Plant, y0: &State, y: &State) -> Ledger {
    let b0 = Plant::battery_state(y0);
    let b1 = Plant::battery_state(y);
    Ledger {
        operator_work_j: y[E_OPERATOR],
        kinetic_change_j: plant.kinetic_j(y) - plant.kinetic_j(y0),
        drive_loss_j: y[E_DRIVE],
        friction_j: y[E_FRICTION],
        copper_j: y[E_COPPER],
        brush_j: y[E_BRUSH],
        diode_j: y[E_DIODE],
        converter_loss_j: y[E_CONVERTER],
        battery_terminal_j: y[E_BATTERY_TERMINAL],
        battery_ohmic_j: y[E_BATTERY_OHMIC],
        battery_coulombic_j: y[E_BATTERY_COULOMBIC],
        stored_chemical_j: y[E_STORED],
        rc_change_j: plant.battery.rc_energy_j(&b1) - plant.battery.rc_energy_j(&b0),
        field_change_j: plant.field_energy_j(y) - plant.field_energy_j(y0),
        charge_as: y[Q_BATTERY],
        device_loss_j: y[E_DEVICE],
        gas_j: y[E_GAS],
        iron_loss_j: y[E_IRON],
        cogging_change_j: plant.cogging_j(y) - plant.cogging_j(y0),
        overhead_loss_j: y[E_OVERHEAD],
        pass_heat_j: y[E_PASS],
        recombination_heat_j: y[E_RECOMBINATION],
        leakage_j: y[E_LEAKAGE],
    }
}

/// Named state dump for failure messages (the physical states; the ledger quadratures are left
/// out).
fn describe(y: &State) -> String {
    STATE_NAMES
        .iter()
        .zip(y.iter())
        .enumerate()
        .filter(|(k, _)| !stiff::is_ledger(*k))
        .map(|(_, (n, v))| format!("{n}={v:.6e}"))
        .collect::<Vec<_>>()
        .join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unphysical_flags_non_finite_and_out_of_range_states_only() {
        let mut y = State::zeros();
        y[SOC] = 0.5;
        y[BATTERY_TEMP] = 25.0;
        y[WINDING_TEMP] = 25.0;
        y[OUTPUT_V] = 12.0;
        assert_eq!(unphysical(&y), None);
        // Ledger quadratures may grow without bound in a long session.
        y[E_OPERATOR] = 1e12;
        assert_eq!(unphysical(&y), None);
        let mut bad = y;
        bad[INPUT_V] = f64::NAN;
        assert_eq!(unphysical(&bad), Some("a state is not finite"));
        let mut bad = y;
        bad[E_DIODE] = f64::INFINITY;
        assert_eq!(unphysical(&bad), Some("a state is not finite"));
        let mut bad = y;
        bad[OUTPUT_V] = -2e4;
        assert_eq!(unphysical(&bad), Some("output voltage beyond ±10 kV"));
    }
}
