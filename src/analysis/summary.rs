//! The one-line-per-figure summary of a session (`summary.json`) and its verdict.

use serde::Serialize;

use super::events::{Event, EventKind};
use super::trace::Trace;
use crate::simulate::engine::{Ledger, SolverStats};

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
    pub in_regulation_fraction: f64,
    pub regulation_loss_s: f64,
    pub overcharge_s: f64,
    pub max_battery_v: f64,
    pub charge_limit_v: f64,
    pub energy_balance_error: f64,
    pub alerts: Vec<Event>,
    pub verdict: Verdict,
    pub wall_time_s: f64,
    /// Grid of trace.csv, s (widened for very long sessions to bound memory).
    pub trace_interval_s: f64,
    // Extras after the contract keys.
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
}

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
    /// Lowest bus voltage while the device drew (all samples if it never drew), trace grid, V.
    pub min_bus_v: f64,
    /// Highest bus voltage, trace grid, V.
    pub max_bus_v: f64,
    /// Cranking time during which the device drew with the bus outside the band, s.
    pub out_of_band_s: f64,
    /// Device cut-offs while cranking (`device_cutoff` events).
    pub device_cutoffs: usize,
    /// Their total time, s.
    pub device_cutoff_s: f64,
    /// Energy the bus delivered to the device, Wh.
    pub energy_to_bus_wh: f64,
    /// Heat in the device's charger between bus and cell, Wh.
    pub device_loss_wh: f64,
}

/// Total duration of the events of one kind, s.
pub fn total_duration(events: &[Event], kind: EventKind) -> f64 {
    events
        .iter()
        .filter(|e| e.kind == kind)
        .map(|e| e.duration_s)
        // A fold from +0.0: `sum()` of no floats is −0.0, which would print as "-0.0".
        .fold(0.0, |a, d| a + d)
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
pub const SCALAR_KEYS: [&str; 31] = [
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
    "peak_instant_operator_power_w",
];

impl Summary {
    /// The scalar keys as strings, in [`SCALAR_KEYS`] order.
    pub fn scalar_values(&self) -> Vec<String> {
        let mut kinds: Vec<&str> = self.alerts.iter().map(|e| e.kind.as_str()).collect();
        kinds.sort_unstable();
        kinds.dedup();
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
            fmt(self.in_regulation_fraction),
            fmt(self.regulation_loss_s),
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
            self.usb
                .as_ref()
                .map_or_else(String::new, |u| fmt(u.min_bus_v)),
            self.usb
                .as_ref()
                .map_or_else(String::new, |u| fmt(u.out_of_band_s)),
            self.usb
                .as_ref()
                .map_or_else(String::new, |u| u.device_cutoffs.to_string()),
            fmt(self.peak_instant_operator_power_w),
        ]
    }
}

/// Compact float formatting for tables (shortest round-trip representation).
pub fn fmt(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}
