//! The one-line-per-figure summary of a session (`summary.json`) and its verdict.

use serde::Serialize;

use super::events::Event;
use super::ledger::{Ledger, SolverStats};
use super::trace::Trace;
use crate::scenario::alerts::Alerts;

/// Verdict of a run: `ok`, one flag, or a list of flags.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(untagged)]
pub enum Verdict {
    One(String),
    Many(Vec<String>),
}

impl Verdict {
    /// Builds the verdict from its flags (`ok` when none).
    pub fn from_flags(flags: Vec<&str>) -> Self {
        match flags.len() {
            0 => Verdict::One("ok".into()),
            1 => Verdict::One(flags[0].into()),
            _ => Verdict::Many(flags.into_iter().map(String::from).collect()),
        }
    }

    /// Whether the design was flagged.
    pub fn flagged(&self) -> bool {
        !matches!(self, Verdict::One(s) if s == "ok")
    }

    /// Whether the verdict holds the flag `word`.
    pub fn has(&self, word: &str) -> bool {
        match self {
            Verdict::One(s) => s == word,
            Verdict::Many(v) => v.iter().any(|s| s == word),
        }
    }

    /// The flags as words.
    pub fn words(&self) -> Vec<String> {
        match self {
            Verdict::One(s) => vec![s.clone()],
            Verdict::Many(v) => v.clone(),
        }
    }
}

/// The contract keys of `summary.json`, then extras.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Summary {
    pub setup: String,
    pub profile: String,
    pub seed: u64,
    pub duration_s: f64,
    pub fidelity: String,
    pub soc_start: f64,
    pub soc_end: f64,
    pub charge_delivered_ah: f64,
    pub energy_to_battery_wh: f64,
    pub operator_work_j: f64,
    pub mean_operator_power_w: f64,
    /// Highest operator power averaged over a crank revolution (trace grid), W: what the
    /// operator's power cap and W′ balance act on.
    pub peak_operator_power_w: f64,
    /// Fraction of cranking time the converter held its set point; `null` for a direct design
    /// (nothing regulates).
    pub in_regulation_fraction: Option<f64>,
    /// Cranking time out of regulation (every moment, dwell or not), s; `null` for direct.
    pub regulation_loss_s: Option<f64>,
    /// Time the battery spent past the overcharge threshold (every moment, dwell or not), s.
    pub overcharge_s: f64,
    pub max_battery_v: f64,
    pub charge_limit_v: f64,
    pub energy_balance_error: f64,
    /// The rows that count towards a flag of the verdict (`affects_verdict`).
    pub alerts: Vec<Event>,
    pub verdict: Verdict,
    pub wall_time_s: f64,
    /// Charge limit at the peak minus the highest battery voltage, V (negative when crossed).
    pub overcharge_margin_v: f64,
    /// Lowest sustained crank cadence minus the cadence regulation needs (from `check`), rpm;
    /// `null` when no converter regulates or either figure is undefined.
    pub cadence_margin_rpm: Option<f64>,
    // Extras after the contract keys.
    /// The setup and profile files the run read (a path, or a shipped file's path marked
    /// `(built-in)`), each with the first 12 hex digits of its SHA-256.
    pub setup_file: String,
    pub setup_sha256: String,
    pub profile_file: String,
    pub profile_sha256: String,
    /// Why the verdict is what it is, one sentence per flag (empty when `ok`).
    pub verdict_reasons: Vec<String>,
    /// Informational rows (everything in events.csv that does not affect the verdict).
    pub episodes: Vec<Event>,
    /// The alert rules the run used (thresholds, hysteresis, dwell, merge gaps; `alerts` in the
    /// setup), and the overcharge threshold they give at the peak, V.
    pub alert_rules: Alerts,
    pub overcharge_threshold_v: f64,
    /// Lowest mean crank cadence over any [`SUSTAINED_WINDOW_S`] of cranking (rests and spin-up
    /// left out), rpm.
    pub lowest_sustained_cadence_rpm: Option<f64>,
    /// Crank cadence from which the converter holds its start target (as `check` computes it),
    /// rpm.
    pub regulation_cadence_rpm: Option<f64>,
    /// Grid of trace.csv, s (widened for very long sessions to bound memory).
    pub trace_interval_s: f64,
    pub topology: String,
    pub chemistry: String,
    /// What the converter feeds: `battery` or `usb_5v`.
    pub output: String,
    pub cranking_s: f64,
    pub charging_fraction: f64,
    pub lockout_s: f64,
    pub max_input_v: f64,
    pub max_battery_temp_c: f64,
    pub efficiency_crank_to_battery: f64,
    pub overrides: Vec<String>,
    /// Every term of the energy ledger, J.
    pub ledger: Ledger,
    /// Integrator figures.
    pub solver: SolverStats,
    /// The USB bus (only with a USB port).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub usb: Option<UsbSummary>,
    /// Highest instantaneous operator power, the per-turn torque ripple riding on the mean
    /// (trace grid), W.
    pub peak_instant_operator_power_w: f64,
    /// A supercapacitor bank's energy (only for `supercap`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub supercap: Option<SupercapSummary>,
    /// A NiMH pack's end of charge (only for `nimh`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub nimh: Option<NimhSummary>,
    /// The recorded log a replayed session followed (absent for a planned profile).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub replay: Option<ReplaySummary>,
}

