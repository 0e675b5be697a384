//! Implicit integrators for the detailed fidelity (differential-equations crate): the plant in a
//! fixed mode as a stiff ODE, a finite-difference Jacobian over the states that feed back, and a
//! one-step-at-a-time driver so the engine can check every accepted step and use its dense output.
//!
//! Why implicit: the detailed network's output capacitor against the battery's R0 has τ ≈ 5 µs;
//! an explicit method's step is bounded by stability there (Dopri5 ≈ 13 µs whatever the
//! tolerance), while an L-stable implicit method follows the slow solution with steps set by
//! accuracy (Hairer & Wanner, Solving ODEs II, 2nd ed., 1996, §IV.3 and §IV.8).

use std::cell::Cell;

use differential_equations::error::Error;
use differential_equations::interpolate::Interpolation;
use differential_equations::linalg::Matrix;
use differential_equations::methods::{BackwardDifferentiationFormula, ImplicitRungeKutta};
use differential_equations::ode::{OrdinaryNumericalMethod, ODE};
use differential_equations::stats::Evals;

use super::plant::{Discrete, Plant};
use super::state::*;

/// Whether state `k` is an energy-ledger quadrature (read by nothing that feeds back).
pub const fn is_ledger(k: usize) -> bool {
    (k >= E_OPERATOR && k <= Q_BATTERY)
        || k == E_DEVICE
        || k == E_GAS
        || (k >= E_IRON && k <= E_COGGING)
        || k == E_RECOMBINATION
        || k == E_LEAKAGE
}

const fn ledger_count() -> usize {
    let (mut n, mut k) = (0, 0);
    while k < N_STATES {
        if is_ledger(k) {
            n += 1;
        }
        k += 1;
    }
    n
}

/// Number of states in the implicit solve: every state except the ledger quadratures.
pub const N_DYN: usize = N_STATES - ledger_count();

/// The state as the implicit solvers see it: the states that feed back, as a plain array.
pub type Flat = [f64; N_DYN];

/// Position in [`State`] of each entry of [`Flat`].
const DYN_INDEX: [usize; N_DYN] = {
    let mut out = [0; N_DYN];
    let (mut k, mut j) = (0, 0);
    while k < N_STATES {
        if !is_ledger(k) {
            out[j] = k;
            j += 1;
        }
        k += 1;
    }
    out
};

/// The feedback states of a full state.
pub fn flat_of(y: &State) -> Flat {
    std::array::from_fn(|k| y[DYN_INDEX[k]])
}

/// A full state from feedback states and ledger quadratures taken from `q`.
pub fn state_of(f: &Flat, q: &State) -> State {
    let mut y = *q;
    for (k, v) in DYN_INDEX.iter().zip(f) {
        y[*k] = *v;
    }
    y
}

/// Relative perturbation of the forward-difference Jacobian: δ_j = √ε·max(|y_j|, 1e-5), the
/// usual choice that balances truncation against rounding (√ε ≈ 1.5e-8 for f64).
const FD_EPS: f64 = 1.490_116_119_384_765_6e-8;

/// The plant in one mode over one segment [t0, t_stop] as an ODE, counting its evaluations.
pub struct StiffRhs<'a> {
    pub plant: &'a Plant,
    pub disc: Discrete,
    pub evals: &'a Cell<u64>,
    /// End of the segment, s. A segment ends where a time input has a kink (a profile segment
    /// boundary, the end of a spin-up ramp); the right-hand side there is the segment's own
    /// left-hand limit. Radau IIA's last stage sits exactly at the step end, so evaluating the
    /// next segment's inputs there would bend the whole last step.
    pub t_stop: f64,
}

impl StiffRhs<'_> {
    /// Full derivative at (t, y), t taken as the segment's left-hand limit at its end.
    fn full(&self, t: f64, y: &State) -> State {
        let t = if t >= self.t_stop {
            self.t_stop.next_down()
        } else {
            t
        };
        let mut d = State::zeros();
        let p = self.plant.eval(t, y, &self.disc);
        self.plant.derivatives(&p, y, &self.disc, &mut d);
        self.evals.set(self.evals.get() + 1);
        d
    }

    fn eval_into(&self, t: f64, y: &Flat, dy: &mut Flat) {
        *dy = self.rates(t, y);
    }

    /// Rates of the feedback states (the ledger slots are read by nothing that feeds back; zeros
    /// stand in for them).
    pub fn rates(&self, t: f64, y: &Flat) -> Flat {
        flat_of(&self.full(t, &state_of(y, &State::zeros())))
    }
}

