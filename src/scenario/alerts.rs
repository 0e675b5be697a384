//! The `alerts` section of a setup: for each kind of episode the threshold, the hysteresis, the
//! least time past the threshold (dwell) and the gap under which two episodes count as one, plus
//! the verdict rule and the bands inside which a figure is too close to its threshold to decide.
//!
//! Each default says where it comes from; the README's alert table repeats them.

use serde::{Deserialize, Serialize};

/// Thresholds for alerts and the verdict.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Alerts {
    /// Verdict `fails_regulation` when the in-regulation fraction of cranking time is below this
    /// (0 … 1); default 0.9.
    pub min_in_regulation_fraction: f64,
    /// An in-regulation fraction closer than this to `min_in_regulation_fraction` is `marginal`
    /// (0 … 0.5); default 0.02, the agreement stated between the two fidelities.
    pub regulation_decision_band: f64,
    /// A peak battery voltage closer than this to the overcharge threshold is `marginal`, V
    /// (0 … 1); default 0.05, the agreement stated between the two fidelities.
    pub overcharge_decision_band_v: f64,
    /// Battery above its charge limit (affects the verdict).
    pub overcharge: OverchargeRule,
    /// Converter not holding its set point while the operator cranks (the verdict uses the
    /// in-regulation fraction; the rows say when and why).
    pub regulation_loss: EpisodeTiming,
    /// Converter locked out by UVLO while the operator cranks (its on/off thresholds are the
    /// converter's own hysteresis).
    pub lockout: EpisodeTiming,
    /// Converter input above its over-voltage limit.
    pub input_overvoltage: InputOvervoltageRule,
    /// Battery temperature above a limit.
    pub battery_overtemp: BatteryOvertempRule,
    /// Li-ion charging refused or reduced by the battery temperature window (bands from
    /// `battery.charge_window`).
    pub charge_temp_window: EpisodeTiming,
    /// Operator's anaerobic reserve W′ nearly spent.
    pub operator_overload: OperatorOverloadRule,
    /// USB device cut off the bus (each cut-off is a row; its length is the time until the
    /// device reconnects).
    pub device_cutoff: EpisodeTiming,
    /// The battery model runs outside the range its laws were fitted to (lead-acid: charge
    /// current above 1.5·I10); informational.
    pub model_range: EpisodeTiming,
    /// A linear charger's pass element hot enough to fold its current back; informational.
    pub thermal_foldback: EpisodeTiming,
    /// NiMH: the pack is full and its fast charge goes on (the −ΔV or dT/dt end was missed);
    /// affects the verdict as `overcharge`.
    pub missed_end_of_charge: MissedEndRule,
    /// Battery temperature rising fast (dT/dt above a limit); informational.
    pub temperature_rise: TemperatureRiseRule,
}

impl Default for Alerts {
    fn default() -> Self {
        Self {
            min_in_regulation_fraction: 0.9,
            regulation_decision_band: 0.02,
            overcharge_decision_band_v: 0.05,
            overcharge: OverchargeRule::default(),
            regulation_loss: EpisodeTiming {
                dwell_s: 0.2,
                merge_gap_s: 2.0,
            },
            lockout: EpisodeTiming {
                dwell_s: 0.1,
                merge_gap_s: 1.0,
            },
            input_overvoltage: InputOvervoltageRule::default(),
            battery_overtemp: BatteryOvertempRule::default(),
            charge_temp_window: EpisodeTiming {
                dwell_s: 1.0,
                merge_gap_s: 10.0,
            },
            operator_overload: OperatorOverloadRule::default(),
            device_cutoff: EpisodeTiming {
                dwell_s: 0.0,
                merge_gap_s: 0.0,
            },
            model_range: EpisodeTiming {
                dwell_s: 1.0,
                merge_gap_s: 10.0,
            },
            thermal_foldback: EpisodeTiming {
                dwell_s: 1.0,
                merge_gap_s: 10.0,
            },
            missed_end_of_charge: MissedEndRule::default(),
            temperature_rise: TemperatureRiseRule::default(),
        }
    }
}

/// When a run of a condition becomes a row: it must last `dwell_s`; rows closer than
/// `merge_gap_s` are joined into one.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct EpisodeTiming {
    /// Least time the condition must hold to be a row, s (0 … 3600).
    pub dwell_s: f64,
    /// Rows of one kind and cause closer than this are one, s (0 … 3600).
    pub merge_gap_s: f64,
}

impl Default for EpisodeTiming {
    fn default() -> Self {
        Self {
            dwell_s: 0.2,
            merge_gap_s: 2.0,
        }
    }
}

/// Overcharge: battery terminal above the charge limit in force plus a tolerance.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct OverchargeRule {
    /// Tolerance above the charge limit before it counts, V per series cell (0 … 0.5); default
    /// 0.05: the ±50 mV a Li-ion CV charger may hold around 4.20 V (Battery University BU-409)
    /// and the 2.45 V/cell top of the lead-acid constant-voltage window (BU-403).
    pub tolerance_v_per_cell: f64,
    /// The episode ends once the battery is this far below its threshold, V per series cell
    /// (0 … 0.5); default 0.02.
    pub hysteresis_v_per_cell: f64,
    /// Least time above the threshold, s (0 … 3600); default 1: cell protection circuits confirm
    /// an over-voltage for about a second before they act.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 5.
    pub merge_gap_s: f64,
}

