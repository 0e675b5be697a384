//! The design under test: drive, generator, diode, converter and battery (a setup `.ron` file).

use serde::{Deserialize, Serialize};

pub use super::alerts::Alerts;

/// A whole charger design. Every physical field carries its unit in its name.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Setup {
    /// Short name echoed in summaries and tables.
    pub name: String,
    /// Free text: what the design is (say that demo data is invented).
    #[serde(default)]
    pub description: String,
    /// Ambient air temperature, °C (−30 … 60).
    pub ambient_c: f64,
    /// Belt/gear stages, flywheel, freewheel and friction.
    pub drive: Drive,
    /// The permanent-magnet DC generator.
    pub generator: Generator,
    /// The protection diode between generator and converter.
    pub diode: Diode,
    /// The charger between the input node and the battery.
    pub converter: Converter,
    /// The battery being charged.
    pub battery: Battery,
    /// A 5 V USB port on the converter output instead of a battery there: the converter holds the
    /// bus and a device (whose cell is `battery`) draws from it. None: the battery sits on the
    /// converter output.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub usb: Option<UsbPort>,
    /// Thresholds for alerts and the verdict.
    #[serde(default)]
    pub alerts: Alerts,
    /// Numerical settings (tolerances, trace grid).
    #[serde(default)]
    pub solver: Solver,
}

/// One belt or gear stage; ratio > 1 speeds the generator up.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Stage {
    /// Speed ratio output/input (0.05 … 100); belts typically 2 … 8 per stage.
    pub ratio: f64,
    /// Power efficiency of the stage (0.5 … 1); synchronous belts 0.95 … 0.98.
    pub efficiency: f64,
}

/// Mechanical drive from crank to generator shaft.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Drive {
    /// Stages from crank to generator (1 … 6 stages).
    pub stages: Vec<Stage>,
    /// Inertia of crank, handle and the operator's hand/forearm about the crank axis, kg·m² (0 … 1).
    pub crank_inertia_kg_m2: f64,
    /// Flywheel on the generator shaft, kg·m² (0 … 0.1).
    #[serde(default)]
    pub flywheel_inertia_kg_m2: f64,
    /// One-way clutch: the generator may overrun (coast) when the crank slows.
    #[serde(default)]
    pub freewheel: bool,
    /// Coulomb (dry) friction torque at the generator shaft, N·m (0 … 1).
    #[serde(default)]
    pub coulomb_friction_n_m: f64,
    /// Viscous friction at the generator shaft, N·m per rad/s (0 … 0.01).
    #[serde(default)]
    pub viscous_friction_n_m_s: f64,
}

/// Kind of generator.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum GeneratorKind {
    /// Brushed permanent-magnet DC machine (the protection diode in series).
    #[default]
    BrushedDc,
    /// Three-phase permanent-magnet alternator (a hub or small wind-turbine machine) with a
    /// six-diode bridge: `diode` describes each of the bridge's diodes, two of which conduct at a
    /// time.
    ThreePhasePm,
}

impl GeneratorKind {
    /// The word used in summaries.
    pub fn as_str(self) -> &'static str {
        match self {
            GeneratorKind::BrushedDc => "brushed_dc",
            GeneratorKind::ThreePhasePm => "three_phase_pm",
        }
    }
}

