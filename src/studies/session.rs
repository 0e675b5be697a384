//! One charging session end to end: scenario → plant → integration → summary. Every study runs
//! sessions through here.

use std::time::Instant;

use crate::analysis::events::{EventKind, OUT_OF_BAND_DETAIL};
use crate::analysis::summary::{self, Summary, UsbSummary, Verdict};
use crate::model::jitter::JitterTrack;
use crate::scenario::Scenario;
use crate::simulate::engine::initial_state;
use crate::simulate::plant::Plant;
use crate::simulate::{simulate, Fidelity, Method, SimError, SimOptions, SimResult};

/// How to run a session beyond what the files say.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RunSettings {
    /// Session length, s; None: the profile's total duration.
    pub duration_s: Option<f64>,
    /// Seed of the jitter; None: the profile's seed.
    pub seed: Option<u64>,
    pub fidelity: Fidelity,
    /// Operator's own cadence offset (Monte Carlo draws), rpm.
    pub cadence_offset_rpm: f64,
}

impl Default for RunSettings {
    fn default() -> Self {
        Self {
            duration_s: None,
            seed: None,
            fidelity: Fidelity::Fast,
            cadence_offset_rpm: 0.0,
        }
    }
}

/// Most trace rows kept in memory; longer sessions get a proportionally coarser grid, so memory
/// stays bounded (≈ 30 MB) however long the session.
pub const MAX_TRACE_ROWS: f64 = 72_000.0;

/// The trace grid actually used: the setup's interval, widened to keep at most
/// [`MAX_TRACE_ROWS`] rows (a 2-h session keeps 0.1 s; 8 h gets 0.4 s).
pub fn trace_interval_s(requested_s: f64, duration_s: f64) -> f64 {
    requested_s.max(duration_s / MAX_TRACE_ROWS)
}

/// A finished session: the raw result and its summary.
#[derive(Debug, Clone)]
pub struct Session {
    pub result: SimResult,
    pub summary: Summary,
}

