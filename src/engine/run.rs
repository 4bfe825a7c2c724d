//! Forward passes that record a tape, and reverse-mode gradients from it.

use super::graph::{Graph, Source, ValueId};
use super::ops::BackwardArgs;
use crate::{Error, Result, Tensor};
use ndarray::{Axis, IxDyn, Zip};

/// Which entries of a value an [`Override`] replaces.
#[derive(Debug, Clone)]
pub enum Part {
    /// All of it.
    Whole,
    /// These channels (axis 1).
    Channels(Vec<usize>),
    /// Entries where this mask (0 or 1, broadcastable to the value, e.g. `[1, C, H, W]`) is 1.
    Mask(Tensor),
}

/// Replace part of a value during forward: the entries chosen by `part` take the values of
/// `with` (broadcast to the value's shape). Gradients do not flow through replaced entries,
/// since they no longer depend on the input.
#[derive(Debug, Clone)]
pub struct Override {
    /// The value to change.
    pub value: ValueId,
    /// Which entries.
    pub part: Part,
    /// Replacement, broadcastable to the value's shape (e.g. `[1, C, H, W]` for every sample).
    pub with: Tensor,
}

impl Override {
    fn apply(&self, t: &mut Tensor, graph: &Graph) -> Result<()> {
        let name = &graph.values[self.value].name;
        let misfit = |what: &str, shape: &[usize]| {
            Error::Usage(format!(
                "override of '{name}': {what} of shape {shape:?} does not fit the value's shape {:?}",
                t.shape()
            ))
        };
        let src = self.with.broadcast(IxDyn(t.shape())).ok_or_else(|| misfit("replacement", self.with.shape()))?;
        match &self.part {
            Part::Whole => t.assign(&src),
            Part::Channels(chs) => {
                let c = t.shape().get(1).copied().unwrap_or(0);
                for &ch in chs {
                    if ch >= c {
                        return Err(Error::Usage(format!(
                            "override of '{name}': channel {ch} does not exist (it has {c})"
                        )));
                    }
                    t.index_axis_mut(Axis(1), ch).assign(&src.index_axis(Axis(1), ch));
                }
            }
            Part::Mask(m) => {
                let m = m.broadcast(IxDyn(t.shape())).ok_or_else(|| misfit("mask", m.shape()))?;
                Zip::from(t.view_mut()).and(&m).and(&src).for_each(|v, &k, &s| {
                    if k != 0.0 {
                        *v = s
                    }
                });
            }
        }
        Ok(())
    }

    /// Zero the gradient entries this override cut off from upstream.
    fn block(&self, g: &mut Tensor) {
        match &self.part {
            Part::Whole => g.fill(0.0),
            Part::Channels(chs) => {
                for &ch in chs {
                    if ch < g.shape().get(1).copied().unwrap_or(0) {
                        g.index_axis_mut(Axis(1), ch).fill(0.0);
                    }
                }
            }
            Part::Mask(m) => {
                if let Some(m) = m.broadcast(IxDyn(g.shape())) {
                    Zip::from(g.view_mut()).and(&m).for_each(|v, &k| {
                        if k != 0.0 {
                            *v = 0.0
                        }
                    });
                }
            }
        }
    }
}

/// Every activation of one forward pass, kept for reading and for backward.
pub struct Tape<'g> {
    graph: &'g Graph,
    values: Vec<Option<Tensor>>,
    overrides: Vec<Override>,
}

impl<'g> Tape<'g> {
    /// The value `id` as computed in this pass (parameters come from the graph).
    ///
    /// Panics if the pass did not compute it (see [`Tape::try_value`]).
    pub fn value(&self, id: ValueId) -> &Tensor {
        self.try_value(id).unwrap_or_else(|| panic!("'{}' was not computed in this pass", self.graph.values[id].name))
    }

    /// The value `id`, or `None` when this pass skipped it (see [`Graph::forward_from`]).
    pub fn try_value(&self, id: ValueId) -> Option<&Tensor> {
        match &self.graph.values[id].source {
            Source::Param(t) => Some(t),
            _ => self.values[id].as_ref(),
        }
    }

    /// The model outputs, in order.
    pub fn outputs(&self) -> Vec<&Tensor> {
        self.graph.outputs.iter().map(|&o| self.value(o)).collect()
    }

    /// Reverse mode: given seeds dF/d(value) at some values, return dF/d(value) at each of
    /// `wanted` (zeros where F does not depend on it). One call serves any number of seeds.
    pub fn gradients(&self, seeds: &[(ValueId, Tensor)], wanted: &[ValueId]) -> Result<Vec<Tensor>> {
        let g = self.graph;
        let n = g.values.len();
        // A value needs a gradient if it is wanted or lies downstream of a wanted value.
        let mut live = vec![false; n];
        for &w in wanted {
            live[w] = true;
        }
        for node in &g.nodes {
            if node.inputs.iter().any(|&i| live[i]) {
                live[node.output] = true;
            }
        }
        let mut grads: Vec<Option<Tensor>> = vec![None; n];
        for (id, seed) in seeds {
            if seed.shape() != self.value(*id).shape() {
                return Err(Error::Usage(format!(
                    "gradient seed for '{}' has shape {:?}, the value has {:?}",
                    g.values[*id].name,
                    seed.shape(),
                    self.value(*id).shape()
                )));
            }
            accumulate(&mut grads[*id], seed.clone());
        }
        for node in g.nodes.iter().rev() {
            let wants: Vec<bool> = node.inputs.iter().map(|&i| live[i]).collect();
            let Some(grad) = grads[node.output].as_ref() else {
                continue;
            };
            if !wants.iter().any(|&w| w) {
                continue;
            }
            let mut grad = grad.clone();
            for o in self.overrides.iter().filter(|o| o.value == node.output) {
                o.block(&mut grad);
            }
            let inputs: Vec<&Tensor> = node
                .inputs
                .iter()
                .map(|&i| {
                    self.try_value(i).ok_or_else(|| {
                        Error::Usage(format!(
                            "a gradient through '{}' needs '{}', which this pass did not compute",
                            node.name, g.values[i].name
                        ))
                    })
                })
                .collect::<Result<_>>()?;
            let args = BackwardArgs { inputs: &inputs, output: self.value(node.output), grad: &grad, wants: &wants };
            let input_grads = node.op.backward(&args).map_err(|e| node_error(node, e.0))?;
            for ((&i, gi), &w) in node.inputs.iter().zip(input_grads).zip(&wants) {
                if let (true, Some(gi)) = (w, gi) {
                    accumulate(&mut grads[i], gi);
                }
            }
        }
        wanted
            .iter()
            .map(|&w| match (grads[w].clone(), self.try_value(w)) {
                (Some(gw), _) => Ok(gw),
                (None, Some(v)) => Ok(Tensor::zeros(IxDyn(v.shape()))),
                (None, None) => Err(Error::Usage(format!("'{}' was not computed in this pass", g.values[w].name))),
            })
            .collect()
    }
}

