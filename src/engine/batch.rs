//! Large batches: cut into chunks that fit a memory budget and run the chunks in parallel.

use crate::{Result, Tensor};
use ndarray::{Axis, Slice};
use rayon::prelude::*;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Default activation memory budget for one chunk's tape: 1 GiB.
pub const DEFAULT_BUDGET_BYTES: usize = 1 << 30;

static BUDGET: AtomicUsize = AtomicUsize::new(DEFAULT_BUDGET_BYTES);

/// The activation memory budget of one chunk's tape (chunks run one per thread), set from
/// `--max-memory`.
pub fn budget_bytes() -> usize {
    BUDGET.load(Ordering::Relaxed)
}

/// Set the per-chunk budget for the rest of the process.
pub fn set_budget_bytes(bytes: usize) {
    BUDGET.store(bytes.max(1), Ordering::Relaxed);
}

/// Samples per chunk so that a chunk's tape (activations plus same-sized gradients) stays
/// within `budget_bytes`; at least one.
pub fn chunk_len(bytes_per_sample: usize, budget_bytes: usize) -> usize {
    (budget_bytes / (2 * bytes_per_sample.max(1))).max(1)
}

/// Apply `f` to consecutive chunks of `input` (split on axis 0) in parallel; results keep
/// chunk order.
pub fn map_chunks<T: Send>(input: &Tensor, chunk: usize, f: impl Fn(Tensor) -> Result<T> + Sync) -> Result<Vec<T>> {
    let n = input.shape().first().copied().unwrap_or(0);
    let starts: Vec<usize> = (0..n).step_by(chunk.max(1)).collect();
    starts
        .par_iter()
        .map(|&s| {
            crate::interrupt::check()?;
            let part = input.slice_axis(Axis(0), Slice::from(s..(s + chunk).min(n))).to_owned();
            f(part)
        })
        .collect()
}

/// Join per-chunk tensors back along axis 0.
pub fn join(parts: &[Tensor]) -> Result<Tensor> {
    let views: Vec<_> = parts.iter().map(|t| t.view()).collect();
    ndarray::concatenate(Axis(0), &views).map_err(|e| crate::Error::Usage(format!("chunks do not join: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{ArrayD, IxDyn};

    #[test]
    fn chunks_cover_the_batch_in_order() {
        let x = ArrayD::from_shape_fn(IxDyn(&[10, 2]), |i| (i[0] * 2 + i[1]) as f32);
        let parts = map_chunks(&x, 3, |c| Ok(c.mapv(|v| v * 2.0))).unwrap();
        assert_eq!(parts.len(), 4);
        assert_eq!(join(&parts).unwrap(), x.mapv(|v| v * 2.0));
    }

    #[test]
    fn chunk_length_respects_the_budget() {
        assert_eq!(chunk_len(1000, 10_000), 5);
        assert_eq!(chunk_len(1 << 40, 10), 1);
    }
}