/// The generator: a permanent-magnet DC machine, or a three-phase permanent-magnet alternator
/// with its bridge rectifier.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Generator {
    /// `brushed_dc` (default) or `three_phase_pm`.
    #[serde(default)]
    pub kind: GeneratorKind,
    /// Back-EMF constant, volts per 1000 rpm (0.1 … 500), the datasheet habit. For
    /// `three_phase_pm`: the open-circuit line-to-line EMF, RMS, per 1000 rpm (what an AC
    /// voltmeter reads between two leads of the unloaded machine).
    pub back_emf_v_per_krpm: f64,
    /// Armature (terminal) resistance at 20 °C, Ω (0.001 … 100). For `three_phase_pm`: one
    /// phase of the equivalent star winding, half what an ohmmeter reads between two leads.
    pub resistance_ohm: f64,
    /// Armature inductance, H (0 … 1); default 1e-3. For `three_phase_pm`: the synchronous
    /// inductance of one phase of the equivalent star winding (half the inductance between two
    /// leads); its reactance X = p·ω·L limits the current as the speed rises.
    #[serde(default = "default_inductance")]
    pub inductance_h: f64,
    /// `three_phase_pm` only (and required there): pole pairs p (1 … 100); the electrical
    /// frequency is p × the shaft speed. Hub alternators have many (10–30), small wind-turbine
    /// machines 4–12.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pole_pairs: Option<u32>,
    /// Rotor inertia, kg·m² (0 … 0.1).
    pub inertia_kg_m2: f64,
    /// Total brush voltage drop at full current, V (0 … 3); default 0. Carbon brushes drop about
    /// 1.6–2 V in all (Hawkins Electrical Guide), metal-graphite about 0.6 V, small precious-metal
    /// brushes far less (REFERENCES §4). A `three_phase_pm` machine has no brushes: 0 there.
    #[serde(default)]
    pub brush_drop_v: f64,
    /// Hysteresis part of the iron (core) loss, W per 1000 rpm of shaft speed (0 … 50):
    /// P_h = k_h·(n/1000 rpm), a drag torque independent of speed. Default 0 (not modelled).
    #[serde(default)]
    pub hysteresis_loss_w_per_krpm: f64,
    /// Eddy-current part of the iron loss, W per (1000 rpm)² (0 … 50): P_e = k_e·(n/1000 rpm)²,
    /// a drag torque proportional to speed. Default 0 (not modelled).
    #[serde(default)]
    pub eddy_loss_w_per_krpm2: f64,
    /// Change of the back-EMF (and torque) constant with magnet temperature, % per K (−1 … 0),
    /// about 20 °C: k_e(T) = k_e·(1 + c·(T − 20)/100). Default −0.2, ferrite magnets, the usual
    /// ones in small PMDC machines (NdFeB ≈ −0.12, SmCo ≈ −0.04; magnet makers' remanence
    /// coefficients, from memory). The winding's lumped temperature stands in for the magnets'.
    #[serde(default = "default_back_emf_tempco")]
    pub back_emf_tempco_pct_per_k: f64,
    /// Peak cogging torque at the generator shaft, N·m (0 … 1); default 0 (none). Cogging is
    /// conservative: τ = −T_c·sin(n·θ_rotor), the slope of a potential, so it stores and returns
    /// energy within each period and does no work over one.
    #[serde(default)]
    pub cogging_torque_n_m: f64,
    /// Cogging periods per rotor revolution n, the least common multiple of slot and pole
    /// counts (1 … 200); default 10 (five slots, two poles, a common small PMDC layout).
    #[serde(default = "default_cogging_periods")]
    pub cogging_periods_per_rev: u32,
    /// Heat capacity of the winding, J/K (0.1 … 10 000).
    #[serde(default = "default_winding_heat_capacity")]
    pub winding_heat_capacity_j_per_k: f64,
    /// Heat conductance winding to ambient, W/K (0.001 … 100).
    #[serde(default = "default_winding_conductance")]
    pub winding_to_ambient_w_per_k: f64,
}

fn default_inductance() -> f64 {
    1e-3
}
fn default_back_emf_tempco() -> f64 {
    -0.2
}
fn default_cogging_periods() -> u32 {
    10
}
fn default_winding_heat_capacity() -> f64 {
    60.0
}
fn default_winding_conductance() -> f64 {
    0.8
}

/// Protection diode model.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum DiodeKind {
    /// Shockley law with series resistance (Schottky or silicon).
    Shockley,
    /// Fixed forward drop, blocks reverse current.
    Ideal,
    /// No diode: current may flow both ways.
    None,
}

/// A datasheet point of a diode's forward characteristic.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct DiodePoint {
    /// Forward current, A (1e-6 … 100).
    pub current_a: f64,
    /// Forward voltage at that current, V (0.05 … 2).
    pub forward_v: f64,
}