/// Why a session could not be run.
#[derive(Debug, thiserror::Error)]
pub enum SessionError {
    #[error("{0}")]
    Setup(String),
    #[error(transparent)]
    Sim(#[from] SimError),
}

/// Runs one session and summarises it.
pub fn run_session(sc: &Scenario, rs: &RunSettings) -> Result<Session, SessionError> {
    run_session_with(sc, rs, Method::for_fidelity(rs.fidelity))
}

/// Runs one session with a given integration method (the benchmark compares them; every study
/// uses [`run_session`]).
pub fn run_session_with(
    sc: &Scenario,
    rs: &RunSettings,
    method: Method,
) -> Result<Session, SessionError> {
    let started = Instant::now();
    let seed = rs.seed.unwrap_or(sc.profile.seed);
    let duration = rs
        .duration_s
        .unwrap_or_else(|| sc.profile.total_duration_s());
    let jitter = JitterTrack::draw(&sc.profile.jitter, seed, duration);
    let plant = Plant::with_fidelity(
        &sc.setup,
        &sc.profile,
        jitter,
        rs.cadence_offset_rpm,
        rs.fidelity,
    )
    .map_err(SessionError::Setup)?;
    let so = &sc.setup.solver;
    let opts = SimOptions {
        duration_s: duration,
        fidelity: rs.fidelity,
        trace_interval_s: trace_interval_s(so.trace_interval_s, duration),
        rtol: so.rtol,
        atol: so.atol,
        max_step_s: so.max_step_s,
        method,
    };
    let b = &sc.setup.battery;
    let y0 = initial_state(
        &plant,
        b.soc_start,
        b.temp_start_c.unwrap_or(sc.setup.ambient_c),
    );
    let result = simulate(&plant, y0, &opts)?;
    if let Some(bad) = first_non_finite(&result) {
        return Err(SessionError::Sim(SimError::NonFinite {
            t_s: bad,
            state: "a trace value is not finite".into(),
        }));
    }
    let wall = started.elapsed().as_secs_f64();
    let summary = summarise(sc, &plant, &result, seed, rs.fidelity, wall);
    Ok(Session { result, summary })
}

/// Time of the first trace row with a non-finite number, if any.
fn first_non_finite(r: &SimResult) -> Option<f64> {
    r.trace.rows.iter().find_map(|row| {
        let v = [
            row.crank_rpm,
            row.target_rpm,
            row.generator_rpm,
            row.emf_v,
            row.generator_current_a,
            row.input_v,
            row.duty,
            row.output_v,
            row.battery_v,
            row.battery_current_a,
            row.soc,
            row.battery_temp_c,
            row.operator_power_w,
            row.operator_mean_power_w,
            row.junction_temp_c,
            row.charge_limit_v,
            row.operator_torque_n_m,
            row.w_prime_balance_j,
            row.winding_temp_c,
            row.bus_v,
            row.bus_current_a,
        ];
        v.iter().any(|x| !x.is_finite()).then_some(row.time_s)
    })
}

/// Seconds of the session during which the operator means to crank (planned target > 0, not
/// resting): the cranking segments (the last target holds past the end) minus the rests.
pub fn cranking_seconds(plant: &Plant, duration_s: f64) -> f64 {
    if plant.cadence_scale <= 0.0 {
        return 0.0;
    }
    let mut spans: Vec<(f64, f64)> = plant
        .segments
        .iter()
        .filter(|s| s.start_rpm.max(s.end_rpm) > 0.0)
        .map(|s| (s.start_s, s.end_s))
        .collect();
    if let Some(last) = plant.segments.last() {
        if last.end_rpm > 0.0 && duration_s > last.end_s {
            spans.push((last.end_s, duration_s));
        }
    }
    spans
        .iter()
        .map(|&(a, b)| {
            let (a, b) = (a.max(0.0), b.min(duration_s));
            if b <= a {
                return 0.0;
            }
            let rested: f64 = plant
                .jitter
                .rests
                .iter()
                .map(|r| (r.end_s.min(b) - r.start_s.max(a)).max(0.0))
                .sum();
            b - a - rested
        })
        .sum::<f64>()
        .max(0.0)
}

fn summarise(
    sc: &Scenario,
    plant: &Plant,
    r: &SimResult,
    seed: u64,
    fidelity: Fidelity,
    wall_s: f64,
) -> Summary {
    let trace = &r.trace;
    let led = &r.ledger;
    let duration = r.duration_s;
    let cranking = cranking_seconds(plant, duration);
    let regulation_loss = summary::total_duration(&r.events, EventKind::RegulationLoss);
    let in_regulation = if cranking > 0.0 {
        (1.0 - regulation_loss / cranking).clamp(0.0, 1.0)
    } else {
        1.0
    };
    let charging_time = trace.integrate(|row| f64::from(u8::from(row.battery_current_a > 1e-6)));
    let (peak_v, limit_at_peak) = summary::battery_peak(trace);
    let max_event_v = r
        .events
        .iter()
        .filter(|e| e.kind == EventKind::Overcharge)
        .map(|e| e.peak)
        .fold(f64::NEG_INFINITY, f64::max);
    let overcharge_s = summary::total_duration(&r.events, EventKind::Overcharge);
    let mut flags = Vec::new();
    if r.events.iter().any(|e| e.kind == EventKind::Overcharge) {
        flags.push("overcharge");
    }
    if plant.has_converter()
        && cranking > 0.0
        && in_regulation < sc.setup.alerts.min_in_regulation_fraction
    {
        flags.push("fails_regulation");
    }
    let fold_max = |f: fn(&crate::analysis::trace::TraceRow) -> f64| {
        trace.rows.iter().map(f).fold(f64::NEG_INFINITY, f64::max)
    };
    let soc_end = r.final_state[crate::simulate::state::SOC];
    Summary {
        setup: sc.setup.name.clone(),
        profile: sc.profile.name.clone(),
        seed,
        duration_s: duration,
        fidelity: fidelity.as_str().to_string(),
        soc_start: sc.setup.battery.soc_start,
        soc_end,
        charge_delivered_ah: led.charge_as / 3600.0,
        energy_to_battery_wh: led.battery_terminal_j / 3600.0,
        operator_work_j: led.operator_work_j,
        mean_operator_power_w: if duration > 0.0 {
            led.operator_work_j / duration
        } else {
            0.0
        },
        peak_operator_power_w: fold_max(|r| r.operator_mean_power_w).max(0.0),
        in_regulation_fraction: in_regulation,
        regulation_loss_s: regulation_loss,
        overcharge_s,
        max_battery_v: peak_v.max(max_event_v),
        charge_limit_v: limit_at_peak,
        energy_balance_error: led.closure_error(),
        alerts: r
            .events
            .iter()
            .filter(|e| e.kind.is_alert())
            .cloned()
            .collect(),
        verdict: Verdict::from_flags(flags),
        wall_time_s: wall_s,
        trace_interval_s: trace_interval_s(sc.setup.solver.trace_interval_s, duration),
        topology: sc.setup.converter.topology.as_str().to_string(),
        chemistry: sc.setup.battery.chemistry.as_str().to_string(),
        output: sc.setup.output_word().to_string(),
        cranking_s: cranking,
        charging_fraction: if cranking > 0.0 {
            (charging_time / cranking).min(1.0)
        } else {
            0.0
        },
        lockout_s: summary::total_duration(&r.events, EventKind::Lockout),
        max_input_v: fold_max(|r| r.input_v),
        max_battery_temp_c: fold_max(|r| r.battery_temp_c),
        efficiency_crank_to_battery: if led.operator_work_j > 0.0 {
            led.battery_terminal_j / led.operator_work_j
        } else {
            0.0
        },
        overrides: sc
            .overrides
            .iter()
            .map(|o| format!("{}={}", o.key, o.value))
            .collect(),
        ledger: *led,
        solver: r.stats,
        usb: usb_summary(sc, r),
        peak_instant_operator_power_w: fold_max(|r| r.operator_power_w).max(0.0),
    }
}

/// The bus figures of a session with a USB port (None for a battery output).
fn usb_summary(sc: &Scenario, r: &SimResult) -> Option<UsbSummary> {
    let u = sc.setup.usb.as_ref()?;
    let rows = &r.trace.rows;
    let lowest = |drawing: bool| {
        rows.iter()
            .filter(|row| !drawing || row.bus_current_a > 1e-6)
            .map(|row| row.bus_v)
            .fold(f64::INFINITY, f64::min)
    };
    let min_bus_v = match lowest(true) {
        v if v.is_finite() => v,
        _ => lowest(false),
    };
    let cutoffs = r
        .events
        .iter()
        .filter(|e| e.kind == EventKind::DeviceCutoff);
    let led = &r.ledger;
    Some(UsbSummary {
        bus_setpoint_v: u.bus_v,
        port_current_a: u.port_current_a,
        band_low_v: u.band_low_v,
        band_high_v: u.band_high_v,
        min_bus_v,
        max_bus_v: rows.iter().map(|row| row.bus_v).fold(0.0, f64::max),
        out_of_band_s: r
            .events
            .iter()
            .filter(|e| {
                e.kind == EventKind::RegulationLoss && e.detail.starts_with(OUT_OF_BAND_DETAIL)
            })
            .fold(0.0, |a, e| a + e.duration_s),
        device_cutoffs: cutoffs.clone().count(),
        device_cutoff_s: cutoffs.fold(0.0, |a, e| a + e.duration_s),
        energy_to_bus_wh: (led.battery_terminal_j + led.device_loss_j) / 3600.0,
        device_loss_wh: led.device_loss_j / 3600.0,
    })
}
