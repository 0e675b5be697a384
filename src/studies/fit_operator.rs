//! `fit-operator`: the operator of a crank profile estimated from recorded logs (mean cadence,
//! cadence wander, per-revolution ripple, rests; critical power and W′ when the logs carry the
//! torque), with standard errors. Writes `profile.ron` (usable by `--profile`), `fit.json`,
//! `report.html`. Cost: reading the logs; no simulation.
//!
//! The logs are read as `--profile LOG.csv` reads them (`time_s`, `crank_rpm` or another cadence
//! unit, optional `operator_torque_n_m`); the estimators are in `analysis::operator_fit`.

use std::path::PathBuf;

use anyhow::anyhow;
use clap::Args;
use serde::Serialize;

use super::outcome::{say, Failure, EXIT_OK};
use crate::analysis::operator_fit::{
    self, Estimate, OperatorFit, CP_DURATIONS_S, END_MARGIN_S, SETTLE_S,
};
use crate::model::recording::{Recording, KNOT_SPACING_S};
use crate::output::json::to_json;
use crate::output::report;
use crate::output::rundir::Staging;
use crate::scenario::profile::{Operator, Profile};
use crate::scenario::{replay, validate, SourceText};

use super::pages;

/// Arguments of `fit-operator`.
#[derive(Debug, Clone, Args)]
pub struct FitOperatorArgs {
    /// Crank logs (CSV: time_s, crank_rpm, optional operator_torque_n_m); a run's trace.csv is one.
    #[arg(required = true)]
    pub logs: Vec<PathBuf>,
    /// Output folder (default: outputs/fit-operator).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// The logs are maximal efforts: their critical power and W′ go into profile.ron (otherwise
    /// the profile keeps the default capacities and fit.json reports them only).
    #[arg(long)]
    pub all_out: bool,
    /// Name of the written profile.
    #[arg(long, default_value = "fitted")]
    pub name: String,
    /// Replace the output folder even if crankcharge did not write it (its files are lost).
    #[arg(long)]
    pub force: bool,
}

/// How each figure is estimated (written into fit.json).
#[derive(Debug, Clone, Serialize)]
struct Methods {
    stretches: String,
    mean_cadence: &'static str,
    wander: &'static str,
    ripple: &'static str,
    rests: &'static str,
    critical_power: String,
    standard_errors: &'static str,
}

/// One (duration, mean-maximal power) point.
#[derive(Debug, Clone, Serialize)]
struct DurationPoint {
    duration_s: f64,
    mean_maximal_power_w: f64,
}

/// `fit.json`.
#[derive(Debug, Clone, Serialize)]
struct FitJson<'a> {
    logs: &'a [operator_fit::LogFacts],
    revolutions: usize,
    mean_cadence_rpm: Option<Estimate>,
    wander_rpm: Option<Estimate>,
    wander_time_s: Option<Estimate>,
    ripple: Option<&'a operator_fit::RippleFit>,
    rests: &'a operator_fit::RestFit,
    critical_power_w: Option<Estimate>,
    w_prime_j: Option<Estimate>,
    peak_power_w: Option<f64>,
    power_duration: Vec<DurationPoint>,
    all_out: bool,
    profile_file: &'static str,
    method: Methods,
    notes: Vec<String>,
}

/// Reads one log as `--profile` reads it.
fn read_log(path: &PathBuf) -> Result<Recording, Failure> {
    let name = path.display().to_string();
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Input(anyhow!("could not read '{name}': {e}")))?;
    replay::read(&SourceText {
        name,
        text,
        built_in: false,
    })
    .map_err(|e| Failure::Input(e.into()))
}

/// A value clamped into [lo, hi], with a note when it had to be.
fn within(v: f64, lo: f64, hi: f64, key: &str, notes: &mut Vec<String>) -> f64 {
    let c = v.clamp(lo, hi);
    if c != v {
        notes.push(format!(
            "{key}: the estimate {v:.4} lies outside the profile's range {lo} ..= {hi}; {c} is written"
        ));
    }
    c
}

