//! The whole chain assembled from the model parts: one pure evaluation f(t, x, mode) giving every
//! algebraic quantity and the state derivative. Mode (discrete state) is fixed within a segment.

use crate::model::battery::li_ion::TempBand;
use crate::model::battery::nimh;
use crate::model::battery::{BatteryModel, BatteryPowers, BatteryRates, BatteryState, Terminal};
use crate::model::circuit::{self, CircuitConstants, FastRates, FastStates};
use crate::model::controller::{self, ControlInput, ControllerGains};
use crate::model::converter::{BuckBoostModel, BuckModel, LinearModel};
use crate::model::diode::DiodeModel;
use crate::model::drive::DriveModel;
use crate::model::generator::GeneratorModel;
use crate::model::jitter::JitterTrack;
use crate::model::network::{self, Load, NetworkPoint, Source};
use crate::model::operator::OperatorModel;
use crate::model::smooth;
use crate::model::thermal::Lumped;
use crate::model::usb::{BusPoint, UsbModel};
use crate::scenario::profile::Profile;
use crate::scenario::setup::{Alerts, Setup, Topology};
use crate::units::{rad_s_to_rpm, rpm_to_rad_s};

use super::fidelity::Fidelity;
pub use super::mode::{Charger, Discrete, Stage, PEAK_RESOLUTION_V_PER_CELL};
use super::replay::Replay;
use super::state::*;
use super::usb_rules::{device_charger, usb_gains, usb_in_regulation};

/// Crank bearing friction, N·m (acts on the crank side, in the friction ledger).
const CRANK_BEARING_N_M: f64 = 0.05;
/// Speed scale of the bearing friction smoothing, rad/s.
const CRANK_BEARING_SMOOTH: f64 = 0.5;
/// Input over-voltage shutdown releases below this fraction of the limit.
pub const OV_RELEASE_FRACTION: f64 = 0.95;

/// One target-cadence segment in absolute time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TargetSegment {
    pub start_s: f64,
    pub end_s: f64,
    pub start_rpm: f64,
    pub end_rpm: f64,
}

/// Everything the evaluation needs, built once per run.
#[derive(Debug, Clone)]
pub struct Plant {
    pub fidelity: Fidelity,
    pub ambient_c: f64,
    pub generator: GeneratorModel,
    pub diode: DiodeModel,
    pub drive: DriveModel,
    pub buck: BuckModel,
    /// Buck-boost model (used when the topology is `buck_boost`).
    pub buck_boost: BuckBoostModel,
    /// The buck-boost's power stage run as a buck (its buck mode).
    pub buck_boost_as_buck: BuckModel,
    /// Linear charger model (used when the topology is `linear`).
    pub linear: LinearModel,
    pub charger: Charger,
    pub battery: BatteryModel,
    pub winding: Lumped,
    pub operator: OperatorModel,
    pub segments: Vec<TargetSegment>,
    pub cadence_scale: f64,
    /// Operator's own cadence offset (Monte Carlo spread), rpm.
    pub cadence_offset_rpm: f64,
    pub jitter: JitterTrack,
    /// Times at which the operator starts cranking (session start, after rests and planned
    /// pauses), sorted; the target ramps up over `spin_up_s` from each.
    pub crank_starts: Vec<f64>,
    pub spin_up_s: f64,
    pub ripple_fraction: f64,
    pub ripple_phase_rad: f64,
    /// Torque peaks per crank revolution k of the ripple 1 + a·cos(k·θ + φ).
    pub ripple_peaks_per_rev: f64,
    pub alerts: Alerts,
    /// Detailed fidelity: circuit constants and loop gains.
    pub circuit: CircuitConstants,
    pub gains: ControllerGains,
    /// A USB port on the converter output (None: the battery sits there). With a port, `charger`
    /// describes the device's own charger (its current limit, termination) and `battery` its cell.
    pub usb: Option<UsbModel>,
    /// Detailed fidelity with a USB port: loop gains designed for the bus.
    pub usb_gains: Option<ControllerGains>,
    /// A replayed log: the target cadence (and, when it imposes torque, the operator's torque)
    /// comes from the recording; the segments then only say when the hands are on the crank.
    pub replay: Option<Replay>,
}

/// What the charger asks of the converter at one instant.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Request {
    /// Locked out or shut down.
    Off,
    /// Diode-only connection.
    Direct,
    /// Charging: CC limit (after the temperature band), voltage set point, soft-start ramp;
    /// `hold` when charging is refused or done.
    Charge {
        cc_limit_a: f64,
        v_set: f64,
        ramp: f64,
        hold: bool,
    },
}

