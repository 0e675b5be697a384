//! Studies built on the one session engine: run, and (later) compare, sweep, Monte Carlo.

pub mod run;
pub mod session;
