//! The search for a minimal sufficient subcircuit. Units of a layer are ranked by
//! |conductance| and added until the reduced response reaches the fidelity target; then kept
//! units are dropped one at a time while the target still holds, until no single unit can be
//! dropped (1-minimal). Dropped units are clamped (see [`super::Clamp`]). Candidate circuits of
//! one layer share the forward pass up to that layer and run downstream as one batch.

use super::fidelity::{fidelity, Criterion, Fidelity};
use crate::engine::batch::{budget_bytes, chunk_len};
use crate::engine::{Override, Part, ValueId};
use crate::model::Model;
use crate::response::windows_at;
use crate::{Error, Result, Tensor};
use ndarray::{Array3, Axis, IxDyn, Zip};
use rayon::prelude::*;
use serde::Serialize;

/// The full model's response in the analysis window, and what reduced circuits are compared with.
pub struct Judge<'m> {
    model: &'m Model,
    cell: usize,
    x: Tensor,
    /// The cell's full rate at each analysis frame.
    pub full: Vec<f64>,
    /// The cell's rate under the gray stimulus.
    pub rest: f64,
}

impl<'m> Judge<'m> {
    /// Run the full model on the windows ending at `frames` of `movie`.
    pub fn new(model: &'m Model, movie: &Array3<f32>, cell: usize, frames: &[usize]) -> Result<Self> {
        let b = &model.binding;
        let x = b.to_model_input(windows_at(movie, b.lags, frames));
        let gray = b.to_model_input(ndarray::Array4::zeros((1, b.lags, b.height, b.width)));
        let cells = model.graph.values[model.graph.outputs[0]].shape[1..].iter().product::<usize>();
        if cell >= cells {
            return Err(Error::Usage(format!("cell {cell} is out of range: the model has {cells} cells")));
        }
        let mut judge = Judge { model, cell, x, full: Vec::new(), rest: 0.0 };
        judge.rest = judge.cell_rates(&model.graph.forward(gray, &[])?.outputs()[0].view().into_owned(), 1)?[0][0];
        judge.full = judge.run(&[])?;
        Ok(judge)
    }

    /// The cell's rate per sample, split into `groups` equal groups.
    fn cell_rates(&self, out: &Tensor, groups: usize) -> Result<Vec<Vec<f64>>> {
        let samples = out.shape()[0];
        let per = out.len() / samples.max(1);
        let flat = out.as_standard_layout();
        let flat = flat.as_slice().ok_or_else(|| Error::Usage("output layout".into()))?;
        let rates: Vec<f64> = (0..samples).map(|s| flat[s * per + self.cell] as f64).collect();
        Ok(rates.chunks(samples / groups.max(1)).map(|c| c.to_vec()).collect())
    }

    /// The cell's rate over the analysis frames with `overrides` applied.
    pub fn run(&self, overrides: &[Override]) -> Result<Vec<f64>> {
        let out = self.model.graph.forward(self.x.clone(), overrides)?.outputs()[0].clone();
        Ok(self.cell_rates(&out, 1)?.remove(0))
    }

    /// Fidelity of a reduced rate trace.
    pub fn fidelity(&self, reduced: &[f64]) -> Fidelity {
        fidelity(&self.full, reduced, self.rest)
    }

    /// The value of `layer` over the analysis windows with `fixed` overrides on other layers.
    pub fn layer_value(&self, layer: ValueId, fixed: &[Override]) -> Result<Tensor> {
        let g = &self.model.graph;
        let others: Vec<Override> = fixed.iter().filter(|o| o.value != layer).cloned().collect();
        Ok(g.forward_to(vec![(g.input, self.x.clone())], &[layer], &others)?.value(layer).clone())
    }

