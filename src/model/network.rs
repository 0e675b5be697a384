//! The electrical network solved algebraically (fast fidelity): generator → diode → input node →
//! converter → battery, with the armature current, capacitor voltages and inductor current at their
//! quasi-steady values (singular perturbation of the fast electrical states).
//!
//! A charger holding its current is a constant-power load, so the input node can have two
//! operating points; the physical one is the smaller current (higher input voltage), reached from
//! open circuit. Regulated and dropout branches meet continuously at the dropout edge.

use crate::model::battery::Terminal;
use crate::model::converter::{BuckModel, ConverterLosses};
use crate::model::diode::DiodeModel;
use crate::model::generator::GeneratorModel;
use crate::model::roots::root_in;

/// Absolute tolerance of the current solves, A.
const CURRENT_TOL_A: f64 = 1e-11;
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

/// Solves the network for the given source, load and battery terminal.
pub fn solve(src: &Source, load: Load, term: &Terminal) -> NetworkPoint {
    match load {
        Load::Off => off_point(src, term),
        Load::Direct => direct_point(src, term),
        Load::Buck { model, target_a } => buck_point(src, model, target_a.max(0.0), term),
    }
}

fn off_point(src: &Source, term: &Terminal) -> NetworkPoint {
    NetworkPoint {
        input_v: src.emf_v.max(0.0),
        battery_v: term.v(0.0).0,
        ..NetworkPoint::default()
    }
}

fn direct_point(src: &Source, term: &Terminal) -> NetworkPoint {
    // f(i) = V_batt(i) − node_v(i), increasing in i; its root is the generator current.
    let f = |i: f64| {
        let (vb, sb) = term.v(i);
        (vb - src.node_v(i), sb + src.node_slope(i))
    };
    let rest = term.v(0.0).0;
    let r = src.resistance_ohm.max(1e-9);
    let i = if src.emf_v - src.diode.threshold_v() > rest {
        let hi = (src.emf_v - rest) / r;
        root_in(0.0, hi, 0.5 * hi, CURRENT_TOL_A, f)
    } else if !src.diode.blocks_reverse() && src.emf_v < rest {
        let lo = (src.emf_v - rest) / r;
        root_in(lo, 0.0, 0.5 * lo, CURRENT_TOL_A, f)
    } else {
        0.0
    };
    let vb = term.v(i).0;
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

/// Battery current the buck passes at duty D_max from input `v`, and its slope dI/dv.
/// Solves D·(v − V_sw − I·R_on + V_D) − V_D − I·R_L = V_batt(I) for I ≥ 0.
fn dropout_current(buck: &BuckModel, term: &Terminal, v: f64, cap: f64) -> (f64, f64) {
    let d = buck.max_duty;
    let r_conv = d * buck.switch_resistance_ohm + buck.inductor_resistance_ohm;
    match term {
        Terminal::Linear { rest_v, r_ohm } => {
            let den = (r_conv + r_ohm).max(1e-12);
            let i = (d * (v - buck.switch_drop_v + buck.catch_drop_v) - buck.catch_drop_v - rest_v)
                / den;
            if i <= 0.0 {
                (0.0, 0.0)
            } else {
                (i.min(cap), d / den)
            }
        }
        Terminal::Curve { .. } => {
            let res = |ib: f64| {
                let (vb, sb) = term.v(ib);
                (-buck.dropout_residual(v, vb, ib), sb + r_conv)
            };
            if res(0.0).0 >= 0.0 {
                return (0.0, 0.0);
            }
            let i = root_in(0.0, cap.max(1e-12), 0.5 * cap, CURRENT_TOL_A, res);
            let slope = term.v(i).1;
            (i, d / (r_conv + slope).max(1e-12))
        }
    }
}

fn buck_point(src: &Source, buck: &BuckModel, target: f64, term: &Terminal) -> NetworkPoint {
    let vo_target = term.v(target).0;
    let v_edge = buck.dropout_input_v(vo_target, target);
    let i_cap = buck.input_current_a(buck.max_duty, target);
    let r = src.resistance_ohm.max(1e-9);

    // Regulated branch: d(v) = num/(v − c) for the target current.
    let num = vo_target + buck.catch_drop_v + target * buck.inductor_resistance_ohm;
    let c = buck.switch_drop_v + target * buck.switch_resistance_ohm - buck.catch_drop_v;
    let fixed = buck.quiescent_current_a + buck.switching_current_a(target);
    let g_reg = |i: f64| {
        let v = src.node_v(i);
        let den = (v - c).max(1e-12);
        let g = i - (target * num / den + fixed);
        let dg = 1.0 - target * num / (den * den) * src.node_slope(i);
        (g, dg)
    };

    // Generator current at the dropout edge (node voltage = v_edge).
    let i_edge = if src.emf_v > v_edge {
        let hi = (src.emf_v - v_edge) / r;
        root_in(0.0, hi, 0.5 * hi, CURRENT_TOL_A, |i| {
            (v_edge - src.node_v(i), src.node_slope(i))
        })
    } else {
        0.0
    };

    if i_edge > 0.0 {
        let bracket = if g_reg(i_edge).0 >= 0.0 {
            Some((0.0, i_edge))
        } else {
            // Short of current at the edge: a regulated point may still exist before the fold.
            let mut prev = 0.0;
            let mut found = None;
            for k in 1..FOLD_SAMPLES {
                let x = i_edge * k as f64 / FOLD_SAMPLES as f64;
                if g_reg(x).0 >= 0.0 {
                    found = Some((prev, x));
                    break;
                }
                prev = x;
            }
            found
        };
        if let Some((lo, hi)) = bracket {
            let x0 = (target * num / (src.emf_v - c).max(1e-12) + fixed).clamp(lo, hi);
            let i = root_in(lo, hi, x0, CURRENT_TOL_A, g_reg);
            let v = src.node_v(i);
            let d = buck.ccm_duty(v, vo_target, target).min(buck.max_duty);
            return buck_report(src, buck, i, v, d, target, vo_target, false);
        }
    }

    // Dropout branch: duty at D_max, the converter passes what the input allows.
    let k_in = buck.max_duty + buck.switching_current_a(1.0);
    let g_drop = |i: f64| {
        let v = src.node_v(i);
        let (ib, dib) = dropout_current(buck, term, v, target);
        let g = i - (k_in * ib + buck.quiescent_current_a);
        (g, 1.0 + k_in * dib * src.node_slope(i))
    };
    let i = root_in(i_edge, i_cap.max(i_edge), i_edge, CURRENT_TOL_A, g_drop);
    let v = src.node_v(i);
    let (ib, _) = dropout_current(buck, term, v, target);
    let vo = term.v(ib).0;
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