/// Every algebraic quantity at one (t, x, mode).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Point {
    pub t: f64,
    pub target_rpm: f64,
    pub cranking: bool,
    pub crank_speed: f64,
    pub gen_speed: f64,
    pub emf_v: f64,
    pub net: NetworkPoint,
    pub target_current_a: f64,
    pub cv_active: bool,
    pub charge_limit_v: f64,
    pub operator_torque_n_m: f64,
    pub operator_command_n_m: f64,
    /// Instantaneous operator power τ·ω, ripple included, W.
    pub operator_power_w: f64,
    /// Operator power averaged over a crank revolution, W (see [`Plant::eval`]).
    pub operator_mean_power_w: f64,
    pub crank_accel: f64,
    pub gen_accel: f64,
    pub belt_torque_n_m: f64,
    pub drive_loss_w: f64,
    pub friction_w: f64,
    /// Generator iron loss, W.
    pub iron_w: f64,
    /// Power into the cogging potential (negative while it gives energy back), W.
    pub cogging_w: f64,
    pub copper_w: f64,
    pub winding_ohm: f64,
    pub battery_powers: BatteryPowers,
    /// Rates of SOC, the RC pair and the lead-acid time law.
    pub battery_rates: BatteryRates,
    pub in_regulation: bool,
    /// The converter is enabled but still in its soft-start ramp.
    pub restarting: bool,
    pub band: TempBand,
    /// Input voltage the converter would see at its quiescent draw (what UVLO and sleep compare
    /// before enabling, so that enabling cannot at once undo itself), V.
    pub idle_input_v: f64,
    /// Detailed fidelity: rates of the fast states and of the two loop integrators.
    pub fast_rates: FastRates,
    pub ctrl_rates: (f64, f64),
    /// The converter's output: a USB bus and its device, or the battery terminal.
    pub bus: BusPoint,
}

impl Plant {
    /// Assembles the fast-fidelity plant from a validated setup and profile and the drawn jitter.
    pub fn new(
        setup: &Setup,
        profile: &Profile,
        jitter: JitterTrack,
        cadence_offset_rpm: f64,
    ) -> Result<Self, String> {
        Self::with_fidelity(setup, profile, jitter, cadence_offset_rpm, Fidelity::Fast)
    }

