//! Range checks of every physical field, with the path and the allowed range for the message.

use super::profile::Profile;
use super::setup::{
    Alerts, Battery, Chemistry, DiodeKind, GeneratorKind, Setup, Topology, UsbPort,
};

/// One field outside its allowed range.
#[derive(Debug, Clone, PartialEq)]
pub struct Violation {
    /// Dotted path (`battery.capacity_ah`).
    pub path: String,
    /// The value as written.
    pub value: String,
    /// The allowed range in words (`0.01 ..= 2000`).
    pub allowed: String,
}

/// Collects violations.
#[derive(Default)]
struct Checker {
    out: Vec<Violation>,
}

impl Checker {
    /// lo ≤ v ≤ hi and finite.
    fn range(&mut self, path: &str, v: f64, lo: f64, hi: f64) {
        if !(v.is_finite() && v >= lo && v <= hi) {
            self.push(path, v, format!("{lo} ..= {hi}"));
        }
    }

    /// lo < v ≤ hi and finite.
    fn above(&mut self, path: &str, v: f64, lo: f64, hi: f64) {
        if !(v.is_finite() && v > lo && v <= hi) {
            self.push(path, v, format!("> {lo} and <= {hi}"));
        }
    }

    fn opt_range(&mut self, path: &str, v: Option<f64>, lo: f64, hi: f64) {
        if let Some(v) = v {
            self.range(path, v, lo, hi);
        }
    }

    fn rule(&mut self, ok: bool, path: &str, value: String, allowed: &str) {
        if !ok {
            self.out.push(Violation {
                path: path.to_string(),
                value,
                allowed: allowed.to_string(),
            });
        }
    }

    fn push(&mut self, path: &str, v: f64, allowed: String) {
        self.out.push(Violation {
            path: path.to_string(),
            value: format!("{v}"),
            allowed,
        });
    }
}

/// Loosest relative tolerance accepted. Measured on every shipped setup × profile (fast
/// fidelity, 10 min): the ledger's worst closure was 4.3e-4 at 1e-4, 6.6e-4 at 2e-4, 9.5e-4 at
/// 3e-4 and 1.4e-3 at 5e-4, against the 1e-3 bound every result is held to.
pub const MAX_RTOL: f64 = 2e-4;

/// Tightest relative tolerance accepted (the floor of a session's automatic rerun too).
pub const MIN_RTOL: f64 = 1e-10;

/// Shortest largest step accepted, s (the floor of a session's automatic rerun too).
pub const MIN_MAX_STEP_S: f64 = 1e-4;

/// The ordered lead-acid settings, with their defaults filled in: the compensation's clamp
/// (min ≤ max; the clamp would otherwise have no valid value) and float at or below absorption.
fn lead_acid_order(c: &mut Checker, b: &super::setup::Battery) {
    use super::setup::{DEFAULT_MAX_COMPENSATED_V, DEFAULT_MIN_COMPENSATED_V};
    use crate::model::battery::lead_acid::{default_absorption_v, default_float_v};
    let max = b
        .max_compensated_v_per_cell
        .unwrap_or(DEFAULT_MAX_COMPENSATED_V);
    let min = b
        .min_compensated_v_per_cell
        .unwrap_or(DEFAULT_MIN_COMPENSATED_V);
    if b.max_compensated_v_per_cell.is_some() || b.min_compensated_v_per_cell.is_some() {
        let blame = if b.max_compensated_v_per_cell.is_some() {
            "battery.max_compensated_v_per_cell"
        } else {
            "battery.min_compensated_v_per_cell"
        };
        c.rule(
            min <= max,
            blame,
            format!("max {max} V, min {min} V per cell"),
            "battery.min_compensated_v_per_cell <= battery.max_compensated_v_per_cell (defaults 2.20 and 2.50)",
        );
    }
    let absorption = b
        .charge_v_per_cell
        .unwrap_or_else(|| default_absorption_v(b.lead_acid_kind));
    let float = b
        .float_v_per_cell
        .unwrap_or_else(|| default_float_v(b.lead_acid_kind));
    if b.float_v_per_cell.is_some() || b.charge_v_per_cell.is_some() {
        let blame = if b.float_v_per_cell.is_some() {
            "battery.float_v_per_cell"
        } else {
            "battery.charge_v_per_cell"
        };
        c.rule(
            float <= absorption,
            blame,
            format!("float {float} V, absorption {absorption} V per cell"),
            "battery.float_v_per_cell <= battery.charge_v_per_cell (float at or below absorption)",
        );
    }
}