impl ODE<f64, Flat> for StiffRhs<'_> {
    fn diff(&self, t: f64, y: &Flat, dydt: &mut Flat) {
        self.eval_into(t, y, dydt);
    }

    /// Forward differences, one evaluation per column.
    fn jacobian(&self, t: f64, y: &Flat, j: &mut Matrix<f64>) {
        let mut f0 = [0.0; N_DYN];
        self.eval_into(t, y, &mut f0);
        let mut yp = *y;
        let mut fp = [0.0; N_DYN];
        for col in 0..N_DYN {
            yp[col] = y[col] + FD_EPS * y[col].abs().max(1e-5);
            let delta = yp[col] - y[col];
            self.eval_into(t, &yp, &mut fp);
            yp[col] = y[col];
            for row in 0..N_DYN {
                j[(row, col)] = (fp[row] - f0[row]) / delta;
            }
        }
    }
}

/// Radau IIA nodes c1, c2 (c3 = 1) and weights b1, b2, b3 of the three-stage, order-5 formula:
/// c = (4 ∓ √6)/10, b = ((16 − √6)/36, (16 + √6)/36, 1/9) (Hairer & Wanner, Solving ODEs II,
/// 1996, §IV.5, the three-stage Radau IIA tableau).
const RADAU_C: [f64; 3] = [0.155_051_025_721_682_2, 0.644_948_974_278_317_8, 1.0];
const RADAU_B: [f64; 3] = [
    0.376_403_062_700_467_4,
    0.512_485_826_188_421_5,
    0.111_111_111_111_111_1,
];

/// Which implicit method.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Implicit {
    /// Radau IIA, 3 stages, order 5 (Hairer & Wanner's RADAU5).
    Radau5,
    /// Variable-order BDF 1–5 (numerical differentiation formulas).
    Bdf,
}

/// Explicit limits of an implicit segment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Limits {
    pub rtol: f64,
    pub atol: f64,
    pub h_max: f64,
    /// First step, s (0: the solver's own estimate).
    pub h0: f64,
    /// Step attempts per segment (accepted and rejected).
    pub max_steps: usize,
    /// Newton iterations per step before the step is retried shorter.
    pub max_newton_iter: usize,
}

/// Counters of one segment beyond the evaluations.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ImplicitCounts {
    pub jacobians: u64,
    pub decompositions: u64,
    pub newton_iterations: u64,
    /// Step attempts abandoned because Newton did not converge (or the matrix was singular).
    pub newton_failures: u64,
}

/// Outcome of one attempt.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Attempt {
    /// Accepted: the step (t_prev, t]; the full state at t is [`Segment::y`].
    Accepted { t_prev: f64, t: f64 },
    /// Rejected; the solver retries with a shorter step.
    Rejected,
}

/// A solver error in our words (the crate's own message needs a printable state; the engine adds
/// the named state itself).
fn reason(e: &Error<f64, Flat>) -> String {
    match e {
        Error::BadInput { msg } => format!("bad solver input: {msg}"),
        Error::MaxSteps { .. } => "the step limit of the segment was reached".into(),
        Error::StepSize { .. } => "the step size fell below rounding".into(),
        Error::Stiffness { .. } => "repeated step failures".into(),
        Error::LinearAlgebra { msg, .. } => format!("linear algebra: {msg}"),
        other => format!("{other:?}"),
    }
}

/// What the engine needs of an implicit solver (object-safe; the crate's own traits are generic
/// over the ODE type).
trait Stepper {
    fn init(&mut self, rhs: &StiffRhs, t0: f64, tf: f64, y0: &Flat) -> Result<(), String>;
    fn step(&mut self, rhs: &StiffRhs) -> Result<Evals, String>;
    fn t(&self) -> f64;
    fn y(&self) -> &Flat;
    fn h(&self) -> f64;
    fn set_h(&mut self, h: f64);
    fn interpolate(&mut self, t: f64) -> Option<Flat>;
}

impl<S> Stepper for S
where
    S: OrdinaryNumericalMethod<f64, Flat> + Interpolation<f64, Flat>,
{
    fn init(&mut self, rhs: &StiffRhs, t0: f64, tf: f64, y0: &Flat) -> Result<(), String> {
        OrdinaryNumericalMethod::init(self, rhs, t0, tf, y0)
            .map(|_| ())
            .map_err(|e| reason(&e))
    }
    fn step(&mut self, rhs: &StiffRhs) -> Result<Evals, String> {
        OrdinaryNumericalMethod::step(self, rhs).map_err(|e| reason(&e))
    }
    fn t(&self) -> f64 {
        OrdinaryNumericalMethod::t(self)
    }
    fn y(&self) -> &Flat {
        OrdinaryNumericalMethod::y(self)
    }
    fn h(&self) -> f64 {
        OrdinaryNumericalMethod::h(self)
    }
    fn set_h(&mut self, h: f64) {
        OrdinaryNumericalMethod::set_h(self, h);
    }
    fn interpolate(&mut self, t: f64) -> Option<Flat> {
        Interpolation::interpolate(self, t).ok()
    }
}

