//! Path attribution along the straight line from a baseline to the stimulus: input integrated
//! gradients (Sundararajan, Taly & Yan 2017, ICML) and layer conductance (Dhamdhere, Sundararajan
//! & Yan 2019, ICLR), on every window of the target at once.
//!
//! Conductance of unit j: C_j = integral of dF/dy_j * dy_j/da da. With the midpoint rule it is the
//! sum over steps of the gradient at the step's midpoint times the exact change of y_j across the
//! step, so sum_j C_j telescopes to F(x) - F(x') up to the quadrature error of each step. With
//! Gauss-Legendre, dy_j/da is exact when y = f(z) with z in the affine prefix:
//! dy/da = f'(z(a)) (z(x) - z(x')).

use super::quadrature::Rule;
use crate::engine::batch::{budget_bytes, chunk_len};
use crate::engine::{Graph, ValueId};
use crate::{Error, Result, Tensor};
use ndarray::{Axis, IxDyn, Zip};
use rayon::prelude::*;

/// One path integral to compute.
pub struct PathJob<'a> {
    /// The model graph.
    pub graph: &'a Graph,
    /// Model inputs for the stimulus windows `[N, ...]`.
    pub x: &'a Tensor,
    /// Model inputs for the baseline windows, same shape.
    pub x0: &'a Tensor,
    /// dF/d(output) for one window: F = sum over windows of sum(seed * output).
    pub seed: &'a Tensor,
    /// Layers (hidden values) whose conductance is wanted.
    pub layers: &'a [ValueId],
    /// Quadrature rule.
    pub rule: Rule,
    /// Number of steps (midpoint) or nodes (Gauss-Legendre).
    pub steps: usize,
    /// Whether to compute input integrated gradients.
    pub input_ig: bool,
    /// Called with (finished, total) path points x window ranges, for progress bars.
    pub progress: &'a (dyn Fn(usize, usize) + Sync),
}

/// The full-model passes at the path's ends, computed once and reused for every step count:
/// the stimulus (kept as a tape for the final input-gradient step through the prefix) and each
/// baseline.
pub struct Endpoints<'g> {
    start: ValueId,
    tape_x: crate::engine::Tape<'g>,
    f_x: Vec<f64>,
    baselines: Vec<BaselineEnd>,
}

/// One baseline's end of the path.
struct BaselineEnd {
    z0: Tensor,
    dz: Tensor,
    f_x0: Vec<f64>,
}

impl<'g> Endpoints<'g> {
    /// Run the model on the stimulus windows `x` and on each baseline in `x0s`; `prefix_end` is
    /// where path points start from (the model input when there is no affine prefix).
    pub fn new(
        graph: &'g Graph,
        x: &Tensor,
        x0s: &[Tensor],
        seed: &Tensor,
        prefix_end: Option<ValueId>,
    ) -> Result<Self> {
        let out = graph.outputs[0];
        let start = prefix_end.unwrap_or(graph.input);
        let tape_x = graph.forward(x.clone(), &[])?;
        let f_x = weighted_output(tape_x.value(out), seed);
        let z1 = tape_x.value(start);
        let baselines = x0s
            .iter()
            .map(|x0| {
                let tape = graph.forward(x0.clone(), &[])?;
                let z0 = tape.value(start).clone();
                Ok(BaselineEnd { dz: z1 - &z0, z0, f_x0: weighted_output(tape.value(out), seed) })
            })
            .collect::<Result<_>>()?;
        Ok(Endpoints { start, tape_x, f_x, baselines })
    }
}

/// The result of one path integral.
pub struct PathResult {
    /// F at the stimulus, per window.
    pub f_x: Vec<f64>,
    /// F at the baseline, per window.
    pub f_x0: Vec<f64>,
    /// Per layer: conductance per window and position, `[N, C, spatial...]` (f64 sums).
    pub conductance: Vec<ndarray::ArrayD<f64>>,
    /// Input integrated gradients, model-input shaped, when asked for.
    pub input_ig: Option<Tensor>,
    /// Per layer and channel: dF/dy summed over windows and positions, averaged along the path
    /// (the sign of a unit's effect on the target).
    pub gradient: Vec<Vec<f64>>,
}

/// Repeat the seed for every sample of a batch of `n` windows.
pub(crate) fn seeds(seed: &Tensor, n: usize) -> Tensor {
    let mut shape = seed.shape().to_vec();
    shape[0] = n;
    seed.broadcast(IxDyn(&shape)).map_or_else(|| seed.clone(), |v| v.to_owned())
}