/// Protection diode between generator and input capacitor.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Diode {
    /// `shockley`, `ideal` or `none`.
    pub kind: DiodeKind,
    /// Shockley saturation current, A (1e-15 … 1e-2); ignored when `points` is given.
    #[serde(default)]
    pub saturation_current_a: Option<f64>,
    /// Shockley ideality factor n (0.5 … 4); ignored when `points` is given.
    #[serde(default)]
    pub ideality: Option<f64>,
    /// Series resistance, Ω (0 … 10).
    #[serde(default)]
    pub series_resistance_ohm: f64,
    /// Two datasheet points (V_F at two currents) from which I_s and n are derived.
    #[serde(default)]
    pub points: Option<Vec<DiodePoint>>,
    /// Forward drop of the `ideal` kind, V (0 … 2).
    #[serde(default)]
    pub forward_v: Option<f64>,
}

/// Converter topology.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Topology {
    /// Asynchronous buck charger with CC/CV control.
    Buck,
    /// Non-inverting two-switch buck-boost charger: regulates above and below the battery voltage.
    BuckBoost,
    /// Linear (series-pass) charger: dropout voltage, efficiency V_o/V_in.
    Linear,
    /// Diode only: the battery sits on the input node.
    Direct,
}

impl Topology {
    /// The word used in summaries.
    pub fn as_str(self) -> &'static str {
        match self {
            Topology::Buck => "buck",
            Topology::BuckBoost => "buck_boost",
            Topology::Linear => "linear",
            Topology::Direct => "direct",
        }
    }
}