/// One segment of implicit integration, driven step by step.
///
/// The energy-ledger quadratures feed nothing back, so they stay out of the Newton system (a
/// 17×17 LU instead of 31×31; the linear algebra was ~80 % of the run time): after each accepted
/// step they are advanced with the Radau IIA quadrature on the step's dense output. For Radau5
/// that output is the collocation polynomial, which passes through the stage values, so the
/// ledger gets exactly the update it would get inside the solve.
pub struct Segment {
    method: Implicit,
    solver: Box<dyn Stepper>,
    t_stop: f64,
    /// Full state (ledger included) at the last accepted step.
    y: State,
    /// Time and full state at the step before it.
    prev: (f64, State),
    pub counts: ImplicitCounts,
}

impl Segment {
    /// Starts a segment at (t0, y0) that ends at `t_stop`.
    pub fn start(
        method: Implicit,
        rhs: &StiffRhs,
        t0: f64,
        y0: &State,
        t_stop: f64,
        lim: &Limits,
    ) -> Result<Self, String> {
        let y = flat_of(y0);
        let h0 = if lim.h0 > 0.0 {
            lim.h0.min(t_stop - t0).min(lim.h_max)
        } else {
            0.0
        };
        let mut solver: Box<dyn Stepper> = match method {
            // Tolerances per component: differential-equations 0.7 rescales a scalar tolerance
            // once per component (Hairer's rtol' = 0.1·rtol^(2/3), applied N times to the one
            // value, ends near 1e-3 whatever was asked); a vector is rescaled once each.
            Implicit::Radau5 => Box::new(
                ImplicitRungeKutta::radau5()
                    .rtol(vec![lim.rtol; N_DYN])
                    .atol(vec![lim.atol; N_DYN])
                    .h_max(lim.h_max)
                    .h0(h0)
                    .max_steps(lim.max_steps)
                    .max_newton_iter(lim.max_newton_iter),
            ),
            Implicit::Bdf => Box::new(
                BackwardDifferentiationFormula::adaptive()
                    .rtol(vec![lim.rtol; N_DYN])
                    .atol(vec![lim.atol; N_DYN])
                    .h_max(lim.h_max)
                    .h0(h0)
                    .max_steps(lim.max_steps)
                    .max_newton_iter(lim.max_newton_iter),
            ),
        };
        solver.init(rhs, t0, t_stop, &y)?;
        Ok(Self {
            method,
            solver,
            t_stop,
            y: *y0,
            prev: (t0, *y0),
            counts: ImplicitCounts::default(),
        })
    }

    /// Time of the last accepted step.
    pub fn t(&self) -> f64 {
        self.solver.t()
    }

    /// Attempts one step, never past the segment end.
    pub fn attempt(&mut self, rhs: &StiffRhs) -> Result<Attempt, String> {
        let t_before = self.t();
        let rest = self.t_stop - t_before;
        let h = self.solver.h();
        if h >= rest || rest - h <= 1e-9 * self.t_stop.abs().max(1.0) {
            self.solver.set_h(rest);
        }
        let ev = self.solver.step(rhs)?;
        self.counts.jacobians += ev.jacobian as u64;
        self.counts.decompositions += ev.decompositions as u64;
        self.counts.newton_iterations += ev.newton as u64;
        let t_after = self.t();
        if t_after > t_before {
            let t = if (self.t_stop - t_after).abs() <= 1e-12 * self.t_stop.abs().max(1.0) {
                self.t_stop
            } else {
                t_after
            };
            let q = self.ledger_at(rhs, t_before, t_after);
            self.prev = (t_before, self.y);
            self.y = state_of(self.solver.y(), &q);
            return Ok(Attempt::Accepted {
                t_prev: t_before,
                t,
            });
        }
        // Radau5 solves two linear systems per Newton iteration and one more for the error
        // estimate: a rejected attempt that never reached the estimate failed in Newton (the
        // crate's BDF retries inside its own step and never returns a rejection).
        if self.method == Implicit::Radau5 && ev.solves <= 2 * ev.newton {
            self.counts.newton_failures += 1;
        }
        Ok(Attempt::Rejected)
    }