/// A Li-ion OCV curve: 2 … 50 points from SOC 0 to SOC 1, SOC and OCV strictly increasing, each
/// OCV in 1.5 … 4.6 V; and the CV voltage at most the OCV at full (SOC 1 is full at the CV
/// voltage, so the charge can never pass it).
fn ocv_curve(c: &mut Checker, b: &super::setup::Battery) {
    use crate::model::battery::li_ion::{default_cv_v_per_cell, full_ocv_v_per_cell};
    if let Some(pts) = &b.ocv_curve {
        c.rule(
            (2..=50).contains(&pts.len()),
            "battery.ocv_curve",
            format!("{} points", pts.len()),
            "2 ..= 50 points",
        );
        for (i, p) in pts.iter().enumerate() {
            c.range(&format!("battery.ocv_curve.{i}.soc"), p.soc, 0.0, 1.0);
            c.range(&format!("battery.ocv_curve.{i}.ocv_v"), p.ocv_v, 1.5, 4.6);
            if i > 0 {
                let q = pts[i - 1];
                c.rule(
                    p.soc > q.soc,
                    &format!("battery.ocv_curve.{i}.soc"),
                    format!("{} after {}", p.soc, q.soc),
                    "> the previous point's soc (strictly increasing)",
                );
                c.rule(
                    p.ocv_v > q.ocv_v,
                    &format!("battery.ocv_curve.{i}.ocv_v"),
                    format!("{} after {}", p.ocv_v, q.ocv_v),
                    "> the previous point's ocv_v (OCV rises with SOC)",
                );
            }
        }
        if let (Some(first), Some(last)) = (pts.first(), pts.last()) {
            c.rule(
                first.soc == 0.0 && last.soc == 1.0,
                "battery.ocv_curve",
                format!("soc from {} to {}", first.soc, last.soc),
                "the first point at soc 0 and the last at soc 1",
            );
        }
        if !c.out.is_empty() {
            return;
        }
    }
    let cv = b
        .charge_v_per_cell
        .unwrap_or_else(|| default_cv_v_per_cell(b.chemistry));
    let full = full_ocv_v_per_cell(b);
    c.rule(
        cv <= full + 1e-9,
        "battery.charge_v_per_cell",
        format!("{cv} (OCV at SOC 1: {full} V)"),
        "<= the cell's OCV at SOC 1 (the top of battery.ocv_curve or of the built-in curve); \
         a cell charged higher needs its own battery.ocv_curve ending at its CV voltage",
    );
}

/// The capacity and the supercapacitor's own fields: `capacity_ah` for every chemistry but
/// `supercap`, whose charge follows from its capacitance and rated voltage; `capacitance_f`,
/// `leakage_current_a` and `min_v_per_cell` only there.
fn storage_kind(c: &mut Checker, b: &Battery) {
    let supercap = b.chemistry == Chemistry::Supercap;
    match (supercap, b.capacity_ah) {
        (false, Some(v)) => c.range("battery.capacity_ah", v, 0.01, 2000.0),
        (false, None) => c.rule(
            false,
            "battery.capacity_ah",
            "missing".into(),
            "0.01 ..= 2000 Ah (the capacity of the whole battery, required for every chemistry but supercap)",
        ),
        (true, Some(v)) => c.rule(
            false,
            "battery.capacity_ah",
            format!("{v}"),
            "none for a supercapacitor (its charge follows from battery.capacitance_f and the rated voltage battery.charge_v_per_cell)",
        ),
        (true, None) => {}
    }
    if supercap {
        match b.capacitance_f {
            Some(v) => c.range("battery.capacitance_f", v, 0.01, 1e5),
            None => c.rule(
                false,
                "battery.capacitance_f",
                "missing".into(),
                "0.01 ..= 100000 F (one cell's capacitance, required for a supercapacitor)",
            ),
        }
        c.opt_range("battery.leakage_current_a", b.leakage_current_a, 0.0, 1.0);
    } else {
        for (path, v) in [
            ("battery.capacitance_f", b.capacitance_f),
            ("battery.leakage_current_a", b.leakage_current_a),
            ("battery.min_v_per_cell", b.min_v_per_cell),
        ] {
            if let Some(v) = v {
                c.rule(
                    false,
                    path,
                    format!("{v}"),
                    "only on a supercapacitor (chemistry supercap)",
                );
            }
        }
    }
}

/// NiMH and supercapacitor cells: their charge limit per cell, no Li-ion curve and no lead-acid
/// settings; a supercapacitor's lowest usable voltage below its rated one and a positive ESR.
fn nimh_or_supercap(c: &mut Checker, b: &Battery) {
    use crate::model::battery::supercap::{DEFAULT_RATED_V_PER_CELL, MIN_TIME_CONSTANT_S};
    let word = b.chemistry.as_str();
    c.rule(
        b.ocv_curve.is_none(),
        "battery.ocv_curve",
        format!("set on a {word} battery"),
        "only on a Li-ion battery (nmc, lco, nca, lfp)",
    );
    for (path, v) in [
        ("battery.float_v_per_cell", b.float_v_per_cell),
        (
            "battery.temp_comp_mv_per_c_per_cell",
            b.temp_comp_mv_per_c_per_cell,
        ),
        (
            "battery.max_compensated_v_per_cell",
            b.max_compensated_v_per_cell,
        ),
        (
            "battery.min_compensated_v_per_cell",
            b.min_compensated_v_per_cell,
        ),
    ] {
        if let Some(v) = v {
            c.rule(
                false,
                path,
                format!("{v} on a {word} battery"),
                "only on a lead-acid battery",
            );
        }
    }
    if b.chemistry == Chemistry::Nimh {
        // From memory: a NiMH cell peaks near 1.4–1.6 V at 1 C; chargers' backup limits sit up to
        // about 1.8 V.
        c.opt_range("battery.charge_v_per_cell", b.charge_v_per_cell, 1.3, 2.0);
        return;
    }
    c.opt_range("battery.charge_v_per_cell", b.charge_v_per_cell, 1.0, 4.0);
    let rated = b.charge_v_per_cell.unwrap_or(DEFAULT_RATED_V_PER_CELL);
    if let Some(v_min) = b.min_v_per_cell {
        c.rule(
            v_min.is_finite() && v_min >= 0.0 && v_min < rated,
            "battery.min_v_per_cell",
            format!("{v_min} (rated {rated} V per cell)"),
            "0 ..< the rated voltage battery.charge_v_per_cell",
        );
    }
    c.rule(
        b.cell_r0_ohm > 0.0,
        "battery.cell_r0_ohm",
        format!("{}", b.cell_r0_ohm),
        "> 0 for a supercapacitor cell (its ESR)",
    );
    if let Some(cap) = b.capacitance_f {
        let tau = b.cell_r0_ohm * cap;
        c.rule(
            tau >= MIN_TIME_CONSTANT_S,
            "battery.cell_r0_ohm",
            format!("{} Ω × {cap} F = {tau:.3e} s", b.cell_r0_ohm),
            &format!(
                "battery.cell_r0_ohm × battery.capacitance_f >= {MIN_TIME_CONSTANT_S} s (a double-layer \
                 cell's RC time constant is about 0.5–2 s for large cells and longer for small \
                 ones; a faster cell is outside what this model integrates: raise the ESR to the \
                 maker's figure)"
            ),
        );
    }
}

