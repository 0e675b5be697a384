//! The electrical network solved algebraically (fast fidelity): generator → diode → input node →
//! converter → battery, with the armature current, capacitor voltages and inductor current at their
//! quasi-steady values (singular perturbation of the fast electrical states).
//!
//! A charger holding its current is a constant-power load, so the input node can have two
//! operating points; the physical one is the smaller current (higher input voltage), reached from
//! open circuit. Regulated and dropout branches meet continuously at the dropout edge.

use crate::model::battery::{BatteryModel, BatteryState};
use crate::model::converter::{BuckModel, ConverterLosses};
use crate::model::diode::DiodeModel;
use crate::model::generator::GeneratorModel;

/// Absolute tolerance of the current solves, A.
const CURRENT_TOL_A: f64 = 1e-10;
/// Samples used to look for a regulated operating point when the dropout edge is short of current.
const FOLD_SAMPLES: usize = 8;

/// What loads the input node.
#[derive(Debug, Clone, Copy)]
pub enum Load<'a> {
    /// Converter locked out or shut down: no input current.
    Off,
    /// Buck charger enabled and asking for `target_a` into the battery.
    Buck { model: &'a BuckModel, target_a: f64 },
    /// Battery directly on the input node.
    Direct,
}

/// The generator side of the network at one instant.
#[derive(Debug, Clone, Copy)]
pub struct Source<'a> {
    pub generator: &'a GeneratorModel,
    pub diode: &'a DiodeModel,
    /// Back-EMF, V.
    pub emf_v: f64,
    /// Armature resistance at the winding temperature, Ω.
    pub resistance_ohm: f64,
}

impl Source<'_> {
    /// Input-node voltage when the generator delivers `i`: E − i·R − V_brush(i) − V_D(i).
    pub fn node_v(&self, i: f64) -> f64 {
        self.emf_v
            - i * self.resistance_ohm
            - self.generator.brush_drop(i)
            - self.diode.forward_v(i)
    }

    /// −d(node_v)/di, Ω.
    pub fn node_slope(&self, i: f64) -> f64 {
        self.resistance_ohm + self.generator.brush_drop_slope(i) + self.diode.slope(i)
    }
}

/// The solved operating point.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct NetworkPoint {
    /// Generator (armature) current, A.
    pub generator_current_a: f64,
    /// Input-node voltage, V.
    pub input_v: f64,
    /// Duty applied (DCM-aware for a buck; 1 for direct; 0 when off).
    pub duty: f64,
    /// Duty in the CCM-form balance used for currents and losses.
    pub balance_duty: f64,
    /// Whether the buck runs in discontinuous conduction.
    pub dcm: bool,
    /// Current into the battery, A.
    pub battery_current_a: f64,
    /// Battery terminal (converter output) voltage, V.
    pub battery_v: f64,
    /// Duty saturated at D_max with less current than asked.
    pub dropout: bool,
    /// Protection diode drop, V.
    pub diode_v: f64,
    /// Brush drop, V.
    pub brush_v: f64,
    /// Converter losses, W.
    pub losses: ConverterLosses,
}

/// Solves the network for the given source, load and battery state.
pub fn solve(src: &Source, load: Load, battery: &BatteryModel, bs: &BatteryState) -> NetworkPoint {
    match load {
        Load::Off => off_point(src, battery, bs),
        Load::Direct => direct_point(src, battery, bs),
        Load::Buck { model, target_a } => buck_point(src, model, target_a.max(0.0), battery, bs),
    }
}

fn off_point(src: &Source, battery: &BatteryModel, bs: &BatteryState) -> NetworkPoint {
    let (vb, _) = battery.terminal_v(0.0, bs);
    NetworkPoint {
        input_v: src.emf_v.max(0.0),
        battery_v: vb,
        ..NetworkPoint::default()
    }
}

fn direct_point(src: &Source, battery: &BatteryModel, bs: &BatteryState) -> NetworkPoint {
    // g(i) = node_v(i) − V_batt(i), decreasing in i.
    let g = |i: f64| src.node_v(i) - battery.terminal_v(i, bs).0;
    let rest = battery.terminal_v(0.0, bs).0;
    let threshold = src.diode.threshold_v();
    let r = src.resistance_ohm.max(1e-9);
    let i = if src.emf_v - threshold > rest {
        let hi = (src.emf_v - rest) / r;
        bracket_root(|i| -g(i), 0.0, hi, CURRENT_TOL_A)
    } else if !src.diode.blocks_reverse() && src.emf_v < rest {
        let lo = (src.emf_v - rest) / r;
        bracket_root(|i| -g(i), lo, 0.0, CURRENT_TOL_A)
    } else {
        0.0
    };
    let (vb, _) = battery.terminal_v(i, bs);
    NetworkPoint {
        generator_current_a: i,
        input_v: vb,
        duty: 1.0,
        balance_duty: 1.0,
        battery_current_a: i,
        battery_v: vb,
        diode_v: src.diode.forward_v(i),
        brush_v: src.generator.brush_drop(i),
        ..NetworkPoint::default()
    }
}

