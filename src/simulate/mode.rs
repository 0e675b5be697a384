//! The plant's discrete state (constant between located events) and the charger settings
//! resolved with their defaults.

use crate::model::battery::li_ion::TempBand;
use crate::scenario::setup::Topology;

/// Charger stage (discrete).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stage {
    /// Li-ion CC/CV charging, or lead-acid bulk.
    Charging,
    /// Lead-acid absorption (held at the absorption voltage).
    Absorption,
    /// Lead-acid float.
    Float,
    /// Li-ion (or supercapacitor) charge terminated.
    Done,
    /// NiMH: the fast charge ended (−ΔV or dT/dt); a small top-off current follows.
    Trickle,
}

/// Discrete state, constant between located events.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Discrete {
    /// Converter enabled (UVLO released); always true for direct.
    pub enabled: bool,
    /// Shut down by input over-voltage.
    pub ov_shutdown: bool,
    pub stage: Stage,
    /// Time the absorption stage began, s.
    pub absorption_since_s: f64,
    /// Li-ion charge-temperature band.
    pub band: TempBand,
    /// Operator resting (hands off).
    pub resting: bool,
    /// Freewheel engaged (always true without a freewheel).
    pub engaged: bool,
    /// Soft-start ramp finished.
    pub soft_done: bool,
    /// Buck-boost running as a buck (output switch held off).
    pub buck_mode: bool,
    /// When the converter last locked out or went to sleep, s (−∞ before the first time).
    pub disabled_at_s: f64,
    /// USB port: the device is attached and draws from the bus.
    pub device_on: bool,
    /// USB port: when the device last cut itself off, s (−∞ before the first time).
    pub device_off_at_s: f64,
    /// USB port: when the device last attached, s (its draw ramps up from there).
    pub device_on_at_s: f64,
    /// USB port: cut-offs so far.
    pub device_cutoffs: u32,
    /// NiMH: the highest pack voltage the charger has seen while watching its fast charge, V
    /// (it stores a new one each time the voltage passes it by [`PEAK_RESOLUTION_V_PER_CELL`] a
    /// cell; 0 before the first).
    pub peak_v: f64,
    /// NiMH: the charger watches for the end of its fast charge from this time, s (its hold-off
    /// after each start).
    pub watch_from_s: f64,
    /// Why the charge ended: 0 not ended, 1 current below termination (Li-ion, supercapacitor),
    /// 2 NiMH voltage drop, 3 NiMH temperature rise.
    pub end_cause: u8,
}

/// NiMH: the voltage step by which the charger's stored peak follows a rising pack voltage, V
/// per cell (its measurement resolution: a peak is stored each time the voltage has risen this
/// much past the last one, so the stored peak lies within this of the true one).
pub const PEAK_RESOLUTION_V_PER_CELL: f64 = 0.25e-3;

/// Charger settings resolved with defaults.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Charger {
    pub topology: Topology,
    pub charge_current_a: f64,
    pub cv_setpoint_v: Option<f64>,
    pub float_setpoint_v: Option<f64>,
    pub termination_current_a: f64,
    pub absorption_exit_current_a: f64,
    pub absorption_max_s: f64,
    pub soft_start_s: f64,
    pub uvlo_on_v: f64,
    pub uvlo_off_v: f64,
    pub input_overvoltage_v: f64,
    pub overvoltage_shutdown: bool,
    /// The charger sleeps while its input is below the battery (buck, linear); a buck-boost
    /// charges from there too.
    pub sleeps_below_battery: bool,
    /// How far above the battery the input must be before a sleeping charger can pass current, V:
    /// a buck's switch drop (below V_o + V_sw no duty pushes current into the inductor), 0 for a
    /// linear charger.
    pub sleep_margin_v: f64,
    /// Switching chargers: the input-voltage floor they hold by trimming their current, V.
    pub input_floor_v: Option<f64>,
    /// Least off-time after a lock-out before a restart, s.
    pub restart_delay_s: f64,
    /// Buck-boost: buck mode while the buck duty stays at or below this (0: never).
    pub buck_mode_max_duty: f64,
    /// NiMH: the voltage drop below the stored peak that ends the fast charge, V (whole pack;
    /// 0: off).
    pub end_drop_v: f64,
    /// NiMH: the temperature rise rate that ends the fast charge, K/s (0: off).
    pub end_rise_k_per_s: f64,
    /// NiMH: hold-off of both ends after each start, s.
    pub end_holdoff_s: f64,
    /// NiMH: current of the trickle after the fast charge, A.
    pub trickle_current_a: f64,
}
