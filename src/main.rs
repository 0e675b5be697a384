//! Thin entry point: parse arguments, run, print the error chain, exit with the contract's code.
//! A panic is a bug; it is still reported with exit code 3 (simulation failed), never 101.

use clap::Parser;

fn main() {
    let cli = crankcharge::cli::Cli::parse();
    let code = match std::panic::catch_unwind(|| crankcharge::cli::run(cli)) {
        Ok(code) => code,
        Err(_) => {
            eprintln!(
                "crankcharge: internal error (please report it with the inputs that caused it)"
            );
            crankcharge::cli::EXIT_SIM
        }
    };
    std::process::exit(code);
}
