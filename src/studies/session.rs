//! One charging session end to end: scenario → plant → integration → summary. Every study runs
//! sessions through here.

use std::time::Instant;

use crate::analysis::episodes::{self, Timing};
use crate::analysis::events::{Event, EventKind};
use crate::analysis::invariants::{self, Attempt, Broken, LEDGER_BOUND};
use crate::analysis::summary::{
    self, NimhSummary, ReplaySummary, Summary, SupercapSummary, UsbSummary, Verdict, MARGINAL,
};
use crate::analysis::trace::Trace;
use crate::model::jitter::JitterTrack;
use crate::scenario::alerts::Alerts;
use crate::scenario::limits::MAX_IMPLIED_STEPS;
use crate::scenario::validate::{MIN_MAX_STEP_S, MIN_RTOL};
use crate::scenario::Scenario;
use crate::simulate::engine::initial_state;
use crate::simulate::observe::{
    overcharge_tolerance_v, REGULATION_CAUSES_COUNTED_ONLY, USB_OUT_OF_BAND,
};
use crate::simulate::plant::Plant;
use crate::simulate::{
    simulate_watched, Fidelity, Method, Progress, SimError, SimOptions, SimResult,
};

use super::check_report;

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
    /// The result breaks one of its own laws (analysis::invariants); nothing is written.
    #[error(transparent)]
    Broken(#[from] crate::analysis::invariants::Broken),
    /// The rerun at a tighter tolerance, after the first attempt's ledger did not close, failed
    /// in another way.
    #[error(
        "{source} (in the run again at solver.rtol {:e} and solver.max_step_s {} s, after the \
         energy ledger closed only to {:.2e} at solver.rtol {:e} and solver.max_step_s {} s)",
        rerun.rtol,
        rerun.max_step_s,
        first.energy_balance_error,
        first.rtol,
        first.max_step_s
    )]
    Rerun {
        first: Attempt,
        rerun: Tolerance,
        source: Box<SessionError>,
    },
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
    run_session_watched(sc, rs, method, None)
}

/// The rerun's relative tolerance is the first attempt's divided by this (floored at
/// [`MIN_RTOL`]).
pub const RERUN_RTOL_DIVISOR: f64 = 10.0;

/// The rerun's largest step is the first attempt's divided by this (floored at
/// [`MIN_MAX_STEP_S`] and at the step the session's step limit allows).
pub const RERUN_STEP_DIVISOR: f64 = 2.0;

/// The integrator's tolerance pair a session runs with.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tolerance {
    pub rtol: f64,
    /// Largest step, s.
    pub max_step_s: f64,
}

impl Tolerance {
    /// The setup's pair.
    pub fn of(sc: &Scenario) -> Self {
        Self {
            rtol: sc.setup.solver.rtol,
            max_step_s: sc.setup.solver.max_step_s,
        }
    }

    /// The pair of a rerun: rtol / [`RERUN_RTOL_DIVISOR`], the step / [`RERUN_STEP_DIVISOR`], each
    /// kept inside its validated range, the step also long enough for the session's step limit
    /// over `duration_s` ([`MAX_IMPLIED_STEPS`]); never looser than `self`.
    pub fn tighter(self, duration_s: f64) -> Self {
        let floor_step = MIN_MAX_STEP_S.max(duration_s / MAX_IMPLIED_STEPS);
        Self {
            rtol: (self.rtol / RERUN_RTOL_DIVISOR)
                .max(MIN_RTOL)
                .min(self.rtol),
            max_step_s: (self.max_step_s / RERUN_STEP_DIVISOR)
                .max(floor_step)
                .min(self.max_step_s),
        }
    }

    fn attempt(self, energy_balance_error: f64) -> Attempt {
        Attempt {
            rtol: self.rtol,
            max_step_s: self.max_step_s,
            energy_balance_error,
        }
    }
}