fn weighted_output(out: &Tensor, seed: &Tensor) -> Vec<f64> {
    out.axis_iter(Axis(0))
        .zip(seed.axis_iter(Axis(0)).cycle())
        .map(|(o, s)| o.iter().zip(s.iter()).map(|(a, b)| *a as f64 * *b as f64).sum())
        .collect()
}

/// Values of `start` along the path at fractions `alphas`, stacked on the batch axis.
fn along(z0: &Tensor, dz: &Tensor, alphas: &[f64], windows: std::ops::Range<usize>) -> Tensor {
    let parts: Vec<Tensor> = alphas
        .iter()
        .map(|&a| {
            let (b0, bd) =
                (z0.slice_axis(Axis(0), windows.clone().into()), dz.slice_axis(Axis(0), windows.clone().into()));
            Zip::from(&b0).and(&bd).map_collect(|&p, &d| p + a as f32 * d)
        })
        .collect();
    let views: Vec<_> = parts.iter().map(|p| p.view()).collect();
    ndarray::concatenate(Axis(0), &views).expect("equal shapes")
}

/// Sum consecutive blocks of `n` samples (one block per path point), weighted.
fn fold_blocks(t: &Tensor, n: usize, weights: &[f64]) -> ndarray::ArrayD<f64> {
    let mut shape = t.shape().to_vec();
    shape[0] = n;
    let mut acc = ndarray::ArrayD::<f64>::zeros(IxDyn(&shape));
    for (k, w) in weights.iter().enumerate() {
        let block = t.slice_axis(Axis(0), (k * n..(k + 1) * n).into());
        Zip::from(&mut acc).and(&block).for_each(|a, &v| *a += w * v as f64);
    }
    acc
}

