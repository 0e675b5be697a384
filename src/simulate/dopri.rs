//! Dormand–Prince 5(4) with its 4th-order dense output and the PI step-size control (Hairer,
//! Nørsett & Wanner, Solving ODEs I, 2nd ed., §II.4–II.6), on the fixed-size state vector.
//!
//! It performs the operations of `ode_solvers` 0.6's `Dopri5` (which the engine used before) in
//! the same order, so a session gives the same bytes; what it saves is the library's
//! per-step copies and allocations (a vector of all step ends and a heap vector of dense
//! coefficients for every step) and its generic vector arithmetic. The dense output is handed to
//! the caller with each accepted step, which keeps it only as long as it needs it.

use super::state::{State, N_STATES};

/// Butcher tableau of Dormand & Prince (1980), rows of a_ij (i = 2 … 7).
const A: [[f64; 6]; 6] = [
    [1.0 / 5.0, 0.0, 0.0, 0.0, 0.0, 0.0],
    [3.0 / 40.0, 9.0 / 40.0, 0.0, 0.0, 0.0, 0.0],
    [44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0, 0.0, 0.0, 0.0],
    [
        19372.0 / 6561.0,
        -25360.0 / 2187.0,
        64448.0 / 6561.0,
        -212.0 / 729.0,
        0.0,
        0.0,
    ],
    [
        9017.0 / 3168.0,
        -355.0 / 33.0,
        46732.0 / 5247.0,
        49.0 / 176.0,
        -5103.0 / 18656.0,
        0.0,
    ],
    [
        35.0 / 384.0,
        0.0,
        500.0 / 1113.0,
        125.0 / 192.0,
        -2187.0 / 6784.0,
        11.0 / 84.0,
    ],
];
/// Nodes c_i.
const C: [f64; 7] = [0.0, 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0, 1.0, 1.0];
/// Dense-output coefficients (Hairer's `d`); d₂ = 0.
const D: [f64; 7] = [
    -12715105075.0 / 11282082432.0,
    0.0,
    87487479700.0 / 32700410799.0,
    -10690763975.0 / 1880347072.0,
    701980252875.0 / 199316789632.0,
    -1453857185.0 / 822651844.0,
    69997945.0 / 29380423.0,
];
/// Error-estimate coefficients (5th minus 4th order weights); e₂ = 0.
const E: [f64; 7] = [
    71.0 / 57600.0,
    0.0,
    -71.0 / 16695.0,
    71.0 / 1920.0,
    -17253.0 / 339200.0,
    22.0 / 525.0,
    -1.0 / 40.0,
];

/// The five coefficient vectors of one accepted step's dense output, on [t₀, t₀ + h].
#[derive(Debug, Clone, Copy)]
pub struct DenseStep {
    pub t0: f64,
    pub h: f64,
    pub c: [State; 5],
}

impl DenseStep {
    /// The interpolated state at t (θ = (t − t₀)/h), Hairer's CONTD5.
    pub fn at(&self, t: f64) -> State {
        let theta = (t - self.t0) / self.h;
        let theta1 = 1.0 - theta;
        let c = &self.c;
        let mut r = State::zeros();
        for i in 0..N_STATES {
            r[i] = c[0][i]
                + (c[1][i] + (c[2][i] + (c[3][i] + c[4][i] * theta1) * theta) * theta1) * theta;
        }
        r
    }
}

/// What the integrator is run on: the right-hand side, and the callback for each accepted step.
pub trait Problem {
    /// dy/dt at (t, y).
    fn rhs(&mut self, t: f64, y: &State, dy: &mut State);
    /// The accepted step ending at (t, y), with its dense output when asked for; true stops the
    /// integration there.
    fn accepted(&mut self, t: f64, y: &State, dense: Option<&DenseStep>) -> bool;
}

/// Tolerances and step-size control of one integration.
#[derive(Debug, Clone, Copy)]
pub struct Settings {
    pub rtol: f64,
    pub atol: f64,
    pub safety: f64,
    pub beta: f64,
    pub fac_min: f64,
    pub fac_max: f64,
    /// Longest step, s.
    pub h_max: f64,
    /// First step, s; 0 lets the integrator choose (Hairer's HINIT).
    pub h0: f64,
    /// Most steps (accepted or rejected) before the integration fails.
    pub n_max: u32,
    /// Whether the dense output is formed for each accepted step.
    pub dense: bool,
}

