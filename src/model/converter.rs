//! Averaged asynchronous buck charger (state-space averaging, Middlebrook & Ćuk 1976;
//! Erickson & Maksimović ch. 2, 5 and 7): volt-second balance with switch, catch-diode and DCR drops.
//!
//! CCM inductor balance: d·(V_in − V_sw − I·R_on) − (1 − d)·V_D − I·R_L = V_o (+ V_D2, the output
//! diode of a buck-boost run as a buck, which conducts all the time).
//! Input current d·I + I_q + ½·I·t_tr·f_sw (switching loss ½·V·I·t·f referred to the input) + the
//! core's loss P_core/V_in. I_q includes the gate driver's Q_g·f_sw.

use crate::scenario::setup::Converter;

/// Input voltage below which the core-loss current P_core/V_in is held at P_core/this (the
/// converter switches only above its UVLO, well above it), V.
pub const CORE_LOSS_MIN_V: f64 = 1.0;

/// The fixed losses of a switching stage, which loss budgets keep apart from the current-dependent
/// ones (common practice): the gate driver, fed from the input through the controller's
/// regulator, draws Q_g·f_sw for every switching transistor; the inductor core loses P_core while
/// the stage switches (held at its value at the design ripple), taken from the input as
/// P_core/V_in.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Overhead {
    /// Gate-drive current from the input, A.
    pub gate_drive_current_a: f64,
    /// Core loss while switching, W.
    pub core_loss_w: f64,
}

impl Overhead {
    /// Gate drive of `switches` switching transistors and the core loss of the configuration.
    pub fn from_config(c: &Converter, switches: f64) -> Self {
        Self {
            gate_drive_current_a: switches * c.gate_charge_c * c.switching_frequency_hz,
            core_loss_w: c.core_loss_w,
        }
    }

    /// Core-loss current drawn from the input at `v_in`: P_core/max(V_in, 1 V), A.
    pub fn core_current_a(&self, v_in: f64) -> f64 {
        if self.core_loss_w == 0.0 {
            return 0.0;
        }
        self.core_loss_w / v_in.max(CORE_LOSS_MIN_V)
    }

    /// d(core current)/d(v_in), A/V.
    pub fn core_current_slope(&self, v_in: f64) -> f64 {
        if self.core_loss_w == 0.0 || v_in <= CORE_LOSS_MIN_V {
            return 0.0;
        }
        -self.core_loss_w / (v_in * v_in)
    }

    /// Gate-drive and core power at `v_in`, W.
    pub fn power_w(&self, v_in: f64) -> f64 {
        v_in * (self.gate_drive_current_a + self.core_current_a(v_in))
    }
}

/// Buck charger parameters in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BuckModel {
    pub max_duty: f64,
    pub switch_drop_v: f64,
    pub switch_resistance_ohm: f64,
    pub catch_drop_v: f64,
    /// Drop of a diode in series with the output that conducts all the time, V: 0 for a buck; the
    /// output diode of a buck-boost run as a buck.
    pub output_diode_v: f64,
    pub inductor_resistance_ohm: f64,
    pub inductance_h: f64,
    pub switching_frequency_hz: f64,
    pub switch_transition_s: f64,
    /// Constant input current while running: the controller's quiescent current plus the gate
    /// drive ([`Overhead::gate_drive_current_a`]), A.
    pub quiescent_current_a: f64,
    /// Gate drive and core loss.
    pub overhead: Overhead,
}

/// Loss breakdown of the converter at one operating point, W.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ConverterLosses {
    pub switch_w: f64,
    pub catch_diode_w: f64,
    pub inductor_w: f64,
    /// The controller's own quiescent draw (gate drive apart), W.
    pub quiescent_w: f64,
    pub switching_w: f64,
    /// Gate drive and inductor core, W.
    pub overhead_w: f64,
    /// Heat in a linear charger's pass element, W.
    pub pass_w: f64,
}

