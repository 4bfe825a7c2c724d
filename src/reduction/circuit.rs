//! Reducing several layers in turn, from the layer nearest the cell down to the first, each
//! search seeing the layers above already reduced; then, optionally, positions inside the kept
//! channels. The result is the set of kept units per layer and the overrides that realise it.

use super::fidelity::{Criterion, Fidelity};
use super::search::{clamp_outside, reduce_layer, CurvePoint, Goal, Judge, LayerReduction, Units};
use super::{clamp_value, Clamp};
use crate::attribution::LayerAttribution;
use crate::engine::{Override, ValueId};
use crate::model::Model;
use crate::{Result, Tensor};
use ndarray::Array3;

/// What to reduce and how.
#[derive(Debug, Clone)]
pub struct Plan {
    /// Layers to reduce (value ids, any order), with their attributions (same order).
    pub layers: Vec<ValueId>,
    /// Which fidelity score must reach the target.
    pub criterion: Criterion,
    /// The target, in (0, 1].
    pub target: f64,
    /// What dropped units are clamped to.
    pub clamp: Clamp,
    /// Also prune positions inside the kept channels.
    pub positions: bool,
}

/// The reduction of one layer.
#[derive(Debug, Clone)]
pub struct LayerCircuit {
    /// The layer.
    pub layer: ValueId,
    /// Its value when silenced, `[1, C, spatial...]`.
    pub clamp: Tensor,
    /// Kept channels, in rank order.
    pub channels: Vec<usize>,
    /// Channel search (curve, minimality scores).
    pub channel_search: LayerReduction,
    /// Position search inside the kept channels, when asked for: kept (channel, flat position).
    pub positions: Option<(Vec<(usize, usize)>, LayerReduction)>,
    /// Keep-mask `[1, C, spatial...]` of the final circuit (1 = kept).
    pub keep: Tensor,
}

/// A reduced circuit.
#[derive(Debug, Clone)]
pub struct Circuit {
    /// Per reduced layer, deepest first.
    pub layers: Vec<LayerCircuit>,
    /// Fidelity of the whole reduced circuit.
    pub fidelity: Fidelity,
    /// The cell's full and reduced rate over the analysis frames.
    pub full: Vec<f64>,
    /// The reduced rate.
    pub reduced: Vec<f64>,
    /// The cell's rate under gray.
    pub rest: f64,
}

impl Circuit {
    /// The overrides that run the reduced circuit in the full model.
    pub fn overrides(&self) -> Vec<Override> {
        self.layers.iter().map(|l| clamp_outside(l.layer, &l.keep, &l.clamp)).collect()
    }

    /// The fidelity curve rows: (layer id, level "channels"/"positions", point).
    pub fn curve(&self) -> Vec<(ValueId, &'static str, &CurvePoint)> {
        let mut rows = Vec::new();
        for l in &self.layers {
            rows.extend(l.channel_search.curve.iter().map(|p| (l.layer, "channels", p)));
            if let Some((_, s)) = &l.positions {
                rows.extend(s.curve.iter().map(|p| (l.layer, "positions", p)));
            }
        }
        rows
    }
}

fn channel_units(shape: &[usize], conductance: &[f64]) -> Units {
    let per: usize = shape[2..].iter().product();
    Units {
        entries: (0..shape[1]).map(|c| (c * per..(c + 1) * per).collect()).collect(),
        conductance: conductance.to_vec(),
        shape: shape.to_vec(),
    }
}

/// Reduce `plan.layers` for `cell` over the analysis `frames`, ranking by `attributions`
/// (one per layer of the plan, same order).
pub fn reduce(
    model: &Model,
    movie: &Array3<f32>,
    cell: usize,
    frames: &[usize],
    plan: &Plan,
    attributions: &[LayerAttribution],
    progress: &(dyn Fn(&str) + Sync),
) -> Result<Circuit> {
    let g = &model.graph;
    let judge = Judge::new(model, movie, cell, frames)?;
    let goal = Goal { criterion: plan.criterion, target: plan.target };
    let mut order: Vec<usize> = (0..plan.layers.len()).collect();
    order.sort_by_key(|&i| std::cmp::Reverse(plan.layers[i]));
    let mut done: Vec<LayerCircuit> = Vec::new();
    for &i in &order {
        let layer = plan.layers[i];
        progress(&format!("channels of {}", g.values[layer].name));
        let clamp = clamp_value(model, movie, layer, plan.clamp)?;
        let units = channel_units(&g.values[layer].shape, &attributions[i].total);
        let fixed: Vec<Override> = done.iter().map(|l| clamp_outside(l.layer, &l.keep, &l.clamp)).collect();
        let search = reduce_layer(&judge, layer, &clamp, &units, &fixed, goal, true)?;
        let keep = units.mask(&search.kept);
        done.push(LayerCircuit {
            layer,
            clamp,
            channels: search.kept.clone(),
            channel_search: search,
            positions: None,
            keep,
        });
    }
    if plan.positions {
        for k in 0..done.len() {
            let l = &done[k];
            progress(&format!("positions of {}", g.values[l.layer].name));
            let i = plan.layers.iter().position(|&x| x == l.layer).unwrap_or(0);
            let space = &attributions[i].space;
            let per: usize = space.shape()[1..].iter().product();
            let flat = space.as_standard_layout();
            let flat = flat.as_slice().unwrap_or(&[]);
            let pairs: Vec<(usize, usize)> = l.channels.iter().flat_map(|&c| (0..per).map(move |p| (c, p))).collect();
            let units = Units {
                entries: pairs.iter().map(|&(c, p)| vec![c * per + p]).collect(),
                conductance: pairs.iter().map(|&(c, p)| flat.get(c * per + p).copied().unwrap_or(0.0) as f64).collect(),
                shape: g.values[l.layer].shape.clone(),
            };
            let fixed: Vec<Override> =
                done.iter().filter(|o| o.layer != l.layer).map(|o| clamp_outside(o.layer, &o.keep, &o.clamp)).collect();
            let search = reduce_layer(&judge, l.layer, &l.clamp, &units, &fixed, goal, false)?;
            let keep = units.mask(&search.kept);
            let kept = search.kept.iter().map(|&u| pairs[u]).collect();
            done[k].keep = keep;
            done[k].positions = Some((kept, search));
        }
    }
    let mut circuit = Circuit {
        layers: done,
        fidelity: judge.fidelity(&judge.full),
        full: judge.full.clone(),
        reduced: Vec::new(),
        rest: judge.rest,
    };
    circuit.reduced = judge.run(&circuit.overrides())?;
    circuit.fidelity = judge.fidelity(&circuit.reduced);
    Ok(circuit)
}
