//! Layout of the integrated state vector: one named offset per state, no anonymous slots.

use ode_solvers::SVector;

/// Number of integrated states (physics plus energy-ledger quadratures).
pub const N_STATES: usize = 39;

/// The state vector type handed to the integrator.
pub type State = SVector<f64, N_STATES>;

/// Crank angle θ, rad (for the per-turn torque ripple).
pub const CRANK_ANGLE: usize = 0;
/// Crank speed, rad/s.
pub const CRANK_SPEED: usize = 1;
/// Generator shaft speed, rad/s.
pub const GEN_SPEED: usize = 2;
/// Operator's cadence-tracking integrator, N·m.
pub const OP_INTEGRATOR: usize = 3;
/// Operator's remaining anaerobic reserve W′, J.
pub const W_PRIME: usize = 4;
/// Battery state of charge, 0 … 1.
pub const SOC: usize = 5;
/// RC-pair voltage, V: the Li-ion RC branch, or the lead-acid charge polarisation.
pub const V_RC: usize = 6;
/// Battery temperature, °C.
pub const BATTERY_TEMP: usize = 7;
/// Generator winding temperature, °C.
pub const WINDING_TEMP: usize = 8;
/// Converter soft-start progress, 0 … 1.
pub const SOFT_START: usize = 9;

/// Energy ledger (quadratures of every power flow), J; charge in A·s.
pub const E_OPERATOR: usize = 10;
pub const E_DRIVE: usize = 11;
pub const E_FRICTION: usize = 12;
pub const E_COPPER: usize = 13;
pub const E_BRUSH: usize = 14;
pub const E_DIODE: usize = 15;
pub const E_CONVERTER: usize = 16;
pub const E_BATTERY_TERMINAL: usize = 17;
pub const E_BATTERY_OHMIC: usize = 18;
pub const E_BATTERY_COULOMBIC: usize = 19;
pub const E_STORED: usize = 20;
pub const Q_BATTERY: usize = 21;

/// Detailed fidelity only (held at zero by the fast fidelity):
/// armature current, A.
pub const ARMATURE_I: usize = 22;
/// Input capacitor voltage, V.
pub const INPUT_V: usize = 23;
/// Buck inductor current, A.
pub const INDUCTOR_I: usize = 24;
/// Output capacitor voltage, V.
pub const OUTPUT_V: usize = 25;
/// Voltage-loop integrator (current reference), A.
pub const CTRL_V: usize = 26;
/// Current-loop integrator (duty trim), 1.
pub const CTRL_I: usize = 27;
/// Energy ledger, USB port only: heat in the device's charger (its pass element), J.
pub const E_DEVICE: usize = 28;
/// Lead-acid: progress 0 … 1 of Copetti's time law from the gassing to the end-of-charge voltage
/// (0 for Li-ion).
pub const GAS_PROGRESS: usize = 29;
/// Energy ledger, lead-acid: chemical energy leaving as gas (thermoneutral voltage × the gassing
/// current that escapes), J.
pub const E_GAS: usize = 30;

/// Generator rotor angle, rad (for the cogging torque; it runs on its own while the freewheel
/// lets the shaft overrun).
pub const ROTOR_ANGLE: usize = 31;
/// Junction temperature of a linear charger's pass element, °C (ambient for the other
/// topologies).
pub const JUNCTION_TEMP: usize = 32;
/// Energy ledger: generator iron loss, J.
pub const E_IRON: usize = 33;
/// Energy ledger: switching chargers' gate-drive and inductor-core loss, J.
pub const E_OVERHEAD: usize = 34;
/// Energy ledger: heat in a linear charger's pass element, J.
pub const E_PASS: usize = 35;
/// Work done against the generator's cogging torque, J: for an exact solution the change of the
/// cogging potential (within ±2·T_c/n), which the ledger takes from the rotor angle itself. Kept
/// as a quadrature so that Dopri5's step-size control resolves the cogging period (a step over
/// several periods misses this integral by far more than the tolerance).
pub const E_COGGING: usize = 36;
/// Energy ledger, NiMH: heat of the oxygen the charge current evolves instead of storing,
/// recombined in the sealed cell, J.
pub const E_RECOMBINATION: usize = 37;
/// Energy ledger, supercapacitor: heat of the leakage current, J.
pub const E_LEAKAGE: usize = 38;

/// Whether every entry is finite.
pub fn all_finite(y: &State) -> bool {
    // Over the plain slice: the matrix iterator is several times slower on this hot path (every
    // accepted step is checked).
    y.as_slice().iter().all(|v| v.is_finite())
}

/// Names of the states for failure reports.
pub const STATE_NAMES: [&str; N_STATES] = [
    "crank_angle_rad",
    "crank_speed_rad_s",
    "generator_speed_rad_s",
    "operator_integrator_n_m",
    "w_prime_j",
    "soc",
    "v_rc_v",
    "battery_temp_c",
    "winding_temp_c",
    "soft_start",
    "e_operator_j",
    "e_drive_j",
    "e_friction_j",
    "e_copper_j",
    "e_brush_j",
    "e_diode_j",
    "e_converter_j",
    "e_battery_terminal_j",
    "e_battery_ohmic_j",
    "e_battery_coulombic_j",
    "e_stored_j",
    "q_battery_as",
    "armature_a",
    "input_v",
    "inductor_a",
    "output_v",
    "voltage_loop_a",
    "current_loop",
    "e_device_j",
    "gassing_progress",
    "e_gas_j",
    "rotor_angle_rad",
    "junction_temp_c",
    "e_iron_j",
    "e_overhead_j",
    "e_pass_j",
    "e_cogging_j",
    "e_recombination_j",
    "e_leakage_j",
];
