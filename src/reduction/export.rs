//! The reduced circuit as a valid ONNX model. A dropped channel is removed where that is exact:
//! its producing convolution (and per-channel bias, batch norm and nonlinearity parameters) lose
//! the channel, and its constant clamped contribution to each consumer is folded into that
//! consumer's bias (a Conv whose contribution is the same at every position, or Flatten -> Gemm).
//! Otherwise the layer keeps its channels and gets a constant input instead:
//! `h' = h * keep + clamp * (1 - keep)` as Mul and Add nodes, which is exact everywhere.

use super::circuit::Circuit;
use crate::engine::{Node, Source, ValueId};
use crate::model::tensor_proto::{decode, encode_f32};
use crate::model::Model;
use crate::{Error, Result, Tensor};
use ndarray::{Axis, IxDyn, Zip};
use std::collections::HashMap;
use tract_onnx::pb::{self, ModelProto, NodeProto};

/// How each layer was written.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ExportNote {
    /// The layer.
    pub layer: String,
    /// `removed` (channels deleted, constants folded into biases) or `constant-input`.
    pub method: &'static str,
    /// Why channels could not be removed, for `constant-input`.
    pub reason: Option<String>,
}

/// The editable model: nodes and float initializers by name.
#[derive(Clone)]
struct Edit {
    nodes: Vec<NodeProto>,
    params: HashMap<String, Tensor>,
    order: Vec<String>,
    other: Vec<pb::TensorProto>,
}

impl Edit {
    fn uses(&self, name: &str) -> usize {
        self.nodes.iter().flat_map(|n| &n.input).filter(|i| *i == name).count()
    }
    fn consumers(&self, name: &str) -> Vec<usize> {
        (0..self.nodes.len()).filter(|&i| self.nodes[i].input.iter().any(|x| x == name)).collect()
    }
    fn producer(&self, name: &str) -> Option<usize> {
        self.nodes.iter().position(|n| n.output.first().is_some_and(|o| o == name))
    }
    fn set(&mut self, name: String, t: Tensor) {
        if !self.params.contains_key(&name) {
            self.order.push(name.clone());
        }
        self.params.insert(name, t);
    }
}

fn attr_i(n: &NodeProto, name: &str, default: i64) -> i64 {
    n.attribute.iter().find(|a| a.name == name).map_or(default, |a| a.i)
}
fn attr_f(n: &NodeProto, name: &str, default: f32) -> f32 {
    n.attribute.iter().find(|a| a.name == name).map_or(default, |a| a.f)
}

/// Keep only `keep` entries along `axis` of `t`.
fn select(t: &Tensor, axis: usize, keep: &[usize]) -> Tensor {
    t.select(Axis(axis), keep)
}

