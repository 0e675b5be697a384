//! The sampled session trace: one row every grid step, columns in the contract order.

use serde::Serialize;

/// Operating mode of the charger at a trace sample (written as a word in `trace.csv`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Mode {
    /// Converter locked out by UVLO (input below its thresholds).
    Lockout,
    /// Soft-start ramp after the converter is enabled.
    SoftStart,
    /// Constant-current regulation.
    Cc,
    /// Constant-voltage regulation (Li-ion CV or lead-acid absorption).
    Cv,
    /// Lead-acid float stage.
    Float,
    /// Duty saturated at its maximum: the converter passes what it can.
    Dropout,
    /// The charger trims its current below the set point (or idles) to hold its input floor.
    InputFloor,
    /// Charge terminated (Li-ion below the termination current).
    Done,
    /// NiMH: the fast charge ended (voltage drop or temperature rise); trickle current.
    Trickle,
    /// Charging refused by the battery temperature window.
    TempHold,
    /// Diode-only connection: generator feeds the battery directly.
    Direct,
    /// USB port: the device is off the bus (cut off, or waiting to attach) while the converter runs.
    DeviceOff,
}

impl Mode {
    /// The word written to `trace.csv`.
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Lockout => "lockout",
            Mode::SoftStart => "soft_start",
            Mode::Cc => "cc",
            Mode::Cv => "cv",
            Mode::Float => "float",
            Mode::Dropout => "dropout",
            Mode::InputFloor => "input_floor",
            Mode::Done => "done",
            Mode::Trickle => "trickle",
            Mode::TempHold => "temp_hold",
            Mode::Direct => "direct",
            Mode::DeviceOff => "device_off",
        }
    }
}

/// One trace sample. Field order is the `trace.csv` column order of the contract.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TraceRow {
    pub time_s: f64,
    pub crank_rpm: f64,
    pub target_rpm: f64,
    pub generator_rpm: f64,
    pub emf_v: f64,
    pub generator_current_a: f64,
    pub input_v: f64,
    pub duty: f64,
    pub output_v: f64,
    pub battery_v: f64,
    pub battery_current_a: f64,
    pub soc: f64,
    pub battery_temp_c: f64,
    pub operator_power_w: f64,
    pub mode: Mode,
    pub charge_limit_v: f64,
    /// Extra columns after the contract ones.
    pub operator_torque_n_m: f64,
    pub w_prime_balance_j: f64,
    pub winding_temp_c: f64,
    pub in_regulation: bool,
    /// Converter output: the USB bus, or the battery terminal (then equal to `battery_v`), V.
    pub bus_v: f64,
    /// Current out of the converter output into the device or the battery, A.
    pub bus_current_a: f64,
    /// Operator power averaged over a crank revolution (the un-rippled torque × crank speed), W.
    pub operator_mean_power_w: f64,
    /// Junction temperature of a linear charger's pass element (ambient otherwise), °C.
    pub junction_temp_c: f64,
}

/// Column names of `trace.csv`, in order.
pub const TRACE_COLUMNS: [&str; 24] = [
    "time_s",
    "crank_rpm",
    "target_rpm",
    "generator_rpm",
    "emf_v",
    "generator_current_a",
    "input_v",
    "duty",
    "output_v",
    "battery_v",
    "battery_current_a",
    "soc",
    "battery_temp_c",
    "operator_power_w",
    "mode",
    "charge_limit_v",
    "operator_torque_n_m",
    "w_prime_balance_j",
    "winding_temp_c",
    "in_regulation",
    "bus_v",
    "bus_current_a",
    "operator_mean_power_w",
    "junction_temp_c",
];

/// The whole sampled trace of one session.
#[derive(Debug, Clone, Default)]
pub struct Trace {
    pub rows: Vec<TraceRow>,
}

impl Trace {
    /// Trapezoidal integral of `f(row)` over time.
    pub fn integrate(&self, f: impl Fn(&TraceRow) -> f64) -> f64 {
        self.rows
            .windows(2)
            .map(|w| 0.5 * (f(&w[0]) + f(&w[1])) * (w[1].time_s - w[0].time_s))
            .sum()
    }
}