/// A NiMH charger's end of charge and trickle: in range, below the charge current, and only
/// with a NiMH battery.
fn nimh_charger(c: &mut Checker, s: &Setup) {
    let cv = &s.converter;
    let nimh = s.battery.chemistry == Chemistry::Nimh;
    for (path, v, lo, hi) in [
        (
            "converter.end_voltage_drop_mv_per_cell",
            cv.end_voltage_drop_mv_per_cell,
            0.0,
            50.0,
        ),
        (
            "converter.end_temp_rise_c_per_min",
            cv.end_temp_rise_c_per_min,
            0.0,
            10.0,
        ),
        ("converter.end_holdoff_s", cv.end_holdoff_s, 0.0, 3600.0),
        (
            "converter.trickle_current_a",
            cv.trickle_current_a,
            0.0,
            50.0,
        ),
    ] {
        if let Some(v) = v {
            c.range(path, v, lo, hi);
            c.rule(
                nimh,
                path,
                format!("{v} with a {} battery", s.battery.chemistry.as_str()),
                "only with a NiMH battery (chemistry nimh)",
            );
        }
    }
    if let Some(t) = cv.trickle_current_a {
        c.rule(
            t < cv.charge_current_a,
            "converter.trickle_current_a",
            format!("{t} (charge_current_a {})", cv.charge_current_a),
            "< converter.charge_current_a (the trickle follows the fast charge)",
        );
    }
}