/// Runs one session, storing the simulated time reached in `progress` (for a progress bar).
///
/// When the energy ledger's closure is the only law the result breaks (integration error: SOC in
/// range, every figure finite, the solver done), the whole session is run once more, same seed,
/// profile and overrides, at [`Tolerance::tighter`]; that result is published with
/// `solver.tolerance_reruns` 1, or, if its ledger is still open, the session fails naming both
/// attempts.
pub fn run_session_watched(
    sc: &Scenario,
    rs: &RunSettings,
    method: Method,
    progress: Option<&Progress>,
) -> Result<Session, SessionError> {
    let started = Instant::now();
    let asked = Tolerance::of(sc);
    run_with_one_rerun(asked, session_duration_s(sc, rs), |tol| {
        run_once(sc, rs, method, progress, tol, started)
    })
}

/// The rerun rule of [`run_session_watched`], apart from the integration (`run` runs the
/// session once at a tolerance).
fn run_with_one_rerun(
    asked: Tolerance,
    duration_s: f64,
    mut run: impl FnMut(Tolerance) -> Result<Session, SessionError>,
) -> Result<Session, SessionError> {
    let first = match run(asked) {
        Err(SessionError::Broken(Broken::Ledger { error, .. })) if error.is_finite() => {
            asked.attempt(error)
        }
        other => return other,
    };
    let tighter = asked.tighter(duration_s);
    if tighter == asked {
        // Already at the tightest tolerance: a rerun would repeat the same integration.
        return Err(SessionError::Broken(Broken::Ledger {
            error: first.energy_balance_error,
            bound: LEDGER_BOUND,
        }));
    }
    match run(tighter) {
        Ok(mut s) => {
            for stats in [&mut s.result.stats, &mut s.summary.solver] {
                stats.tolerance_reruns = 1;
                stats.first_attempt = Some(first);
            }
            Ok(s)
        }
        Err(SessionError::Broken(Broken::Ledger { error, bound })) => {
            Err(SessionError::Broken(Broken::LedgerAfterRerun {
                first,
                rerun: tighter.attempt(error),
                bound,
            }))
        }
        Err(e) => Err(SessionError::Rerun {
            first,
            rerun: tighter,
            source: Box::new(e),
        }),
    }
}

/// The session's length, s: the run's duration, else the profile's.
fn session_duration_s(sc: &Scenario, rs: &RunSettings) -> f64 {
    rs.duration_s
        .unwrap_or_else(|| sc.profile.total_duration_s())
}

/// One integration of a session at a tolerance, summarised and held to its laws
/// (`analysis::invariants`). `started`: when the session's work began (its wall time).
fn run_once(
    sc: &Scenario,
    rs: &RunSettings,
    method: Method,
    progress: Option<&Progress>,
    tol: Tolerance,
    started: Instant,
) -> Result<Session, SessionError> {
    let seed = rs.seed.unwrap_or(sc.profile.seed);
    let duration = session_duration_s(sc, rs);
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
        rtol: tol.rtol,
        atol: so.atol,
        max_step_s: tol.max_step_s,
        method,
    };
    let b = &sc.setup.battery;
    let y0 = initial_state(
        &plant,
        b.soc_start,
        b.temp_start_c.unwrap_or(sc.setup.ambient_c),
    );
    let mut result = simulate_watched(&plant, y0, &opts, progress)?;
    if let Some(bad) = first_non_finite(&result) {
        return Err(SessionError::Sim(SimError::NonFinite {
            t_s: bad,
            state: "a trace value is not finite".into(),
        }));
    }
    let wall = started.elapsed().as_secs_f64();
    let mut summary = summarise(sc, &plant, &result, seed, rs.fidelity, wall);
    invariants::check(
        &result.trace,
        summary.soc_end,
        result.duration_s,
        summary.energy_balance_error,
        &summary,
        invariants::soc_slack(opts.rtol),
    )?;
    for row in &mut result.trace.rows {
        row.soc = invariants::clamp_soc(row.soc);
    }
    summary.soc_end = invariants::clamp_soc(summary.soc_end);
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

