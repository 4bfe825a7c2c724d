//! What a kept unit looks at: its spatiotemporal filter split into a spatial map and a temporal
//! filter. First-layer units read their convolution kernel directly; every unit also gets an
//! effective filter, the gradient of its activation at its most relevant position with respect
//! to the stimulus, averaged along the path from gray and over the analysis windows.

use super::gray_path::{batch_sum, GrayPath};
use crate::engine::{Override, ValueId};
use crate::model::{InputLayout, Model};
use crate::response::windows_at;
use crate::{Error, Result, Tensor};
use nalgebra::DMatrix;
use ndarray::{Array1, Array2, Array3, Axis, IxDyn};
use serde::Serialize;

/// A spatiotemporal filter `[lags, height, width]` and its best separable approximation.
#[derive(Debug, Clone, Serialize)]
pub struct Separable {
    /// Temporal filter, oldest lag first (the last entry is the frame the response is read at).
    pub temporal: Vec<f32>,
    /// Spatial map `[height, width]`, sign chosen so its largest-magnitude entry is positive.
    #[serde(skip)]
    pub spatial: Array2<f32>,
    /// Share of the filter's energy (sum of squares) in the rank-1 part: sigma_1^2 / sum sigma^2.
    pub rank_one_share: f64,
    /// The full filter.
    #[serde(skip)]
    pub full: Array3<f32>,
}

/// Split `k` by singular value decomposition: k[l, y, x] ~ temporal[l] * spatial[y, x].
pub fn separate(k: Array3<f32>) -> Separable {
    let (l, h, w) = k.dim();
    let data: Vec<f64> = k.iter().map(|&v| v as f64).collect();
    let m = DMatrix::from_row_slice(l, h * w, &data);
    let svd = m.svd(true, true);
    let energy: f64 = svd.singular_values.iter().map(|s| s * s).sum();
    let (Some(u), Some(vt)) = (svd.u, svd.v_t) else {
        return Separable { temporal: vec![0.0; l], spatial: Array2::zeros((h, w)), rank_one_share: 0.0, full: k };
    };
    let s1 = svd.singular_values.get(0).copied().unwrap_or(0.0);
    let mut spatial: Vec<f64> = (0..h * w).map(|j| vt[(0, j)] * s1).collect();
    let mut temporal: Vec<f64> = (0..l).map(|i| u[(i, 0)]).collect();
    let peak = spatial.iter().copied().fold(0.0f64, |a, v| if v.abs() > a.abs() { v } else { a });
    if peak < 0.0 {
        spatial.iter_mut().for_each(|v| *v = -*v);
        temporal.iter_mut().for_each(|v| *v = -*v);
    }
    Separable {
        temporal: temporal.iter().map(|&v| v as f32).collect(),
        spatial: Array2::from_shape_vec((h, w), spatial.iter().map(|&v| v as f32).collect()).expect("h * w entries"),
        rank_one_share: if energy > 0.0 { s1 * s1 / energy } else { 0.0 },
        full: k,
    }
}

/// Ops that act on each channel separately, entry by entry (nonlinearities, bias, batch norm):
/// a conv's kernel passes through them unchanged, and channels can be deleted across them.
pub fn elementwise_per_channel(op: &str) -> bool {
    matches!(
        op,
        "Relu"
            | "LeakyRelu"
            | "Elu"
            | "Softplus"
            | "Sigmoid"
            | "Tanh"
            | "Exp"
            | "Clip"
            | "BatchNormalization"
            | "Add"
            | "Sub"
            | "Mul"
            | "Div"
            | "Identity"
            | "Dropout"
    )
}

/// The Conv node that reads the stimulus directly and feeds `layer` through per-channel
/// elementwise ops only (bias add, batch norm, the nonlinearity), if there is one.
pub fn first_conv(model: &Model, layer: ValueId) -> Option<&crate::engine::Node> {
    let g = &model.graph;
    let mut v = layer;
    for _ in 0..8 {
        let node = g.producer(v)?;
        if node.op.name() == "Conv" {
            return (node.inputs[0] == g.input).then_some(node);
        }
        if !elementwise_per_channel(node.op.name()) {
            return None;
        }
        // Follow the one input that depends on the stimulus.
        let dynamic: Vec<ValueId> =
            node.inputs.iter().copied().filter(|&i| g.producer(i).is_some() || i == g.input).collect();
        match dynamic.as_slice() {
            [only] => v = *only,
            _ => return None,
        }
    }
    None
}

/// The bias of output channel `c` of `conv` (0 when it has none or it is not a constant).
pub fn conv_bias(model: &Model, conv: &crate::engine::Node, c: usize) -> f64 {
    match conv.inputs.get(2).map(|&b| &model.graph.values[b].source) {
        Some(crate::engine::Source::Param(t)) => t.iter().nth(c).copied().unwrap_or(0.0) as f64,
        _ => 0.0,
    }
}