    /// Responses of several candidate keep-masks of `layer` (1 = keep, `[1, C, spatial...]`),
    /// given the layer's unmasked value `a` (from [`Judge::layer_value`] with the same `fixed`).
    pub fn candidates(
        &self,
        layer: ValueId,
        a: &Tensor,
        clamp: &Tensor,
        keeps: &[Tensor],
        fixed: &[Override],
    ) -> Result<Vec<Vec<f64>>> {
        let g = &self.model.graph;
        let others: Vec<Override> = fixed.iter().filter(|o| o.value != layer).cloned().collect();
        let n = a.shape()[0];
        let per_candidate = g.bytes_per_sample() * n;
        let batch = chunk_len(per_candidate, budget_bytes() / 2).clamp(1, 64);
        let clamp = clamp.broadcast(IxDyn(a.shape())).ok_or_else(|| Error::Usage("clamp shape".into()))?;
        let parts: Vec<Vec<Vec<f64>>> = keeps
            .par_chunks(batch)
            .map(|chunk| {
                let mixed: Vec<Tensor> = chunk
                    .iter()
                    .map(|k| {
                        let k = k.broadcast(IxDyn(a.shape())).ok_or_else(|| Error::Usage("keep mask shape".into()))?;
                        Ok(Zip::from(a).and(&k).and(&clamp).map_collect(|&v, &m, &c| if m != 0.0 { v } else { c }))
                    })
                    .collect::<Result<_>>()?;
                let views: Vec<_> = mixed.iter().map(|m| m.view()).collect();
                let stacked = ndarray::concatenate(Axis(0), &views).map_err(|e| Error::Usage(e.to_string()))?;
                let out = g.forward_from(vec![(layer, stacked)], &others)?.outputs()[0].clone();
                self.cell_rates(&out, chunk.len())
            })
            .collect::<Result<_>>()?;
        Ok(parts.into_iter().flatten().collect())
    }
}

/// One point of the fidelity-vs-size curve.
#[derive(Debug, Clone, Serialize)]
pub struct CurvePoint {
    /// `add` (growing by rank) or `drop` (pruning to minimal).
    pub phase: &'static str,
    /// Units kept in this layer.
    pub size: usize,
    /// The unit added or dropped at this point (index into the layer's units).
    pub unit: Option<usize>,
    /// Fidelity with this many units.
    pub fidelity: Fidelity,
}

/// The outcome of reducing one layer.
#[derive(Debug, Clone)]
pub struct LayerReduction {
    /// Kept units (indices into the layer's unit list), in rank order.
    pub kept: Vec<usize>,
    /// Every evaluated point, in search order.
    pub curve: Vec<CurvePoint>,
    /// Fidelity of the final kept set.
    pub fidelity: Fidelity,
    /// For each kept unit, the score with it removed (all below target: the proof of minimality).
    pub without_each: Vec<f64>,
    /// False when even every unit together missed the target (all are kept).
    pub reached: bool,
}

/// A layer's units for the search: their keep-masks and conductances.
pub struct Units {
    /// Per unit, the mask entries it owns (flat indices into `[C, spatial...]`).
    pub entries: Vec<Vec<usize>>,
    /// Per unit, its conductance.
    pub conductance: Vec<f64>,
    /// Shape of one sample of the layer, `[1, C, spatial...]`.
    pub shape: Vec<usize>,
}

impl Units {
    /// A keep-mask holding `kept` units.
    pub fn mask(&self, kept: &[usize]) -> Tensor {
        let mut m = Tensor::zeros(IxDyn(&self.shape));
        let flat = m.as_slice_mut().expect("fresh array is contiguous");
        for &u in kept {
            for &e in &self.entries[u] {
                flat[e] = 1.0;
            }
        }
        m
    }
}

/// What a reduction must keep: a fidelity score at or above a target.
#[derive(Debug, Clone, Copy)]
pub struct Goal {
    /// Which score.
    pub criterion: Criterion,
    /// Its target, in (0, 1].
    pub target: f64,
}

/// The override that clamps everything outside `keep` to `clamp`.
pub fn clamp_outside(layer: ValueId, keep: &Tensor, clamp: &Tensor) -> Override {
    Override { value: layer, part: Part::Mask(keep.mapv(|k| if k != 0.0 { 0.0 } else { 1.0 })), with: clamp.clone() }
}