/// Checks a setup; an empty list means valid.
pub fn setup(s: &Setup) -> Vec<Violation> {
    let mut c = Checker::default();
    c.range("ambient_c", s.ambient_c, -30.0, 60.0);
    let d = &s.drive;
    c.rule(
        !d.stages.is_empty() && d.stages.len() <= 6,
        "drive.stages",
        format!("{} stages", d.stages.len()),
        "1 ..= 6 stages",
    );
    for (i, st) in d.stages.iter().enumerate() {
        c.range(&format!("drive.stages.{i}.ratio"), st.ratio, 0.05, 100.0);
        c.above(
            &format!("drive.stages.{i}.efficiency"),
            st.efficiency,
            0.5,
            1.0,
        );
    }
    let ratio: f64 = d.stages.iter().map(|s| s.ratio).product();
    c.rule(
        (0.05..=500.0).contains(&ratio),
        "drive.stages",
        format!("total ratio {ratio}"),
        "total ratio 0.05 ..= 500",
    );
    c.range(
        "drive.crank_inertia_kg_m2",
        d.crank_inertia_kg_m2,
        1e-4,
        1.0,
    );
    c.range(
        "drive.flywheel_inertia_kg_m2",
        d.flywheel_inertia_kg_m2,
        0.0,
        0.1,
    );
    c.range(
        "drive.coulomb_friction_n_m",
        d.coulomb_friction_n_m,
        0.0,
        1.0,
    );
    c.range(
        "drive.viscous_friction_n_m_s",
        d.viscous_friction_n_m_s,
        0.0,
        0.01,
    );

    let g = &s.generator;
    c.range(
        "generator.back_emf_v_per_krpm",
        g.back_emf_v_per_krpm,
        0.1,
        500.0,
    );
    c.range("generator.resistance_ohm", g.resistance_ohm, 0.001, 100.0);
    c.range("generator.inductance_h", g.inductance_h, 0.0, 1.0);
    c.range("generator.inertia_kg_m2", g.inertia_kg_m2, 1e-7, 0.1);
    c.range("generator.brush_drop_v", g.brush_drop_v, 0.0, 3.0);
    c.range(
        "generator.hysteresis_loss_w_per_krpm",
        g.hysteresis_loss_w_per_krpm,
        0.0,
        50.0,
    );
    c.range(
        "generator.eddy_loss_w_per_krpm2",
        g.eddy_loss_w_per_krpm2,
        0.0,
        50.0,
    );
    c.range(
        "generator.back_emf_tempco_pct_per_k",
        g.back_emf_tempco_pct_per_k,
        -1.0,
        0.0,
    );
    c.range(
        "generator.cogging_torque_n_m",
        g.cogging_torque_n_m,
        0.0,
        1.0,
    );
    c.rule(
        (1..=200).contains(&g.cogging_periods_per_rev),
        "generator.cogging_periods_per_rev",
        g.cogging_periods_per_rev.to_string(),
        "1 ..= 200",
    );
    c.range(
        "generator.winding_heat_capacity_j_per_k",
        g.winding_heat_capacity_j_per_k,
        0.1,
        10_000.0,
    );
    c.range(
        "generator.winding_to_ambient_w_per_k",
        g.winding_to_ambient_w_per_k,
        0.001,
        100.0,
    );

    if g.kind == GeneratorKind::ThreePhasePm {
        match g.pole_pairs {
            Some(p) => c.rule(
                (1..=100).contains(&p),
                "generator.pole_pairs",
                p.to_string(),
                "1 ..= 100",
            ),
            None => c.rule(
                false,
                "generator.pole_pairs",
                "missing".into(),
                "1 ..= 100 (required for a three_phase_pm generator)",
            ),
        }
        c.rule(
            g.brush_drop_v == 0.0,
            "generator.brush_drop_v",
            format!("{}", g.brush_drop_v),
            "0 for a three_phase_pm generator (it has no brushes)",
        );
        c.rule(
            s.diode.kind != DiodeKind::None,
            "diode.kind",
            "none".into(),
            "shockley or ideal with a three_phase_pm generator (`diode` describes each of the bridge's six diodes)",
        );
    } else if let Some(p) = g.pole_pairs {
        c.rule(
            false,
            "generator.pole_pairs",
            p.to_string(),
            "only on a three_phase_pm generator",
        );
    }

    let di = &s.diode;
    c.range(
        "diode.series_resistance_ohm",
        di.series_resistance_ohm,
        0.0,
        10.0,
    );
    c.opt_range(
        "diode.saturation_current_a",
        di.saturation_current_a,
        1e-15,
        1e-2,
    );
    c.opt_range("diode.ideality", di.ideality, 0.5, 4.0);
    c.opt_range("diode.forward_v", di.forward_v, 0.0, 2.0);
    if di.kind == DiodeKind::Shockley {
        match &di.points {
            Some(p) => {
                c.rule(
                    p.len() == 2,
                    "diode.points",
                    format!("{} points", p.len()),
                    "exactly 2 points",
                );
                for (i, pt) in p.iter().enumerate() {
                    c.range(
                        &format!("diode.points.{i}.current_a"),
                        pt.current_a,
                        1e-6,
                        100.0,
                    );
                    c.range(
                        &format!("diode.points.{i}.forward_v"),
                        pt.forward_v,
                        0.05,
                        2.0,
                    );
                }
                if p.len() == 2 && c.out.is_empty() {
                    let ok = crate::model::diode::shockley_from_points(
                        (p[0].current_a, p[0].forward_v),
                        (p[1].current_a, p[1].forward_v),
                        di.series_resistance_ohm,
                    )
                    .is_some();
                    c.rule(
                        ok,
                        "diode.points",
                        "the two points".into(),
                        "two different currents with V_F rising with current (n·V_T between 0.1 mV and 1 V)",
                    );
                }
            }
            None => c.rule(
                di.saturation_current_a.is_some() && di.ideality.is_some(),
                "diode",
                "no Shockley parameters".into(),
                "`points` (two datasheet points) or both `saturation_current_a` and `ideality`",
            ),
        }
    }

    let cv = &s.converter;
    c.range(
        "converter.charge_current_a",
        cv.charge_current_a,
        0.001,
        50.0,
    );
    c.opt_range("converter.cv_setpoint_v", cv.cv_setpoint_v, 0.5, 1000.0);
    c.opt_range(
        "converter.float_setpoint_v",
        cv.float_setpoint_v,
        0.5,
        1000.0,
    );
    if cv.topology != Topology::Direct {
        if cv.topology == Topology::BuckBoost {
            // M = D/(1 − D) grows without bound towards D = 1; real parts stop near 0.9.
            c.range("converter.max_duty", cv.max_duty, 0.1, 0.95);
        } else {
            c.range("converter.max_duty", cv.max_duty, 0.1, 1.0);
        }
        if cv.topology == Topology::Linear {
            c.opt_range("converter.dropout_v", cv.dropout_v, 0.01, 5.0);
            c.range(
                "converter.pass_theta_ja_k_per_w",
                cv.pass_theta_ja_k_per_w,
                0.1,
                500.0,
            );
            c.range(
                "converter.pass_heat_capacity_j_per_k",
                cv.pass_heat_capacity_j_per_k,
                0.01,
                10_000.0,
            );
            c.range("converter.pass_foldback_c", cv.pass_foldback_c, 40.0, 200.0);
            c.above(
                "converter.pass_shutdown_c",
                cv.pass_shutdown_c,
                cv.pass_foldback_c,
                250.0,
            );
            c.rule(
                cv.input_floor_v.is_none(),
                "converter.input_floor_v",
                "set on a linear charger".into(),
                "only on the switching chargers (buck, buck_boost)",
            );
        } else if let Some(floor) = cv.input_floor_v {
            c.range(
                "converter.input_floor_v",
                floor,
                cv.uvlo_off_v.max(0.5),
                1000.0,
            );
        }
        c.range("converter.switch_drop_v", cv.switch_drop_v, 0.0, 3.0);
        c.range(
            "converter.switch_resistance_ohm",
            cv.switch_resistance_ohm,
            0.0,
            5.0,
        );
        c.range(
            "converter.catch_diode_drop_v",
            cv.catch_diode_drop_v,
            0.0,
            2.0,
        );
        c.range(
            "converter.inductor_resistance_ohm",
            cv.inductor_resistance_ohm,
            0.0,
            5.0,
        );
        c.range("converter.inductance_h", cv.inductance_h, 1e-7, 0.1);
        c.range(
            "converter.switching_frequency_hz",
            cv.switching_frequency_hz,
            1e3,
            5e6,
        );
        c.range(
            "converter.switch_transition_s",
            cv.switch_transition_s,
            0.0,
            1e-5,
        );
        c.range(
            "converter.quiescent_current_a",
            cv.quiescent_current_a,
            0.0,
            0.5,
        );
        c.range("converter.gate_charge_c", cv.gate_charge_c, 0.0, 1e-6);
        c.range("converter.core_loss_w", cv.core_loss_w, 0.0, 10.0);
        if let Some(b) = cv.buck_mode_max_duty {
            c.rule(
                b == 0.0 || (b.is_finite() && b >= 0.2 && b <= cv.max_duty - 0.01),
                "converter.buck_mode_max_duty",
                format!("{b}"),
                &format!(
                    "0 (never in buck mode) or 0.2 ..= max_duty − 0.01 = {}",
                    cv.max_duty - 0.01
                ),
            );
            c.rule(
                cv.topology == Topology::BuckBoost,
                "converter.buck_mode_max_duty",
                format!("{b}"),
                "only on a buck_boost charger",
            );
        }
        c.range("converter.uvlo_on_v", cv.uvlo_on_v, 0.0, 200.0);
        c.range(
            "converter.uvlo_off_v",
            cv.uvlo_off_v,
            0.0,
            cv.uvlo_on_v.max(0.0),
        );
        c.rule(
            cv.uvlo_on_v <= 0.0 || cv.uvlo_off_v < cv.uvlo_on_v,
            "converter.uvlo_off_v",
            format!("{} (uvlo_on_v {})", cv.uvlo_off_v, cv.uvlo_on_v),
            "< converter.uvlo_on_v (the lock-out needs hysteresis; both 0 turns it off)",
        );
        c.rule(
            cv.uvlo_on_v < cv.input_overvoltage_v,
            "converter.uvlo_on_v",
            format!("{} (input_overvoltage_v {})", cv.uvlo_on_v, cv.input_overvoltage_v),
            "< converter.input_overvoltage_v (the charger must be able to start below its input limit)",
        );
        if let Some(floor) = cv.input_floor_v {
            c.rule(
                floor < cv.input_overvoltage_v,
                "converter.input_floor_v",
                format!("{floor} (input_overvoltage_v {})", cv.input_overvoltage_v),
                "< converter.input_overvoltage_v",
            );
        }
        if let (Some(float), Some(cvs)) = (cv.float_setpoint_v, cv.cv_setpoint_v) {
            c.rule(
                float <= cvs,
                "converter.float_setpoint_v",
                format!("{float} (cv_setpoint_v {cvs})"),
                "<= converter.cv_setpoint_v (float sits at or below absorption)",
            );
        }
        for (path, v) in [
            ("converter.termination_current_a", cv.termination_current_a),
            (
                "converter.absorption_exit_current_a",
                cv.absorption_exit_current_a,
            ),
        ] {
            if let Some(v) = v {
                c.rule(
                    v < cv.charge_current_a,
                    path,
                    format!("{v} (charge_current_a {})", cv.charge_current_a),
                    "< converter.charge_current_a (the CV or absorption current tapers from the CC limit down to it)",
                );
            }
        }
        c.range("converter.soft_start_s", cv.soft_start_s, 0.0, 10.0);
        c.range("converter.restart_delay_s", cv.restart_delay_s, 0.0, 10.0);
        c.range(
            "converter.input_overvoltage_v",
            cv.input_overvoltage_v,
            1.0,
            1000.0,
        );
        c.range(
            "converter.input_capacitance_f",
            cv.input_capacitance_f,
            1e-7,
            1.0,
        );
        c.range(
            "converter.output_capacitance_f",
            cv.output_capacitance_f,
            1e-7,
            1.0,
        );
        c.opt_range(
            "converter.termination_current_a",
            cv.termination_current_a,
            0.0,
            50.0,
        );
        c.opt_range(
            "converter.absorption_exit_current_a",
            cv.absorption_exit_current_a,
            0.0,
            50.0,
        );
        c.range("converter.absorption_max_s", cv.absorption_max_s, 1.0, 1e6);
    }

    nimh_charger(&mut c, s);

    let b = &s.battery;
    c.range(
        "battery.cells_series",
        f64::from(b.cells_series),
        1.0,
        200.0,
    );
    c.range(
        "battery.cells_parallel",
        f64::from(b.cells_parallel),
        1.0,
        100.0,
    );
    storage_kind(&mut c, b);
    c.range("battery.soc_start", b.soc_start, 0.0, 1.0);
    c.range("battery.cell_r0_ohm", b.cell_r0_ohm, 0.0, 1.0);
    c.range("battery.cell_r1_ohm", b.cell_r1_ohm, 1e-6, 1.0);
    c.range("battery.cell_c1_f", b.cell_c1_f, 1.0, 1e6);
    c.range(
        "battery.resistance_activation_k",
        b.resistance_activation_k,
        0.0,
        10_000.0,
    );
    c.opt_range(
        "battery.coulombic_efficiency",
        b.coulombic_efficiency,
        0.5,
        1.0,
    );
    let lithium = b.chemistry.is_lithium();
    if matches!(b.chemistry, Chemistry::Nimh | Chemistry::Supercap) {
        nimh_or_supercap(&mut c, b);
    } else if lithium {
        c.opt_range("battery.charge_v_per_cell", b.charge_v_per_cell, 2.0, 4.5);
        ocv_curve(&mut c, b);
        c.rule(
            b.cell_r0_ohm > 0.0,
            "battery.cell_r0_ohm",
            format!("{}", b.cell_r0_ohm),
            "> 0 for a Li-ion cell",
        );
    } else {
        c.rule(
            b.ocv_curve.is_none(),
            "battery.ocv_curve",
            "set on a lead-acid battery".into(),
            "only on a Li-ion battery (nmc, lco, nca, lfp)",
        );
        c.opt_range("battery.charge_v_per_cell", b.charge_v_per_cell, 2.0, 2.7);
        c.opt_range("battery.float_v_per_cell", b.float_v_per_cell, 2.0, 2.5);
        c.opt_range(
            "battery.temp_comp_mv_per_c_per_cell",
            b.temp_comp_mv_per_c_per_cell,
            -10.0,
            0.0,
        );
        c.opt_range(
            "battery.max_compensated_v_per_cell",
            b.max_compensated_v_per_cell,
            2.0,
            2.8,
        );
        c.opt_range(
            "battery.min_compensated_v_per_cell",
            b.min_compensated_v_per_cell,
            1.9,
            2.6,
        );
        lead_acid_order(&mut c, b);
    }
    c.range("battery.mass_kg", b.mass_kg, 0.001, 1000.0);
    c.range(
        "battery.specific_heat_j_per_kg_k",
        b.specific_heat_j_per_kg_k,
        100.0,
        5000.0,
    );
    c.range("battery.surface_area_m2", b.surface_area_m2, 1e-4, 10.0);
    c.range(
        "battery.heat_transfer_w_per_m2_k",
        b.heat_transfer_w_per_m2_k,
        0.1,
        100.0,
    );
    c.opt_range("battery.temp_start_c", b.temp_start_c, -40.0, 80.0);
    let w = &b.charge_window;
    c.rule(
        w.min_c <= w.cool_c && w.cool_c <= w.warm_c && w.warm_c <= w.max_c,
        "battery.charge_window",
        format!("{} / {} / {} / {}", w.min_c, w.cool_c, w.warm_c, w.max_c),
        "min_c <= cool_c <= warm_c <= max_c",
    );
    c.range("battery.charge_window.min_c", w.min_c, -40.0, 80.0);
    c.range("battery.charge_window.max_c", w.max_c, -40.0, 100.0);
    c.range(
        "battery.charge_window.cool_current_fraction",
        w.cool_current_fraction,
        0.0,
        1.0,
    );
    c.range(
        "battery.charge_window.warm_cv_drop_v_per_cell",
        w.warm_cv_drop_v_per_cell,
        0.0,
        0.5,
    );

    if let Some(u) = &s.usb {
        usb(&mut c, s, u);
    }

    alerts(&mut c, &s.alerts);
    let so = &s.solver;
    c.rule(
        so.rtol.is_finite() && (MIN_RTOL..=MAX_RTOL).contains(&so.rtol),
        "solver.rtol",
        format!("{}", so.rtol),
        "1e-10 ..= 2e-4 (looser tolerances let the energy ledger drift past its 0.1 % bound)",
    );
    c.range("solver.atol", so.atol, 1e-12, 1e-2);
    c.range("solver.max_step_s", so.max_step_s, MIN_MAX_STEP_S, 1.0);
    c.range("solver.trace_interval_s", so.trace_interval_s, 1e-3, 60.0);
    c.out
}

