//! Ctrl-C: the first press asks long work to stop at the next chunk boundary (so every file
//! already written is complete and the run ends with [`Error::Interrupted`]); a second press
//! ends the process at once.

use crate::{Error, Result};
use std::sync::atomic::{AtomicBool, Ordering};

static REQUESTED: AtomicBool = AtomicBool::new(false);

/// Install the handler (once, from `main`). Without it (library use) nothing is ever interrupted.
pub fn install() {
    let _ = ctrlc::set_handler(|| {
        if REQUESTED.swap(true, Ordering::SeqCst) {
            std::process::exit(crate::error::exit::INTERRUPTED as i32);
        }
        eprintln!("\nsufficit: stopping after the current step (press Ctrl-C again to stop at once)");
    });
}

/// `Err(Error::Interrupted)` once a stop was asked for: call between chunks of long work.
pub fn check() -> Result<()> {
    if REQUESTED.load(Ordering::Relaxed) {
        Err(Error::Interrupted)
    } else {
        Ok(())
    }
}