/// What a replayed session followed (`summary.json` `replay`).
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ReplaySummary {
    /// The log file as given.
    pub log: String,
    pub samples: usize,
    /// Time from its first to its last sample, s.
    pub span_s: f64,
    /// `torque` (the recorded torque fed forward, the loop correcting the drift from the
    /// recorded cadence) or `cadence` (the loop tracking the recorded cadence).
    pub follows: String,
    /// The resampling, in words.
    pub resampling: String,
}

/// A supercapacitor bank's energy over a session (`summary.json` `supercap`).
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct SupercapSummary {
    /// Capacitance and rated voltage of the bank, F and V.
    pub capacitance_f: f64,
    pub rated_v: f64,
    /// Capacitor voltage at the start and the end, V.
    pub voltage_start_v: f64,
    pub voltage_end_v: f64,
    /// Energy held at the start and the end, Wh: ½·C·V².
    pub energy_start_wh: f64,
    pub energy_end_wh: f64,
    /// Energy the capacitance took over the session by the ledger, Wh (the closed form is
    /// energy_end_wh − energy_start_wh).
    pub stored_wh: f64,
    /// Lowest usable voltage of the bank and the energy above it at the end, Wh.
    pub min_v: f64,
    pub usable_end_wh: f64,
    /// Share of the energy at the rated voltage above the lowest usable voltage.
    pub usable_fraction: f64,
    /// Heat of the leakage and of the ESR over the session, Wh.
    pub leakage_wh: f64,
    pub esr_wh: f64,
}

/// A NiMH pack's end of charge (`summary.json` `nimh`).
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct NimhSummary {
    /// When the fast charge ended, s (None: it did not).
    pub fast_charge_end_s: Option<f64>,
    /// What ended it: `voltage_drop` (−ΔV) or `temperature_rise` (dT/dt).
    pub fast_charge_end: Option<String>,
    /// Highest pack voltage per cell over the session, V.
    pub peak_v_per_cell: f64,
    /// Fastest rise of the battery temperature on the trace grid, °C per minute.
    pub max_temp_rise_c_per_min: f64,
    /// Heat of the oxygen recombined in the cells over the session, Wh.
    pub recombination_heat_wh: f64,
}

/// Window over which the lowest sustained cadence is averaged, s: a few crank turns, so that the
/// dip inside one stroke does not count as the operator's cadence.
pub const SUSTAINED_WINDOW_S: f64 = 5.0;

/// Figures of a USB port's bus (`summary.json` `usb`).
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct UsbSummary {
    /// Bus voltage the converter holds, V.
    pub bus_setpoint_v: f64,
    /// Port current limit, A.
    pub port_current_a: f64,
    /// Regulation band, V.
    pub band_low_v: f64,
    pub band_high_v: f64,
    /// Lowest bus voltage while the operator cranked and the device drew (all samples if it never
    /// drew), trace grid, V.
    pub min_bus_v: f64,
    /// Highest bus voltage, trace grid, V.
    pub max_bus_v: f64,
    /// Cranking time during which the device drew with the bus outside the band, s.
    pub out_of_band_s: f64,
    /// Device cut-offs while cranking (`device_cutoff` events).
    pub device_cutoffs: usize,
    /// Their total time, s.
    pub device_cutoff_s: f64,
    /// Least time the device stays off before it reconnects, as configured, s.
    pub reconnect_delay_s: f64,
    /// Shortest and longest time off of the cut-offs that ended in a reconnection, s (`null`
    /// when none did).
    pub observed_reconnect_delay_s: Option<(f64, f64)>,
    /// Energy the bus delivered to the device, Wh.
    pub energy_to_bus_wh: f64,
    /// Heat in the device's charger between bus and cell, Wh.
    pub device_loss_wh: f64,
}

/// Peak battery voltage in the trace and the charge limit in force at that sample.
pub fn battery_peak(trace: &Trace) -> (f64, f64) {
    trace
        .rows
        .iter()
        .map(|r| (r.battery_v, r.charge_limit_v))
        .fold((f64::NEG_INFINITY, f64::NAN), |acc, x| {
            if x.0 > acc.0 {
                x
            } else {
                acc
            }
        })
}