/// Ranges of the `alerts` section: thresholds, hysteresis bands, dwell times and merge gaps.
fn alerts(c: &mut Checker, a: &Alerts) {
    c.range(
        "alerts.min_in_regulation_fraction",
        a.min_in_regulation_fraction,
        0.0,
        1.0,
    );
    c.range(
        "alerts.regulation_decision_band",
        a.regulation_decision_band,
        0.0,
        0.5,
    );
    c.range(
        "alerts.overcharge_decision_band_v",
        a.overcharge_decision_band_v,
        0.0,
        1.0,
    );
    let o = &a.overcharge;
    c.range(
        "alerts.overcharge.tolerance_v_per_cell",
        o.tolerance_v_per_cell,
        0.0,
        0.5,
    );
    c.range(
        "alerts.overcharge.hysteresis_v_per_cell",
        o.hysteresis_v_per_cell,
        0.0,
        0.5,
    );
    let io = &a.input_overvoltage;
    c.range(
        "alerts.input_overvoltage.hysteresis_v",
        io.hysteresis_v,
        0.0,
        100.0,
    );
    let t = &a.battery_overtemp;
    c.range(
        "alerts.battery_overtemp.threshold_c",
        t.threshold_c,
        -40.0,
        150.0,
    );
    c.range(
        "alerts.battery_overtemp.hysteresis_k",
        t.hysteresis_k,
        0.0,
        50.0,
    );
    let m = &a.missed_end_of_charge;
    c.range(
        "alerts.missed_end_of_charge.stored_fraction",
        m.stored_fraction,
        0.01,
        0.99,
    );
    c.range(
        "alerts.missed_end_of_charge.hysteresis_fraction",
        m.hysteresis_fraction,
        0.0,
        0.5,
    );
    c.range(
        "alerts.missed_end_of_charge.min_c_rate",
        m.min_c_rate,
        0.0,
        10.0,
    );
    let tr = &a.temperature_rise;
    c.range(
        "alerts.temperature_rise.threshold_c_per_min",
        tr.threshold_c_per_min,
        0.01,
        100.0,
    );
    c.range(
        "alerts.temperature_rise.hysteresis_c_per_min",
        tr.hysteresis_c_per_min,
        0.0,
        10.0,
    );
    let op = &a.operator_overload;
    c.range(
        "alerts.operator_overload.reserve_fraction",
        op.reserve_fraction,
        0.0,
        1.0,
    );
    c.range(
        "alerts.operator_overload.hysteresis_fraction",
        op.hysteresis_fraction,
        0.0,
        1.0,
    );
    let timings = [
        ("overcharge", o.dwell_s, o.merge_gap_s),
        (
            "regulation_loss",
            a.regulation_loss.dwell_s,
            a.regulation_loss.merge_gap_s,
        ),
        ("lockout", a.lockout.dwell_s, a.lockout.merge_gap_s),
        ("input_overvoltage", io.dwell_s, io.merge_gap_s),
        ("battery_overtemp", t.dwell_s, t.merge_gap_s),
        (
            "charge_temp_window",
            a.charge_temp_window.dwell_s,
            a.charge_temp_window.merge_gap_s,
        ),
        ("operator_overload", op.dwell_s, op.merge_gap_s),
        (
            "device_cutoff",
            a.device_cutoff.dwell_s,
            a.device_cutoff.merge_gap_s,
        ),
        (
            "model_range",
            a.model_range.dwell_s,
            a.model_range.merge_gap_s,
        ),
        (
            "thermal_foldback",
            a.thermal_foldback.dwell_s,
            a.thermal_foldback.merge_gap_s,
        ),
        (
            "missed_end_of_charge",
            a.missed_end_of_charge.dwell_s,
            a.missed_end_of_charge.merge_gap_s,
        ),
        (
            "temperature_rise",
            a.temperature_rise.dwell_s,
            a.temperature_rise.merge_gap_s,
        ),
    ];
    for (kind, dwell, gap) in timings {
        c.range(&format!("alerts.{kind}.dwell_s"), dwell, 0.0, 3600.0);
        c.range(&format!("alerts.{kind}.merge_gap_s"), gap, 0.0, 3600.0);
    }
}