/// The rows of `events.csv` from a session's runs: the regulation-loss causes that have a row
/// kind of their own are left out, then each kind's dwell and merge gap apply.
pub fn rows_of(runs: &[Event], alerts: &Alerts) -> Vec<Event> {
    let listed: Vec<Event> = runs
        .iter()
        .filter(|e| {
            !(e.kind == EventKind::RegulationLoss
                && REGULATION_CAUSES_COUNTED_ONLY.contains(&e.cause))
        })
        .cloned()
        .collect();
    episodes::rows(&listed, |k| timing(alerts, k))
}

/// Dwell and merge gap of one kind from the setup's `alerts` section.
pub fn timing(a: &Alerts, kind: EventKind) -> Timing {
    let (dwell_s, merge_gap_s) = match kind {
        EventKind::Overcharge => (a.overcharge.dwell_s, a.overcharge.merge_gap_s),
        EventKind::RegulationLoss => (a.regulation_loss.dwell_s, a.regulation_loss.merge_gap_s),
        EventKind::Lockout => (a.lockout.dwell_s, a.lockout.merge_gap_s),
        EventKind::InputOvervoltage => {
            (a.input_overvoltage.dwell_s, a.input_overvoltage.merge_gap_s)
        }
        EventKind::BatteryOvertemp => (a.battery_overtemp.dwell_s, a.battery_overtemp.merge_gap_s),
        EventKind::ChargeTempWindow => (
            a.charge_temp_window.dwell_s,
            a.charge_temp_window.merge_gap_s,
        ),
        EventKind::OperatorOverload => {
            (a.operator_overload.dwell_s, a.operator_overload.merge_gap_s)
        }
        EventKind::DeviceCutoff => (a.device_cutoff.dwell_s, a.device_cutoff.merge_gap_s),
        EventKind::ModelRange => (a.model_range.dwell_s, a.model_range.merge_gap_s),
        EventKind::ThermalFoldback => (a.thermal_foldback.dwell_s, a.thermal_foldback.merge_gap_s),
        EventKind::MissedEndOfCharge => (
            a.missed_end_of_charge.dwell_s,
            a.missed_end_of_charge.merge_gap_s,
        ),
        EventKind::TemperatureRise => (a.temperature_rise.dwell_s, a.temperature_rise.merge_gap_s),
        // A period from the termination to the session end: every one is a row.
        EventKind::ChargeComplete => (0.0, 0.0),
    };
    Timing {
        dwell_s,
        merge_gap_s,
    }
}

/// Rounding allowed at the edge of the overcharge decision band, V: a single cell held at its
/// CV limit lies exactly one tolerance (0.05 V) under the threshold, the band's width, and the
/// difference of the two floats came out a few ulps under it (`marginal`).
const BAND_ROUNDING_V: f64 = 1e-9;