    /// Assembles the plant for the given fidelity.
    pub fn with_fidelity(
        setup: &Setup,
        profile: &Profile,
        jitter: JitterTrack,
        cadence_offset_rpm: f64,
        fidelity: Fidelity,
    ) -> Result<Self, String> {
        let generator = GeneratorModel::from_config(&setup.generator);
        let diode = DiodeModel::from_config(&setup.diode, setup.ambient_c)
            .map_err(|e| format!("diode: {e}"))?;
        let drive = DriveModel::from_config(&setup.drive, generator.inertia_kg_m2);
        let battery = BatteryModel::from_config(&setup.battery);
        let c = &setup.converter;
        let cap = battery.capacity_ah();
        let mut charger = Charger {
            topology: c.topology,
            charge_current_a: c.charge_current_a,
            cv_setpoint_v: c.cv_setpoint_v,
            float_setpoint_v: c.float_setpoint_v,
            // A supercapacitor's charger holds its rated voltage (a current below zero never
            // comes); NiMH ends on −ΔV or dT/dt instead.
            termination_current_a: c.termination_current_a.unwrap_or(match &battery {
                BatteryModel::Supercap(_) | BatteryModel::Nimh(_) => 0.0,
                _ => cap / 10.0,
            }),
            absorption_exit_current_a: c.absorption_exit_current_a.unwrap_or(cap / 50.0),
            absorption_max_s: c.absorption_max_s,
            soft_start_s: c.soft_start_s,
            restart_delay_s: c.restart_delay_s,
            uvlo_on_v: c.uvlo_on_v,
            uvlo_off_v: c.uvlo_off_v,
            input_overvoltage_v: c.input_overvoltage_v,
            overvoltage_shutdown: c.overvoltage_shutdown,
            sleeps_below_battery: c.topology != Topology::BuckBoost,
            sleep_margin_v: if c.topology == Topology::Buck && setup.usb.is_none() {
                c.switch_drop_v
            } else {
                0.0
            },
            input_floor_v: match c.topology {
                Topology::Buck | Topology::BuckBoost => c.input_floor_v,
                _ => None,
            },
            buck_mode_max_duty: match c.topology {
                // A USB bus keeps the buck-boost switching both switches (not modelled in buck
                // mode there).
                Topology::BuckBoost if setup.usb.is_none() => {
                    c.buck_mode_max_duty.unwrap_or((c.max_duty - 0.05).min(0.8))
                }
                _ => 0.0,
            },
            end_drop_v: c
                .end_voltage_drop_mv_per_cell
                .unwrap_or(nimh::DEFAULT_END_DROP_MV_PER_CELL)
                * 1e-3
                * battery.series_cells(),
            end_rise_k_per_s: c
                .end_temp_rise_c_per_min
                .unwrap_or(nimh::DEFAULT_END_RISE_C_PER_MIN)
                / 60.0,
            end_holdoff_s: c.end_holdoff_s.unwrap_or(nimh::DEFAULT_END_HOLDOFF_S),
            trickle_current_a: match &battery {
                BatteryModel::Nimh(m) => c.trickle_current_a.unwrap_or(m.default_trickle_a()),
                _ => 0.0,
            },
        };
        let mut segments = Vec::with_capacity(profile.segments.len());
        let mut t = 0.0;
        for s in &profile.segments {
            segments.push(TargetSegment {
                start_s: t,
                end_s: t + s.duration_s,
                start_rpm: s.cadence_rpm,
                end_rpm: s.end_cadence_rpm.unwrap_or(s.cadence_rpm),
            });
            t += s.duration_s;
        }
        let (ripple_fraction, ripple_phase_rad) = if profile.jitter.enabled {
            (
                profile.jitter.ripple_fraction,
                profile.jitter.ripple_phase_rad,
            )
        } else {
            (0.0, 0.0)
        };
        let mut crank_starts = vec![0.0];
        for w in segments.windows(2) {
            if w[0].end_rpm <= 0.0 && w[1].start_rpm.max(w[1].end_rpm) > 0.0 {
                crank_starts.push(w[1].start_s);
            }
        }
        crank_starts.extend(jitter.rests.iter().map(|r| r.end_s));
        crank_starts.sort_by(f64::total_cmp);
        let buck = BuckModel::from_config(c);
        let start = BatteryState::rested(
            setup.battery.soc_start,
            setup.battery.temp_start_c.unwrap_or(setup.ambient_c),
        );
        // The loops are designed for the battery's largest impedance at their crossover: real
        // chargers compensate for the worst case rather than the start state.
        let slope = battery.crossover_impedance_ohm(&start);
        let v_nominal = c
            .uvlo_on_v
            .max(battery.charge_limit_v(setup.ambient_c) + 2.0);
        // The buck-boost's inductor sees V_in + V_o across a duty step.
        let v_nominal = if c.topology == Topology::BuckBoost {
            v_nominal + battery.charge_limit_v(setup.ambient_c)
        } else {
            v_nominal
        };
        let buck_boost = BuckBoostModel::from_config(c);
        let linear = LinearModel::from_config(c);
        let usb = setup.usb.as_ref().map(UsbModel::from_config);
        if let Some(u) = &setup.usb {
            device_charger(&mut charger, u, cap);
        }
        Ok(Self {
            fidelity,
            circuit: CircuitConstants {
                armature_inductance_h: generator.inductance_h.max(1e-6),
                input_capacitance_f: c.input_capacitance_f,
                output_capacitance_f: c.output_capacitance_f,
            },
            gains: ControllerGains {
                // Input loop: the source's resistance against the battery's slope, at a twentieth
                // of the voltage loop's crossover, well under the armature-inductance/input-capacitor
                // resonance (the charger is a negative resistance to its source).
                input_error_scale: 0.05 * slope
                    / (generator.resistance_20c_ohm
                        + generator.conducting_diodes() * setup.diode.series_resistance_ohm)
                        .max(1e-3),
                ..ControllerGains::design(&buck, v_nominal, slope)
            },
            usb_gains: usb.map(|u| usb_gains(setup, &buck, &u)),
            usb,
            ambient_c: setup.ambient_c,
            generator,
            diode,
            drive,
            buck,
            buck_boost_as_buck: buck_boost.as_buck(),
            buck_boost,
            linear,
            charger,
            battery,
            winding: Lumped {
                heat_capacity_j_per_k: setup.generator.winding_heat_capacity_j_per_k,
                conductance_w_per_k: setup.generator.winding_to_ambient_w_per_k,
            },
            operator: OperatorModel::from_config(&profile.operator),
            segments,
            cadence_scale: profile.cadence_scale,
            cadence_offset_rpm,
            jitter,
            crank_starts,
            spin_up_s: profile.operator.spin_up_s,
            ripple_fraction,
            ripple_phase_rad,
            ripple_peaks_per_rev: f64::from(profile.jitter.ripple_peaks_per_rev),
            alerts: setup.alerts.clone(),
            replay: profile.recording.clone().map(|recording| Replay {
                recording,
                imposes_torque: profile.imposes_torque(),
            }),
        })
    }

    /// Whether the battery is a lithium chemistry.
    pub fn battery_is_lithium(&self) -> bool {
        matches!(self.battery, BatteryModel::LiIon(_))
    }

    /// Whether the battery is a NiMH pack (its charger ends on −ΔV or dT/dt, then trickles).
    pub fn battery_is_nimh(&self) -> bool {
        matches!(self.battery, BatteryModel::Nimh(_))
    }

