//! Reading results: trace, events, summary figures and statistics. Never reaches back into the model.

pub mod episodes;
pub mod events;
pub mod fit;
pub mod invariants;
pub mod ledger;
pub mod measured;
pub mod operator_fit;
pub mod pareto;
pub mod stats;
pub mod summary;
pub mod trace;
