//! The `sufficit` command: parse arguments, run, and print any error as one paragraph with an
//! exit code naming its kind (docs/errors.md).

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = sufficit::cli::Cli::parse();
    sufficit::interrupt::install();
    match sufficit::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("sufficit: error: {e}");
            ExitCode::from(e.exit_code())
        }
    }
}