/// Write `circuit` of `model` as an ONNX model; also say how each layer was written.
pub fn export(model: &Model, circuit: &Circuit) -> Result<(ModelProto, Vec<ExportNote>)> {
    let g = &model.graph;
    let graph = model.proto.graph.as_ref().ok_or_else(|| Error::Usage("the model holds no graph".into()))?;
    let mut edit = Edit { nodes: graph.node.clone(), params: HashMap::new(), order: Vec::new(), other: Vec::new() };
    for t in &graph.initializer {
        match (t.data_type == pb::tensor_proto::DataType::Float as i32).then(|| decode(t)) {
            Some(Ok(v)) => edit.set(t.name.clone(), v),
            _ => edit.other.push(t.clone()),
        }
    }
    let mut notes = Vec::new();
    // Consumer side first (with the original weights), then producer side.
    let mut removable = Vec::new();
    for l in &circuit.layers {
        let name = g.values[l.layer].name.clone();
        let keep_channels = whole_channels(&l.keep);
        let plan = keep_channels.ok_or_else(|| "positions are pruned inside kept channels".to_string()).and_then(|k| {
            if k.is_empty() {
                return Err("every channel is dropped".into());
            }
            check_removable(model, &edit, l.layer).map(|conv| (k, conv))
        });
        let before = edit.clone();
        let plan =
            plan.and_then(|(k, conv)| fold_consumers(model, &mut edit, l.layer, &k, &l.clamp).map(|()| (k, conv)));
        match plan {
            Ok((k, conv)) => {
                removable.push((l.layer, k, conv));
                notes.push(ExportNote { layer: name, method: "removed", reason: None });
            }
            Err(reason) => {
                edit = before;
                constant_input(&mut edit, &name, &l.keep, &l.clamp);
                notes.push(ExportNote { layer: name, method: "constant-input", reason: Some(reason) });
            }
        }
    }
    for (layer, k, conv) in removable {
        slice_producers(model, &mut edit, layer, &k, &conv);
    }
    let mut out = model.proto.clone();
    let gp = out.graph.as_mut().ok_or_else(|| Error::Usage("the model holds no graph".into()))?;
    gp.node = edit.nodes;
    gp.initializer = edit.order.iter().map(|n| encode_f32(n, &edit.params[n])).chain(edit.other).collect();
    gp.name = format!("{} (reduced by sufficit)", gp.name);
    Ok((out, notes))
}

/// The kept channels when the mask keeps whole channels only.
fn whole_channels(keep: &Tensor) -> Option<Vec<usize>> {
    let mut kept = Vec::new();
    for c in 0..keep.shape()[1] {
        let ch = keep.index_axis(Axis(1), c);
        if ch.iter().all(|&v| v != 0.0) {
            kept.push(c);
        } else if ch.iter().any(|&v| v != 0.0) {
            return None;
        }
    }
    Some(kept)
}

/// The chain from the producing Conv to the layer, if every link is per-channel and unshared,
/// and every consumer can drop input channels. Returns the producer chain's node names.
fn check_removable(model: &Model, edit: &Edit, layer: ValueId) -> std::result::Result<Vec<String>, String> {
    let g = &model.graph;
    let channels = g.values[layer].shape[1];
    let mut chain = Vec::new();
    let mut v = layer;
    loop {
        let node: &Node = g.producer(v).ok_or("the layer is not computed by a node")?;
        chain.push(node.proto.output[0].clone());
        let params: Vec<ValueId> =
            node.inputs.iter().copied().filter(|&i| matches!(g.values[i].source, Source::Param(_))).collect();
        for &p in &params {
            if edit.uses(&g.values[p].name) > 1 {
                return Err(format!("parameter '{}' is shared by several nodes", g.values[p].name));
            }
        }
        if node.op.name() == "Conv" {
            if attr_i(&node.proto, "group", 1) != 1 {
                return Err(format!("'{}' is a grouped convolution", node.name));
            }
            break;
        }
        let per_channel = params.iter().all(|&p| {
            let s = &g.values[p].shape;
            s.iter().product::<usize>() == 1 || s.first() == Some(&channels) || s.get(1) == Some(&channels)
        });
        if !super::filters::elementwise_per_channel(node.op.name()) || !per_channel {
            return Err(format!(
                "'{}' ({}) between the convolution and the layer is not per-channel",
                node.name,
                node.op.name()
            ));
        }
        let dynamic: Vec<ValueId> =
            node.inputs.iter().copied().filter(|&i| !matches!(g.values[i].source, Source::Param(_))).collect();
        match dynamic.as_slice() {
            [only] => v = *only,
            _ => return Err(format!("'{}' combines several stimulus-dependent inputs", node.name)),
        }
        if edit.consumers(&g.values[v].name).len() != 1 {
            return Err(format!("'{}' feeds more than one node", g.values[v].name));
        }
    }
    for i in edit.consumers(&g.values[layer].name) {
        let n = &edit.nodes[i];
        let fits = match n.op_type.as_str() {
            "Conv" => n.input[0] == g.values[layer].name && attr_i(n, "group", 1) == 1 && n.input.len() >= 2,
            "Flatten" => {
                attr_i(n, "axis", 1) == 1
                    && edit.consumers(&n.output[0]).iter().all(|&j| {
                        let m = &edit.nodes[j];
                        m.op_type == "Gemm"
                            && m.input[0] == n.output[0]
                            && attr_i(m, "transA", 0) == 0
                            && attr_f(m, "alpha", 1.0) == 1.0
                            && attr_f(m, "beta", 1.0) == 1.0
                    })
            }
            _ => false,
        };
        if !fits {
            return Err(format!("its consumer '{}' ({}) cannot drop input channels", n.name, n.op_type));
        }
        let w = n.input.get(1).cloned().unwrap_or_default();
        if n.op_type == "Conv" && (edit.uses(&w) > 1 || !edit.params.contains_key(&w)) {
            return Err(format!("the weights of '{}' are shared or not constant", n.name));
        }
    }
    Ok(chain)
}