/// Step counts of one integration.
#[derive(Debug, Clone, Copy, Default)]
pub struct Counts {
    pub accepted_steps: u32,
    /// Rejected steps after the first accepted one (as Hairer's code counts them).
    pub rejected_steps: u32,
}

/// Why an integration stopped early.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DopriError {
    #[error("Stopped at x = {x}. Need more than {n_step} steps.")]
    TooManySteps { x: f64, n_step: u32 },
    #[error("Stopped at x = {x}. Step size underflow.")]
    StepSizeUnderflow { x: f64 },
}

/// The PI controller: h_new = h / clamp(err^α · err_old^−β / safety).
struct Controller {
    alpha: f64,
    beta: f64,
    facc1: f64,
    facc2: f64,
    fac_old: f64,
    h_max: f64,
    reject: bool,
    safety: f64,
}

impl Controller {
    fn new(s: &Settings) -> Self {
        Self {
            alpha: 0.2 - s.beta * 0.75,
            beta: s.beta,
            facc1: 1.0 / s.fac_min,
            facc2: 1.0 / s.fac_max,
            fac_old: 1.0e-4,
            h_max: s.h_max.abs(),
            reject: false,
            safety: s.safety,
        }
    }

    /// Whether the step of size h with error norm `err` is accepted, and the next step size.
    fn accept(&mut self, err: f64, h: f64) -> (bool, f64) {
        let fac11 = err.powf(self.alpha);
        let mut fac = fac11 * self.fac_old.powf(-self.beta);
        fac = self.facc2.max(self.facc1.min(fac / self.safety));
        let mut h_new = h / fac;
        if err <= 1.0 {
            self.fac_old = err.max(1.0e-4);
            if h_new.abs() > self.h_max {
                h_new = self.h_max;
            }
            if self.reject {
                h_new = h_new.abs().min(h.abs());
            }
            self.reject = false;
            (true, h_new)
        } else {
            self.reject = true;
            (false, h / self.facc1.min(fac11 / self.safety))
        }
    }
}

/// Hairer's initial step guess from ‖y₀‖, ‖f₀‖ and a second derivative estimate.
fn initial_step(p: &mut impl Problem, t: f64, y: &State, s: &Settings) -> f64 {
    let mut f0 = State::zeros();
    p.rhs(t, y, &mut f0);
    let (mut d0, mut d1) = (0.0, 0.0);
    for i in 0..N_STATES {
        let sci = s.atol + y[i].abs() * s.rtol;
        d0 += (y[i] / sci) * (y[i] / sci);
        d1 += (f0[i] / sci) * (f0[i] / sci);
    }
    let mut h0 = if d0 < 1.0e-10 || d1 < 1.0e-10 {
        1.0e-6
    } else {
        0.01 * (d0 / d1).sqrt()
    };
    h0 = h0.min(s.h_max.abs()).abs();
    let mut y1 = State::zeros();
    for i in 0..N_STATES {
        y1[i] = y[i] + f0[i] * h0;
    }
    let mut f1 = State::zeros();
    p.rhs(t + h0, &y1, &mut f1);
    let mut d2 = 0.0;
    for i in 0..N_STATES {
        let sci = s.atol + y[i].abs() * s.rtol;
        d2 += ((f1[i] - f0[i]) / sci) * ((f1[i] - f0[i]) / sci);
    }
    d2 = d2.sqrt() / h0;
    let h1 = if d1.sqrt().max(d2.abs()) <= 1.0e-15 {
        1.0e-6_f64.max(h0.abs() * 1.0e-3)
    } else {
        (0.01 / d1.sqrt().max(d2)).powf(1.0 / 5.0)
    };
    (100.0 * h0.abs()).min(h1.min(s.h_max.abs())).abs()
}