/// The charger between input node and battery (averaged model).
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Converter {
    /// `buck`, `buck_boost`, `linear` or `direct`.
    pub topology: Topology,
    /// Constant-current limit into the battery, A (0.001 … 50).
    #[serde(default = "default_charge_current")]
    pub charge_current_a: f64,
    /// CV (or absorption) set point of the battery terminal, V; default: the battery's limit.
    #[serde(default)]
    pub cv_setpoint_v: Option<f64>,
    /// Float set point for lead-acid, V; default: the battery's float voltage.
    #[serde(default)]
    pub float_setpoint_v: Option<f64>,
    /// Maximum duty cycle (buck 0.1 … 1; buck-boost 0.1 … 0.95).
    #[serde(default = "default_max_duty")]
    pub max_duty: f64,
    /// Fixed switch drop when on (bipolar saturation), V (0 … 3); each of the buck-boost's two.
    #[serde(default)]
    pub switch_drop_v: f64,
    /// Switch on-resistance, Ω (0 … 5).
    #[serde(default)]
    pub switch_resistance_ohm: f64,
    /// Linear charger: headroom V_in − V_o needed at the charge current, V (0.01 … 5); default 0.3.
    #[serde(default)]
    pub dropout_v: Option<f64>,
    /// Linear charger: thermal resistance from the pass element's junction to ambient, K/W
    /// (0.1 … 500). Default 62.5, a TO-220 package in free air (from memory: the R_θJA that
    /// power-transistor datasheets give for it); on a heatsink, junction-to-case plus interface
    /// plus heatsink, a few K/W.
    #[serde(default = "default_pass_theta_ja")]
    pub pass_theta_ja_k_per_w: f64,
    /// Linear charger: heat capacity of the pass element with whatever it is mounted on, J/K
    /// (0.01 … 10 000). Default 1, a TO-220 package alone (about 2 g of copper tab and moulding;
    /// from memory); add a heatsink's mass × specific heat (aluminium ≈ 0.9 J/(g·K)).
    #[serde(default = "default_pass_heat_capacity")]
    pub pass_heat_capacity_j_per_k: f64,
    /// Linear charger: junction temperature at which thermal foldback starts to cut the charge
    /// current, °C (40 … 200). Default 120 (common practice: linear charger ICs regulate their die
    /// near 105–125 °C).
    #[serde(default = "default_pass_foldback")]
    pub pass_foldback_c: f64,
    /// Linear charger: junction temperature at which foldback has cut the current to zero, °C
    /// (above `pass_foldback_c`, at most 250). Default 150 (common practice: thermal shutdown of
    /// regulator and charger ICs near 150–165 °C).
    #[serde(default = "default_pass_shutdown")]
    pub pass_shutdown_c: f64,
    /// Freewheel (catch) diode drop, V (0 … 2); the buck-boost has two such diodes.
    #[serde(default = "default_catch_drop")]
    pub catch_diode_drop_v: f64,
    /// Inductor DC resistance, Ω (0 … 5).
    #[serde(default)]
    pub inductor_resistance_ohm: f64,
    /// Inductance, H (1e-7 … 0.1).
    #[serde(default = "default_inductance_conv")]
    pub inductance_h: f64,
    /// Switching frequency, Hz (1e3 … 5e6).
    #[serde(default = "default_fsw")]
    pub switching_frequency_hz: f64,
    /// Sum of switch rise and fall times, s (0 … 1e-5); switching loss ½·V·I·t·f.
    #[serde(default)]
    pub switch_transition_s: f64,
    /// Controller quiescent current from the input, A (0 … 0.5).
    #[serde(default)]
    pub quiescent_current_a: f64,
    /// Switching chargers: total gate charge of each switching transistor, C (0 … 1e-6); the
    /// driver, fed from the input, draws Q_g·f_sw per transistor (two for the buck-boost, one in
    /// its buck mode). Default 0 (not modelled; a bipolar switch has no gate charge — its base
    /// drive is not modelled). Small power MOSFETs: about 5–30 nC (common practice).
    #[serde(default)]
    pub gate_charge_c: f64,
    /// Switching chargers: inductor core loss while switching, W (0 … 10), held at its value at
    /// the design ripple and taken from the input. Default 0 (not modelled).
    #[serde(default)]
    pub core_loss_w: f64,
    /// Buck-boost: it runs as a buck (output switch held off, its diode conducting) while the
    /// buck duty it needs stays at or below this, switches both switches above it, and returns to
    /// buck mode once that duty falls 0.05 below it. 0 keeps it switching both. Range 0 or
    /// 0.2 … max_duty − 0.01; default the lower of 0.8 and max_duty − 0.05 (from memory: such
    /// controllers leave buck mode as the buck duty nears its limit, typically 0.8–0.9).
    #[serde(default)]
    pub buck_mode_max_duty: Option<f64>,
    /// UVLO: converter enables when the input rises to this, V (0 … 200).
    #[serde(default)]
    pub uvlo_on_v: f64,
    /// UVLO: converter locks out when the input falls below this, V (0 … uvlo_on_v).
    #[serde(default)]
    pub uvlo_off_v: f64,
    /// Least time the charger stays off after a lock-out or sleep before it may restart, s
    /// (0 … 10; default 0); a delay keeps a stalled generator from hiccuping every few ms.
    #[serde(default = "default_restart_delay")]
    pub restart_delay_s: f64,
    /// Soft-start ramp of the current reference after enabling, s (0 … 10).
    #[serde(default = "default_soft_start")]
    pub soft_start_s: f64,
    /// Switching chargers: input-voltage floor, V (0.5 … 1000, above `uvlo_off_v`); the charger
    /// trims its current so that its input stays at or above it. None: no floor.
    #[serde(default)]
    pub input_floor_v: Option<f64>,
    /// Input over-voltage limit, V (1 … 1000).
    #[serde(default = "default_input_ov")]
    pub input_overvoltage_v: f64,
    /// Whether the converter shuts down above the input over-voltage limit.
    #[serde(default)]
    pub overvoltage_shutdown: bool,
    /// Input capacitance, F (1e-7 … 1).
    #[serde(default = "default_cap_in")]
    pub input_capacitance_f: f64,
    /// Output capacitance, F (1e-7 … 1).
    #[serde(default = "default_cap_out")]
    pub output_capacitance_f: f64,
    /// Li-ion (and supercapacitor) termination current, A: the charge ends when the CV current
    /// falls below it; default C/10 of a Li-ion pack; none for a supercapacitor, whose charger
    /// holds its rated voltage (feeding the leakage).
    #[serde(default)]
    pub termination_current_a: Option<f64>,
    /// Lead-acid: leave absorption for float below this current, A; default C/50.
    #[serde(default)]
    pub absorption_exit_current_a: Option<f64>,
    /// Lead-acid: longest absorption stage before float, s (1 … 1e6).
    #[serde(default = "default_absorption_time")]
    pub absorption_max_s: f64,
    /// NiMH: the fast charge ends once the pack voltage has fallen this far below its peak
    /// (−ΔV), mV per cell (0 … 50; 0 turns the voltage-drop end off); default 5. Common practice:
    /// NiMH chargers end on about 5–10 mV/cell (NiCd chargers on 10–20).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub end_voltage_drop_mv_per_cell: Option<f64>,
    /// NiMH: the fast charge ends once the pack temperature rises faster than this (dT/dt),
    /// °C per minute (0 … 10; 0: no thermistor, the temperature end is off); default 1.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub end_temp_rise_c_per_min: Option<f64>,
    /// NiMH: both ends are ignored this long after the charger (re)starts, s (0 … 3600);
    /// default 60. Common practice: chargers wait one to several minutes, since a cell that sat
    /// unused can show a false peak when its charge begins.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub end_holdoff_s: Option<f64>,
    /// NiMH: the trickle (top-off) current after the fast charge ends, A (0 … 50, below
    /// `charge_current_a`); default C/30 of the pack (common practice: C/20 … C/40).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub trickle_current_a: Option<f64>,
}