    /// Ledger quadratures at `tq` inside the last accepted step (t_a, t_b]: the previous step's
    /// values plus the Radau IIA quadrature of the ledger rates over (t_a, tq] on the dense
    /// output (three evaluations).
    fn ledger_at(&mut self, rhs: &StiffRhs, t_a: f64, tq: f64) -> State {
        let mut q = self.y;
        let h = tq - t_a;
        if h <= 0.0 {
            return q;
        }
        for (c, b) in RADAU_C.iter().zip(RADAU_B) {
            let tn = t_a + c * h;
            let yn = match self.solver.interpolate(tn) {
                Some(f) => state_of(&f, &q),
                None => state_of(self.solver.y(), &q),
            };
            let d = rhs.full(tn, &yn);
            for k in (0..N_STATES).filter(|&k| is_ledger(k)) {
                q[k] += h * b * d[k];
            }
        }
        q
    }

    /// The full state at `tq` inside the last accepted step, with the ledger integrated to `tq`
    /// (for the end of a segment at a located switching time).
    pub fn state_at(&mut self, rhs: &StiffRhs, tq: f64) -> State {
        let (t_a, y_a) = self.prev;
        let tq = tq.clamp(t_a, self.solver.t());
        let y_end = std::mem::replace(&mut self.y, y_a);
        let q = self.ledger_at(rhs, t_a, tq);
        self.y = y_end;
        match self.solver.interpolate(tq) {
            Some(f) => state_of(&f, &q),
            None => state_of(self.solver.y(), &q),
        }
    }

    /// Full state at the last accepted step.
    pub fn y(&self) -> &State {
        &self.y
    }

    /// Step size the solver proposes next, s.
    pub fn h(&self) -> f64 {
        self.solver.h()
    }

    /// Dense output inside the last accepted step, clamped to it; the ledger entries are
    /// interpolated linearly (nothing reads them inside a step; see [`Segment::state_at`]).
    pub fn dense(&mut self, tq: f64) -> State {
        let (t_a, y_a) = self.prev;
        let t_b = self.solver.t();
        let tq = tq.clamp(t_a, t_b);
        let w = if t_b > t_a {
            (tq - t_a) / (t_b - t_a)
        } else {
            1.0
        };
        let q = y_a + (self.y - y_a) * w;
        match self.solver.interpolate(tq) {
            Some(f) => state_of(&f, &q),
            None => self.y,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn radau_quadrature_is_exact_for_polynomials_through_degree_four() {
        // Source: Hairer & Wanner, Solving ODEs II, 1996, §IV.5 — the s-stage Radau IIA
        // quadrature (nodes the zeros of the right Radau polynomial, c_s = 1) has order 2s − 1,
        // so for s = 3 it integrates t^k over [0, 1] exactly for k ≤ 4: Σ b_j·c_j^k = 1/(k + 1).
        for k in 0..=4 {
            let sum: f64 = RADAU_B
                .iter()
                .zip(RADAU_C)
                .map(|(b, c)| b * c.powi(k))
                .sum();
            assert!(
                (sum - 1.0 / f64::from(k + 1)).abs() < 1e-15,
                "k = {k}: {sum}"
            );
        }
        // Degree five is beyond its order, so the check above can tell a wrong table apart.
        let five: f64 = RADAU_B
            .iter()
            .zip(RADAU_C)
            .map(|(b, c)| b * c.powi(5))
            .sum();
        assert!((five - 1.0 / 6.0).abs() > 1e-4, "{five}");
    }

    #[test]
    fn the_implicit_solve_holds_every_state_but_the_ledger() {
        let mut y = State::zeros();
        for (k, v) in y.iter_mut().enumerate() {
            *v = k as f64 + 0.5;
        }
        let f = flat_of(&y);
        // The ledger: operator work through charge, the USB device's loss, the lead-acid gas,
        // iron, gate-drive and core, pass-element losses, the cogging work, NiMH recombination
        // and supercapacitor leakage.
        let expected: Vec<f64> = (0..N_STATES)
            .filter(|k| {
                !(E_OPERATOR..=Q_BATTERY).contains(k)
                    && *k != E_DEVICE
                    && *k != E_GAS
                    && !(E_IRON..=E_COGGING).contains(k)
                    && *k != E_RECOMBINATION
                    && *k != E_LEAKAGE
            })
            .map(|k| k as f64 + 0.5)
            .collect();
        assert_eq!(f.to_vec(), expected);
        assert_eq!(state_of(&f, &y), y);
        // Ledger entries come from the second argument only.
        let back = state_of(&f, &State::zeros());
        assert_eq!(back[E_OPERATOR], 0.0);
        assert_eq!(back[ARMATURE_I], y[ARMATURE_I]);
        assert_eq!(back[ROTOR_ANGLE], y[ROTOR_ANGLE]);
        assert_eq!(back[JUNCTION_TEMP], y[JUNCTION_TEMP]);
        assert_eq!(back[E_PASS], 0.0);
    }
}
