//! The `sufficit` command: parse arguments, run, and print any error as one paragraph.

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = sufficit::cli::Cli::parse();
    match sufficit::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("sufficit: error: {e}");
            ExitCode::FAILURE
        }
    }
}