/// Names of the scalar summary keys, in order (CSV columns of the studies). Wall time is left out
/// so that study files are identical for identical inputs.
pub const SCALAR_KEYS: [&str; 37] = [
    "duration_s",
    "fidelity",
    "soc_start",
    "soc_end",
    "charge_delivered_ah",
    "energy_to_battery_wh",
    "operator_work_j",
    "mean_operator_power_w",
    "peak_operator_power_w",
    "in_regulation_fraction",
    "regulation_loss_s",
    "overcharge_s",
    "max_battery_v",
    "charge_limit_v",
    "energy_balance_error",
    "verdict",
    "topology",
    "chemistry",
    "cranking_s",
    "charging_fraction",
    "lockout_s",
    "max_input_v",
    "max_battery_temp_c",
    "efficiency_crank_to_battery",
    "alert_count",
    "alert_kinds",
    "output",
    "min_bus_v",
    "bus_out_of_band_s",
    "device_cutoffs",
    "overcharge_margin_v",
    "cadence_margin_rpm",
    "episode_count",
    "marginal_figures",
    "overrides",
    "peak_instant_operator_power_w",
    "tolerance_reruns",
];

impl Summary {
    /// The scalar keys as strings, in [`SCALAR_KEYS`] order (an empty cell where a figure does
    /// not apply).
    pub fn scalar_values(&self) -> Vec<String> {
        let mut kinds: Vec<&str> = self.alerts.iter().map(|e| e.kind.as_str()).collect();
        kinds.sort_unstable();
        kinds.dedup();
        let opt = |v: Option<f64>| v.map_or_else(String::new, fmt);
        vec![
            fmt(self.duration_s),
            self.fidelity.clone(),
            fmt(self.soc_start),
            fmt(self.soc_end),
            fmt(self.charge_delivered_ah),
            fmt(self.energy_to_battery_wh),
            fmt(self.operator_work_j),
            fmt(self.mean_operator_power_w),
            fmt(self.peak_operator_power_w),
            opt(self.in_regulation_fraction),
            opt(self.regulation_loss_s),
            fmt(self.overcharge_s),
            fmt(self.max_battery_v),
            fmt(self.charge_limit_v),
            fmt(self.energy_balance_error),
            self.verdict.words().join("+"),
            self.topology.clone(),
            self.chemistry.clone(),
            fmt(self.cranking_s),
            fmt(self.charging_fraction),
            fmt(self.lockout_s),
            fmt(self.max_input_v),
            fmt(self.max_battery_temp_c),
            fmt(self.efficiency_crank_to_battery),
            self.alerts.len().to_string(),
            kinds.join("+"),
            self.output.clone(),
            opt(self.usb.as_ref().map(|u| u.min_bus_v)),
            opt(self.usb.as_ref().map(|u| u.out_of_band_s)),
            self.usb
                .as_ref()
                .map_or_else(String::new, |u| u.device_cutoffs.to_string()),
            fmt(self.overcharge_margin_v),
            opt(self.cadence_margin_rpm),
            self.episodes.len().to_string(),
            self.marginal_figures().join("+"),
            self.overrides.join(";"),
            fmt(self.peak_instant_operator_power_w),
            self.solver.tolerance_reruns.to_string(),
        ]
    }

    /// Whether the session overcharged: an overcharge row (past the voltage limit, or a full pack
    /// still charged; such rows always count towards the verdict), or the verdict's flag (which a
    /// charger set past the limit raises without a row).
    pub fn overcharged(&self) -> bool {
        self.alerts.iter().any(|e| e.kind.is_overcharge()) || self.verdict.has("overcharge")
    }

    /// Every row of `events.csv`: the alerts and the episodes, by start time.
    pub fn events(&self) -> Vec<Event> {
        let mut v: Vec<Event> = self.alerts.iter().chain(&self.episodes).cloned().collect();
        v.sort_by(|a, b| a.start_s.total_cmp(&b.start_s).then(a.kind.cmp(&b.kind)));
        v
    }

    /// The figures a `marginal` verdict names (empty otherwise).
    pub fn marginal_figures(&self) -> Vec<&'static str> {
        let mut v = Vec::new();
        if self.verdict.has(MARGINAL) {
            for r in &self.verdict_reasons {
                for f in MARGINAL_FIGURES {
                    if r.starts_with(f) && !v.contains(&f) {
                        v.push(f);
                    }
                }
            }
        }
        v
    }
}

/// The verdict word for a figure too close to its threshold to decide.
pub const MARGINAL: &str = "marginal";
/// The figures a `marginal` verdict can name (each reason starts with one).
pub const MARGINAL_FIGURES: [&str; 2] = ["max_battery_v", "in_regulation_fraction"];

/// A fraction as a percentage with one decimal, or `n/a` where it does not apply (a direct
/// design's regulation).
pub fn percent_or_na(v: Option<f64>) -> String {
    v.map_or_else(|| "n/a".to_string(), |f| format!("{:.1}", 100.0 * f))
}

/// Compact float formatting for tables (shortest round-trip representation).
pub fn fmt(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}