/// The kernel of channel `c` of a first-layer conv as `[lags, height, width]`, for the layouts
/// where the kernel's axes are the stimulus's (lags as channels, 3-D volume, 1-D line).
pub fn kernel(model: &Model, conv: &crate::engine::Node, c: usize) -> Option<Array3<f32>> {
    let g = &model.graph;
    let w = match &g.values[*conv.inputs.get(1)?].source {
        crate::engine::Source::Param(t) => t,
        _ => return None,
    };
    let wc = w.index_axis(Axis(0), c);
    let s = wc.shape().to_vec();
    let k = match (model.binding.layout, s.as_slice()) {
        (InputLayout::LagsFirst, [l, kh, kw]) => wc.to_shape((*l, *kh, *kw)).ok()?.to_owned(),
        (InputLayout::Volume, [1, l, kh, kw]) => wc.to_shape((*l, *kh, *kw)).ok()?.to_owned(),
        (InputLayout::Line, [l, kw]) => wc.to_shape((*l, 1, *kw)).ok()?.to_owned(),
        _ => return None,
    };
    Some(k)
}

/// The position (flat index into the layer's spatial axes) where channel `c` carries the most
/// |conductance|, from a `[C, spatial...]` map.
pub fn hot_position(space: &Tensor, c: usize) -> usize {
    let ch = space.index_axis(Axis(0), c);
    ch.iter()
        .enumerate()
        .fold((0, -1.0f32), |(at, best), (i, &v)| if v.abs() > best { (i, v.abs()) } else { (at, best) })
        .0
}

/// The effective filters of channels `sites` (channel, flat position) of `layer`: for each,
/// d y / d stimulus averaged over `steps` midpoints of `path` (gray to the analysis windows) and
/// over the windows, with `overrides` (the reduced circuit) in place. One forward pass per step
/// serves every site. Each filter is `[lags, height, width]`.
pub fn effective_filters(
    model: &Model,
    path: &GrayPath,
    layer: ValueId,
    sites: &[(usize, usize)],
    overrides: &[Override],
    steps: usize,
) -> Result<Vec<Array3<f32>>> {
    let g = &model.graph;
    let n = path.windows();
    let mut shape = g.values[layer].shape.clone();
    shape[0] = n;
    let per: usize = shape[2..].iter().product();
    let seeds: Vec<Tensor> = sites
        .iter()
        .map(|&(c, pos)| {
            let mut seed = Tensor::zeros(IxDyn(&shape));
            if let Some(flat) = seed.as_slice_mut() {
                for s in 0..n {
                    flat[(s * shape[1] + c) * per + pos] = 1.0 / (n * steps) as f32;
                }
            }
            seed
        })
        .collect();
    let mut acc: Vec<Option<Tensor>> = vec![None; sites.len()];
    for k in 0..steps {
        let a = (k as f64 + 0.5) / steps as f64;
        let tape = g.forward_to(vec![(path.start, path.at(a))], &[layer], overrides)?;
        for (slot, seed) in acc.iter_mut().zip(&seeds) {
            let grad = batch_sum(&tape.gradients(&[(layer, seed.clone())], &[path.start])?.remove(0));
            *slot = Some(match slot.take() {
                None => grad,
                Some(prev) => prev + grad,
            });
        }
    }
    acc.into_iter()
        .map(|a| {
            let grad = path.to_input(a.ok_or_else(|| Error::Usage("no path steps".into()))?)?;
            Ok(model.binding.from_model_input(&grad)?.index_axis_move(Axis(0), 0))
        })
        .collect()
}

/// The filter's generator signal for each window: sum over lags and pixels of filter x window.
pub fn generator(model: &Model, movie: &Array3<f32>, frames: &[usize], filter: &Array3<f32>) -> Array1<f64> {
    let w = windows_at(movie, model.binding.lags, frames);
    Array1::from_iter(
        w.axis_iter(Axis(0)).map(|win| win.iter().zip(filter.iter()).map(|(&a, &b)| a as f64 * b as f64).sum()),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn separable_kernel_is_recovered_exactly() {
        let t = [0.1f32, -0.4, 1.0];
        let s = Array2::from_shape_fn((4, 5), |(y, x)| {
            (-(((y as f32 - 1.5).powi(2) + (x as f32 - 2.0).powi(2)) / 2.0)).exp()
        });
        let k = Array3::from_shape_fn((3, 4, 5), |(l, y, x)| -t[l] * s[[y, x]]);
        let sep = separate(k.clone());
        assert!((sep.rank_one_share - 1.0).abs() < 1e-9);
        // Spatial map positive at its peak, so the sign sits in the temporal filter.
        assert!(sep.spatial[[1, 2]] > 0.0 && sep.temporal[2] < 0.0);
        for ((l, y, x), &v) in k.indexed_iter() {
            assert!((sep.temporal[l] * sep.spatial[[y, x]] - v).abs() < 1e-5);
        }
    }

    #[test]
    fn sum_of_two_separable_parts_has_a_partial_rank_one_share() {
        // Two orthogonal rank-1 parts of equal energy: the rank-1 share is exactly 1/2.
        let k = Array3::from_shape_fn((2, 1, 2), |(l, _, x)| if l == x { 1.0 } else { 0.0 });
        assert!((separate(k).rank_one_share - 0.5).abs() < 1e-9);
    }
}