/// The verdict and the reasons for each flag. Overcharge: any overcharge row; regulation: the
/// in-regulation fraction below its minimum. A figure closer to its threshold than the decision
/// band (the agreement stated between the fidelities) is `marginal` instead: the model cannot
/// decide it, a population of operators (`montecarlo`) can.
fn verdict_of(
    alerts: &Alerts,
    rows: &[Event],
    peak_v: f64,
    threshold_at_peak_v: f64,
    in_regulation: Option<f64>,
    setpoint: Option<SetpointPast>,
) -> (Verdict, Vec<String>, bool) {
    let mut flags = Vec::new();
    let mut reasons = Vec::new();
    // A charger set to hold the battery past its limit overcharges it whenever it brings it to
    // full, whether or not this session got there.
    if let Some(sp) = setpoint {
        flags.push("overcharge");
        reasons.push(format!(
            "overcharge: the charger's set point {:.3} V lies {:.3} V past the charge limit {:.3} V in force (tolerance {:.3} V): it drives the battery past its limit whenever it brings it to full",
            sp.setpoint_v,
            sp.setpoint_v - sp.limit_v,
            sp.limit_v,
            sp.tolerance_v
        ));
    }
    let band_v = alerts.overcharge_decision_band_v;
    let over: Vec<&Event> = rows
        .iter()
        .filter(|e| e.kind == EventKind::Overcharge)
        .collect();
    let deepest = over
        .iter()
        .map(|e| e.worst - e.threshold)
        .fold(f64::NEG_INFINITY, f64::max);
    // A full pack still charged (NiMH fast-charged past its end; Li-ion or supercapacitor past
    // full) is overcharged whatever its modelled voltage does.
    let missed: Vec<&Event> = rows
        .iter()
        .filter(|e| e.kind == EventKind::MissedEndOfCharge)
        .collect();
    if !missed.is_empty() {
        flags.push("overcharge");
        let lowest = missed.iter().map(|e| e.worst).fold(f64::INFINITY, f64::min);
        reasons.push(format!(
            "overcharge: {} episode(s) of a full pack still charged, storing as little as {:.0} % of the current (nothing ended the charge)",
            missed.len(),
            100.0 * lowest
        ));
    }
    if !over.is_empty() && deepest >= band_v {
        flags.push("overcharge");
        reasons.push(format!(
            "overcharge: {} episode(s), up to {:.3} V past the threshold",
            over.len(),
            deepest
        ));
    } else if (threshold_at_peak_v - peak_v).abs() < band_v - BAND_ROUNDING_V || !over.is_empty() {
        flags.push(MARGINAL);
        reasons.push(format!(
            "max_battery_v {peak_v:.3} V lies within {band_v:.3} V of the overcharge threshold {threshold_at_peak_v:.3} V"
        ));
    }
    let mut regulation_counts = false;
    if let Some(f) = in_regulation {
        let min = alerts.min_in_regulation_fraction;
        let band = alerts.regulation_decision_band;
        if (f - min).abs() < band {
            flags.push(MARGINAL);
            regulation_counts = true;
            reasons.push(format!(
                "in_regulation_fraction {f:.3} lies within {band:.3} of the {min:.3} threshold"
            ));
        } else if f < min {
            flags.push("fails_regulation");
            regulation_counts = true;
            reasons.push(format!(
                "fails_regulation: in regulation {:.1} % of cranking time, below {:.1} %",
                100.0 * f,
                100.0 * min
            ));
        }
    }
    flags.dedup();
    (Verdict::from_flags(flags), reasons, regulation_counts)
}

