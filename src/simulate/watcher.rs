//! Observation of a run: trace rows on the fixed grid and the watched conditions (episodes and
//! alerts), taken from each accepted step and its dense output. Nothing here feeds back into the
//! integration.

use crate::analysis::trace::{Mode, TraceRow};
use crate::units::rad_s_to_rpm;

use super::observe::{codes, Codes, Observer};
use super::plant::{Discrete, Plant, Point, Stage};
use super::state::*;

/// Trace sampler and condition observer of one run.
pub(super) struct Watcher<'a> {
    plant: &'a Plant,
    pub sampler: Sampler,
    pub observer: Observer,
}

impl<'a> Watcher<'a> {
    pub fn new(plant: &'a Plant, trace_interval_s: f64, t_end: f64) -> Self {
        Self {
            plant,
            sampler: Sampler::new(trace_interval_s, t_end),
            observer: Observer::new(),
        }
    }

    /// Trace rows and watched conditions over the accepted step (a, b], b ≤ end.t (a step cut
    /// at a located mode change ends at b).
    pub fn observe(
        &mut self,
        disc: &Discrete,
        a: f64,
        b: f64,
        end: &StepEnd,
        dense: &dyn Fn(f64) -> State,
    ) {
        if b <= a {
            return;
        }
        let plant = self.plant;
        let mut a = a;
        let observer = &mut self.observer;
        self.sampler.sample_until(b, |tq| {
            let yq = dense(tq);
            let pq = plant.eval(tq, &yq, disc);
            if tq > a {
                watch(plant, disc, observer, a, tq, &yq, &pq, dense);
                a = tq;
            }
            observer.touch(plant, &pq, &yq, disc);
            row(plant, &pq, &yq, disc)
        });
        let (yb, pb) = if b < end.t {
            let yb = dense(b);
            (yb, plant.eval(b, &yb, disc))
        } else {
            (end.y, end.p)
        };
        if b > a {
            watch(plant, disc, &mut self.observer, a, b, &yb, &pb, dense);
        }
        self.observer.touch(plant, &pb, &yb, disc);
    }

    /// A segment's accepted steps from `t0`, the last one cut at `cut` (a mode change located
    /// inside it).
    pub fn segment(
        &mut self,
        disc: &Discrete,
        t0: f64,
        steps: &[StepEnd],
        cut: Option<f64>,
        dense: &dyn Fn(f64) -> State,
    ) {
        let n = steps.len();
        let mut a = t0;
        for (k, step) in steps.iter().enumerate() {
            let b = match cut {
                Some(ts) if k + 1 == n => ts,
                _ => step.t,
            };
            self.observe(disc, a, b, step, dense);
            a = step.t;
        }
    }

    /// Nothing was stepped: the state `y` is held to `t_stop`.
    pub fn hold(&mut self, disc: &Discrete, y: &State, t_stop: f64) {
        let plant = self.plant;
        self.sampler.sample_until(t_stop, |tq| {
            let pq = plant.eval(tq, y, disc);
            row(plant, &pq, y, disc)
        });
    }

    /// The mode after the transitions applied at `t`: the conditions are taken afresh there.
    pub fn mark(&mut self, t: f64, disc: &Discrete, y: &State) {
        let p = self.plant.eval(t, y, disc);
        let open = self.observer.current();
        self.observer.set(
            t,
            &codes(self.plant, &p, y, disc, &open),
            self.plant,
            (&p, y, disc),
        );
    }
}

/// Located changes of the watched conditions (reporting only: episodes and alerts, whose times
/// are written to 0.1 ms) are within this of the true crossing, s.
const WATCH_TOL_S: f64 = 1e-5;

/// One accepted step end.
#[derive(Debug, Clone, Copy)]
pub(super) struct StepEnd {
    pub t: f64,
    pub y: State,
    pub p: Point,
}

/// Locates changes of the watched conditions inside (a, b] and applies them. Each condition's
/// hysteresis depends on which runs are open, so the end codes are taken afresh after each change.
#[allow(clippy::too_many_arguments)]
fn watch(
    plant: &Plant,
    disc: &Discrete,
    observer: &mut Observer,
    a: f64,
    b: f64,
    yb: &State,
    pb: &Point,
    dense: &dyn Fn(f64) -> State,
) {
    let mut lo = a;
    for _ in 0..WATCH_LIMIT {
        let now: Codes = observer.current();
        if codes(plant, pb, yb, disc, &now) == now {
            return;
        }
        let tc = bisect(lo, b, WATCH_TOL_S, |tq| {
            let yq = dense(tq);
            let pq = plant.eval(tq, &yq, disc);
            codes(plant, &pq, &yq, disc, &now) != now
        });
        let yc = dense(tc);
        let pc = plant.eval(tc, &yc, disc);
        observer.set(
            tc,
            &codes(plant, &pc, &yc, disc, &now),
            plant,
            (&pc, &yc, disc),
        );
        lo = tc;
    }
}

