//! Edges of a reduced circuit: how much of a kept upper unit's conductance flows through each
//! kept unit of the layer below. Along the straight path from gray to the stimulus, in the reduced
//! circuit (dropped units clamped), the edge from lower unit j to upper unit k is
//! `E_jk = integral of (dF/dY_k * dY_k/dZ)_j * dZ_j/da da`, summed over windows and positions
//! (midpoint rule: the gradient at each step's midpoint times the exact change of Z_j across the
//! step). Summed over j it gives k's conductance when every path from Z to F runs through Y
//! (the chain rule; Dhamdhere, Sundararajan & Yan 2019 define conductance through one layer).

use super::circuit::Circuit;
use super::gray_path::GrayPath;
use crate::attribution::path::seeds as repeat_seed;
use crate::attribution::seed_for;
use crate::engine::ValueId;
use crate::model::Model;
use crate::{Result, Tensor};
use ndarray::{Axis, IxDyn};
use rayon::prelude::*;
use serde::Serialize;

/// One weighted edge of the circuit diagram.
#[derive(Debug, Clone, Serialize)]
pub struct Edge {
    /// `stimulus` or a unit `layer:channel`.
    pub from: String,
    /// A unit `layer:channel` or `cell N`.
    pub to: String,
    /// Conductance carried (rate units summed over the window); its sign is the sign of the effect.
    pub weight: f64,
}

fn channel_sums(t: &Tensor, c: usize) -> f64 {
    t.index_axis(Axis(1), c).iter().map(|&v| v as f64).sum()
}

fn only_channel(t: &Tensor, c: usize) -> Tensor {
    let mut m = Tensor::zeros(IxDyn(t.shape()));
    m.index_axis_mut(Axis(1), c).assign(&t.index_axis(Axis(1), c));
    m
}

/// Edges of `circuit` for `cell` along `path` (gray to the analysis windows), with `steps`
/// midpoint steps.
pub fn edges(model: &Model, path: &GrayPath, cell: usize, circuit: &Circuit, steps: usize) -> Result<Vec<Edge>> {
    let g = &model.graph;
    let overrides = circuit.overrides();
    let out = g.outputs[0];
    let mut layers: Vec<(ValueId, Vec<usize>)> = circuit.layers.iter().map(|l| (l.layer, l.channels.clone())).collect();
    layers.sort_by_key(|(l, _)| *l);
    let ids: Vec<ValueId> = layers.iter().map(|(l, _)| *l).collect();
    let seed = repeat_seed(&seed_for(model, &[(cell, 1.0)])?, path.windows());
    let h = 1.0 / steps as f64;
    // Per step: conductance of each kept unit, and the flow from each kept lower unit to each kept upper unit.
    type Sums = (Vec<Vec<f64>>, Vec<Vec<Vec<f64>>>);
    let per_step: Vec<Sums> = (0..steps)
        .into_par_iter()
        .map(|k| -> Result<Sums> {
            let a = (k as f64 + 0.5) * h;
            let tape = g.forward_from(vec![(path.start, path.at(a))], &overrides)?;
            let lo = g.forward_to(vec![(path.start, path.at(a - h / 2.0))], &ids, &overrides)?;
            let hi = g.forward_to(vec![(path.start, path.at(a + h / 2.0))], &ids, &overrides)?;
            let dy: Vec<Tensor> = ids.iter().map(|&l| hi.value(l) - lo.value(l)).collect();
            let grads = tape.gradients(&[(out, seed.clone())], &ids)?;
            let cond: Vec<Vec<f64>> = layers
                .iter()
                .enumerate()
                .map(|(i, (_, chs))| chs.iter().map(|&c| channel_sums(&(&grads[i] * &dy[i]), c)).collect())
                .collect();
            let mut flow = Vec::new();
            for i in 1..layers.len() {
                let (upper, lower) = (ids[i], ids[i - 1]);
                let mut m = Vec::new();
                for &ku in &layers[i].1 {
                    let gz = tape.gradients(&[(upper, only_channel(&grads[i], ku))], &[lower])?.remove(0);
                    let prod = &gz * &dy[i - 1];
                    m.push(layers[i - 1].1.iter().map(|&c| channel_sums(&prod, c)).collect());
                }
                flow.push(m);
            }
            Ok((cond, flow))
        })
        .collect::<Result<_>>()?;
    let label = |l: ValueId, c: usize| format!("{}:{c}", g.values[l].name);
    let mut cond: Vec<Vec<f64>> = layers.iter().map(|(_, chs)| vec![0.0; chs.len()]).collect();
    let mut flow: Vec<Vec<Vec<f64>>> =
        (1..layers.len()).map(|i| vec![vec![0.0; layers[i - 1].1.len()]; layers[i].1.len()]).collect();
    for (c, f) in per_step {
        cond.iter_mut().flatten().zip(c.iter().flatten()).for_each(|(a, v)| *a += v);
        for (acc, part) in flow.iter_mut().zip(f) {
            acc.iter_mut().flatten().zip(part.iter().flatten()).for_each(|(a, v)| *a += v);
        }
    }
    let mut edges = Vec::new();
    if let Some((first, chs)) = layers.first() {
        for (j, &c) in chs.iter().enumerate() {
            edges.push(Edge { from: "stimulus".into(), to: label(*first, c), weight: cond[0][j] });
        }
    }
    for i in 1..layers.len() {
        for (ku, &cu) in layers[i].1.iter().enumerate() {
            for (kl, &cl) in layers[i - 1].1.iter().enumerate() {
                edges.push(Edge { from: label(ids[i - 1], cl), to: label(ids[i], cu), weight: flow[i - 1][ku][kl] });
            }
        }
    }
    if let Some((top, chs)) = layers.last() {
        let t = layers.len() - 1;
        for (j, &c) in chs.iter().enumerate() {
            edges.push(Edge { from: label(*top, c), to: format!("cell {cell}"), weight: cond[t][j] });
        }
    }
    Ok(edges)
}