/// Run the path integral.
/// Run the path integral from baseline `baseline` of `ends` to the stimulus.
pub fn integrate(job: &PathJob, ends: &Endpoints, baseline: usize) -> Result<PathResult> {
    let g = job.graph;
    let n = job.x.shape()[0];
    let out = g.outputs[0];
    let start = ends.start;
    let BaselineEnd { z0, dz, f_x0 } = &ends.baselines[baseline];
    let (f_x, f_x0) = (ends.f_x.clone(), f_x0.clone());

    if job.rule == Rule::GaussLegendre {
        for &l in job.layers {
            let direct =
                g.producer(l).is_some_and(|p| p.inputs.len() == 1 && p.inputs[0] == start && p.op.is_nonlinearity());
            if !direct {
                return Err(Error::Usage(format!(
                    "Gauss-Legendre conductance needs the layer to be a nonlinearity applied directly to the end of the \
                     affine prefix; '{}' is not. Use --quadrature midpoint for this layer",
                    g.values[l].name
                )));
            }
        }
    }

    // Work items: one path point (a midpoint step with its two boundaries, or a GL node) for a
    // range of windows, sized to the memory budget.
    let points = job.rule.nodes(job.steps);
    let per_sample = g.bytes_per_sample().max(1);
    let windows_per_item = chunk_len(per_sample * 3, budget_bytes()).clamp(1, n);
    let items: Vec<(usize, std::ops::Range<usize>)> = (0..points.len())
        .flat_map(|k| (0..n).step_by(windows_per_item).map(move |s| (k, s..(s + windows_per_item).min(n))))
        .collect();
    let h = 1.0 / job.steps as f64;

    type Partial = (std::ops::Range<usize>, Vec<ndarray::ArrayD<f64>>, Option<ndarray::ArrayD<f64>>, Vec<Vec<f64>>);
    let done = std::sync::atomic::AtomicUsize::new(0);
    let partials: Vec<Partial> = items
        .par_iter()
        .map(|(k, range)| -> Result<Partial> {
            crate::interrupt::check()?;
            let (alpha, weight) = points[*k];
            let m = range.len();
            let z_mid = along(z0, dz, &[alpha], range.clone());
            let tape = g.forward_from(vec![(start, z_mid)], &[])?;
            let mut wanted: Vec<ValueId> = job.layers.to_vec();
            wanted.push(start);
            let grads = tape.gradients(&[(out, seeds(job.seed, m))], &wanted)?;
            // Midpoint: every layer at both ends of the step [alpha - h/2, alpha + h/2], in one pass.
            let step_ends = match job.rule {
                Rule::Midpoint => {
                    let z = along(z0, dz, &[alpha - h / 2.0, alpha + h / 2.0], range.clone());
                    Some(g.forward_to(vec![(start, z)], job.layers, &[])?)
                }
                Rule::GaussLegendre => None,
            };
            let dz_r = step_ends.is_none().then(|| dz.slice_axis(Axis(0), range.clone().into()).to_owned());
            let mut cond = Vec::with_capacity(job.layers.len());
            for (li, &l) in job.layers.iter().enumerate() {
                let dy = match &step_ends {
                    Some(t) => {
                        // Exact change of the layer across the step.
                        let y = t.try_value(l).ok_or_else(|| {
                            Error::Usage(format!("layer '{}' is not downstream of the input", g.values[l].name))
                        })?;
                        &y.slice_axis(Axis(0), (m..2 * m).into()) - &y.slice_axis(Axis(0), (0..m).into())
                    }
                    None => {
                        // Gauss-Legendre: dy/da = f'(z(a)) (z1 - z0), weighted by the node's weight.
                        let p = g.producer(l).expect("checked above");
                        let dz_r = dz_r.as_ref().expect("made for Gauss-Legendre");
                        let zin = tape.value(start);
                        let args = crate::engine::ops::BackwardArgs {
                            inputs: &[zin],
                            output: tape.value(l),
                            grad: dz_r,
                            wants: &[true],
                        };
                        let d = p.op.backward(&args).map_err(|e| Error::Usage(e.0))?.remove(0).expect("wanted");
                        d.mapv(|v| v * weight as f32)
                    }
                };
                cond.push(Zip::from(&grads[li]).and(&dy).map_collect(|&gv, &d| gv as f64 * d as f64));
            }
            let gz = job.input_ig.then(|| fold_blocks(&grads[job.layers.len()], m, &[weight]));
            let slope = grads[..job.layers.len()].iter().map(|gl| channel_sums(gl, weight)).collect();
            (job.progress)(done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1, items.len());
            Ok((range.clone(), cond, gz, slope))
        })
        .collect::<Result<_>>()?;

    // Reduce the partial sums into per-window arrays.
    let mut conductance: Vec<ndarray::ArrayD<f64>> = job
        .layers
        .iter()
        .map(|&l| {
            let mut shape = g.values[l].shape.clone();
            shape[0] = n;
            ndarray::ArrayD::zeros(IxDyn(&shape))
        })
        .collect();
    let mut gz_sum = job.input_ig.then(|| {
        let mut shape = z0.shape().to_vec();
        shape[0] = n;
        ndarray::ArrayD::<f64>::zeros(IxDyn(&shape))
    });
    let mut gradient: Vec<Vec<f64>> = job.layers.iter().map(|&l| vec![0.0; g.values[l].shape[1]]).collect();
    for (range, cond, gz, slope) in partials {
        for (acc, s) in gradient.iter_mut().zip(slope) {
            acc.iter_mut().zip(s).for_each(|(a, v)| *a += v);
        }
        for (acc, c) in conductance.iter_mut().zip(cond) {
            let mut part = acc.slice_axis_mut(Axis(0), range.clone().into());
            part += &c;
        }
        if let (Some(total), Some(gz)) = (gz_sum.as_mut(), gz) {
            let mut part = total.slice_axis_mut(Axis(0), range.clone().into());
            part += &gz;
        }
    }

    // Input IG: (x - x') * J_prefix^T (sum_k w_k dF/dz(a_k)); the prefix is affine, so one
    // backward pass through it serves every step.
    let input_ig = match gz_sum {
        None => None,
        Some(gz) => {
            let gz = gz.mapv(|v| v as f32);
            let gx = if start == g.input { gz } else { ends.tape_x.gradients(&[(start, gz)], &[g.input])?.remove(0) };
            let dx = job.x - job.x0;
            Some(&dx * &gx)
        }
    };
    Ok(PathResult { f_x, f_x0, conductance, input_ig, gradient })
}

/// `weight` times the sum of `t` over every axis but the channel axis (1).
fn channel_sums(t: &Tensor, weight: f64) -> Vec<f64> {
    (0..t.shape()[1]).map(|c| weight * t.index_axis(Axis(1), c).iter().map(|&v| v as f64).sum::<f64>()).collect()
}