/// Ranges of a USB port and the rules that tie it to the rest of the setup: a switching
/// converter to hold the bus, a Li-ion cell in the device whose charge limit lies below the bus,
/// cut-off below reconnect at most the bus, and an ordered band.
fn usb(c: &mut Checker, s: &Setup, u: &UsbPort) {
    c.range("usb.bus_v", u.bus_v, 4.0, 5.5);
    c.range("usb.port_current_a", u.port_current_a, 0.05, 5.0);
    c.range("usb.device_current_a", u.device_current_a, 0.01, 5.0);
    c.range("usb.device_dropout_v", u.device_dropout_v, 0.01, 2.0);
    c.range("usb.device_cutoff_v", u.device_cutoff_v, 2.5, 5.5);
    c.range(
        "usb.device_reconnect_v",
        u.device_reconnect_v,
        u.device_cutoff_v,
        u.bus_v,
    );
    c.rule(
        u.device_reconnect_v > u.device_cutoff_v,
        "usb.device_reconnect_v",
        format!("{}", u.device_reconnect_v),
        "above usb.device_cutoff_v (hysteresis)",
    );
    c.range(
        "usb.device_reconnect_delay_s",
        u.device_reconnect_delay_s,
        0.1,
        60.0,
    );
    c.range("usb.device_ramp_s", u.device_ramp_s, 0.0, 10.0);
    c.range(
        "usb.device_input_regulation_v",
        u.device_input_regulation_v,
        2.5,
        5.5,
    );
    c.rule(
        u.device_input_regulation_v < u.bus_v,
        "usb.device_input_regulation_v",
        format!("{}", u.device_input_regulation_v),
        "below usb.bus_v (the device regulates its input below the bus set point)",
    );
    c.opt_range(
        "usb.device_termination_current_a",
        u.device_termination_current_a,
        0.0,
        50.0,
    );
    c.range("usb.band_low_v", u.band_low_v, 3.0, 5.5);
    c.range("usb.band_high_v", u.band_high_v, u.band_low_v, 6.0);
    c.rule(
        matches!(s.converter.topology, Topology::Buck | Topology::BuckBoost),
        "converter.topology",
        s.converter.topology.as_str().to_string(),
        "buck or buck_boost with a `usb` port (a switching converter holds the bus)",
    );
    c.rule(
        s.converter.cv_setpoint_v.is_none(),
        "converter.cv_setpoint_v",
        "set with a `usb` port".into(),
        "none with a `usb` port (the bus set point is usb.bus_v)",
    );
    c.rule(
        s.converter.termination_current_a.is_none(),
        "converter.termination_current_a",
        "set with a `usb` port".into(),
        "none with a `usb` port (the device's is usb.device_termination_current_a)",
    );
    c.rule(
        s.converter.input_floor_v.is_none(),
        "converter.input_floor_v",
        "set with a `usb` port".into(),
        "none with a `usb` port (the device, not the converter, sets the bus current)",
    );
    let b = &s.battery;
    if b.chemistry.is_lithium() {
        let per_cell = b
            .charge_v_per_cell
            .unwrap_or_else(|| crate::model::battery::li_ion::default_cv_v_per_cell(b.chemistry));
        let limit = per_cell * f64::from(b.cells_series);
        c.rule(
            limit < u.bus_v,
            "usb.bus_v",
            format!("{} (cell charge limit {limit:.3} V)", u.bus_v),
            "above the charge limit of the device's cell (its charger steps down from the bus)",
        );
    } else {
        c.rule(
            false,
            "battery.chemistry",
            b.chemistry.as_str().to_string(),
            "a Li-ion cell (nmc, lco, nca, lfp) in the device behind a `usb` port",
        );
    }
}

