//! The memory bound of a run (`--max-memory`): parsed, defaulted to a share of the machine,
//! turned into the per-chunk budget the engine sizes its batches by, and checked against each
//! model's smallest possible working set before any work starts.

use super::plan::Plan;
use crate::{Error, Result};

/// Share of the machine's memory a study takes by default.
pub const DEFAULT_SHARE: f64 = 0.5;

/// Work items held at once per thread by the heaviest stage (attribution: input, output and
/// gradient tapes of one chunk; see `attribution::path`).
const TAPES_PER_THREAD: usize = 3;

/// Parse `512M`, `4G`, `2.5G` or a number of bytes.
pub fn parse_size(s: &str) -> Result<u64> {
    let t = s.trim();
    let (num, mult) = match t.char_indices().last() {
        Some((i, c)) if c.is_ascii_alphabetic() => {
            let m = match c.to_ascii_uppercase() {
                'K' => 1u64 << 10,
                'M' => 1 << 20,
                'G' => 1 << 30,
                'T' => 1 << 40,
                _ => 0,
            };
            (&t[..i], m)
        }
        _ => (t, 1),
    };
    match num.trim().parse::<f64>() {
        Ok(v) if v > 0.0 && v.is_finite() && mult > 0 => Ok((v * mult as f64) as u64),
        _ => Err(Error::Usage(format!("--max-memory '{s}': expected a size such as 512M, 4G or 2.5G"))),
    }
}

/// Total memory of this machine (Linux /proc/meminfo), if known.
pub fn machine_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    line.split_whitespace().nth(1)?.parse::<u64>().ok().map(|kb| kb * 1024)
}

/// The default bound: half the machine, or 4 GiB when the machine's size is unknown.
pub fn default_bytes() -> u64 {
    machine_bytes().map_or(4 << 30, |b| (b as f64 * DEFAULT_SHARE) as u64)
}

/// The per-chunk budget for `max` bytes shared by `threads` workers (half of it for tapes, the
/// rest for movies, weights and results).
pub fn chunk_budget(max: u64, threads: usize) -> usize {
    (max / 2 / threads.max(1) as u64) as usize
}

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
            return Err(Error::Usage(format!(
                "model '{}' needs at least about {} MiB with {threads} threads ({:.1} MiB per window, movies \
                 up to {} frames), more than half of --max-memory {} MiB: raise --max-memory or lower --threads",
                m.path.display(),
                need >> 20,
                m.bytes_per_window as f64 / (1 << 20) as f64,
                longest_movie(plan, i),
                max >> 20
            )));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_parse_with_binary_units() {
        assert_eq!(parse_size("512M").unwrap(), 512 << 20);
        assert_eq!(parse_size("2.5g").unwrap(), (2.5 * (1u64 << 30) as f64) as u64);
        assert_eq!(parse_size("1000").unwrap(), 1000);
        assert!(parse_size("lots").is_err() && parse_size("-1G").is_err() && parse_size("3Q").is_err());
        assert_eq!(chunk_budget(8 << 30, 2), 2 << 30);
    }
}