/// Remove the dropped input channels from every consumer of `layer` and fold their constant
/// contribution into the consumer's bias, or say why that is not exact.
fn fold_consumers(
    model: &Model,
    edit: &mut Edit,
    layer: ValueId,
    keep: &[usize],
    clamp: &Tensor,
) -> std::result::Result<(), String> {
    let g = &model.graph;
    let name = g.values[layer].name.clone();
    let mut only_dropped =
        clamp.broadcast(IxDyn(&g.values[layer].shape)).map(|v| v.to_owned()).unwrap_or(clamp.clone());
    for &k in keep {
        only_dropped.index_axis_mut(Axis(1), k).fill(0.0);
    }
    for i in edit.consumers(&name) {
        let n = edit.nodes[i].clone();
        if n.op_type == "Conv" {
            let w = edit.params[&n.input[1]].clone();
            let conv = g.nodes.iter().find(|m| m.proto.output == n.output).ok_or("the consumer is not in the graph")?;
            let contribution = conv.op.forward(&[&only_dropped, &w]).map_err(|e| e.0)?;
            let per_out: Vec<f32> = (0..contribution.shape()[1])
                .map(|o| {
                    let ch = contribution.index_axis(Axis(1), o);
                    let first = ch.iter().next().copied().unwrap_or(0.0);
                    if ch.iter().all(|&v| (v - first).abs() <= 1e-6 * (1.0 + first.abs())) {
                        Ok(first)
                    } else {
                        Err(())
                    }
                })
                .collect::<std::result::Result<_, _>>()
                .map_err(|_| {
                    format!("the clamped channels add a position-dependent constant to '{}' (padding)", n.name)
                })?;
            let bias_name = match n.input.get(2) {
                Some(b) if !b.is_empty() => b.clone(),
                _ => {
                    let b = format!("{}__sufficit_bias", n.output[0]);
                    edit.set(b.clone(), Tensor::zeros(IxDyn(&[per_out.len()])));
                    let node = &mut edit.nodes[i];
                    node.input.resize(2, String::new());
                    node.input.push(b.clone());
                    b
                }
            };
            let mut bias = edit.params[&bias_name].clone();
            Zip::from(&mut bias).and(&ndarray::ArrayView1::from(&per_out).into_dyn()).for_each(|b, &v| *b += v);
            edit.set(bias_name, bias);
            edit.set(n.input[1].clone(), select(&w, 1, keep));
        } else {
            // Flatten (axis 1) -> Gemm: columns c * P .. (c + 1) * P belong to channel c.
            let per: usize = g.values[layer].shape[2..].iter().product();
            let cols: Vec<usize> = keep.iter().flat_map(|&k| k * per..(k + 1) * per).collect();
            let flat_clamp: Vec<f32> = only_dropped.iter().copied().collect();
            for j in edit.consumers(&n.output[0]) {
                let m = edit.nodes[j].clone();
                let trans_b = attr_i(&m, "transB", 0) == 1;
                let b = edit.params.get(&m.input[1]).cloned().ok_or("the Gemm weights are not constant")?;
                let (k_axis, o_axis) = if trans_b { (1, 0) } else { (0, 1) };
                let outs = b.shape()[o_axis];
                let add: Vec<f32> = (0..outs)
                    .map(|o| {
                        let col = b.index_axis(Axis(o_axis), o);
                        col.iter().zip(&flat_clamp).map(|(&w, &x)| w as f64 * x as f64).sum::<f64>() as f32
                    })
                    .collect();
                let bias_name = match m.input.get(2) {
                    Some(x) if !x.is_empty() => x.clone(),
                    _ => {
                        let x = format!("{}__sufficit_bias", m.output[0]);
                        edit.set(x.clone(), Tensor::zeros(IxDyn(&[outs])));
                        edit.nodes[j].input.resize(2, String::new());
                        edit.nodes[j].input.push(x.clone());
                        x
                    }
                };
                let bias = edit.params.get(&bias_name).cloned().ok_or("the Gemm bias is not constant")?;
                let bias = bias.broadcast(IxDyn(&[outs])).map(|v| v.to_owned()).unwrap_or(bias);
                let bias = bias + &ndarray::ArrayD::from_shape_vec(IxDyn(&[outs]), add).map_err(|e| e.to_string())?;
                edit.set(bias_name, bias);
                edit.set(m.input[1].clone(), select(&b, k_axis, &cols));
            }
        }
    }
    Ok(())
}