impl ConverterLosses {
    /// Sum of all losses, W.
    pub fn total_w(&self) -> f64 {
        self.switch_w
            + self.catch_diode_w
            + self.inductor_w
            + self.quiescent_w
            + self.switching_w
            + self.overhead_w
            + self.pass_w
    }
}

impl BuckModel {
    /// Builds the model from the converter configuration.
    pub fn from_config(c: &Converter) -> Self {
        let overhead = Overhead::from_config(c, 1.0);
        Self {
            max_duty: c.max_duty,
            switch_drop_v: c.switch_drop_v,
            switch_resistance_ohm: c.switch_resistance_ohm,
            catch_drop_v: c.catch_diode_drop_v,
            output_diode_v: 0.0,
            inductor_resistance_ohm: c.inductor_resistance_ohm,
            inductance_h: c.inductance_h,
            switching_frequency_hz: c.switching_frequency_hz,
            switch_transition_s: c.switch_transition_s,
            quiescent_current_a: c.quiescent_current_a + overhead.gate_drive_current_a,
            overhead,
        }
    }

    /// Output voltage as the switching cell sees it: V_o plus the always-on output diode, V.
    pub fn cell_v(&self, v_o: f64) -> f64 {
        v_o + self.output_diode_v
    }

    /// Core-loss current from the input at `v_in`, A.
    pub fn core_current_a(&self, v_in: f64) -> f64 {
        self.overhead.core_current_a(v_in)
    }

    /// CCM duty for output current `i` at input `v_in` and output `v_o` (volt-second balance).
    pub fn ccm_duty(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let den = v_in - self.switch_drop_v - i * self.switch_resistance_ohm + self.catch_drop_v;
        if den <= 0.0 {
            return f64::INFINITY;
        }
        (self.cell_v(v_o) + self.catch_drop_v + i * self.inductor_resistance_ohm) / den
    }

    /// Input voltage at which the duty for (`v_o`, `i`) reaches D_max: the dropout edge, V.
    pub fn dropout_input_v(&self, v_o: f64, i: f64) -> f64 {
        (self.cell_v(v_o) + self.catch_drop_v + i * self.inductor_resistance_ohm) / self.max_duty
            + self.switch_drop_v
            + i * self.switch_resistance_ohm
            - self.catch_drop_v
    }

    /// Volt-second residual at duty D_max: D·(V_in − V_sw − I·R_on + V_D) − V_D − I·R_L − V_o.
    /// Positive means the converter could push more than `i` at this input.
    pub fn dropout_residual(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let d = self.max_duty;
        d * (v_in - self.switch_drop_v - i * self.switch_resistance_ohm + self.catch_drop_v)
            - self.catch_drop_v
            - i * self.inductor_resistance_ohm
            - self.cell_v(v_o)
    }

    /// d(dropout_residual)/dI at fixed V_in and V_o, Ω (negative).
    pub fn dropout_residual_slope(&self) -> f64 {
        -(self.max_duty * self.switch_resistance_ohm + self.inductor_resistance_ohm)
    }

    /// Switching-loss current referred to the input: ½·I·t_tr·f_sw, A.
    pub fn switching_current_a(&self, i: f64) -> f64 {
        0.5 * i * self.switch_transition_s * self.switching_frequency_hz
    }

    /// Input current at duty `d`, output current `i` and input `v_in`:
    /// d·I + I_q + ½·I·t_tr·f_sw + P_core/V_in, A.
    pub fn input_current_a(&self, d: f64, i: f64, v_in: f64) -> f64 {
        d * i + self.quiescent_current_a + self.switching_current_a(i) + self.core_current_a(v_in)
    }

    /// Losses at duty `d`, output current `i`, input `v_in` (same CCM-form balance as the duty).
    pub fn losses(&self, d: f64, i: f64, v_in: f64) -> ConverterLosses {
        let gate = self.overhead.gate_drive_current_a;
        ConverterLosses {
            switch_w: d * i * (self.switch_drop_v + i * self.switch_resistance_ohm),
            catch_diode_w: (1.0 - d) * i * self.catch_drop_v + i * self.output_diode_v,
            inductor_w: i * i * self.inductor_resistance_ohm,
            quiescent_w: v_in * (self.quiescent_current_a - gate),
            switching_w: v_in * self.switching_current_a(i),
            overhead_w: self.overhead.power_w(v_in),
            pass_w: 0.0,
        }
    }