impl Default for OverchargeRule {
    fn default() -> Self {
        Self {
            tolerance_v_per_cell: 0.05,
            hysteresis_v_per_cell: 0.02,
            dwell_s: 1.0,
            merge_gap_s: 5.0,
        }
    }
}

/// Input over-voltage: converter input above `converter.input_overvoltage_v`.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct InputOvervoltageRule {
    /// The episode ends once the input is this far below the limit, V (0 … 100); default 0.5.
    pub hysteresis_v: f64,
    /// Least time above the limit, s (0 … 3600); default 0.01: the averaged converter model does
    /// not resolve switching-period transients, so it claims nothing shorter.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 1.
    pub merge_gap_s: f64,
}

impl Default for InputOvervoltageRule {
    fn default() -> Self {
        Self {
            hysteresis_v: 0.5,
            dwell_s: 0.01,
            merge_gap_s: 1.0,
        }
    }
}

/// Battery over-temperature.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct BatteryOvertempRule {
    /// Alert above this battery temperature, °C (−40 … 150); default 50, a common top of the
    /// Li-ion charge window (BU-409 charges at 0–45 °C; JEITA's reduced band ends near 50–60 °C).
    pub threshold_c: f64,
    /// The episode ends this far below the threshold, K (0 … 50); default 2.
    pub hysteresis_k: f64,
    /// Least time above the threshold, s (0 … 3600); default 5.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 30.
    pub merge_gap_s: f64,
}

impl Default for BatteryOvertempRule {
    fn default() -> Self {
        Self {
            threshold_c: 50.0,
            hysteresis_k: 2.0,
            dwell_s: 5.0,
            merge_gap_s: 30.0,
        }
    }
}

/// Operator overload: W′ balance below a fraction of the operator's W′.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct OperatorOverloadRule {
    /// Alert when the W′ balance falls below this fraction of W′ (0 … 1); default 0.1.
    pub reserve_fraction: f64,
    /// The episode ends once the balance is this fraction of W′ above the threshold (0 … 1);
    /// default 0.05.
    pub hysteresis_fraction: f64,
    /// Least time below the threshold, s (0 … 3600); default 1.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 10.
    pub merge_gap_s: f64,
}

impl Default for OperatorOverloadRule {
    fn default() -> Self {
        Self {
            reserve_fraction: 0.1,
            hysteresis_fraction: 0.05,
            dwell_s: 1.0,
            merge_gap_s: 10.0,
        }
    }
}

/// NiMH overcharge: the pack stores only a small part of a fast-charge current (it is full: the
/// rest evolves oxygen, which recombines in the sealed cell as heat) while the charger is still in
/// its fast charge.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct MissedEndRule {
    /// Alert when the pack stores less than this fraction of its charge current (0.01 … 0.99);
    /// default 0.1: nine tenths of the current is heat. A −ΔV charger at 0.5–1 C ends while the
    /// pack still stores 15–35 % (the model's NiMH pack, from 20 °C).
    pub stored_fraction: f64,
    /// The episode ends once the stored fraction is this much higher (0 … 0.5); default 0.05.
    pub hysteresis_fraction: f64,
    /// Only charge currents above this fraction of the capacity per hour count (0 … 10), or above
    /// the charger's termination current where that is higher; default 0.1: sealed nickel cells
    /// recombine the oxygen of a continuous overcharge up to about C/10 (the rate of the standard
    /// 14–16-h charge), not a fast charge's (common practice). Li-ion and supercapacitor cells
    /// are watched the same way (their model stores nothing past full).
    pub min_c_rate: f64,
    /// Least time past the threshold, s (0 … 3600); default 30.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 60.
    pub merge_gap_s: f64,
}

impl Default for MissedEndRule {
    fn default() -> Self {
        Self {
            stored_fraction: 0.1,
            hysteresis_fraction: 0.05,
            min_c_rate: 0.1,
            dwell_s: 30.0,
            merge_gap_s: 60.0,
        }
    }
}

/// Battery temperature rising faster than a limit.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct TemperatureRiseRule {
    /// Alert above this rate of rise, °C per minute (0.01 … 100); default 1: the dT/dt on which
    /// NiMH chargers end a fast charge (common practice), so a row means the heating went on.
    pub threshold_c_per_min: f64,
    /// The episode ends once the rate is this much lower, °C per minute (0 … 10); default 0.2.
    pub hysteresis_c_per_min: f64,
    /// Least time above the threshold, s (0 … 3600); default 30.
    pub dwell_s: f64,
    /// Episodes closer than this are one, s (0 … 3600); default 60.
    pub merge_gap_s: f64,
}

impl Default for TemperatureRiseRule {
    fn default() -> Self {
        Self {
            threshold_c_per_min: 1.0,
            hysteresis_c_per_min: 0.2,
            dwell_s: 30.0,
            merge_gap_s: 60.0,
        }
    }
}