/// Search one layer: grow by rank, then prune to a 1-minimal set. `exhaustive` evaluates every
/// prefix size and every single drop (channels); otherwise sizes are bracketed by doubling and
/// bisection and drops are tried one at a time (positions, where units are many).
pub fn reduce_layer(
    judge: &Judge,
    layer: ValueId,
    clamp: &Tensor,
    units: &Units,
    fixed: &[Override],
    goal: Goal,
    exhaustive: bool,
) -> Result<LayerReduction> {
    let Goal { criterion, target } = goal;
    let n = units.entries.len();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| units.conductance[b].abs().total_cmp(&units.conductance[a].abs()).then(a.cmp(&b)));
    let value = judge.layer_value(layer, fixed)?;
    let eval = |sets: &[Vec<usize>]| -> Result<Vec<Fidelity>> {
        let masks: Vec<Tensor> = sets.iter().map(|s| units.mask(s)).collect();
        Ok(judge.candidates(layer, &value, clamp, &masks, fixed)?.iter().map(|r| judge.fidelity(r)).collect())
    };
    let ok = |f: &Fidelity| criterion.score(f) >= target;
    let mut curve = Vec::new();

    // Grow: smallest prefix of the ranking that reaches the target.
    let sizes: Vec<usize> = if exhaustive {
        (0..=n).collect()
    } else {
        let mut s = vec![0];
        let mut k = 1;
        while k < n {
            s.push(k);
            k *= 2;
        }
        s.push(n);
        s
    };
    let mut scored: Vec<(usize, Fidelity)> = Vec::new();
    let fids = eval(&sizes.iter().map(|&k| order[..k].to_vec()).collect::<Vec<_>>())?;
    scored.extend(sizes.iter().copied().zip(fids));
    let first_ok = scored.iter().find(|(_, f)| ok(f)).map(|(k, _)| *k);
    let mut size = match first_ok {
        Some(k) => k,
        None => n,
    };
    if !exhaustive && size > 0 && first_ok.is_some() {
        // Bisect between the last failing size below and the first passing one.
        let mut lo = scored.iter().filter(|(k, f)| *k < size && !ok(f)).map(|(k, _)| *k).max().unwrap_or(0);
        while size - lo > 1 {
            let mid = (lo + size) / 2;
            let f = eval(&[order[..mid].to_vec()])?[0];
            scored.push((mid, f));
            if ok(&f) {
                size = mid;
            } else {
                lo = mid;
            }
        }
    }
    scored.sort_by_key(|(k, _)| *k);
    for (k, f) in &scored {
        curve.push(CurvePoint { phase: "add", size: *k, unit: k.checked_sub(1).map(|i| order[i]), fidelity: *f });
    }
    let reached = first_ok.is_some();
    let mut kept: Vec<usize> = order[..size].to_vec();
    let mut current =
        scored.iter().find(|(k, _)| *k == size).map(|(_, f)| *f).ok_or_else(|| Error::Usage("size".into()))?;

    // Prune: drop units while the target holds, until none can go.
    let without = |kept: &[usize], i: usize| -> Vec<usize> {
        kept.iter().enumerate().filter(|&(j, _)| j != i).map(|(_, &u)| u).collect()
    };
    let mut without_each: Vec<f64>;
    if reached {
        loop {
            if exhaustive {
                let fids = eval(&(0..kept.len()).map(|i| without(&kept, i)).collect::<Vec<_>>())?;
                without_each = fids.iter().map(|f| criterion.score(f)).collect();
                let best = (0..kept.len()).max_by(|&a, &b| without_each[a].total_cmp(&without_each[b]));
                match best {
                    Some(i) if ok(&fids[i]) => {
                        let unit = kept.remove(i);
                        current = fids[i];
                        curve.push(CurvePoint { phase: "drop", size: kept.len(), unit: Some(unit), fidelity: current });
                    }
                    _ => break,
                }
            } else {
                // Weakest first, one at a time; a pass that drops nothing proves minimality.
                without_each = vec![0.0; kept.len()];
                let mut dropped = false;
                let mut i = kept.len();
                while i > 0 {
                    i -= 1;
                    let f = eval(&[without(&kept, i)])?[0];
                    if ok(&f) {
                        let unit = kept.remove(i);
                        without_each.remove(i);
                        current = f;
                        dropped = true;
                        curve.push(CurvePoint { phase: "drop", size: kept.len(), unit: Some(unit), fidelity: f });
                    } else {
                        without_each[i] = criterion.score(&f);
                    }
                }
                if !dropped {
                    break;
                }
            }
        }
    } else {
        without_each = vec![f64::NAN; kept.len()];
    }
    Ok(LayerReduction { kept, curve, fidelity: current, without_each, reached })
}