/// Integrates from (t, y) towards `t_end` > t until the end or until `accepted` asks to stop;
/// returns the step counts and the last accepted state.
pub fn integrate(
    p: &mut impl Problem,
    t: f64,
    t_end: f64,
    y: State,
    s: &Settings,
) -> Result<(Counts, State), DopriError> {
    let mut ctl = Controller::new(s);
    let mut counts = Counts::default();
    let mut x = t;
    let mut y = y;
    let mut h = if s.h0 == 0.0 {
        initial_step(p, t, &y, s)
    } else {
        s.h0
    };
    let mut k = [State::zeros(); 7];
    let mut y_next = State::zeros();
    let mut dense = DenseStep {
        t0: x,
        h,
        c: [State::zeros(); 5],
    };
    p.rhs(x, &y, &mut k[0]);
    let mut n_step = 0u32;
    let mut last = false;
    while !last {
        if n_step > s.n_max {
            return Err(DopriError::TooManySteps { x, n_step });
        }
        if 0.1 * h.abs() <= f64::EPSILON * x.abs() {
            return Err(DopriError::StepSizeUnderflow { x });
        }
        if x + 1.01 * h - t_end > 0.0 {
            h = t_end - x;
            last = true;
        }
        n_step += 1;

        // Stages 2 … 7: y_next = y + h·Σ a_sj k_j, k_s = f(x + c_s h, y_next).
        for st in 1..7 {
            let a = &A[st - 1];
            for i in 0..N_STATES {
                let mut v = y[i];
                for j in 0..st {
                    v += k[j][i] * h * a[j];
                }
                y_next[i] = v;
            }
            p.rhs(x + h * C[st], &y_next, &mut k[st]);
        }
        // k[6] is f(x + h, y_next): the next step's first stage (FSAL).
        if s.dense {
            let c4 = &mut dense.c[4];
            for i in 0..N_STATES {
                c4[i] = (k[0][i] * D[0]
                    + k[2][i] * D[2]
                    + k[3][i] * D[3]
                    + k[4][i] * D[4]
                    + k[5][i] * D[5]
                    + k[6][i] * D[6])
                    * h;
            }
        }
        let mut err = 0.0;
        for i in 0..N_STATES {
            let e = (k[0][i] * E[0]
                + k[2][i] * E[2]
                + k[3][i] * E[3]
                + k[4][i] * E[4]
                + k[5][i] * E[5]
                + k[6][i] * E[6])
                * h;
            let sc = s.atol + y[i].abs().max(y_next[i].abs()) * s.rtol;
            err += (e / sc) * (e / sc);
        }
        err = (err / N_STATES as f64).sqrt();

        let (ok, h_new) = ctl.accept(err, h);
        if ok {
            counts.accepted_steps += 1;
            if s.dense {
                let [c0, c1, c2, c3, _] = &mut dense.c;
                for i in 0..N_STATES {
                    let ydiff = y_next[i] - y[i];
                    let bspl = k[0][i] * h - ydiff;
                    c0[i] = y[i];
                    c1[i] = ydiff;
                    c2[i] = bspl;
                    c3[i] = -k[6][i] * h + ydiff - bspl;
                }
                dense.t0 = x;
                dense.h = h;
            }
            k[0] = k[6];
            y = y_next;
            x += h;
            if p.accepted(x, &y, s.dense.then_some(&dense)) {
                last = true;
            }
            if last {
                return Ok((counts, y));
            }
        } else {
            last = false;
            if counts.accepted_steps >= 1 {
                counts.rejected_steps += 1;
            }
        }
        h = h_new;
    }
    Ok((counts, y))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A harmonic oscillator in states 0 and 1 (y₀'' = −ω²y₀); every other state stays zero.
    struct Oscillator {
        omega: f64,
        steps: Vec<DenseStep>,
    }

    impl Problem for Oscillator {
        fn rhs(&mut self, _t: f64, y: &State, dy: &mut State) {
            *dy = State::zeros();
            dy[0] = y[1];
            dy[1] = -self.omega * self.omega * y[0];
        }
        fn accepted(&mut self, _t: f64, _y: &State, dense: Option<&DenseStep>) -> bool {
            self.steps.extend(dense.copied());
            false
        }
    }

    fn settings(rtol: f64) -> Settings {
        Settings {
            rtol,
            atol: rtol,
            safety: 0.9,
            beta: 0.04,
            fac_min: 0.2,
            fac_max: 10.0,
            h_max: 10.0,
            h0: 0.0,
            n_max: 100_000,
            dense: true,
        }
    }

    // Source: the analytic solution of y'' = −ω²y, y(0) = 1, y'(0) = 0: y = cos ωt.
    #[test]
    fn it_follows_the_analytic_oscillation_and_its_dense_output_too() {
        let mut y0 = State::zeros();
        y0[0] = 1.0;
        let mut p = Oscillator {
            omega: 2.0,
            steps: Vec::new(),
        };
        let t_end = 10.0;
        let (counts, y) = integrate(&mut p, 0.0, t_end, y0, &settings(1e-8)).unwrap();
        assert!((y[0] - (2.0 * t_end).cos()).abs() < 1e-6, "{}", y[0]);
        assert!((y[1] + 2.0 * (2.0 * t_end).sin()).abs() < 2e-6, "{}", y[1]);
        assert!(counts.accepted_steps > 20 && counts.accepted_steps < 2000);
        assert_eq!(counts.accepted_steps as usize, p.steps.len());
        // The 4th-order interpolant midway in each step.
        for d in &p.steps {
            let tm = d.t0 + 0.5 * d.h;
            assert!((d.at(tm)[0] - (2.0 * tm).cos()).abs() < 1e-6, "{tm}");
        }
        // Steps tile the interval.
        assert!((p.steps.last().map(|d| d.t0 + d.h).unwrap() - t_end).abs() < 1e-12);
        // A tighter tolerance takes more steps (the error control acts).
        let mut q = Oscillator {
            omega: 2.0,
            steps: Vec::new(),
        };
        let (tight, _) = integrate(&mut q, 0.0, t_end, y0, &settings(1e-11)).unwrap();
        assert!(tight.accepted_steps > 2 * counts.accepted_steps);
    }

    // Common practice: an explicit integrator given too few steps reports it instead of
    // returning a partial answer.
    #[test]
    fn too_few_steps_is_an_error() {
        let mut y0 = State::zeros();
        y0[0] = 1.0;
        let mut p = Oscillator {
            omega: 50.0,
            steps: Vec::new(),
        };
        let s = Settings {
            n_max: 5,
            ..settings(1e-8)
        };
        assert!(matches!(
            integrate(&mut p, 0.0, 10.0, y0, &s),
            Err(DopriError::TooManySteps { .. })
        ));
    }

    struct Lib {
        omega: f64,
    }

    impl ode_solvers::System<f64, State> for Lib {
        fn system(&self, _t: f64, y: &State, dy: &mut State) {
            *dy = State::zeros();
            dy[0] = y[1];
            dy[1] = -self.omega * self.omega * y[0];
        }
    }

    // Source: ode_solvers 0.6 (crates.io), Dopri5::from_param with the same settings: the same
    // steps and the same bits, which is what keeps sessions unchanged.
    #[test]
    fn it_gives_the_bits_of_the_ode_solvers_dopri5_it_replaced() {
        let mut y0 = State::zeros();
        y0[0] = 1.0;
        y0[5] = 3.0;
        let s = Settings {
            h_max: 0.3,
            ..settings(1e-6)
        };
        let mut ours = Oscillator {
            omega: 3.0,
            steps: Vec::new(),
        };
        let (counts, y) = integrate(&mut ours, 0.5, 7.0, y0, &s).unwrap();
        let mut lib = ode_solvers::Dopri5::from_param(
            Lib { omega: 3.0 },
            0.5,
            7.0,
            6.5,
            y0,
            s.rtol,
            s.atol,
            s.safety,
            s.beta,
            s.fac_min,
            s.fac_max,
            s.h_max,
            0.0,
            s.n_max,
            u32::MAX,
            ode_solvers::OutputType::Sparse,
        );
        let st = lib.integrate().unwrap();
        assert_eq!(st.accepted_steps, counts.accepted_steps);
        assert_eq!(st.rejected_steps, counts.rejected_steps);
        assert_eq!(lib.y_out().last().unwrap(), &y);
    }
}
