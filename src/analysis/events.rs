//! Alerts and periods found during a session (`events.csv` rows).

use serde::Serialize;

/// Kind of an event row; the word is the `kind` column of `events.csv`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum EventKind {
    /// Converter out of regulation (duty at its limit or locked out) while the operator cranks.
    RegulationLoss,
    /// Converter locked out by UVLO while the operator cranks.
    Lockout,
    /// Battery terminal voltage above its charge limit.
    Overcharge,
    /// Converter input above its over-voltage limit.
    InputOvervoltage,
    /// Battery temperature above its alert limit.
    BatteryOvertemp,
    /// Charging refused or reduced by the battery temperature window.
    ChargeTempWindow,
    /// Operator's anaerobic reserve W' nearly exhausted.
    OperatorOverload,
    /// Charge terminated (informational).
    ChargeComplete,
    /// USB port: the device cut itself off the sagging (or vanished) bus, until it reconnects.
    DeviceCutoff,
    /// Linear charger: the pass element's junction is past its foldback temperature, so the
    /// charge current is cut back.
    ThermalFoldback,
}

impl EventKind {
    /// The word written to `events.csv`.
    pub fn as_str(self) -> &'static str {
        match self {
            EventKind::RegulationLoss => "regulation_loss",
            EventKind::Lockout => "lockout",
            EventKind::Overcharge => "overcharge",
            EventKind::InputOvervoltage => "input_overvoltage",
            EventKind::BatteryOvertemp => "battery_overtemp",
            EventKind::ChargeTempWindow => "charge_temp_window",
            EventKind::OperatorOverload => "operator_overload",
            EventKind::ChargeComplete => "charge_complete",
            EventKind::DeviceCutoff => "device_cutoff",
            EventKind::ThermalFoldback => "thermal_foldback",
        }
    }

    /// Whether the kind is an alert (a problem) rather than information.
    pub fn is_alert(self) -> bool {
        !matches!(self, EventKind::ChargeComplete)
    }
}

/// How the detail of a USB `regulation_loss` period begins when the bus left its band while the
/// device drew from it (the summary totals these periods as the time out of band).
pub const OUT_OF_BAND_DETAIL: &str = "bus outside the band";

/// One period or instant of interest.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Event {
    pub kind: EventKind,
    pub start_s: f64,
    pub end_s: f64,
    pub duration_s: f64,
    /// Extreme value reached during the period (see `unit`).
    pub peak: f64,
    pub unit: String,
    pub detail: String,
}

/// Column names of `events.csv`, in order.
pub const EVENT_COLUMNS: [&str; 7] = [
    "kind",
    "start_s",
    "end_s",
    "duration_s",
    "peak",
    "unit",
    "detail",
];
