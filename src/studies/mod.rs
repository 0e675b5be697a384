//! Studies built on the one session engine: run, compare, sweep, Monte Carlo; and the two that
//! run no session: check (static design figures) and fit (generator constants from measurements).

pub mod check;
pub mod check_usb;
pub mod compare;
pub mod fit;
pub mod montecarlo;
pub mod pages;
pub mod progress;
pub mod run;
pub mod session;
pub mod sweep;