fn default_charge_current() -> f64 {
    1.0
}
fn default_pass_theta_ja() -> f64 {
    62.5
}
fn default_pass_heat_capacity() -> f64 {
    1.0
}
fn default_pass_foldback() -> f64 {
    120.0
}
fn default_pass_shutdown() -> f64 {
    150.0
}
fn default_max_duty() -> f64 {
    0.95
}
fn default_catch_drop() -> f64 {
    0.45
}
fn default_inductance_conv() -> f64 {
    47e-6
}
fn default_fsw() -> f64 {
    150e3
}
fn default_restart_delay() -> f64 {
    0.0
}
fn default_soft_start() -> f64 {
    0.05
}
fn default_input_ov() -> f64 {
    40.0
}
fn default_cap_in() -> f64 {
    470e-6
}
fn default_cap_out() -> f64 {
    100e-6
}
fn default_absorption_time() -> f64 {
    7200.0
}

/// Battery chemistry.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Chemistry {
    /// Nickel-manganese-cobalt Li-ion (CV 4.20 V/cell).
    Nmc,
    /// Lithium cobalt oxide (CV 4.20 V/cell).
    Lco,
    /// Nickel-cobalt-aluminium (CV 4.20 V/cell).
    Nca,
    /// Lithium iron phosphate (CV 3.65 V/cell).
    Lfp,
    /// Lead-acid (flooded, AGM or gel; see `lead_acid_kind`).
    LeadAcid,
    /// Nickel-metal hydride (1.2 V/cell nominal): constant current ended on the voltage drop
    /// (−ΔV) or the temperature rise (dT/dt) at full, then a trickle.
    Nimh,
    /// Electric double-layer capacitor (supercapacitor) cells: capacitance, ESR and leakage,
    /// charged at constant current to their rated voltage.
    Supercap,
}

impl Chemistry {
    /// The word used in summaries.
    pub fn as_str(self) -> &'static str {
        match self {
            Chemistry::Nmc => "nmc",
            Chemistry::Lco => "lco",
            Chemistry::Nca => "nca",
            Chemistry::Lfp => "lfp",
            Chemistry::LeadAcid => "lead_acid",
            Chemistry::Nimh => "nimh",
            Chemistry::Supercap => "supercap",
        }
    }

    /// True for the lithium chemistries.
    pub fn is_lithium(self) -> bool {
        matches!(
            self,
            Chemistry::Nmc | Chemistry::Lco | Chemistry::Nca | Chemistry::Lfp
        )
    }
}

