//! A study's memory check: each model's smallest possible working set against the bound
//! (`--max-memory`, see [`crate::memory`]) before any work starts.

use super::plan::Plan;
use crate::memory::human;
use crate::{Error, Result};

/// Work items held at once per thread by the heaviest stage (attribution: input, output and
/// gradient tapes of one chunk; see `attribution::path`).
const TAPES_PER_THREAD: usize = 3;

/// Frames of model `i`'s longest stimulus movie.
fn longest_movie(plan: &Plan, i: usize) -> usize {
    plan.shared.iter().filter(|s| s.model == i).map(|s| s.frames).max().unwrap_or(0)
}

/// The least memory model `i` needs (see [`check`]).
pub fn least_bytes(plan: &Plan, i: usize, threads: usize) -> u64 {
    let m = &plan.models[i];
    (TAPES_PER_THREAD * 2 * m.bytes_per_window * threads + 2 * longest_movie(plan, i) * m.frame_bytes) as u64
}

/// The least memory each model needs: one window per chunk on every thread (three tapes at
/// once in attribution), plus its longest stimulus movie twice (the movie and its windows in
/// flight). Refuses the run, before any work, when that exceeds half of `max`.
pub fn check(plan: &Plan, max: u64, threads: usize) -> Result<()> {
    for (i, m) in plan.models.iter().enumerate() {
        let need = least_bytes(plan, i, threads);
        if need > max / 2 {
            return Err(Error::TooLarge(format!(
                "model '{}' needs at least about {} with {threads} threads ({} per window, movies up to {} \
                 frames), more than half of --max-memory {}: raise --max-memory or lower --threads",
                m.path.display(),
                human(need),
                human(m.bytes_per_window as u64),
                longest_movie(plan, i),
                human(max)
            )));
        }
    }
    Ok(())
}