    /// Duty actually applied, reporting discontinuous conduction (Erickson ch. 5) when the ripple
    /// would reverse the inductor current: DCM when I < I_crit = (V_in − V_sw − V_o)·d·T/(2L), and then
    /// d = √(2·L·I / (T·a·(1 + a/b))) with a = V_in − V_sw − V_o, b = V_o + V_D (V_o with the
    /// always-on output diode, if any).
    pub fn reported_duty(&self, v_in: f64, v_o: f64, i: f64, d_ccm: f64) -> (f64, bool) {
        let v_o = self.cell_v(v_o);
        let a = v_in - self.switch_drop_v - i * self.switch_resistance_ohm - v_o;
        let b = v_o + self.catch_drop_v;
        if a <= 0.0 || b <= 0.0 || i <= 0.0 {
            return (d_ccm, false);
        }
        let period = 1.0 / self.switching_frequency_hz;
        let i_crit = a * d_ccm * period / (2.0 * self.inductance_h);
        if i >= i_crit {
            return (d_ccm, false);
        }
        let d = (2.0 * self.inductance_h * i / (period * a * (1.0 + a / b))).sqrt();
        (d.min(d_ccm), true)
    }
}

/// Erickson's ideal buck DCM conversion ratio M = 2/(1 + √(1 + 4K/D²)), K = 2L/(R·T_s),
/// valid for K < 1 − D; CCM gives M = D.
pub fn buck_conversion_ratio(d: f64, k: f64) -> f64 {
    if k >= 1.0 - d {
        d
    } else {
        2.0 / (1.0 + (1.0 + 4.0 * k / (d * d)).sqrt())
    }
}

/// Averaged non-inverting two-switch buck-boost charger (both switches on for d, both diodes
/// conduct for 1 − d; Erickson & Maksimović ch. 2 for the ideal ratio M = D/(1 − D), ch. 3 for the
/// loss terms in the volt-second balance). It regulates whether the input is above or below the
/// battery, up to its own D_max.
///
/// CCM inductor balance with inductor current I_L and battery current I = (1 − d)·I_L:
/// d·(V_in − 2·V_sw − 2·I_L·R_on) − (1 − d)·(V_o + 2·V_D) − I_L·R_L = 0.
/// Input current d·I_L + I_q + ½·I_L·t_tr·f_sw.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BuckBoostModel {
    pub max_duty: f64,
    /// Drop of each of the two switches when on, V.
    pub switch_drop_v: f64,
    /// On-resistance of each switch, Ω.
    pub switch_resistance_ohm: f64,
    /// Drop of each of the two diodes, V.
    pub diode_drop_v: f64,
    pub inductor_resistance_ohm: f64,
    pub inductance_h: f64,
    pub switching_frequency_hz: f64,
    pub switch_transition_s: f64,
    /// Controller quiescent current plus the gate drive of both switches, A.
    pub quiescent_current_a: f64,
    /// Gate drive (both switches) and core loss.
    pub overhead: Overhead,
}

impl BuckBoostModel {
    /// Builds the model from the converter configuration.
    pub fn from_config(c: &Converter) -> Self {
        let overhead = Overhead::from_config(c, 2.0);
        Self {
            max_duty: c.max_duty,
            switch_drop_v: c.switch_drop_v,
            switch_resistance_ohm: c.switch_resistance_ohm,
            diode_drop_v: c.catch_diode_drop_v,
            inductor_resistance_ohm: c.inductor_resistance_ohm,
            inductance_h: c.inductance_h,
            switching_frequency_hz: c.switching_frequency_hz,
            switch_transition_s: c.switch_transition_s,
            quiescent_current_a: c.quiescent_current_a + overhead.gate_drive_current_a,
            overhead,
        }
    }

