//! The static network of a design: operating points at a crank cadence with the winding and
//! magnets at ambient, and the cadence searches `check` and its USB figures build on.

use crate::model::battery::BatteryState;
use crate::model::network::{self, Load, NetworkPoint, Source};
use crate::scenario::setup::Topology;
use crate::simulate::plant::Plant;
use crate::units::{rad_s_to_rpm, rpm_to_rad_s};

/// Highest crank cadence searched, rpm (well above what a person can hold).
pub const MAX_SEARCH_RPM: f64 = 600.0;
/// Coarse scan step of the cadence searches, rpm.
const SCAN_STEP_RPM: f64 = 0.5;
/// Resolution of the bisection after the scan, rpm.
const BISECT_TOL_RPM: f64 = 1e-3;
/// The static network of a plant: what is needed to solve operating points at a cadence.
pub struct Statics<'a> {
    pub plant: &'a Plant,
    /// Armature resistance with the winding at ambient, Ω.
    pub resistance_ohm: f64,
    /// Back-EMF constant with the magnets at ambient, V·s/rad.
    pub ke_v_s_per_rad: f64,
}

impl Statics<'_> {
    /// Open-circuit EMF at a crank cadence, V.
    pub fn emf_v(&self, crank_rpm: f64) -> f64 {
        self.ke_v_s_per_rad * rpm_to_rad_s(crank_rpm) * self.plant.drive.ratio
    }

    /// Crank cadence at which the open-circuit EMF equals `v`, rpm.
    pub fn cadence_for_emf(&self, v: f64) -> f64 {
        rad_s_to_rpm(v / self.ke_v_s_per_rad / self.plant.drive.ratio)
    }

    /// The generator side at a crank cadence (winding at ambient).
    pub fn source(&self, crank_rpm: f64) -> Source<'_> {
        Source {
            generator: &self.plant.generator,
            diode: &self.plant.diode,
            emf_v: self.emf_v(crank_rpm),
            resistance_ohm: self.resistance_ohm,
            commutation_ohm: self
                .plant
                .generator
                .commutation_ohm(rpm_to_rad_s(crank_rpm) * self.plant.drive.ratio),
        }
    }

    /// The design's converter models (a buck-boost switching both sides).
    pub fn converters(&self) -> network::Converters<'_> {
        network::Converters {
            topology: self.plant.charger.topology,
            buck: &self.plant.buck,
            buck_boost: &self.plant.buck_boost,
            linear: &self.plant.linear,
        }
    }

    pub fn solve(&self, crank_rpm: f64, load: Load, bs: &BatteryState) -> NetworkPoint {
        let term = self.plant.battery.static_terminal(bs);
        network::solve(&self.source(crank_rpm), load, &term)
    }

    /// The charger asking for `target_a` at a cadence: a buck-boost as a buck where the buck duty
    /// this needs stays within its buck-mode limit (as it runs there), else switching both.
    pub fn charging(&self, crank_rpm: f64, target_a: f64, bs: &BatteryState) -> NetworkPoint {
        let limit = self.plant.charger.buck_mode_max_duty;
        if self.plant.charger.topology == Topology::BuckBoost && limit > 0.0 {
            let as_buck = network::Converters {
                topology: Topology::Buck,
                buck: &self.plant.buck_boost_as_buck,
                ..self.converters()
            };
            let p = self.solve(crank_rpm, self.with_floor(as_buck, target_a), bs);
            if !p.dropout && p.balance_duty <= limit {
                return p;
            }
        }
        self.solve(crank_rpm, self.buck(target_a), bs)
    }

    /// The charger asking for `target_a`, trimming it to hold its input floor when it has one.
    pub fn buck(&self, target_a: f64) -> Load<'_> {
        self.with_floor(self.converters(), target_a)
    }

    /// `conv` asking for `target_a`, trimming it to hold the input floor when there is one.
    fn with_floor<'a>(&self, conv: network::Converters<'a>, target_a: f64) -> Load<'a> {
        match self.plant.charger.input_floor_v {
            Some(floor_v) => Load::Floored {
                conv,
                target_a,
                floor_v,
            },
            None => conv.charging(target_a),
        }
    }

    /// Whether the converter runs and holds `target_a` at a cadence (UVLO released by the open
    /// circuit, input above the UVLO off threshold under load, not in dropout, and not trimmed
    /// below the target to hold an input floor).
    pub fn holds(&self, crank_rpm: f64, target_a: f64, bs: &BatteryState) -> bool {
        let c = &self.plant.charger;
        let oc = self.emf_v(crank_rpm);
        if oc < c.uvlo_on_v || (c.overvoltage_shutdown && oc > c.input_overvoltage_v) {
            return false;
        }
        let p = self.charging(crank_rpm, target_a, bs);
        !p.dropout && p.input_v >= c.uvlo_off_v && p.battery_current_a >= target_a * (1.0 - 1e-9)
    }

    /// Steady torque the crank must give at a cadence for a generator current (electromagnetic
    /// torque, shaft friction and iron loss; cogging averages to zero over a turn), N·m.
    pub fn crank_torque_n_m(&self, crank_rpm: f64, generator_current_a: f64) -> f64 {
        let d = &self.plant.drive;
        let g = &self.plant.generator;
        let omega_g = rpm_to_rad_s(crank_rpm) * d.ratio;
        (g.torque_at(self.ke_v_s_per_rad, omega_g, generator_current_a)
            + d.friction_n_m(omega_g)
            + g.iron_loss_torque_n_m(omega_g))
            * d.ratio
            / d.efficiency
    }
}

/// Lowest cadence in [0, MAX_SEARCH_RPM] at which `pred` holds (scan, then bisection); None if
/// it never holds there.
pub fn first_cadence(pred: impl Fn(f64) -> bool) -> Option<f64> {
    if pred(0.0) {
        return Some(0.0);
    }
    let steps = (MAX_SEARCH_RPM / SCAN_STEP_RPM).round() as usize;
    let mut lo = 0.0;
    let hi = (1..=steps).map(|k| k as f64 * SCAN_STEP_RPM).find(|&c| {
        let ok = pred(c);
        if !ok {
            lo = c;
        }
        ok
    })?;
    let (mut lo, mut hi) = (lo, hi);
    while hi - lo > BISECT_TOL_RPM {
        let mid = 0.5 * (lo + hi);
        if pred(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Some(hi)
}
