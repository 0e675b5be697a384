//! Time integration of the plant: segments between located events, fixed-grid trace sampling.

pub mod engine;
pub mod fidelity;
pub mod mode;
pub mod observe;
pub mod plant;
pub mod progress;
pub mod replay;
pub mod state;
pub mod stiff;
pub mod transitions;
pub mod usb_port;
pub mod usb_rules;
mod watcher;

pub use engine::{simulate, simulate_watched, Fidelity, Method, SimError, SimOptions, SimResult};
pub use progress::Progress;
