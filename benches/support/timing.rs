//! Timing and memory helpers shared by the benchmarks.

// Each benchmark includes this file as its own module and uses part of it.
#![allow(dead_code)]

use std::time::{Duration, Instant};

/// Wall times of `repeats` runs of `f` after one warm-up, sorted (first = best,
/// middle = median).
pub fn samples(repeats: usize, mut f: impl FnMut()) -> Vec<Duration> {
    f();
    let mut t: Vec<Duration> = (0..repeats)
        .map(|_| {
            let s = Instant::now();
            f();
            s.elapsed()
        })
        .collect();
    t.sort();
    t
}

/// The median of sorted samples.
pub fn median(sorted: &[Duration]) -> Duration {
    sorted[sorted.len() / 2]
}

/// Peak resident memory of this process so far (Linux VmHWM), in MiB.
pub fn peak_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| s.lines().find(|l| l.starts_with("VmHWM:")).map(String::from))
        .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse::<f64>().ok()))
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// CPU seconds (user + system, all threads) this process has used so far, from /proc/self/stat
/// (fields 14 and 15, in USER_HZ = 100 ticks per second, the fixed Linux ABI value).
pub fn cpu_seconds() -> f64 {
    std::fs::read_to_string("/proc/self/stat")
        .ok()
        .and_then(|s| {
            // Fields after the command name (which is in parentheses and may hold spaces).
            let rest = s.rsplit_once(')')?.1;
            let f: Vec<&str> = rest.split_whitespace().collect();
            Some((f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?) / 100.0)
        })
        .unwrap_or(f64::NAN)
}