/// The profile text: the estimates where the logs give them, the defaults elsewhere (each
/// default named in the header comment).
fn profile_text(
    fit: &OperatorFit,
    all_out: bool,
    name: &str,
    files: &[String],
    notes: &mut Vec<String>,
) -> String {
    let d = Operator::default();
    let j = crate::scenario::profile::Jitter::default();
    let mut defaults: Vec<&str> = Vec::new();
    let span = fit.logs.iter().map(|l| l.span_s).fold(0.0, f64::max);
    let duration = within(span, 0.1, 86_400.0, "segments.0.duration_s", notes);
    let cadence = match fit.mean_cadence_rpm {
        Some(e) => within(e.value, 0.0, 400.0, "segments.0.cadence_rpm", notes),
        None => {
            defaults.push("cadence (70 rpm)");
            70.0
        }
    };
    let wander = match fit.wander_rpm {
        Some(e) => within(e.value, 0.0, 100.0, "jitter.wander_rpm", notes),
        None => {
            defaults.push("wander_rpm");
            j.wander_rpm
        }
    };
    let wander_time = match fit.wander_time_s {
        Some(e) => within(e.value, 0.5, 600.0, "jitter.wander_time_s", notes),
        None => {
            defaults.push("wander_time_s");
            j.wander_time_s
        }
    };
    let (ripple, peaks) = match &fit.ripple {
        Some(r) => {
            let a = match r.torque_fraction {
                Some(e) => within(e.value, 0.0, 1.0, "jitter.ripple_fraction", notes),
                None => {
                    defaults.push("ripple_fraction (the logs have no torque)");
                    j.ripple_fraction
                }
            };
            (a, r.peaks_per_rev)
        }
        None => {
            defaults.push("ripple");
            (j.ripple_fraction, j.ripple_peaks_per_rev)
        }
    };
    let (interval, length) = match (fit.rests.interval_s, fit.rests.length_s) {
        (Some(i), Some(l)) => (
            within(i.value, 5.0, 1e5, "jitter.rest_interval_s", notes),
            within(l.value, 0.0, 600.0, "jitter.rest_length_s", notes),
        ),
        _ => (0.0, 0.0),
    };
    let (cp, wp, peak) = match (&fit.power, all_out) {
        (Some(p), true) => {
            let cp = within(
                p.critical_power_w.value,
                5.0,
                500.0,
                "operator.critical_power_w",
                notes,
            );
            let wp = within(
                p.w_prime_j.value,
                0.0,
                100_000.0,
                "operator.w_prime_j",
                notes,
            );
            let peak = within(
                p.peak_power_w.max(cp),
                cp.max(5.0),
                2000.0,
                "operator.peak_power_w",
                notes,
            );
            (cp, wp, peak)
        }
        (None, true) => {
            notes.push("--all-out: the logs give no critical power (see above); the profile keeps the default capacities".into());
            defaults.push("operator capacities");
            (d.critical_power_w, d.w_prime_j, d.peak_power_w)
        }
        (_, false) => {
            defaults.push("operator capacities (pass --all-out for logs of maximal efforts)");
            (d.critical_power_w, d.w_prime_j, d.peak_power_w)
        }
    };
    if let (Some(p), false) = (&fit.power, all_out) {
        if let Some(&(dur, watts)) = p.points.last() {
            if watts > d.critical_power_w {
                notes.push(format!(
                    "the logs hold {watts:.1} W over {:.0} min, above the default critical power {:.0} W written into profile.ron: raise operator.critical_power_w, or pass --all-out if the logs are maximal efforts",
                    dur / 60.0,
                    d.critical_power_w
                ));
            }
        }
    }
    let defaults_line = if defaults.is_empty() {
        "every figure below comes from the logs".to_string()
    } else {
        format!("defaults kept: {}", defaults.join(", "))
    };
    let name = name.replace(['"', '\\'], "_");
    let logs: Vec<String> = files.iter().map(|f| crate::text::excerpt(f, 60)).collect();
    format!(
        "// crankcharge crank profile written by `crankcharge fit-operator` from {n} log(s): {logs}.\n\
         // One segment at the mean cadence for the longest log's length; wander, ripple and rests\n\
         // from the logs (fit.json gives each estimate with its standard error); {defaults_line}.\n\
         (\n    name: \"{name}\",\n    description: \"Fitted by crankcharge fit-operator from {n} log(s)\",\n    seed: 1,\n    segments: [\n        (duration_s: {duration:.3}, cadence_rpm: {cadence:.3}),\n    ],\n    operator: (\n        peak_torque_n_m: {pt},\n        max_cadence_rpm: {mc},\n        critical_power_w: {cp:.2},\n        w_prime_j: {wp:.0},\n        peak_power_w: {peak:.2},\n        tracking_gain_n_m_per_rpm: {kp},\n        tracking_time_s: {ti},\n        spin_up_s: {su},\n    ),\n    jitter: (\n        enabled: true,\n        wander_rpm: {wander:.3},\n        wander_time_s: {wander_time:.3},\n        ripple_fraction: {ripple:.4},\n        ripple_phase_rad: 0.0,\n        ripple_peaks_per_rev: {peaks},\n        rest_interval_s: {interval:.2},\n        rest_length_s: {length:.3},\n    ),\n)\n",
        n = files.len(),
        logs = logs.join(", "),
        pt = d.peak_torque_n_m,
        mc = d.max_cadence_rpm,
        kp = d.tracking_gain_n_m_per_rpm,
        ti = d.tracking_time_s,
        su = d.spin_up_s,
    )
}