/// Keep only `keep` output channels along the producer chain of `layer`.
fn slice_producers(model: &Model, edit: &mut Edit, layer: ValueId, keep: &[usize], chain: &[String]) {
    let g = &model.graph;
    let channels = g.values[layer].shape[1];
    for out in chain {
        let Some(i) = edit.producer(out) else { continue };
        let node = edit.nodes[i].clone();
        for (k, input) in node.input.iter().enumerate() {
            let Some(t) = edit.params.get(input).cloned() else { continue };
            let sliced = if node.op_type == "Conv" {
                // Weights [O, I, ...] and bias [O].
                (k >= 1).then(|| select(&t, 0, keep))
            } else if t.len() == 1 {
                None
            } else if t.shape().first() == Some(&channels) {
                Some(select(&t, 0, keep))
            } else if t.shape().get(1) == Some(&channels) {
                Some(select(&t, 1, keep))
            } else {
                None
            };
            if let Some(s) = sliced {
                edit.set(input.clone(), s);
            }
        }
    }
}

/// Route every consumer of `name` through `name * keep + clamp * (1 - keep)`.
fn constant_input(edit: &mut Edit, name: &str, keep: &Tensor, clamp: &Tensor) {
    let keep_name = format!("{name}__sufficit_keep");
    let const_name = format!("{name}__sufficit_clamp");
    let clamp = clamp.broadcast(IxDyn(keep.shape())).map(|v| v.to_owned()).unwrap_or(clamp.clone());
    let constant = Zip::from(&clamp).and(keep).map_collect(|&c, &k| if k != 0.0 { 0.0 } else { c });
    edit.set(keep_name.clone(), keep.clone());
    edit.set(const_name.clone(), constant);
    let (masked, clamped) = (format!("{name}__sufficit_masked"), format!("{name}__sufficit_reduced"));
    for i in edit.consumers(name) {
        for x in edit.nodes[i].input.iter_mut().filter(|x| *x == name) {
            *x = clamped.clone();
        }
    }
    let at = edit.producer(name).map_or(0, |i| i + 1);
    let node = |op: &str, inputs: [&str; 2], out: &str| NodeProto {
        op_type: op.into(),
        name: out.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec![out.into()],
        ..Default::default()
    };
    edit.nodes.insert(at, node("Add", [&masked, &const_name], &clamped));
    edit.nodes.insert(at, node("Mul", [name, &keep_name], &masked));
}