/// Lowest mean crank cadence over any [`summary::SUSTAINED_WINDOW_S`] of uninterrupted cranking
/// past the spin-up (trace grid), rpm; None if no such stretch is that long.
fn lowest_sustained_cadence_rpm(plant: &Plant, trace: &Trace) -> Option<f64> {
    let rows = &trace.rows;
    let dt = match rows.get(1) {
        Some(r) => r.time_s - rows[0].time_s,
        None => return None,
    };
    let n = ((summary::SUSTAINED_WINDOW_S / dt).round() as usize).max(1);
    let mut lowest = f64::INFINITY;
    let mut run: Vec<f64> = Vec::new();
    let mut flush = |run: &mut Vec<f64>| {
        if run.len() >= n {
            let mut sum: f64 = run[..n].iter().sum();
            lowest = lowest.min(sum / n as f64);
            for k in n..run.len() {
                sum += run[k] - run[k - n];
                lowest = lowest.min(sum / n as f64);
            }
        }
        run.clear();
    };
    for r in rows {
        if r.target_rpm > 0.0 && plant.spin_up(r.time_s) >= 1.0 {
            run.push(r.crank_rpm);
        } else {
            flush(&mut run);
        }
    }
    flush(&mut run);
    lowest.is_finite().then_some(lowest)
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
    let alerts = &sc.setup.alerts;
    let duration = r.duration_s;
    let cranking = cranking_seconds(plant, duration);
    let regulated = plant.has_converter();
    let regulation_loss = episodes::run_time(&r.runs, EventKind::RegulationLoss);
    let in_regulation = regulated.then(|| {
        if cranking > 0.0 {
            (1.0 - regulation_loss / cranking).clamp(0.0, 1.0)
        } else {
            1.0
        }
    });
    let charging_time = trace.integrate(|row| f64::from(u8::from(row.battery_current_a > 1e-6)));
    let (trace_peak_v, limit_at_peak) = summary::battery_peak(trace);
    // The runs' worst readings see peaks between grid samples.
    let (peak_v, limit_at_peak) = r
        .runs
        .iter()
        .filter(|e| e.kind == EventKind::Overcharge && e.worst > trace_peak_v)
        .fold((trace_peak_v, limit_at_peak), |acc, e| {
            if e.worst > acc.0 {
                (e.worst, e.threshold - overcharge_tolerance_v(plant))
            } else {
                acc
            }
        });
    let threshold_at_peak = limit_at_peak + overcharge_tolerance_v(plant);
    let mut rows = rows_of(&r.runs, alerts);
    let (verdict, verdict_reasons, regulation_counts) = verdict_of(
        alerts,
        &rows,
        peak_v,
        threshold_at_peak,
        in_regulation.filter(|_| cranking > 0.0),
        setpoint_past_limit(plant, trace),
    );
    for e in &mut rows {
        e.affects_verdict = match e.kind {
            EventKind::Overcharge | EventKind::MissedEndOfCharge => true,
            EventKind::RegulationLoss | EventKind::Lockout => regulation_counts,
            _ => false,
        };
    }
    let overcharge_s = episodes::run_time(&r.runs, EventKind::Overcharge);
    let (alert_rows, episode_rows): (Vec<Event>, Vec<Event>) =
        rows.into_iter().partition(|e| e.affects_verdict);
    let fold_max = |f: fn(&crate::analysis::trace::TraceRow) -> f64| {
        trace.rows.iter().map(f).fold(f64::NEG_INFINITY, f64::max)
    };
    let soc_end = r.final_state[crate::simulate::state::SOC];
    let lowest_cadence = lowest_sustained_cadence_rpm(plant, trace);
    let regulation_cadence = if regulated {
        check_report::analyse(sc, plant).regulation_cadence_rpm()
    } else {
        None
    };
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
        regulation_loss_s: regulated.then_some(regulation_loss),
        overcharge_s,
        max_battery_v: peak_v,
        charge_limit_v: limit_at_peak,
        energy_balance_error: led.closure_error(),
        alerts: alert_rows,
        verdict,
        wall_time_s: wall_s,
        overcharge_margin_v: limit_at_peak - peak_v,
        cadence_margin_rpm: match (lowest_cadence, regulation_cadence) {
            (Some(low), Some(need)) => Some(low - need),
            _ => None,
        },
        setup_file: sc.setup_source.name.clone(),
        setup_sha256: sc.setup_source.hash(),
        profile_file: sc.profile_source.name.clone(),
        profile_sha256: sc.profile_source.hash(),
        verdict_reasons,
        episodes: episode_rows,
        alert_rules: alerts.clone(),
        overcharge_threshold_v: threshold_at_peak,
        lowest_sustained_cadence_rpm: lowest_cadence,
        regulation_cadence_rpm: regulation_cadence,
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
        lockout_s: episodes::run_time(&r.runs, EventKind::Lockout),
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
        supercap: supercap_summary(plant, r),
        nimh: nimh_summary(plant, r),
        replay: sc.profile.recording.as_ref().map(|rec| ReplaySummary {
            log: rec.file.clone(),
            samples: rec.time_s.len(),
            span_s: rec.span_s(),
            follows: if sc.profile.imposes_torque() {
                "torque"
            } else {
                "cadence"
            }
            .to_string(),
            resampling: format!(
                "samples closer than {} s averaged, then a monotone cubic (Fritsch-Carlson) through them; the last value holds past the end",
                crate::model::recording::KNOT_SPACING_S
            ),
        }),
    }
}

