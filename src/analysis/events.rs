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
    /// Charge terminated: from the termination to the session end (informational).
    ChargeComplete,
    /// USB port: the device cut itself off the sagging (or vanished) bus, until it reconnects.
    DeviceCutoff,
    /// The battery model runs outside the range its laws were fitted to (lead-acid: charge current
    /// beyond 1.5·I10); its figures there are extrapolations.
    ModelRange,
    /// Linear charger: the pass element's junction is past its foldback temperature, so the
    /// charge current is cut back.
    ThermalFoldback,
    /// NiMH: the pack is full (the current it does not store is above C/10) and its fast charge
    /// goes on: the voltage-drop or temperature-rise end was missed.
    MissedEndOfCharge,
    /// Battery temperature rising faster than its limit (dT/dt).
    TemperatureRise,
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
            EventKind::ModelRange => "model_range",
            EventKind::ThermalFoldback => "thermal_foldback",
            EventKind::MissedEndOfCharge => "missed_end_of_charge",
            EventKind::TemperatureRise => "temperature_rise",
        }
    }

    /// Whether a row of this kind means the battery was overcharged: past its voltage limit, or
    /// full and still charged (NiMH fast-charged past its end; Li-ion or supercapacitor past
    /// full).
    pub fn is_overcharge(self) -> bool {
        matches!(self, EventKind::Overcharge | EventKind::MissedEndOfCharge)
    }

    /// Every kind, in the order of the README's alert table.
    pub const ALL: [EventKind; 13] = [
        EventKind::Overcharge,
        EventKind::MissedEndOfCharge,
        EventKind::RegulationLoss,
        EventKind::Lockout,
        EventKind::InputOvervoltage,
        EventKind::BatteryOvertemp,
        EventKind::ChargeTempWindow,
        EventKind::OperatorOverload,
        EventKind::DeviceCutoff,
        EventKind::ThermalFoldback,
        EventKind::TemperatureRise,
        EventKind::ModelRange,
        EventKind::ChargeComplete,
    ];
}

/// How the detail of a USB `regulation_loss` period begins when the bus left its band while the
/// device drew from it (the summary totals these periods as the time out of band).
pub const OUT_OF_BAND_DETAIL: &str = "bus outside the band";

/// One episode: a quantity past its threshold from `start_s` to `end_s`.
///
/// Sign convention: `worst` is the value of `quantity` at the moment it lay furthest past
/// `threshold` (above it for upper limits such as `overcharge`, below it for lower limits such
/// as `lockout`), and `threshold` is the limit in force at that moment.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Event {
    pub kind: EventKind,
    pub start_s: f64,
    pub end_s: f64,
    pub duration_s: f64,
    /// What was measured (a trace column name, e.g. `battery_v`).
    pub quantity: &'static str,
    pub unit: &'static str,
    /// The limit in force where the quantity was furthest past it.
    pub threshold: f64,
    /// The value furthest past the threshold.
    pub worst: f64,
    /// Whether this row counts towards a flag of the verdict.
    pub affects_verdict: bool,
    pub detail: String,
    /// Cause within the kind (e.g. dropout or soft-start for `regulation_loss`): episodes merge
    /// only with episodes of the same cause. Not written.
    #[serde(skip)]
    pub cause: u8,
    /// Whether past the threshold means above it (upper limits) or below it. Not written.
    #[serde(skip)]
    pub above: bool,
}

/// Column names of `events.csv`, in order.
pub const EVENT_COLUMNS: [&str; 10] = [
    "kind",
    "start_s",
    "end_s",
    "duration_s",
    "quantity",
    "unit",
    "threshold",
    "worst",
    "affects_verdict",
    "detail",
];