    /// Rate of the battery temperature at a point, K/s.
    pub fn battery_temp_rate(&self, p: &Point, y: &State) -> f64 {
        self.battery.thermal().rate_k_per_s(
            p.battery_powers.heat_w(),
            y[BATTERY_TEMP],
            self.ambient_c,
        )
    }

    /// Whether the charger is a converter with UVLO and stages (not direct).
    pub fn has_converter(&self) -> bool {
        self.charger.topology != Topology::Direct
    }

    /// Planned target cadence (segments × scale + offset), rpm, and its slope, rpm/s; no wander.
    pub fn planned_rpm(&self, t: f64) -> (f64, f64) {
        let seg = self
            .segments
            .iter()
            .find(|s| t < s.end_s)
            .or(self.segments.last());
        let Some(s) = seg else { return (0.0, 0.0) };
        let len = (s.end_s - s.start_s).max(1e-12);
        let u = ((t - s.start_s) / len).clamp(0.0, 1.0);
        let slope = if t < s.end_s {
            (s.end_rpm - s.start_rpm) / len
        } else {
            0.0
        };
        let rpm = s.start_rpm + (s.end_rpm - s.start_rpm) * u;
        if rpm <= 0.0 {
            return (0.0, 0.0);
        }
        if let Some(r) = &self.replay {
            return r.target_rpm(t, self.cadence_offset_rpm, self.cadence_scale);
        }
        (
            (rpm + self.cadence_offset_rpm).max(0.0) * self.cadence_scale,
            slope * self.cadence_scale,
        )
    }