fn est_cells(e: Option<Estimate>, digits: usize) -> (String, String) {
    match e {
        Some(e) => (
            format!("{:.digits$}", e.value),
            e.standard_error.map_or_else(String::new, two_significant),
        ),
        None => ("n/a".into(), String::new()),
    }
}

/// A standard error with two significant digits.
fn two_significant(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let decimals = (1 - v.abs().log10().floor() as i32).clamp(0, 12) as usize;
    format!("{v:.decimals$}")
}

/// Executes `fit-operator`.
pub fn run(a: &FitOperatorArgs) -> Result<i32, Failure> {
    let logs: Vec<Recording> = a.logs.iter().map(read_log).collect::<Result<_, _>>()?;
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("outputs").join("fit-operator"));
    let staging =
        Staging::prepare(&out, "fit-operator", a.force).map_err(|e| Failure::Input(e.into()))?;
    let refs: Vec<&Recording> = logs.iter().collect();
    // The torque ripple is read with the tracking gain the written profile keeps.
    let fit = operator_fit::fit(&refs, Operator::default().tracking_gain_n_m_per_rpm);
    let files: Vec<String> = logs.iter().map(|l| l.file.clone()).collect();
    let mut notes = fit.notes.clone();
    let text = profile_text(&fit, a.all_out, &a.name, &files, &mut notes);
    // The written profile must load as any profile does.
    let parsed: Profile = ron::from_str(&text).map_err(|e| {
        Failure::Other(anyhow!(
            "the fitted profile does not parse ({e}); please report this"
        ))
    })?;
    if let Some(v) = validate::profile(&parsed).first() {
        return Err(Failure::Other(anyhow!(
            "the fitted profile breaks a range ({} = {}; allowed {}); please report this",
            v.path,
            v.value,
            v.allowed
        )));
    }
    let power = fit.power.as_ref();
    let json = FitJson {
        logs: &fit.logs,
        revolutions: fit.revolutions,
        mean_cadence_rpm: fit.mean_cadence_rpm,
        wander_rpm: fit.wander_rpm,
        wander_time_s: fit.wander_time_s,
        ripple: fit.ripple.as_ref(),
        rests: &fit.rests,
        critical_power_w: power.map(|p| p.critical_power_w),
        w_prime_j: power.map(|p| p.w_prime_j),
        peak_power_w: power.map(|p| p.peak_power_w),
        power_duration: power.map_or_else(Vec::new, |p| {
            p.points
                .iter()
                .map(|&(d, w)| DurationPoint {
                    duration_s: d,
                    mean_maximal_power_w: w,
                })
                .collect()
        }),
        all_out: a.all_out,
        profile_file: "profile.ron",
        method: Methods {
            stretches: format!(
                "hands on where the torque exceeds 5 % of its median (without torque: the cadence exceeds half its median), stretches under 0.3 s joined to their neighbours; cadence figures leave out {SETTLE_S} s after each start and {END_MARGIN_S} s before each rest"
            ),
            mean_cadence: "whole crank revolutions (angle = trapezoidal integral of the cadence) over the time they took",
            wander: "each log's cadence means over boxes of whole revolutions lasting about 2.5 s, less the log's least-squares line; Ornstein-Uhlenbeck sigma and tau from the lag-1 and lag-2 autocovariances of those box means (gamma(m) = sigma^2 (tau/T)^2 (1 - phi)^2 phi^(m-1), phi = exp(-T/tau), the exact discretisation over one box T); correlation times well under 2.5 s are not resolved",
            ripple: "per stretch, least squares of the cadence on cos(k theta), sin(k theta) (k = 1 ... 4 peaks a turn, as far as the sampling resolves), and with torque of (tau + Kp dw)/tau_rev - 1 on cos and sin (Kp: the profile's tracking gain; the operator's loop answers the speed ripple dw with -Kp dw, which the log's torque carries); the strongest k is kept; weighted mean over stretches",
            rests: "hands-off stretches between two hands-on ones; interval = time with the hands on / rests (Poisson), length from the mean rest length by inverting mean = 0.5 + L exp(-0.5/L) (exponential lengths floored at 0.5 s)",
            critical_power: format!(
                "two-parameter model of Monod & Scherrer (1965), W = W' + CP t, by least squares on the mean-maximal work over {:?} s (those the logs are long enough for); equal to the operator's CP and W' only when the logs hold maximal efforts, lower otherwise",
                CP_DURATIONS_S
            ),
            standard_errors: "delete-one-block jackknife over 10 blocks of revolutions for cadence and wander; spread between stretches for the ripple; 1/sqrt(n) of the Poisson and exponential laws for the rests (delta method for the length); residual variance of the line for CP and W'",
        },
        notes: notes.clone(),
    };
    staging
        .write("profile.ron", text.as_bytes())
        .map_err(|e| Failure::Other(e.into()))?;
    staging
        .write(
            "fit.json",
            &to_json(&json).map_err(|e| Failure::Other(e.into()))?,
        )
        .map_err(|e| Failure::Other(e.into()))?;

    let rows = estimate_rows(&fit);
    let mut facts: Vec<(String, String)> = fit
        .logs
        .iter()
        .map(|l| {
            (
                "log".to_string(),
                format!(
                    "{}: {} samples over {:.1} s, {:.1} s with the hands on, {} rest(s), {} revolutions used{}",
                    l.file,
                    l.samples,
                    l.span_s,
                    l.hands_on_s,
                    l.rests,
                    l.revolutions,
                    if l.has_torque { ", with torque" } else { "" }
                ),
            )
        })
        .collect();
    facts.push((
        "resampling".into(),
        format!("none for the fit (the samples as logged); a replay averages samples closer than {KNOT_SPACING_S} s"),
    ));
    let page = pages::data_page(
        "crankcharge fit-operator",
        &format!("Operator fitted from {} log(s)", logs.len()),
        facts,
        notes.clone(),
        (
            ["figure", "estimate", "standard error", "unit"]
                .map(String::from)
                .to_vec(),
            rows.clone(),
        ),
        Vec::new(),
        vec![("profile.ron (usable by --profile)".into(), text.clone())],
    );
    staging
        .write("report.html", report::render(&page).as_bytes())
        .map_err(|e| Failure::Other(e.into()))?;
    let dir = staging.commit().map_err(|e| Failure::Other(e.into()))?;

    say(&format!(
        "fit-operator: {} log(s), {} whole revolutions with the hands on",
        logs.len(),
        fit.revolutions
    ));
    for r in &rows {
        let se = if r[2].is_empty() {
            String::new()
        } else {
            format!(" ± {}", r[2])
        };
        say(&format!("  {:<34} {}{} {}", r[0], r[1], se, r[3]));
    }
    for n in &notes {
        say(&format!("  note: {n}"));
    }
    say(&format!("  wrote {}", dir.display()));
    Ok(EXIT_OK)
}