fn buck_point(
    src: &Source,
    buck: &BuckModel,
    target: f64,
    battery: &BatteryModel,
    bs: &BatteryState,
) -> NetworkPoint {
    let vo_target = battery.terminal_v(target, bs).0;
    let v_edge = buck.dropout_input_v(vo_target, target);
    let i_cap = buck.input_current_a(buck.max_duty, target);
    let r = src.resistance_ohm.max(1e-9);

    // Regulated branch: input current for the target at node voltage v.
    let reg_in = |v: f64| {
        buck.input_current_a(
            buck.ccm_duty(v, vo_target, target).min(buck.max_duty),
            target,
        )
    };
    let g_reg = |i: f64| i - reg_in(src.node_v(i));

    // Generator current at the dropout edge (node voltage = v_edge).
    let i_edge = if src.emf_v > v_edge {
        let hi = (src.emf_v - v_edge) / r;
        bracket_root(|i| v_edge - src.node_v(i), 0.0, hi, CURRENT_TOL_A)
    } else {
        0.0
    };

    if i_edge > 0.0 {
        let g_edge = g_reg(i_edge);
        let bracket = if g_edge >= 0.0 {
            Some((0.0, i_edge))
        } else {
            // Short of current at the edge: a regulated point may still exist before the fold.
            let mut prev = 0.0;
            let mut found = None;
            for k in 1..FOLD_SAMPLES {
                let x = i_edge * k as f64 / FOLD_SAMPLES as f64;
                if g_reg(x) >= 0.0 {
                    found = Some((prev, x));
                    break;
                }
                prev = x;
            }
            found
        };
        if let Some((lo, hi)) = bracket {
            let i = bracket_root(g_reg, lo, hi, CURRENT_TOL_A);
            let v = src.node_v(i);
            let d = buck.ccm_duty(v, vo_target, target).min(buck.max_duty);
            return buck_report(src, buck, i, v, d, target, vo_target, false);
        }
    }

    // Dropout branch: duty at D_max, the converter passes what the input allows.
    let drop_current = |v: f64| -> f64 {
        let res0 = buck.dropout_residual(v, battery.terminal_v(0.0, bs).0, 0.0);
        if res0 <= 0.0 {
            return 0.0;
        }
        bracket_root(
            |ib| -buck.dropout_residual(v, battery.terminal_v(ib, bs).0, ib),
            0.0,
            target.max(1e-12),
            CURRENT_TOL_A,
        )
    };
    let g_drop = |i: f64| i - buck.input_current_a(buck.max_duty, drop_current(src.node_v(i)));
    let i = if g_drop(i_edge) >= 0.0 {
        i_edge
    } else {
        bracket_root(g_drop, i_edge, i_cap.max(i_edge), CURRENT_TOL_A)
    };
    let v = src.node_v(i);
    let ib = drop_current(v);
    let vo = battery.terminal_v(ib, bs).0;
    buck_report(src, buck, i, v, buck.max_duty, ib, vo, ib < target)
}

#[allow(clippy::too_many_arguments)]
fn buck_report(
    src: &Source,
    buck: &BuckModel,
    i: f64,
    v: f64,
    d: f64,
    ib: f64,
    vo: f64,
    dropout: bool,
) -> NetworkPoint {
    let (duty, dcm) = buck.reported_duty(v, vo, ib, d);
    NetworkPoint {
        generator_current_a: i,
        input_v: v,
        duty,
        balance_duty: d,
        dcm,
        battery_current_a: ib,
        battery_v: vo,
        dropout,
        diode_v: src.diode.forward_v(i),
        brush_v: src.generator.brush_drop(i),
        losses: buck.losses(d, ib, v),
    }
}

/// Root of `f` on [lo, hi] where f(lo) ≤ 0 ≤ f(hi), by the Illinois variant of regula falsi
/// (superlinear, always bracketed). Returns an end point when the signs do not bracket.
pub fn bracket_root(f: impl Fn(f64) -> f64, mut lo: f64, mut hi: f64, tol: f64) -> f64 {
    let mut f_lo = f(lo);
    if f_lo >= 0.0 {
        return lo;
    }
    let mut f_hi = f(hi);
    if f_hi <= 0.0 {
        return hi;
    }
    let mut side = 0i8;
    let mut x = lo;
    for _ in 0..100 {
        x = (lo * f_hi - hi * f_lo) / (f_hi - f_lo);
        if !(x > lo && x < hi) {
            x = 0.5 * (lo + hi);
        }
        let fx = f(x);
        if fx == 0.0 || hi - lo <= tol {
            return x;
        }
        if fx < 0.0 {
            lo = x;
            f_lo = fx;
            if side == -1 {
                f_hi *= 0.5;
            }
            side = -1;
        } else {
            hi = x;
            f_hi = fx;
            if side == 1 {
                f_lo *= 0.5;
            }
            side = 1;
        }
        if hi - lo <= tol {
            break;
        }
    }
    x
}