/// Most separate condition changes located inside one step.
const WATCH_LIMIT: usize = 16;

/// Earliest time in (lo, hi] at which `pred` holds, given it holds at `hi` (bisection to `tol`).
pub(super) fn bisect(mut lo: f64, mut hi: f64, tol: f64, pred: impl Fn(f64) -> bool) -> f64 {
    while hi - lo > tol {
        let mid = 0.5 * (lo + hi);
        if pred(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    hi
}

/// Fixed-grid sampler: row k at k·Δt, plus the final time.
pub(super) struct Sampler {
    dt: f64,
    t_end: f64,
    k: u64,
    pub(super) rows: Vec<TraceRow>,
}

impl Sampler {
    fn new(dt: f64, t_end: f64) -> Self {
        let n = (t_end / dt).ceil() as usize + 2;
        Self {
            dt,
            t_end,
            k: 0,
            rows: Vec::with_capacity(n.min(10_000_000)),
        }
    }

    /// Samples every grid time ≤ `b` not yet sampled.
    fn sample_until(&mut self, b: f64, mut f: impl FnMut(f64) -> TraceRow) {
        loop {
            let tk = self.k as f64 * self.dt;
            if tk > b + 1e-12 || tk > self.t_end + 1e-12 {
                break;
            }
            let tq = tk.min(self.t_end);
            let mut r = f(tq);
            r.time_s = tq;
            self.rows.push(r);
            self.k += 1;
        }
    }
}

/// Mode word of a point.
fn mode_of(plant: &Plant, p: &Point, d: &Discrete) -> Mode {
    use crate::model::battery::li_ion::TempBand;
    if !plant.has_converter() {
        return Mode::Direct;
    }
    if !d.enabled || d.ov_shutdown {
        return Mode::Lockout;
    }
    if plant.usb.is_some() && !d.device_on && d.soft_done {
        return Mode::DeviceOff;
    }
    if d.stage == Stage::Done {
        return Mode::Done;
    }
    if d.stage == Stage::Trickle {
        return Mode::Trickle;
    }
    if matches!(p.band, TempBand::TooCold | TempBand::TooHot) {
        return Mode::TempHold;
    }
    if p.net.dropout && p.target_current_a > 0.0 {
        return Mode::Dropout;
    }
    if !d.soft_done {
        return Mode::SoftStart;
    }
    if p.net.floor_limited {
        return Mode::InputFloor;
    }
    if d.stage == Stage::Float {
        return Mode::Float;
    }
    if p.cv_active {
        Mode::Cv
    } else {
        Mode::Cc
    }
}

/// A trace row from a point.
pub(super) fn row(plant: &Plant, p: &Point, y: &State, d: &Discrete) -> TraceRow {
    TraceRow {
        time_s: p.t,
        crank_rpm: rad_s_to_rpm(p.crank_speed),
        target_rpm: p.target_rpm,
        generator_rpm: rad_s_to_rpm(p.gen_speed),
        emf_v: p.emf_v,
        generator_current_a: p.net.generator_current_a,
        input_v: p.net.input_v,
        duty: p.net.duty,
        output_v: p.bus.bus_v,
        battery_v: p.net.battery_v,
        battery_current_a: p.net.battery_current_a,
        soc: y[SOC],
        battery_temp_c: y[BATTERY_TEMP],
        operator_power_w: p.operator_power_w,
        mode: mode_of(plant, p, d),
        charge_limit_v: p.charge_limit_v,
        operator_torque_n_m: p.operator_torque_n_m,
        w_prime_balance_j: y[W_PRIME],
        winding_temp_c: y[WINDING_TEMP],
        in_regulation: p.in_regulation,
        bus_v: p.bus.bus_v,
        bus_current_a: p.bus.bus_current_a,
        operator_mean_power_w: p.operator_mean_power_w,
        junction_temp_c: y[JUNCTION_TEMP],
    }
}
