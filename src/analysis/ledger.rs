//! What a run booked besides its trace: the energy ledger's totals and the solver's counts.
//! The integrator fills them; the summary and the invariants read them.

/// Totals of the energy ledger, J (charge in A·s).
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct Ledger {
    pub operator_work_j: f64,
    pub kinetic_change_j: f64,
    pub drive_loss_j: f64,
    pub friction_j: f64,
    pub copper_j: f64,
    pub brush_j: f64,
    pub diode_j: f64,
    pub converter_loss_j: f64,
    pub battery_terminal_j: f64,
    pub battery_ohmic_j: f64,
    pub battery_coulombic_j: f64,
    pub stored_chemical_j: f64,
    pub rc_change_j: f64,
    /// Change of the energy in inductances and capacitors (detailed fidelity), J.
    pub field_change_j: f64,
    pub charge_as: f64,
    /// Heat in a USB device's charger between bus and cell, J (0 for a battery output).
    pub device_loss_j: f64,
    /// Lead-acid: chemical energy that left as gas, J (0 for Li-ion).
    pub gas_j: f64,
    /// Generator iron loss, J.
    pub iron_loss_j: f64,
    /// Work done against the generator's cogging torque, J: the change of its potential energy
    /// (it does no work over a period: it only stores and returns).
    pub cogging_change_j: f64,
    /// Gate-drive and inductor-core loss of a switching charger, J.
    pub overhead_loss_j: f64,
    /// Heat in a linear charger's pass element, J.
    pub pass_heat_j: f64,
    /// NiMH: heat of the oxygen recombined in the cells (the charge they did not store), J.
    pub recombination_heat_j: f64,
    /// Supercapacitor: heat of the leakage current, J.
    pub leakage_j: f64,
}

impl Ledger {
    /// Relative closure error |W − ΣE| / max(W, 1 J).
    pub fn closure_error(&self) -> f64 {
        self.imbalance_j().abs() / self.operator_work_j.abs().max(1.0)
    }

    /// Operator work minus everything it went to, W − ΣE, J.
    pub fn imbalance_j(&self) -> f64 {
        let out = self.kinetic_change_j
            + self.drive_loss_j
            + self.friction_j
            + self.copper_j
            + self.brush_j
            + self.diode_j
            + self.converter_loss_j
            + self.battery_ohmic_j
            + self.battery_coulombic_j
            + self.stored_chemical_j
            + self.rc_change_j
            + self.field_change_j
            + self.device_loss_j
            + self.gas_j
            + self.iron_loss_j
            + self.cogging_change_j
            + self.overhead_loss_j
            + self.pass_heat_j
            + self.recombination_heat_j
            + self.leakage_j;
        self.operator_work_j - out
    }
}

/// Solver statistics.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct SolverStats {
    /// Right-hand-side evaluations, including those of finite-difference Jacobians.
    pub evaluations: u64,
    pub accepted_steps: u64,
    pub rejected_steps: u64,
    pub segments: u64,
    pub mode_changes: u64,
    /// Implicit methods: Jacobians formed, LU decompositions, Newton iterations, and step
    /// attempts abandoned because Newton did not converge (0 for Dopri5).
    pub jacobians: u64,
    pub lu_decompositions: u64,
    pub newton_iterations: u64,
    pub newton_failures: u64,
    /// Implicit methods: stalls handed to a short Dopri5 bridge.
    pub explicit_bridges: u64,
    /// Implicit methods: accepted steps taken again because they created or lost energy.
    pub energy_retries: u64,
    /// Integration method (`dopri5`, `radau5`); after the figures that came first, so their
    /// order in `summary.json` is unchanged.
    pub method: &'static str,
    /// The relative tolerance and the largest step, s, this result was integrated with: the
    /// setup's, or the tighter pair of a rerun.
    pub rtol: f64,
    pub max_step_s: f64,
    /// Times the session was run again at a tighter tolerance because its energy ledger did not
    /// close at the setup's (0 or 1; `studies::session::run_session_watched`).
    pub tolerance_reruns: u32,
    /// The integration that was run again: its tolerance and ledger closure (absent without a
    /// rerun: a `null` in `summary.json` would read as a non-finite figure).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub first_attempt: Option<super::invariants::Attempt>,
}