    /// The stage in buck mode: the input switch and its freewheel diode work as a buck, the
    /// output switch is held off (no gate drive, no switching loss) and the output diode conducts
    /// the inductor current all the time, so the inductor carries the battery current I instead of
    /// I/(1 − d). Balance: d·(V_in − V_sw − I·R_on) − (1 − d)·V_D − V_D − I·R_L = V_o.
    pub fn as_buck(&self) -> BuckModel {
        let one_gate = 0.5 * self.overhead.gate_drive_current_a;
        BuckModel {
            max_duty: self.max_duty,
            switch_drop_v: self.switch_drop_v,
            switch_resistance_ohm: self.switch_resistance_ohm,
            catch_drop_v: self.diode_drop_v,
            output_diode_v: self.diode_drop_v,
            inductor_resistance_ohm: self.inductor_resistance_ohm,
            inductance_h: self.inductance_h,
            switching_frequency_hz: self.switching_frequency_hz,
            switch_transition_s: self.switch_transition_s,
            quiescent_current_a: self.quiescent_current_a - one_gate,
            overhead: Overhead {
                gate_drive_current_a: one_gate,
                ..self.overhead
            },
        }
    }

    /// Core-loss current from the input at `v_in`, A.
    pub fn core_current_a(&self, v_in: f64) -> f64 {
        self.overhead.core_current_a(v_in)
    }

    /// ½·t_tr·f_sw: switching-loss current per ampere of inductor current, referred to the input.
    pub fn switching_fraction(&self) -> f64 {
        0.5 * self.switch_transition_s * self.switching_frequency_hz
    }

    /// Off-interval voltage across the inductor (magnitude) at output `v_o`, V.
    pub fn off_v(&self, v_o: f64) -> f64 {
        v_o + 2.0 * self.diode_drop_v
    }

    /// Duty that satisfies the balance for inductor current `i_l` at `v_in`, `v_o`.
    pub fn duty_for_inductor(&self, v_in: f64, v_o: f64, i_l: f64) -> f64 {
        let b = self.off_v(v_o);
        let den = v_in - 2.0 * self.switch_drop_v - 2.0 * i_l * self.switch_resistance_ohm + b;
        if den <= 0.0 {
            return f64::INFINITY;
        }
        (b + i_l * self.inductor_resistance_ohm) / den
    }

    /// CCM duty for battery current `i` at `v_in`, `v_o`: the smaller root of
    /// A·d² − (A + B − 2·R_on·I)·d + (B + R_L·I) = 0 with A = V_in − 2V_sw + B, B = V_o + 2V_D
    /// (the balance multiplied by 1 − d). Infinity when no duty below 1 delivers `i`.
    pub fn ccm_duty(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let b = self.off_v(v_o);
        let a = v_in - 2.0 * self.switch_drop_v + b;
        if a <= 0.0 {
            return f64::INFINITY;
        }
        let p = a + b - 2.0 * self.switch_resistance_ohm * i;
        let q = b + self.inductor_resistance_ohm * i;
        let disc = p * p - 4.0 * a * q;
        if disc < 0.0 || p <= 0.0 {
            return f64::INFINITY;
        }
        // Smaller root, written to avoid cancellation.
        let d = 2.0 * q / (p + disc.sqrt());
        if d < 1.0 {
            d
        } else {
            f64::INFINITY
        }
    }

