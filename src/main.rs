//! The `sufficit` command: parse arguments, run, and print any error as one paragraph with an
//! exit code naming its kind (docs/errors.md).

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    quiet_on_closed_pipe();
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

/// When the reader of our output goes away (`sufficit stimulus --list | head -1`), end quietly as
/// other command-line tools do, instead of panicking in `println!` (Rust ignores SIGPIPE by
/// default, so a write to a closed pipe fails and `println!` panics; restoring the default
/// action is common practice for command-line programs).
#[cfg(unix)]
fn quiet_on_closed_pipe() {
    // SAFETY: sets the action of one signal to its default, before any other thread runs.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}

#[cfg(not(unix))]
fn quiet_on_closed_pipe() {}
