//! The run's memory bound (`--max-memory`, default half the machine): parsed, turned into the
//! per-chunk budget the engine sizes its batches by, and checked before work that would exceed
//! it (a model's activations per sample, a movie to draw, a file to read), so a hostile or
//! mistaken size is refused with an estimate instead of exhausting the machine.

use crate::{Error, Result};
use std::sync::atomic::{AtomicU64, Ordering};

/// Share of the machine's memory a run takes by default.
pub const DEFAULT_SHARE: f64 = 0.5;

/// The bound in bytes; 0 until set (then [`default_bytes`] applies).
static LIMIT: AtomicU64 = AtomicU64::new(0);

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

/// Set the bound for the rest of the process, and the engine's per-chunk budget from it.
pub fn set_limit(max: u64, threads: usize) {
    LIMIT.store(max.max(1), Ordering::Relaxed);
    crate::engine::batch::set_budget_bytes(chunk_budget(max, threads));
}

/// The bound in bytes.
pub fn limit() -> u64 {
    match LIMIT.load(Ordering::Relaxed) {
        0 => default_bytes(),
        set => set,
    }
}

/// A size for messages, in the largest binary unit that keeps it at least 1.
pub fn human(bytes: u64) -> String {
    let units = [("GiB", 30), ("MiB", 20), ("KiB", 10)];
    match units.iter().find(|(_, shift)| bytes >= 1u64 << shift) {
        Some((unit, shift)) => format!("{:.1} {unit}", bytes as f64 / (1u64 << shift) as f64),
        None => format!("{bytes} bytes"),
    }
}

/// Refuse `what` when it needs `bytes` (`None`: more than this machine can address) and that
/// exceeds `share` of the bound. `what` names the thing and its size, e.g. "model 'm.onnx':
/// one sample's activations".
pub fn check(what: &str, bytes: Option<u64>, share: f64) -> Result<()> {
    let allowed = (limit() as f64 * share) as u64;
    match bytes {
        Some(b) if b <= allowed => Ok(()),
        _ => Err(Error::TooLarge(format!(
            "{what} would need {}, more than the {} allowed (--max-memory {}); raise --max-memory \
             if this machine has the memory, or make it smaller",
            bytes.map_or("more memory than this machine can address".to_string(), human),
            human(allowed),
            human(limit())
        ))),
    }
}

/// Bytes of `count` f32 values of shape `dims`, `None` on overflow.
pub fn f32_bytes(dims: &[usize]) -> Option<u64> {
    dims.iter().try_fold(4u64, |n, &d| n.checked_mul(d as u64))
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

    #[test]
    fn sizes_are_counted_without_overflow() {
        assert_eq!(f32_bytes(&[2, 3]), Some(24));
        assert_eq!(f32_bytes(&[usize::MAX, 2]), None);
        let err = check("a movie", None, 0.5).unwrap_err().to_string();
        assert!(err.contains("a movie") && err.contains("--max-memory"), "{err}");
        assert!(check("a byte", Some(1), 0.5).is_ok());
    }
}