/// Lead-acid construction, which sets absorption and float defaults.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum LeadAcidKind {
    /// Vented (wet) cells.
    Flooded,
    /// Absorbed glass mat VRLA.
    #[default]
    Agm,
    /// Gel VRLA.
    Gel,
}

/// Li-ion charge temperature window (JEITA-style bands), °C.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct ChargeWindow {
    /// No charge below this, °C.
    pub min_c: f64,
    /// Reduced current below this (cool band), °C.
    pub cool_c: f64,
    /// Reduced CV voltage above this (warm band), °C.
    pub warm_c: f64,
    /// No charge above this, °C.
    pub max_c: f64,
    /// Current fraction allowed in the cool band (0 … 1).
    pub cool_current_fraction: f64,
    /// CV voltage drop per cell in the warm band, V (0 … 0.5).
    pub warm_cv_drop_v_per_cell: f64,
}

impl Default for ChargeWindow {
    fn default() -> Self {
        Self {
            min_c: 0.0,
            cool_c: 10.0,
            warm_c: 45.0,
            max_c: 60.0,
            cool_current_fraction: 0.5,
            warm_cv_drop_v_per_cell: 0.1,
        }
    }
}

/// The storage: a Li-ion pack (N_s × N_p cells), a lead-acid battery of N_s cells, a NiMH pack
/// or a bank of supercapacitor cells (N_s × N_p).
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Battery {
    /// `nmc`, `lco`, `nca`, `lfp`, `lead_acid`, `nimh` or `supercap`.
    pub chemistry: Chemistry,
    /// Lead-acid construction (`flooded`, `agm`, `gel`); ignored for Li-ion.
    #[serde(default)]
    pub lead_acid_kind: LeadAcidKind,
    /// Cells in series (1 … 200); a 12 V lead-acid block has 6.
    pub cells_series: u32,
    /// Strings in parallel (1 … 100).
    #[serde(default = "one_u32")]
    pub cells_parallel: u32,
    /// Capacity of the whole battery (pack), Ah (0.01 … 2000); lead-acid: the C10 rating.
    /// Required for every chemistry but `supercap`, whose charge follows from `capacitance_f`
    /// and its rated voltage (leave it out there).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub capacity_ah: Option<f64>,
    /// State of charge at the start (0 … 1).
    pub soc_start: f64,
    /// Series resistance per cell at 25 °C, Ω (0 … 1): Li-ion and NiMH R0; a supercapacitor's
    /// ESR.
    #[serde(default = "default_r0")]
    pub cell_r0_ohm: f64,
    /// Li-ion and NiMH RC-branch resistance per cell, Ω (0 … 1).
    #[serde(default = "default_r1")]
    pub cell_r1_ohm: f64,
    /// Li-ion and NiMH RC-branch capacitance per cell, F (1 … 1e6).
    #[serde(default = "default_c1")]
    pub cell_c1_f: f64,
    /// Arrhenius temperature of the resistances, K (0 … 10 000): R(T) = R25·exp(E·(1/T − 1/298.15)).
    #[serde(default = "default_activation")]
    pub resistance_activation_k: f64,
    /// Coulombic efficiency below full (0.5 … 1): Li-ion, default 0.998; NiMH, default 0.98
    /// (its charge acceptance falls further near full). Not used for lead-acid (Copetti's law) or
    /// a supercapacitor.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub coulombic_efficiency: Option<f64>,
    /// Charge limit per cell at 25 °C, V: Li-ion CV voltage, lead-acid absorption, NiMH the
    /// charger's backup voltage limit (default 1.60), a supercapacitor's rated voltage (default
    /// 2.70); default by chemistry.
    #[serde(default)]
    pub charge_v_per_cell: Option<f64>,
    /// Lead-acid float voltage per cell at 25 °C, V; default by kind.
    #[serde(default)]
    pub float_v_per_cell: Option<f64>,
    /// Lead-acid temperature compensation, mV/°C/cell (−10 … 0); default −3.
    #[serde(default)]
    pub temp_comp_mv_per_c_per_cell: Option<f64>,
    /// Lead-acid: the compensated limit is clamped to at most this, V/cell; default 2.50.
    #[serde(default)]
    pub max_compensated_v_per_cell: Option<f64>,
    /// Lead-acid: the compensated limit is clamped to at least this, V/cell; default 2.20.
    #[serde(default)]
    pub min_compensated_v_per_cell: Option<f64>,
    /// Mass, kg (0.001 … 1000).
    pub mass_kg: f64,
    /// Specific heat, J/(kg·K) (100 … 5000).
    #[serde(default = "default_cp")]
    pub specific_heat_j_per_kg_k: f64,
    /// Surface area exchanging heat, m² (1e-4 … 10).
    pub surface_area_m2: f64,
    /// Convective heat transfer coefficient, W/(m²·K) (0.1 … 100).
    #[serde(default = "default_h")]
    pub heat_transfer_w_per_m2_k: f64,
    /// Battery temperature at the start, °C; default ambient.
    #[serde(default)]
    pub temp_start_c: Option<f64>,
    /// Li-ion charge temperature window.
    #[serde(default)]
    pub charge_window: ChargeWindow,
    /// Supercapacitor: capacitance of one cell, F (0.01 … 100 000); required for `supercap`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub capacitance_f: Option<f64>,
    /// Supercapacitor: leakage current of one cell at its rated voltage, A (0 … 1); modelled as
    /// a resistance across the cell, so it falls with the voltage. Default 0. Makers give it after
    /// the cell has been held at its rated voltage for hours (72 h is usual), from microamps to a
    /// few milliamps by size.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub leakage_current_a: Option<f64>,
    /// Supercapacitor: the lowest cell voltage the load can use, V (0 … the rated voltage);
    /// default half the rated voltage (the usable energy is then 1 − (1/2)² = 75 % of the
    /// stored energy). Figures only: `check` and the summary report the energy above it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_v_per_cell: Option<f64>,
    /// Li-ion: the cell's open-circuit voltage against SOC (2 … 50 points, SOC from 0 to 1 and
    /// OCV both strictly increasing, each 1.5 … 4.6 V). SOC 1 is full at the top point, which must
    /// be at least the CV voltage. Default: the chemistry's built-in curve.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ocv_curve: Option<Vec<OcvPoint>>,
}