    /// Feed-forward duty for battery current `i` (detailed fidelity's controller): the CCM duty
    /// where one delivers `i`; past the fold of the output (large switch and inductor
    /// resistances: no duty delivers `i`) the duty of the most current this input gives, the
    /// vertex p/(2a) of the balance's quadratic, where the two roots meet. So the feed-forward
    /// runs on continuously through the fold instead of jumping to D_max there. At most D_max.
    pub fn feed_forward_duty(&self, v_in: f64, v_o: f64, i: f64) -> f64 {
        let d = self.ccm_duty(v_in, v_o, i);
        if d.is_finite() {
            return d.min(self.max_duty);
        }
        let b = self.off_v(v_o);
        let a = v_in - 2.0 * self.switch_drop_v + b;
        let p = a + b - 2.0 * self.switch_resistance_ohm * i;
        let q = b + self.inductor_resistance_ohm * i;
        if a > 0.0 && p > 0.0 && p * p < 4.0 * a * q {
            (p / (2.0 * a)).min(self.max_duty)
        } else {
            self.max_duty
        }
    }

    /// Input voltage at which the duty for (`v_o`, `i`) reaches D_max: the dropout edge, V.
    pub fn dropout_input_v(&self, v_o: f64, i: f64) -> f64 {
        let d = self.max_duty;
        let i_l = i / (1.0 - d);
        ((1.0 - d) * self.off_v(v_o) + i_l * self.inductor_resistance_ohm) / d
            + 2.0 * self.switch_drop_v
            + 2.0 * i_l * self.switch_resistance_ohm
    }

    /// Battery current passed at duty D_max from input `v_in` into a battery at `v_o`, A (may be
    /// negative: then it passes none): the balance solved for I at fixed V_o.
    pub fn dropout_current_at(&self, v_in: f64, v_o: f64) -> f64 {
        let d = self.max_duty;
        let r = (2.0 * d * self.switch_resistance_ohm + self.inductor_resistance_ohm) / (1.0 - d);
        let drive = d * (v_in - 2.0 * self.switch_drop_v) - (1.0 - d) * self.off_v(v_o);
        drive / r.max(1e-12)
    }

    /// Input current at duty `d`, battery current `i` and input `v_in`, A.
    pub fn input_current_a(&self, d: f64, i: f64, v_in: f64) -> f64 {
        let i_l = i / (1.0 - d).max(1e-9);
        d * i_l
            + self.quiescent_current_a
            + self.switching_fraction() * i_l
            + self.core_current_a(v_in)
    }

    /// Losses at duty `d`, battery current `i`, input `v_in` (CCM balance).
    pub fn losses(&self, d: f64, i: f64, v_in: f64) -> ConverterLosses {
        let i_l = i / (1.0 - d).max(1e-9);
        ConverterLosses {
            switch_w: d * i_l * 2.0 * (self.switch_drop_v + i_l * self.switch_resistance_ohm),
            catch_diode_w: (1.0 - d) * i_l * 2.0 * self.diode_drop_v,
            inductor_w: i_l * i_l * self.inductor_resistance_ohm,
            quiescent_w: v_in * (self.quiescent_current_a - self.overhead.gate_drive_current_a),
            switching_w: v_in * self.switching_fraction() * i_l,
            overhead_w: self.overhead.power_w(v_in),
            pass_w: 0.0,
        }
    }

    /// Duty actually applied, reporting discontinuous conduction when the ripple would reverse
    /// the inductor current: DCM when I_L < a·d·T/(2L), a = V_in − 2V_sw − 2·I_L·R_on; then the
    /// energy per cycle ½·L·i_pk²·f_sw carries the input power: d = √(2·L·I_in/(a·T)) with
    /// I_in = d_ccm·I_L (ideal limit |M| = D/√K, Erickson & Maksimović Table 5.2).
    pub fn reported_duty(&self, v_in: f64, i: f64, d_ccm: f64) -> (f64, bool) {
        if i <= 0.0 || d_ccm >= 1.0 {
            return (d_ccm, false);
        }
        let i_l = i / (1.0 - d_ccm);
        let a = v_in - 2.0 * self.switch_drop_v - 2.0 * i_l * self.switch_resistance_ohm;
        if a <= 0.0 {
            return (d_ccm, false);
        }
        let period = 1.0 / self.switching_frequency_hz;
        if i_l >= a * d_ccm * period / (2.0 * self.inductance_h) {
            return (d_ccm, false);
        }
        let d = (2.0 * self.inductance_h * d_ccm * i_l / (a * period)).sqrt();
        (d.min(d_ccm), true)
    }
}