fn accumulate(slot: &mut Option<Tensor>, g: Tensor) {
    match slot {
        Some(acc) => Zip::from(acc).and(&g).for_each(|a, &b| *a += b),
        None => *slot = Some(g),
    }
}

fn node_error(node: &super::Node, message: String) -> Error {
    Error::Node { node: node.name.clone(), op: node.op.name().into(), message }
}

/// The error for the first node whose output holds NaN or infinity (its inputs were all finite,
/// since every earlier node's output and every given value was checked).
fn non_finite(node: &super::Node, out: &Tensor, at: usize) -> Error {
    let value = out.iter().nth(at).copied().unwrap_or(f32::NAN);
    let count = out.iter().filter(|v| !v.is_finite()).count();
    Error::Numerical {
        node: node.name.clone(),
        op: node.op.name().into(),
        message: format!(
            "its output (shape {:?}) holds {count} non-finite value(s), the first {value} at flat index {at}, \
             although its inputs were finite; the weights or the stimulus contrast may be far outside the \
             range the model was trained on",
            out.shape()
        ),
    }
}

impl Graph {
    /// Run the graph on a batch (`input` has the model's input shape with any batch size),
    /// applying `overrides`, and keep every activation.
    pub fn forward(&self, input: Tensor, overrides: &[Override]) -> Result<Tape<'_>> {
        let expected = &self.values[self.input].shape[1..];
        if input.ndim() == 0 || &input.shape()[1..] != expected {
            return Err(Error::Usage(format!(
                "the model input '{}' takes [batch, {}] but was given {:?}",
                self.values[self.input].name,
                expected.iter().map(|d| d.to_string()).collect::<Vec<_>>().join(", "),
                input.shape()
            )));
        }
        self.forward_from(vec![(self.input, input)], overrides)
    }

    /// Run only what the outputs need, starting from given values (e.g. a hidden layer computed
    /// elsewhere): nodes whose outputs are given, and nodes only they depend on, are skipped.
    pub fn forward_from(&self, given: Vec<(ValueId, Tensor)>, overrides: &[Override]) -> Result<Tape<'_>> {
        self.forward_to(given, &self.outputs, overrides)
    }

    /// As [`Graph::forward_from`], computing only what `targets` need (e.g. one hidden layer).
    pub fn forward_to(
        &self,
        given: Vec<(ValueId, Tensor)>,
        targets: &[ValueId],
        overrides: &[Override],
    ) -> Result<Tape<'_>> {
        for o in overrides {
            if !matches!(self.values[o.value].source, Source::Node(_)) {
                return Err(Error::Usage(format!(
                    "'{}' is not computed by a node and cannot be overridden",
                    self.values[o.value].name
                )));
            }
        }
        let mut values: Vec<Option<Tensor>> = vec![None; self.values.len()];
        for (id, t) in given {
            if let Some(bad) = t.iter().position(|v| !v.is_finite()) {
                return Err(Error::Numerical {
                    node: self.values[id].name.clone(),
                    op: "given value".into(),
                    message: format!(
                        "entry {bad} of the {:?} value handed to the model is {}; check the stimulus",
                        t.shape(),
                        t.iter().nth(bad).copied().unwrap_or(f32::NAN)
                    ),
                });
            }
            values[id] = Some(t);
        }
        let mut required = vec![false; self.values.len()];
        for &o in targets {
            required[o] = true;
        }
        for node in self.nodes.iter().rev() {
            if required[node.output] && values[node.output].is_none() {
                for &i in &node.inputs {
                    required[i] = true;
                }
            }
        }
        for node in &self.nodes {
            if !required[node.output] || values[node.output].is_some() {
                continue;
            }
            let inputs: Vec<&Tensor> = node
                .inputs
                .iter()
                .map(|&i| match &self.values[i].source {
                    Source::Param(t) => Ok(t),
                    _ => values[i].as_ref().ok_or_else(|| {
                        Error::Usage(format!("'{}' is needed but was neither given nor computed", self.values[i].name))
                    }),
                })
                .collect::<Result<_>>()?;
            let mut out = node.op.forward(&inputs).map_err(|e| node_error(node, e.0))?;
            for o in overrides.iter().filter(|o| o.value == node.output) {
                o.apply(&mut out, self)?;
            }
            if let Some(bad) = out.iter().position(|v| !v.is_finite()) {
                return Err(non_finite(node, &out, bad));
            }
            values[node.output] = Some(out);
        }
        Ok(Tape { graph: self, values, overrides: overrides.to_vec() })
    }
}