/// One point of a Li-ion cell's open-circuit voltage curve.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct OcvPoint {
    /// State of charge (0 … 1).
    pub soc: f64,
    /// Cell open-circuit voltage at that SOC, V (1.5 … 4.6).
    pub ocv_v: f64,
}

/// Lead-acid: default upper clamp of the temperature-compensated limit, V/cell (the model's
/// default for `max_compensated_v_per_cell`).
pub const DEFAULT_MAX_COMPENSATED_V: f64 = 2.50;
/// Lead-acid: default lower clamp of the temperature-compensated limit, V/cell.
pub const DEFAULT_MIN_COMPENSATED_V: f64 = 2.20;

fn one_u32() -> u32 {
    1
}
fn default_r0() -> f64 {
    0.035
}
fn default_r1() -> f64 {
    0.02
}
fn default_c1() -> f64 {
    2000.0
}
fn default_activation() -> f64 {
    2500.0
}
fn default_cp() -> f64 {
    1000.0
}
fn default_h() -> f64 {
    7.0
}

/// A USB port on the converter output and the device plugged into it. The converter (buck or
/// buck-boost) holds the bus at `bus_v` up to `port_current_a`; the device is a current-limited
/// linear charger feeding its own cell (the setup's `battery`), drawing up to `device_current_a`
/// (less in the CV taper), and it cuts itself off when the bus falls below `device_cutoff_v`.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct UsbPort {
    /// Bus voltage the converter holds (its CV set point), V (4.0 … 5.5); 5.0 for USB.
    #[serde(default = "default_bus_v")]
    pub bus_v: f64,
    /// Port current limit (the converter's CC limit), A (0.05 … 5); 0.5 for a USB 2.0 port,
    /// up to 1.5 for a Battery Charging 1.2 dedicated charging port.
    #[serde(default = "default_port_current")]
    pub port_current_a: f64,
    /// Most current the device draws from the bus (its input current limit), A (0.01 … 5).
    pub device_current_a: f64,
    /// Headroom the device's charger needs between bus and cell at `device_current_a`, V
    /// (0.01 … 2); its pass element is then fully on. Default 0.3.
    #[serde(default = "default_device_dropout")]
    pub device_dropout_v: f64,
    /// The device disconnects when the bus falls below this, V (2.5 … 5.5); default 4.40, the
    /// lowest VBUS a USB 2.0 low-power device must still work at.
    #[serde(default = "default_device_cutoff")]
    pub device_cutoff_v: f64,
    /// The device reconnects once the bus is back at or above this, V (above `device_cutoff_v`,
    /// at most `bus_v`); default 4.60.
    #[serde(default = "default_device_reconnect")]
    pub device_reconnect_v: f64,
    /// Least time the device stays off after a cut-off before it reconnects, s (0.1 … 60);
    /// default 2.
    #[serde(default = "default_device_reconnect_delay")]
    pub device_reconnect_delay_s: f64,
    /// Time the device takes to ramp its draw from zero to its demand after attaching, s
    /// (0 … 10; 0: at once); default 0.5.
    #[serde(default = "default_device_ramp")]
    pub device_ramp_s: f64,
    /// The device ends its charge when its CV current falls below this, A (0 … 50); default C/10
    /// of its cell.
    #[serde(default)]
    pub device_termination_current_a: Option<f64>,
    /// Input-voltage regulation of the device's charger, V (2.5 … 5.5, below `bus_v`; at or below
    /// `device_cutoff_v` it never acts): when the bus sags towards it the device draws less, so
    /// that a weak source settles at this voltage instead of collapsing under the full draw and
    /// cutting the device off. Default 4.5: USB charger ICs hold their input at a programmable
    /// threshold of about 4.4–4.6 V this way (input-voltage dynamic power management).
    #[serde(default = "default_device_input_regulation")]
    pub device_input_regulation_v: f64,
    /// Lower edge of the bus regulation band, V (3 … 5.5); default 4.75 (USB 2.0 §7.2.1; BC 1.2).
    #[serde(default = "default_band_low")]
    pub band_low_v: f64,
    /// Upper edge of the bus regulation band, V (above `band_low_v`, at most 6); default 5.25.
    #[serde(default = "default_band_high")]
    pub band_high_v: f64,
}

