//! Thin entry point: parse arguments, run, print the error chain, exit with the contract's code.

use clap::Parser;

fn main() {
    let cli = crankcharge::cli::Cli::parse();
    let code = crankcharge::cli::run(cli);
    std::process::exit(code);
}