/// Ideal non-inverting buck-boost CCM conversion ratio M = D/(1 − D)
/// (Erickson & Maksimović ch. 2, magnitude of the inverting form).
pub fn buck_boost_conversion_ratio(d: f64) -> f64 {
    d / (1.0 - d)
}

/// Linear (series-pass) charger: the pass element drops V_in − V_o, the controller sets its
/// current; in dropout the pass element is fully on and acts as a resistance
/// R_pass = V_dropout / I_cc (so the headroom needed at the charge current is the dropout voltage).
/// Input current I + I_q, so the efficiency is V_o·I/(V_in·(I + I_q)) ≈ V_o/V_in.
///
/// The pass element heats: one lumped thermal node, C·dT_j/dt = P − (T_j − T_a)/θ_ja, and the
/// charger folds its current limit back linearly from full at T_fold to zero at T_shutdown.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LinearModel {
    /// Headroom V_in − V_o needed at the charge current, V.
    pub dropout_v: f64,
    /// Pass resistance when fully on, Ω.
    pub pass_resistance_ohm: f64,
    pub quiescent_current_a: f64,
    /// The pass element's thermal node.
    pub thermal: PassThermal,
}

/// Thermal node of a linear charger's pass element and its foldback.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PassThermal {
    /// Junction-to-ambient thermal resistance, K/W.
    pub theta_ja_k_per_w: f64,
    /// Heat capacity, J/K.
    pub heat_capacity_j_per_k: f64,
    /// Foldback starts here, °C.
    pub foldback_c: f64,
    /// The current limit reaches zero here, °C.
    pub shutdown_c: f64,
}

impl PassThermal {
    /// dT_j/dt = (P − (T_j − T_a)/θ_ja)/C, K/s (lumped; steady rise P·θ_ja, time constant θ·C).
    pub fn rate_k_per_s(&self, heat_w: f64, junction_c: f64, ambient_c: f64) -> f64 {
        (heat_w - (junction_c - ambient_c) / self.theta_ja_k_per_w) / self.heat_capacity_j_per_k
    }

    /// Fraction of the charge current allowed at junction temperature T_j:
    /// clamp((T_sd − T_j)/(T_sd − T_fold), 0, 1).
    pub fn foldback(&self, junction_c: f64) -> f64 {
        ((self.shutdown_c - junction_c) / (self.shutdown_c - self.foldback_c)).clamp(0.0, 1.0)
    }
}

impl LinearModel {
    /// Builds the model from the converter configuration.
    pub fn from_config(c: &Converter) -> Self {
        let dropout_v = c.dropout_v.unwrap_or(DEFAULT_DROPOUT_V);
        Self {
            dropout_v,
            pass_resistance_ohm: dropout_v / c.charge_current_a.max(1e-6),
            quiescent_current_a: c.quiescent_current_a,
            thermal: PassThermal {
                theta_ja_k_per_w: c.pass_theta_ja_k_per_w,
                heat_capacity_j_per_k: c.pass_heat_capacity_j_per_k,
                foldback_c: c.pass_foldback_c,
                shutdown_c: c.pass_shutdown_c,
            },
        }
    }

    /// Most current the pass element lets through from `v_in` into `v_o`, A.
    pub fn max_current_a(&self, v_in: f64, v_o: f64) -> f64 {
        ((v_in - v_o) / self.pass_resistance_ohm.max(1e-12)).max(0.0)
    }

    /// Pass-element and quiescent losses at battery current `i`, W.
    pub fn losses(&self, i: f64, v_in: f64, v_o: f64) -> ConverterLosses {
        ConverterLosses {
            pass_w: i * (v_in - v_o),
            quiescent_w: v_in * self.quiescent_current_a,
            ..ConverterLosses::default()
        }
    }
}

/// Dropout voltage of a linear charger when the setup gives none, V.
pub const DEFAULT_DROPOUT_V: f64 = 0.3;