/// The table of estimates: figure, value, standard error, unit.
fn estimate_rows(fit: &OperatorFit) -> Vec<Vec<String>> {
    let mut rows = Vec::new();
    let mut push = |name: &str, e: Option<Estimate>, digits: usize, unit: &str| {
        let (v, s) = est_cells(e, digits);
        rows.push(vec![name.to_string(), v, s, unit.to_string()]);
    };
    push("mean cadence", fit.mean_cadence_rpm, 2, "rpm");
    push("wander strength (OU sigma)", fit.wander_rpm, 2, "rpm");
    push(
        "wander correlation time (OU tau)",
        fit.wander_time_s,
        2,
        "s",
    );
    if let Some(r) = &fit.ripple {
        push(
            &format!("cadence ripple ({} a turn)", r.peaks_per_rev),
            Some(r.cadence_amplitude_rpm),
            2,
            "rpm",
        );
        push("torque ripple fraction", r.torque_fraction, 3, "");
    }
    push("rest interval", fit.rests.interval_s, 1, "s");
    push("rest length", fit.rests.length_s, 2, "s");
    if let Some(p) = &fit.power {
        push("critical power", Some(p.critical_power_w), 1, "W");
        push("W'", Some(p.w_prime_j), 0, "J");
        push(
            &format!("peak power ({} s)", operator_fit::PEAK_DURATION_S),
            Some(Estimate {
                value: p.peak_power_w,
                standard_error: None,
            }),
            1,
            "W",
        );
    }
    rows
}