/// A supercapacitor bank's energy figures over the session (None for the other kinds).
fn supercap_summary(plant: &Plant, r: &SimResult) -> Option<SupercapSummary> {
    let crate::model::battery::BatteryModel::Supercap(m) = &plant.battery else {
        return None;
    };
    let soc_start = r.trace.rows.first().map_or(0.0, |row| row.soc);
    let soc_end = r.final_state[crate::simulate::state::SOC];
    let led = &r.ledger;
    Some(SupercapSummary {
        capacitance_f: m.capacitance_f(),
        rated_v: m.rated_v(),
        voltage_start_v: m.voltage_v(soc_start),
        voltage_end_v: m.voltage_v(soc_end),
        energy_start_wh: m.energy_j(soc_start) / 3600.0,
        energy_end_wh: m.energy_j(soc_end) / 3600.0,
        stored_wh: led.stored_chemical_j / 3600.0,
        min_v: m.min_v(),
        usable_end_wh: m.usable_energy_j(soc_end) / 3600.0,
        usable_fraction: m.usable_fraction(),
        leakage_wh: led.leakage_j / 3600.0,
        esr_wh: led.battery_ohmic_j / 3600.0,
    })
}

/// A NiMH pack's end of charge over the session (None for the other kinds).
fn nimh_summary(plant: &Plant, r: &SimResult) -> Option<NimhSummary> {
    if !plant.battery_is_nimh() {
        return None;
    }
    let end = r
        .runs
        .iter()
        .find(|e| e.kind == EventKind::ChargeComplete && matches!(e.cause, 2 | 3));
    let rows = &r.trace.rows;
    let max_rise = rows
        .windows(2)
        .filter(|w| w[1].time_s > w[0].time_s)
        .map(|w| 60.0 * (w[1].battery_temp_c - w[0].battery_temp_c) / (w[1].time_s - w[0].time_s))
        .fold(0.0, f64::max);
    Some(NimhSummary {
        fast_charge_end_s: end.map(|e| e.start_s),
        fast_charge_end: end.map(|e| {
            if e.cause == 2 {
                "voltage_drop".to_string()
            } else {
                "temperature_rise".to_string()
            }
        }),
        peak_v_per_cell: rows.iter().map(|row| row.battery_v).fold(0.0, f64::max)
            / plant.battery.series_cells(),
        max_temp_rise_c_per_min: max_rise,
        recombination_heat_wh: r.ledger.recombination_heat_j / 3600.0,
    })
}

/// A charger voltage set point past the battery's charge limit.
#[derive(Debug, Clone, Copy, PartialEq)]
struct SetpointPast {
    setpoint_v: f64,
    /// The lowest charge limit in force over the session, V.
    limit_v: f64,
    tolerance_v: f64,
}

/// The charger's own voltage set point (`converter.cv_setpoint_v`) when it lies past the lowest
/// charge limit in force over the session by more than the overcharge tolerance. Such a charger
/// overcharges once the battery is near full; the model's cells store nothing past full (their
/// terminal stays near the limit), so the session's voltage alone would not show it. A charger
/// without its own set point follows the battery's limit and is never past it.
fn setpoint_past_limit(plant: &Plant, trace: &Trace) -> Option<SetpointPast> {
    if !plant.has_converter() || plant.usb.is_some() {
        return None;
    }
    let setpoint_v = plant.charger.cv_setpoint_v?;
    let limit_v = trace
        .rows
        .iter()
        .map(|r| r.charge_limit_v)
        .filter(|v| v.is_finite())
        .fold(f64::INFINITY, f64::min);
    let tolerance_v = overcharge_tolerance_v(plant);
    (limit_v.is_finite() && setpoint_v > limit_v + tolerance_v).then_some(SetpointPast {
        setpoint_v,
        limit_v,
        tolerance_v,
    })
}