/// Checks a profile; an empty list means valid.
pub fn profile(p: &Profile) -> Vec<Violation> {
    let mut c = Checker::default();
    c.range("cadence_scale", p.cadence_scale, 0.0, 10.0);
    c.rule(
        !p.segments.is_empty() && p.segments.len() <= 10_000,
        "segments",
        format!("{} segments", p.segments.len()),
        "1 ..= 10000 segments",
    );
    for (i, s) in p.segments.iter().enumerate() {
        c.range(
            &format!("segments.{i}.duration_s"),
            s.duration_s,
            0.1,
            86_400.0,
        );
        c.range(
            &format!("segments.{i}.cadence_rpm"),
            s.cadence_rpm,
            0.0,
            400.0,
        );
        c.opt_range(
            &format!("segments.{i}.end_cadence_rpm"),
            s.end_cadence_rpm,
            0.0,
            400.0,
        );
    }
    let o = &p.operator;
    c.range("operator.peak_torque_n_m", o.peak_torque_n_m, 1.0, 200.0);
    c.range("operator.max_cadence_rpm", o.max_cadence_rpm, 30.0, 600.0);
    c.range("operator.critical_power_w", o.critical_power_w, 5.0, 500.0);
    c.range("operator.w_prime_j", o.w_prime_j, 0.0, 100_000.0);
    c.range(
        "operator.peak_power_w",
        o.peak_power_w,
        o.critical_power_w.max(5.0),
        2000.0,
    );
    c.range(
        "operator.tracking_gain_n_m_per_rpm",
        o.tracking_gain_n_m_per_rpm,
        0.001,
        10.0,
    );
    c.range("operator.tracking_time_s", o.tracking_time_s, 0.05, 100.0);
    c.range("operator.spin_up_s", o.spin_up_s, 0.0, 30.0);
    c.range(
        "operator.spread.critical_power_w",
        o.spread.critical_power_w,
        0.0,
        200.0,
    );
    c.range(
        "operator.spread.w_prime_j",
        o.spread.w_prime_j,
        0.0,
        50_000.0,
    );
    c.range(
        "operator.spread.cadence_rpm",
        o.spread.cadence_rpm,
        0.0,
        100.0,
    );
    let j = &p.jitter;
    c.range("jitter.wander_rpm", j.wander_rpm, 0.0, 100.0);
    c.range("jitter.wander_time_s", j.wander_time_s, 0.5, 600.0);
    c.range("jitter.ripple_fraction", j.ripple_fraction, 0.0, 1.0);
    c.range("jitter.ripple_phase_rad", j.ripple_phase_rad, -10.0, 10.0);
    c.rule(
        (1..=4).contains(&j.ripple_peaks_per_rev),
        "jitter.ripple_peaks_per_rev",
        j.ripple_peaks_per_rev.to_string(),
        "1 ..= 4",
    );
    c.rule(
        j.rest_interval_s == 0.0 || (5.0..=1e5).contains(&j.rest_interval_s),
        "jitter.rest_interval_s",
        format!("{}", j.rest_interval_s),
        "0 (no rests) or 5 ..= 100000",
    );
    c.range("jitter.rest_length_s", j.rest_length_s, 0.0, 600.0);
    c.out
}
