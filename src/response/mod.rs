//! Responses and protocol metrics: slide the model's window over a stimulus movie (frame `t` is
//! predicted from frames `t-L+1 ..= t`; frames before the movie are mean luminance), collect
//! every cell's rate, locate each cell's receptive field, and measure the protocol's effect.

pub mod measure;
mod plot;
mod prefix;
mod write;

pub use plot::Responses;
pub use prefix::PrefixRates;
pub use write::write_responses;

use crate::engine::batch::{budget_bytes, chunk_len};
use crate::model::Model;
use crate::{Error, Result};
use ndarray::{s, Array2, Array3, Array4, Axis, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;

/// Model windows `[n, L, H, W]` ending at frames `first .. first + n` of `movie`.
fn windows(movie: &Array3<f32>, lags: usize, first: usize, n: usize) -> Array4<f32> {
    windows_at(movie, lags, &(first..first + n).collect::<Vec<_>>())
}

/// Model windows `[ends.len(), L, H, W]`, one ending at each frame of `ends`; frames before the
/// movie are mean luminance.
pub fn windows_at(movie: &Array3<f32>, lags: usize, ends: &[usize]) -> Array4<f32> {
    let (_, h, w) = movie.dim();
    let mut out = Array4::zeros((ends.len(), lags, h, w));
    for (i, &t) in ends.iter().enumerate() {
        for l in 0..lags {
            // Lag l of the window ending at t is frame t - (lags - 1) + l; earlier is gray.
            if let Some(f) = (t + l + 1).checked_sub(lags) {
                out.slice_mut(s![i, l, .., ..]).assign(&movie.index_axis(Axis(0), f));
            }
        }
    }
    out
}

/// Check the movie's frame size against the model's input.
pub fn check_size(model: &Model, movie: &Array3<f32>) -> Result<()> {
    let b = &model.binding;
    let (_, h, w) = movie.dim();
    if (h, w) != (b.height, b.width) {
        return Err(Error::Usage(format!(
            "the stimulus frames are {h}x{w} pixels but model '{}' takes {}x{}; make the stimulus with --model",
            model.path.display(),
            b.height,
            b.width
        )));
    }
    Ok(())
}

/// Rates `[frames, cells]` (output 0, flattened per sample) for every frame of `movie`.
/// `progress` is called with the number of frames finished in each chunk.
pub fn rates(model: &Model, movie: &Array3<f32>, progress: &(dyn Fn(usize) + Sync)) -> Result<Array2<f32>> {
    rates_with(model, movie, &[], progress)
}

/// As [`rates`], with values overridden during every forward pass (ablation).
pub fn rates_with(
    model: &Model,
    movie: &Array3<f32>,
    overrides: &[crate::engine::Override],
    progress: &(dyn Fn(usize) + Sync),
) -> Result<Array2<f32>> {
    check_size(model, movie)?;
    let g = &model.graph;
    let frames = movie.shape()[0];
    let chunk = chunk_len(g.bytes_per_sample(), budget_bytes()).min(256);
    let starts: Vec<usize> = (0..frames).step_by(chunk).collect();
    let parts: Vec<Array2<f32>> = starts
        .par_iter()
        .map(|&first| {
            crate::interrupt::check()?;
            let n = chunk.min(frames - first);
            let input = model.binding.to_model_input(windows(movie, model.binding.lags, first, n));
            let r = per_sample(g.forward(input, overrides)?.outputs()[0])?;
            progress(n);
            Ok(r)
        })
        .collect::<Result<_>>()?;
    stack(&parts)
}

/// A model output `[n, ...]` as rows of cells `[n, cells]` (each sample flattened).
pub(crate) fn per_sample(out: &crate::Tensor) -> Result<Array2<f32>> {
    let n = out.shape()[0];
    let cells = out.len() / n.max(1);
    out.as_standard_layout().into_owned().into_shape_with_order((n, cells)).map_err(|e| Error::Usage(e.to_string()))
}

/// Chunks of rates stacked in order.
pub(crate) fn stack(parts: &[Array2<f32>]) -> Result<Array2<f32>> {
    let views: Vec<_> = parts.iter().map(|p| p.view()).collect();
    ndarray::concatenate(Axis(0), &views).map_err(|e| Error::Usage(e.to_string()))
}

/// Receptive-field centre (row, column, in pixels from the top-left corner) of every cell: the
/// centroid of the squared input gradient summed over lags, averaged over a gray window and a few
/// low-contrast noise windows (a gray window alone can sit where a rectifier has no gradient).
pub fn rf_centres(model: &Model, seed: u64) -> Result<Vec<(f64, f64)>> {
    let b = &model.binding;
    let g = &model.graph;
    let probes = 9;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut win = Array4::<f32>::zeros((probes, b.lags, b.height, b.width));
    win.slice_mut(s![1.., .., .., ..]).mapv_inplace(|_| rng.random_range(-0.3..0.3));
    let input = b.to_model_input(win);
    let tape = g.forward(input, &[])?;
    let out_id = g.outputs[0];
    let out_shape = tape.value(out_id).shape().to_vec();
    let cells: usize = out_shape[1..].iter().product();
    let mut centres = Vec::with_capacity(cells);
    for c in 0..cells {
        let mut seed_t = ndarray::ArrayD::<f32>::zeros(IxDyn(&out_shape));
        for p in 0..probes {
            seed_t.index_axis_mut(Axis(0), p).as_slice_mut().ok_or_else(|| Error::Usage("output layout".into()))?[c] =
                1.0;
        }
        let grad = tape.gradients(&[(out_id, seed_t)], &[g.input])?.remove(0);
        let grad = b.from_model_input(&grad)?;
        let map = grad.mapv(|v| (v as f64) * (v as f64)).sum_axis(Axis(0)).sum_axis(Axis(0));
        let total = map.sum();
        centres.push(if total > 0.0 {
            let r = map.indexed_iter().map(|((y, _), v)| (y as f64 + 0.5) * v).sum::<f64>() / total;
            let c = map.indexed_iter().map(|((_, x), v)| (x as f64 + 0.5) * v).sum::<f64>() / total;
            (r, c)
        } else {
            (b.height as f64 / 2.0, b.width as f64 / 2.0)
        });
    }
    Ok(centres)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn windows_end_at_their_frame_and_start_gray() {
        let movie = Array3::from_shape_fn((5, 1, 1), |(t, _, _)| t as f32 + 1.0);
        let w = windows(&movie, 3, 0, 5);
        assert_eq!(w.slice(s![0, .., 0, 0]).to_vec(), vec![0.0, 0.0, 1.0]);
        assert_eq!(w.slice(s![4, .., 0, 0]).to_vec(), vec![3.0, 4.0, 5.0]);
    }
}
