//! Command-line interface (clap derive): sub-commands, shared options, exit codes.
//!
//! Exit codes: 0 done; 1 a flagged verdict under `--strict`; 2 bad input or usage;
//! 3 the simulation itself failed.

use std::io::Write;

use clap::{Parser, Subcommand};

use crate::studies::run::RunArgs;

pub use crate::studies::outcome::{
    parse_duration, say, Failure, EXIT_FLAGGED, EXIT_INPUT, EXIT_OK, EXIT_SIM,
};

/// Simulates hand-cranked chargers: operator, drive, generator, diode, converter and battery in time.
#[derive(Debug, Parser)]
#[command(name = "crankcharge", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

/// The sub-commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Simulate one charging session and write trace, events, summary and charts.
    Run(RunArgs),
    /// Static design figures of a setup (no simulation), then the cautions.
    Check(crate::studies::check::CheckArgs),
    /// Run every setup with every crank profile on one seed and tabulate the results.
    Compare(crate::studies::compare::CompareArgs),
    /// One run per value of a setup or profile field.
    Sweep(crate::studies::sweep::SweepArgs),
    /// A population of operators (seeds and capacities) in parallel, with percentiles.
    Montecarlo(crate::studies::montecarlo::MontecarloArgs),
    /// Fit a generator's back-EMF constant and resistance to measured points.
    FitGenerator(crate::studies::fit::FitArgs),
    /// Vary several fields at once over a population of operators; constraints, an objective, the best setup.
    Search(crate::studies::search::SearchArgs),
    /// Estimate an operator (cadence, wander, ripple, rests, CP and W′) from recorded crank logs; write a profile.
    FitOperator(crate::studies::fit_operator::FitOperatorArgs),
    /// Set a simulated run against a measured battery log: error per channel, charge error, overlay chart.
    CompareMeasured(crate::studies::compare_measured::CompareMeasuredArgs),
    /// Join the parts of a sharded search into the study the unsharded search would write.
    Merge(crate::studies::merge::MergeArgs),
}

/// Runs a parsed command line and returns the exit code.
pub fn run(cli: Cli) -> i32 {
    crate::output::rundir::install_interrupt_cleanup();
    let outcome = match cli.command {
        Command::Run(a) => crate::studies::run::run(&a),
        Command::Check(a) => crate::studies::check::run(&a),
        Command::Compare(a) => crate::studies::compare::run(&a),
        Command::Sweep(a) => crate::studies::sweep::run(&a),
        Command::Montecarlo(a) => crate::studies::montecarlo::run(&a),
        Command::FitGenerator(a) => crate::studies::fit::run(&a),
        Command::Search(a) => crate::studies::search::run(&a),
        Command::Merge(a) => crate::studies::merge::run(&a),
        Command::FitOperator(a) => crate::studies::fit_operator::run(&a),
        Command::CompareMeasured(a) => crate::studies::compare_measured::run(&a),
    };
    match outcome {
        Ok(code) => code,
        Err(f) => {
            let mut err = std::io::stderr().lock();
            let _ = writeln!(err, "crankcharge: error: {f}");
            f.code()
        }
    }
}