/// The bus figures of a session with a USB port (None for a battery output).
fn usb_summary(sc: &Scenario, r: &SimResult) -> Option<UsbSummary> {
    let u = sc.setup.usb.as_ref()?;
    let rows = &r.trace.rows;
    // The same moments the time out of band counts: cranking with the device drawing.
    let lowest = |drawing: bool| {
        rows.iter()
            .filter(|row| !drawing || (row.bus_current_a > 1e-6 && row.target_rpm > 0.0))
            .map(|row| row.bus_v)
            .fold(f64::INFINITY, f64::min)
    };
    let min_bus_v = match lowest(true) {
        v if v.is_finite() => v,
        _ => lowest(false),
    };
    let cutoffs: Vec<&Event> = r
        .runs
        .iter()
        .filter(|e| e.kind == EventKind::DeviceCutoff)
        .collect();
    // A cut-off that lasted to the session end never saw its reconnection.
    let reconnected: Vec<f64> = cutoffs
        .iter()
        .filter(|e| e.end_s < r.duration_s)
        .map(|e| e.duration_s)
        .collect();
    let led = &r.ledger;
    Some(UsbSummary {
        bus_setpoint_v: u.bus_v,
        port_current_a: u.port_current_a,
        band_low_v: u.band_low_v,
        band_high_v: u.band_high_v,
        min_bus_v,
        max_bus_v: rows.iter().map(|row| row.bus_v).fold(0.0, f64::max),
        out_of_band_s: r
            .runs
            .iter()
            .filter(|e| e.kind == EventKind::RegulationLoss && e.cause == USB_OUT_OF_BAND)
            .fold(0.0, |a, e| a + e.duration_s),
        device_cutoffs: cutoffs.len(),
        device_cutoff_s: cutoffs.iter().fold(0.0, |a, e| a + e.duration_s),
        reconnect_delay_s: u.device_reconnect_delay_s,
        observed_reconnect_delay_s: crate::analysis::stats::min_max(&reconnected),
        energy_to_bus_wh: (led.battery_terminal_j + led.device_loss_j) / 3600.0,
        device_loss_wh: led.device_loss_j / 3600.0,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::load::InputKind;
    use crate::scenario::{load_scenario, SourceText};
    use crate::studies::outcome::EXIT_SIM;

    const SHIPPED: Tolerance = Tolerance {
        rtol: 1e-4,
        max_step_s: 0.1,
    };

    fn demo() -> Scenario {
        let s = SourceText::resolve(None, InputKind::Setup).expect("demo setup");
        let p = SourceText::resolve(None, InputKind::Profile).expect("demo profile");
        load_scenario(&s, &p, &[]).expect("demo scenario")
    }

    /// Runs the rerun rule over a stand-in integration that fails with `fail(k, tolerance)` on
    /// its k-th call; returns the outcome and the tolerances it was asked for.
    fn rule(
        asked: Tolerance,
        duration_s: f64,
        fail: impl Fn(usize, Tolerance) -> SessionError,
    ) -> (SessionError, Vec<Tolerance>) {
        let mut calls = Vec::new();
        let r = run_with_one_rerun(asked, duration_s, |tol| {
            calls.push(tol);
            Err(fail(calls.len() - 1, tol))
        });
        match r {
            Err(e) => (e, calls),
            Ok(_) => unreachable!("the stand-in never succeeds"),
        }
    }

    fn ledger(error: f64) -> SessionError {
        SessionError::Broken(Broken::Ledger {
            error,
            bound: LEDGER_BOUND,
        })
    }

    #[test]
    fn a_ledger_still_open_after_the_rerun_fails_with_exit_3_naming_both_attempts() {
        let (e, calls) = rule(SHIPPED, 600.0, |k, _| {
            ledger(if k == 0 { 2.4e-3 } else { 1.5e-3 })
        });
        // Once at the setup's tolerance, once at rtol / 10 and half the step, then no more.
        let tighter = Tolerance {
            rtol: 1e-5,
            max_step_s: 0.05,
        };
        assert_eq!(calls, vec![SHIPPED, tighter]);
        assert!(
            matches!(
                e,
                SessionError::Broken(Broken::LedgerAfterRerun { first, rerun, .. })
                    if first.rtol == 1e-4 && rerun.rtol == 1e-5
            ),
            "{e:?}"
        );
        let f = crate::studies::args::classify(&demo(), Err(e)).expect_err("a failure");
        assert_eq!(f.code(), EXIT_SIM);
        let text = f.to_string();
        assert!(
            text.starts_with(
                "simulation failed: the energy ledger closes only to 2.40e-3 at solver.rtol 1e-4 \
                 and solver.max_step_s 0.1 s, and only to 1.50e-3 when run again at 1e-5 and \
                 0.05 s, past its bound 1e-3"
            ),
            "{text}"
        );
        assert!(text.contains("no result written"), "{text}");
    }

    #[test]
    fn only_a_ledger_open_alone_is_run_again() {
        let others: [fn() -> SessionError; 5] = [
            || {
                SessionError::Broken(Broken::Soc {
                    soc: 1.2,
                    t_s: 30.0,
                })
            },
            || {
                SessionError::Broken(Broken::NonFinite {
                    figure: "max_input_v".into(),
                    value: "NaN".into(),
                })
            },
            || {
                SessionError::Sim(SimError::NonFinite {
                    t_s: 1.0,
                    state: "soc".into(),
                })
            },
            || SessionError::Setup("no plant".into()),
            || ledger(f64::NAN),
        ];
        for make in others {
            let (e, calls) = rule(SHIPPED, 600.0, |_, _| make());
            assert_eq!(calls, vec![SHIPPED], "{e:?} is not rerun");
            assert_eq!(e.to_string(), make().to_string());
        }
    }

    #[test]
    fn a_rerun_that_fails_otherwise_says_why_it_ran() {
        let (e, calls) = rule(SHIPPED, 600.0, |k, _| {
            if k == 0 {
                ledger(1.7e-3)
            } else {
                SessionError::Sim(SimError::NonFinite {
                    t_s: 12.5,
                    state: "soc".into(),
                })
            }
        });
        assert_eq!(calls.len(), 2);
        let f = crate::studies::args::classify(&demo(), Err(e)).expect_err("a failure");
        assert_eq!(f.code(), EXIT_SIM);
        let text = f.to_string();
        assert!(text.contains("non-finite at t = 12.500000 s"), "{text}");
        assert!(
            text.contains(
                "in the run again at solver.rtol 1e-5 and solver.max_step_s 0.05 s, after the \
                 energy ledger closed only to 1.70e-3 at solver.rtol 1e-4 and solver.max_step_s \
                 0.1 s"
            ),
            "{text}"
        );
    }

    #[test]
    fn the_rerun_tolerance_stays_inside_the_validated_ranges() {
        // At both floors there is nothing tighter: one attempt, the plain message.
        let floor = Tolerance {
            rtol: MIN_RTOL,
            max_step_s: MIN_MAX_STEP_S,
        };
        assert_eq!(floor.tighter(600.0), floor);
        let (e, calls) = rule(floor, 600.0, |_, _| ledger(2e-3));
        assert_eq!(calls, vec![floor]);
        assert!(
            matches!(e, SessionError::Broken(Broken::Ledger { .. })),
            "{e:?}"
        );
        // Near the floors each is clamped on its own.
        let near = Tolerance {
            rtol: 5e-10,
            max_step_s: 1.5e-4,
        };
        assert_eq!(
            near.tighter(600.0),
            Tolerance {
                rtol: MIN_RTOL,
                max_step_s: MIN_MAX_STEP_S
            }
        );
        // A long session keeps the step its step limit allows (duration / 1e8 steps).
        let week = crate::scenario::limits::MAX_SESSION_S;
        let t = Tolerance {
            rtol: 1e-4,
            max_step_s: 0.01,
        }
        .tighter(week);
        assert_eq!(t.rtol, 1e-5);
        assert_eq!(t.max_step_s, week / MAX_IMPLIED_STEPS);
        assert!(t.max_step_s > 0.005 && t.max_step_s < 0.01);
    }
}
