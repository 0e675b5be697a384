//! The model fidelity a session runs at: which electrical states are solved algebraically and
//! which are integrated. Below the plant and the engine, which both need it.

/// Model fidelity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Fidelity {
    /// Fast electrical states solved algebraically (default).
    Fast,
    /// Every electrical state integrated.
    Detailed,
}

impl Fidelity {
    /// The word used in summaries.
    pub fn as_str(self) -> &'static str {
        match self {
            Fidelity::Fast => "fast",
            Fidelity::Detailed => "detailed",
        }
    }
}