fn default_bus_v() -> f64 {
    5.0
}
fn default_port_current() -> f64 {
    1.5
}
fn default_device_dropout() -> f64 {
    0.3
}
fn default_device_cutoff() -> f64 {
    4.4
}
fn default_device_reconnect() -> f64 {
    4.6
}
fn default_device_reconnect_delay() -> f64 {
    2.0
}
fn default_device_ramp() -> f64 {
    0.5
}
fn default_device_input_regulation() -> f64 {
    4.5
}
fn default_band_low() -> f64 {
    4.75
}
fn default_band_high() -> f64 {
    5.25
}

impl Setup {
    /// The word naming what the converter feeds, used in summaries: `battery` or `usb_5v`.
    pub fn output_word(&self) -> &'static str {
        if self.usb.is_some() {
            "usb_5v"
        } else {
            "battery"
        }
    }
}

/// Numerical settings.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Solver {
    /// Relative tolerance of the integrator, Dopri5 (fast) or Radau5 (detailed) (1e-10 … 1e-2).
    pub rtol: f64,
    /// Absolute tolerance (1e-12 … 1e-2).
    pub atol: f64,
    /// Largest step, s (1e-4 … 1).
    pub max_step_s: f64,
    /// Trace sampling interval, s (0.001 … 60).
    pub trace_interval_s: f64,
}

impl Default for Solver {
    fn default() -> Self {
        Self {
            rtol: 1e-4,
            atol: 1e-8,
            max_step_s: 0.1,
            trace_interval_s: 0.1,
        }
    }
}