    /// Times at which the planned target has a kink (segment boundaries, ends of spin-up), s.
    pub fn segment_boundaries(&self) -> impl Iterator<Item = f64> + '_ {
        self.segments
            .iter()
            .map(|s| s.end_s)
            .chain(self.crank_starts.iter().map(|t| t + self.spin_up_s))
    }

    /// The operator's torque envelope at crank speed ω (see `OperatorModel::envelope_n_m`), N·m;
    /// a replay that imposes torque raises it to the recorded torque (the recording is what the
    /// person did), so only the loop's correction meets the envelope.
    pub fn envelope_n_m(&self, t: f64, omega: f64, w_prime_j: f64) -> f64 {
        let env = self.operator.envelope_n_m(omega, w_prime_j);
        match self.replay.as_ref().and_then(|r| r.imposed_torque_n_m(t)) {
            Some(q) => env.max(q),
            None => env,
        }
    }

    /// Spin-up factor 0 … 1: how far the operator has brought the target up since the last start.
    pub fn spin_up(&self, t: f64) -> f64 {
        if self.spin_up_s <= 0.0 {
            return 1.0;
        }
        let k = self.crank_starts.partition_point(|&s| s <= t);
        let since = if k == 0 {
            t
        } else {
            t - self.crank_starts[k - 1]
        };
        (since / self.spin_up_s).clamp(0.0, 1.0)
    }

    /// Battery state view of the state vector.
    pub fn battery_state(y: &State) -> BatteryState {
        BatteryState {
            soc: y[SOC],
            v_rc_v: y[V_RC],
            temp_c: y[BATTERY_TEMP],
            gassing_progress: y[GAS_PROGRESS],
        }
    }

    /// CV (or absorption/float) set point of the battery terminals in force, V.
    pub fn voltage_setpoint_v(&self, d: &Discrete, temp_c: f64) -> f64 {
        if d.stage == Stage::Float {
            if let Some(v) = self.charger.float_setpoint_v {
                return v;
            }
            if let Some(v) = self.battery.float_v(temp_c) {
                return v;
            }
        }
        if let Some(v) = self.charger.cv_setpoint_v {
            return v;
        }
        self.battery.charge_limit_v(temp_c)
    }

    /// Band of the battery temperature (Standard for lead-acid).
    pub fn band(&self, temp_c: f64) -> TempBand {
        match &self.battery {
            BatteryModel::LiIon(m) => m.band(temp_c),
            _ => TempBand::Standard,
        }
    }

    /// Evaluates every algebraic quantity at (t, y) in mode `d`.
    pub fn eval(&self, t: f64, y: &State, d: &Discrete) -> Point {
        let bs = Self::battery_state(y);
        let omega_c = y[CRANK_SPEED];
        let omega_g = y[GEN_SPEED];
        let (planned, slope_rpm) = self.planned_rpm(t);
        let cranking = planned > 0.0 && !d.resting;
        let spin = self.spin_up(t);
        let target_rpm = if cranking {
            (planned + self.jitter.wander_rpm(t) * self.cadence_scale).max(0.0) * spin
        } else {
            0.0
        };

        // Electrical network. The magnets sit at the machine's one lumped temperature (the
        // winding's): E and τ share k_e(T).
        let ke = self.generator.ke_at(y[WINDING_TEMP]);
        let emf = self.generator.emf_at(ke, omega_g);
        let r_w = self.generator.resistance_ohm(y[WINDING_TEMP]);
        let src = Source {
            generator: &self.generator,
            diode: &self.diode,
            emf_v: emf,
            resistance_ohm: r_w,
            commutation_ohm: self.generator.commutation_ohm(omega_g),
        };
        let band = self.band(bs.temp_c);
        let frozen = self.battery.freeze(&bs);
        let term = frozen.terminal();
        let request = self.request(d, y, band);
        let usb_eval = self.usb.as_ref().map(|u| {
            // The device's charger asks for current whether or not the converter runs (it
            // cannot tell until the bus runs down): its request as if the converter were on.
            let device = Discrete {
                enabled: true,
                ov_shutdown: false,
                ..*d
            };
            let device_request = self.request(&device, y, band);
            self.usb_network(u, &src, (t, request, device_request), &term, y, d)
        });
        let (net, target_current, cv_active, fast_rates, ctrl_rates) = match self.fidelity {
            _ if self.usb.is_some() => usb_eval.map_or_else(Default::default, |u| u.electrical),
            Fidelity::Fast => {
                let (load, target, cv) = self.fast_load(request, &term, d);
                (
                    network::solve(&src, load, &term),
                    target,
                    cv,
                    FastRates::default(),
                    (0.0, 0.0),
                )
            }
            Fidelity::Detailed => self.detailed_network(&src, request, &term, y, d),
        };
        let bus = usb_eval.map_or_else(
            || BusPoint::battery(net.battery_v, net.battery_current_a),
            |u| u.bus,
        );
        let charge_limit_v = self.battery.charge_limit_v(bs.temp_c);
        let idle_input_v = match (request, self.fidelity) {
            (Request::Off, Fidelity::Fast) => self.idle_input_v(&src, d),
            _ => net.input_v,
        };

        // Mechanics.
        let tau_em = self
            .generator
            .torque_at(ke, omega_g, net.generator_current_a);
        let tau_fric = self.drive.friction_n_m(omega_g);
        // Iron loss and cogging act on the rotor like friction, but are booked on their own.
        let tau_iron = self.generator.iron_loss_torque_n_m(omega_g);
        let tau_cog = self.generator.cogging_torque_n_m(y[ROTOR_ANGLE]);
        let tau_load = tau_em + tau_fric + tau_iron + tau_cog;
        let bearing = CRANK_BEARING_N_M * smooth::sign(omega_c / CRANK_BEARING_SMOOTH);
        let omega_t = rpm_to_rad_s(target_rpm);
        // The ripple factor 1 + a·cos(k·θ + φ) averages to one over a revolution, so the power
        // averaged over a turn is the un-rippled torque times the crank speed (exact up to the
        // change of speed and command within the turn). The power cap of the envelope acts on
        // it, and it drives the W′ balance: the published W′-balance model (Skiba et al., Med Sci
        // Sports Exerc 44(8):1526–1532, 2012) is fitted to mean power, and driving it with the
        // rippled power would drain W′ at a mean power equal to CP (the asymmetric recovery
        // books the ripple's peaks as work above CP but pays back its troughs slowly).
        let (tau_op, tau_cmd, tau_mean) = if cranking {
            let j_eff = self.drive.crank_inertia_kg_m2
                + self.drive.ratio * self.drive.ratio * self.drive.shaft_inertia_kg_m2
                    / self.drive.efficiency;
            let spin_slope = if spin < 1.0 {
                planned / self.spin_up_s
            } else {
                0.0
            };
            // A replay that imposes torque feeds the recorded torque forward; the same loop then
            // only corrects the drift from the recorded cadence.
            let imposed = self.replay.as_ref().and_then(|r| r.imposed_torque_n_m(t));
            let ff = imposed.unwrap_or_else(|| j_eff * rpm_to_rad_s(slope_rpm * spin + spin_slope));
            let cmd = self
                .operator
                .command_n_m(omega_t, omega_c, y[OP_INTEGRATOR], ff);
            let env = self.envelope_n_m(t, omega_c, y[W_PRIME]);
            let sat = cmd.clamp(0.0, env);
            let ripple = match imposed {
                // The recorded torque carries its own ripple.
                Some(_) => 1.0,
                None => {
                    1.0 + self.ripple_fraction
                        * (self.ripple_peaks_per_rev * y[CRANK_ANGLE] + self.ripple_phase_rad).cos()
                }
            };
            (sat * ripple, cmd, sat)
        } else {
            (0.0, 0.0, 0.0)
        };
        let (crank_accel, gen_accel, belt, drive_loss) = if d.engaged {
            let c = self.drive.coupled(tau_op - bearing, tau_load, omega_c);
            (
                c.crank_accel,
                c.crank_accel * self.drive.ratio,
                c.crank_belt_torque_n_m,
                c.loss_w,
            )
        } else {
            let jc = self.drive.crank_inertia_kg_m2.max(1e-9);
            let js = self.drive.shaft_inertia_kg_m2.max(1e-12);
            ((tau_op - bearing) / jc, -tau_load / js, 0.0, 0.0)
        };

        let (powers, rates) = frozen.flows(net.battery_current_a, net.battery_v);
        // Regulating means holding the set point: locked out, shut down, in dropout, trimming its
        // current to hold an input floor, or still ramping up after a (re)start, a charger is
        // not. A converter that keeps restarting (hiccup) spends its time in the soft-start ramp
        // and is counted out of regulation there.
        let in_regulation = if self.has_converter() {
            d.enabled
                && !d.ov_shutdown
                && d.soft_done
                && !net.floor_limited
                && (!net.dropout || target_current <= 0.0)
        } else {
            true
        };
        let in_regulation = match &self.usb {
            Some(u) => usb_in_regulation(u, d, &bus),
            None => in_regulation,
        };
        Point {
            t,
            target_rpm,
            cranking,
            crank_speed: omega_c,
            gen_speed: omega_g,
            emf_v: emf,
            net,
            target_current_a: target_current,
            cv_active,
            charge_limit_v,
            operator_torque_n_m: tau_op,
            operator_command_n_m: tau_cmd,
            operator_power_w: tau_op * omega_c,
            operator_mean_power_w: tau_mean * omega_c,
            crank_accel,
            gen_accel,
            belt_torque_n_m: belt,
            drive_loss_w: drive_loss,
            friction_w: tau_fric * omega_g + bearing * omega_c,
            iron_w: tau_iron * omega_g,
            cogging_w: tau_cog * omega_g,
            copper_w: net.generator_current_a * net.generator_current_a * r_w,
            winding_ohm: r_w,
            battery_powers: powers,
            battery_rates: rates,
            in_regulation,
            restarting: self.has_converter() && d.enabled && !d.soft_done,
            band,
            idle_input_v,
            fast_rates,
            ctrl_rates,
            bus,
        }
    }

    /// The power stage in mode `d`: the topology as it switches now and the buck model it uses
    /// (a buck-boost in buck mode works as a buck with an always-on output diode).
    pub fn stage(&self, d: &Discrete) -> (Topology, &BuckModel) {
        if self.charger.topology == Topology::BuckBoost && d.buck_mode {
            (Topology::Buck, &self.buck_boost_as_buck)
        } else {
            (self.charger.topology, &self.buck)
        }
    }

    /// Input voltage with the converter enabled but passing nothing (fast fidelity): the source
    /// carrying the stage's quiescent and gate-drive current and its core loss, i = I_q + P_core/v(i)
    /// (a few fixed-point steps; the core current is small and varies slowly with v).
    fn idle_input_v(&self, src: &Source, d: &Discrete) -> f64 {
        let (iq, oh) = match self.stage(d) {
            (Topology::BuckBoost, _) => (
                self.buck_boost.quiescent_current_a,
                self.buck_boost.overhead,
            ),
            (Topology::Linear, _) => (self.linear.quiescent_current_a, Default::default()),
            (_, b) => (b.quiescent_current_a, b.overhead),
        };
        let mut i = iq;
        for _ in 0..3 {
            i = iq + oh.core_current_a(src.node_v(i));
        }
        src.node_v(i)
    }

    /// The converter models as the network sees them in mode `d`.
    pub fn converters(&self, d: &Discrete) -> network::Converters<'_> {
        let (topology, buck) = self.stage(d);
        network::Converters {
            topology,
            buck,
            buck_boost: &self.buck_boost,
            linear: &self.linear,
        }
    }

    /// Fast fidelity: the ideal controller holds min(CC limit, the CV current) at once.
    fn fast_load(&self, r: Request, term: &Terminal, d: &Discrete) -> (Load<'_>, f64, bool) {
        match r {
            Request::Off => (Load::Off, 0.0, false),
            Request::Direct => (Load::Direct, 0.0, false),
            Request::Charge {
                cc_limit_a,
                v_set,
                ramp,
                hold,
            } => {
                let conv = self.converters(d);
                if hold {
                    return (conv.charging(0.0), 0.0, false);
                }
                let i_cv = term.current_at(v_set).max(0.0);
                let target = ramp * cc_limit_a.min(i_cv);
                let load = match self.charger.input_floor_v {
                    Some(floor_v) => Load::Floored {
                        conv,
                        target_a: target,
                        floor_v,
                    },
                    None => conv.charging(target),
                };
                (load, target, i_cv < cc_limit_a)
            }
        }
    }

    /// Detailed fidelity: the network from its integrated states and the two control loops.
    #[allow(clippy::type_complexity)]
    fn detailed_network(
        &self,
        src: &Source,
        r: Request,
        term: &Terminal,
        y: &State,
        d: &Discrete,
    ) -> (NetworkPoint, f64, bool, FastRates, (f64, f64)) {
        let (topology, buck) = self.stage(d);
        let x = FastStates {
            armature_a: y[ARMATURE_I],
            input_v: y[INPUT_V],
            inductor_a: y[INDUCTOR_I],
            output_v: y[OUTPUT_V],
        };
        match r {
            Request::Direct => {
                let (p, rates) =
                    circuit::evaluate(src, &self.circuit, term, circuit::Drive::Direct, &x);
                (p, 0.0, false, rates, (0.0, 0.0))
            }
            Request::Off => {
                let drive = match topology {
                    Topology::BuckBoost => circuit::Drive::BuckBoost {
                        model: &self.buck_boost,
                        duty: 0.0,
                    },
                    Topology::Linear => circuit::Drive::Linear {
                        model: &self.linear,
                        current_a: 0.0,
                        on: false,
                    },
                    _ => circuit::Drive::Off(buck),
                };
                let (p, rates) = circuit::evaluate(src, &self.circuit, term, drive, &x);
                (p, 0.0, false, rates, (0.0, 0.0))
            }
            Request::Charge {
                cc_limit_a,
                v_set,
                ramp,
                hold,
            } => {
                let input = ControlInput {
                    cc_limit_a: if hold { 0.0 } else { cc_limit_a },
                    v_set,
                    ramp,
                    input_v: x.input_v,
                    output_v: x.output_v,
                    inductor_a: x.inductor_a,
                    voltage_integrator: y[CTRL_V],
                    current_integrator: y[CTRL_I],
                    input_floor_v: self.charger.input_floor_v,
                };
                let (out, drive) = match topology {
                    Topology::BuckBoost => {
                        let out =
                            controller::control_buck_boost(&self.gains, &self.buck_boost, &input);
                        let drive = circuit::Drive::BuckBoost {
                            model: &self.buck_boost,
                            duty: out.duty,
                        };
                        (out, drive)
                    }
                    Topology::Linear => {
                        let out = controller::control_linear(&self.gains, &self.linear, &input);
                        let drive = circuit::Drive::Linear {
                            model: &self.linear,
                            current_a: out.current_ref_a,
                            on: true,
                        };
                        (out, drive)
                    }
                    _ => {
                        let out = controller::control(&self.gains, buck, &input);
                        let drive = circuit::Drive::Switching {
                            buck,
                            duty: out.duty,
                        };
                        (out, drive)
                    }
                };
                let (mut p, rates) = circuit::evaluate(src, &self.circuit, term, drive, &x);
                p.dropout = out.saturated;
                p.floor_limited = out.floor_limited;
                (
                    p,
                    out.current_ref_a,
                    out.cv_active && !hold,
                    rates,
                    (out.voltage_rate, out.current_rate),
                )
            }
        }
    }

    /// A linear charger's thermal foldback: the fraction of its current limit its pass element's
    /// junction temperature allows (1 for the other topologies).
    pub fn foldback(&self, y: &State) -> f64 {
        if self.charger.topology == Topology::Linear {
            self.linear.thermal.foldback(y[JUNCTION_TEMP])
        } else {
            1.0
        }
    }

    /// What the charger asks for in mode `d` at state `y` (battery temperature in `band`).
    fn request(&self, d: &Discrete, y: &State, band: TempBand) -> Request {
        if !self.has_converter() {
            return Request::Direct;
        }
        if !d.enabled || d.ov_shutdown {
            return Request::Off;
        }
        let hold = matches!(band, TempBand::TooCold | TempBand::TooHot) || d.stage == Stage::Done;
        let fraction = match (&self.battery, band) {
            (BatteryModel::LiIon(m), TempBand::Cool) => m.window.cool_current_fraction,
            _ => 1.0,
        };
        let cc_a = if d.stage == Stage::Trickle {
            self.charger.trickle_current_a
        } else {
            self.charger.charge_current_a
        };
        Request::Charge {
            cc_limit_a: cc_a * fraction * self.foldback(y),
            v_set: self.voltage_setpoint_v(d, y[BATTERY_TEMP]),
            ramp: if d.soft_done {
                1.0
            } else {
                y[SOFT_START].clamp(0.0, 1.0)
            },
            hold,
        }
    }

    /// State derivative at a point (pure: depends on `p`, `y` and `d` only).
    pub fn derivatives(&self, p: &Point, y: &State, d: &Discrete, dy: &mut State) {
        let ib = p.net.battery_current_a;
        let ig = p.net.generator_current_a;
        dy[CRANK_ANGLE] = y[CRANK_SPEED];
        dy[CRANK_SPEED] = p.crank_accel;
        dy[GEN_SPEED] = p.gen_accel;
        dy[OP_INTEGRATOR] = if p.cranking {
            let env = self.envelope_n_m(p.t, p.crank_speed, y[W_PRIME]);
            let sat = p.operator_command_n_m.clamp(0.0, env);
            self.operator.integrator_rate(
                rpm_to_rad_s(p.target_rpm),
                p.crank_speed,
                p.operator_command_n_m,
                sat,
            )
        } else {
            -y[OP_INTEGRATOR] / self.operator.ti_s
        };
        dy[W_PRIME] = self
            .operator
            .w_prime_rate(p.operator_mean_power_w.max(0.0), y[W_PRIME]);
        dy[SOC] = p.battery_rates.soc;
        dy[V_RC] = p.battery_rates.v_rc;
        dy[GAS_PROGRESS] = p.battery_rates.progress;
        dy[BATTERY_TEMP] = self.battery_temp_rate(p, y);
        dy[WINDING_TEMP] = self
            .winding
            .rate_k_per_s(p.copper_w, y[WINDING_TEMP], self.ambient_c);
        dy[SOFT_START] =
            if self.has_converter() && d.enabled && !d.soft_done && self.charger.soft_start_s > 0.0
            {
                1.0 / self.charger.soft_start_s
            } else {
                0.0
            };
        dy[E_OPERATOR] = p.operator_power_w;
        dy[E_DRIVE] = p.drive_loss_w;
        dy[E_FRICTION] = p.friction_w;
        dy[E_COPPER] = p.copper_w;
        dy[E_BRUSH] = p.net.brush_v * ig;
        dy[E_DIODE] = p.net.diode_v * ig;
        let losses = &p.net.losses;
        dy[E_CONVERTER] = losses.total_w() - losses.overhead_w - losses.pass_w;
        dy[E_BATTERY_TERMINAL] = p.net.battery_v * ib;
        dy[E_BATTERY_OHMIC] = p.battery_powers.ohmic_w;
        dy[E_BATTERY_COULOMBIC] = p.battery_powers.coulombic_loss_w;
        dy[E_STORED] = p.battery_powers.stored_w;
        dy[Q_BATTERY] = ib;
        dy[ARMATURE_I] = p.fast_rates.armature;
        dy[INPUT_V] = p.fast_rates.input;
        dy[INDUCTOR_I] = p.fast_rates.inductor;
        dy[OUTPUT_V] = p.fast_rates.output;
        dy[CTRL_V] = p.ctrl_rates.0;
        dy[CTRL_I] = p.ctrl_rates.1;
        dy[E_DEVICE] = p.bus.device_loss_w;
        dy[E_GAS] = p.battery_powers.gas_w;
        dy[ROTOR_ANGLE] = y[GEN_SPEED];
        dy[JUNCTION_TEMP] =
            self.linear
                .thermal
                .rate_k_per_s(losses.pass_w, y[JUNCTION_TEMP], self.ambient_c);
        dy[E_IRON] = p.iron_w;
        dy[E_OVERHEAD] = losses.overhead_w;
        dy[E_PASS] = losses.pass_w;
        dy[E_COGGING] = p.cogging_w;
        dy[E_RECOMBINATION] = p.battery_powers.recombination_w;
        dy[E_LEAKAGE] = p.battery_powers.leakage_w;
    }

    /// Energy in the fast electrical elements (detailed fidelity; 0 for fast), J.
    pub fn field_energy_j(&self, y: &State) -> f64 {
        match self.fidelity {
            Fidelity::Fast => 0.0,
            Fidelity::Detailed => circuit::field_energy_j(
                &self.circuit,
                self.buck.inductance_h,
                &FastStates {
                    armature_a: y[ARMATURE_I],
                    input_v: y[INPUT_V],
                    inductor_a: y[INDUCTOR_I],
                    output_v: y[OUTPUT_V],
                },
            ),
        }
    }

    /// Potential energy of the generator's cogging, J.
    pub fn cogging_j(&self, y: &State) -> f64 {
        self.generator.cogging_energy_j(y[ROTOR_ANGLE])
    }

    /// Kinetic energy of crank and shaft, J.
    pub fn kinetic_j(&self, y: &State) -> f64 {
        0.5 * self.drive.crank_inertia_kg_m2 * y[CRANK_SPEED].powi(2)
            + 0.5 * self.drive.shaft_inertia_kg_m2 * y[GEN_SPEED].powi(2)
    }

    /// Crank cadence, rpm.
    pub fn crank_rpm(y: &State) -> f64 {
        rad_s_to_rpm(y[CRANK_SPEED])
    }
}
