//! Building the differentiable graph from an ONNX file.
//!
//! One pass over the nodes in topological order evaluates the graph on a zero input of batch 1.
//! Every node whose data inputs do not depend on the stimulus (initializers, Constant nodes,
//! and shape arithmetic such as Shape -> Gather -> Unsqueeze -> Concat, which only sees fixed
//! shapes) is folded into a constant; the rest become graph nodes. Reshape targets that carry
//! the batch size as a literal 1 (fixed-batch exports, or a folded Shape of the batch) get a 0
//! ("copy the input's dimension", ONNX Reshape semantics) so the model runs on any batch.

use super::layout::{InputBinding, InputLayout};
use super::{read_proto, tensor_proto};
use crate::engine::ops::{self, BuildCtx, Built};
use crate::engine::{Graph, Node, Source, Value, ValueId};
use crate::{Error, Result, Tensor};
use ndarray::{ArrayD, IxDyn};
use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};
use tract_onnx::pb::{self, tensor_proto::DataType, tensor_shape_proto::dimension, ModelProto, NodeProto};

/// How to load a model.
#[derive(Debug, Clone, Default)]
pub struct LoadOptions {
    /// Force an input layout instead of detecting it.
    pub layout: Option<InputLayout>,
    /// Values for symbolic input dimensions other than the batch (name, value).
    pub dims: Vec<(String, usize)>,
}

/// A loaded model: the differentiable graph, the input binding, and the folded ONNX model that
/// tract runs on the fast path.
#[derive(Debug)]
pub struct Model {
    /// Where it was read from.
    pub path: PathBuf,
    /// The differentiable program.
    pub graph: Graph,
    /// How stimulus windows map onto the input.
    pub binding: InputBinding,
    /// The default-domain opset the file declares.
    pub opset: i64,
    /// The folded model (symbolic batch "N"), for tract and for export.
    pub proto: ModelProto,
    /// How many nodes were folded into constants at load.
    pub folded: usize,
    /// Parameter count of each graph node (float initializers it reads), by node index.
    pub node_parameters: Vec<usize>,
}

/// Per-name facts gathered while walking the graph.
#[derive(Default)]
struct Walk {
    /// Batch-1 value of every name seen so far.
    known: HashMap<String, Tensor>,
    /// ONNX data type of every name (for writing folded constants back).
    dtype: HashMap<String, i32>,
    /// Names whose value depends on the stimulus.
    dynamic: HashSet<String>,
    /// Names that are initializers.
    initializer: HashSet<String>,
}

impl Model {
    /// Read, validate and prepare `path`.
    pub fn load(path: &Path, options: &LoadOptions) -> Result<Model> {
        Self::from_proto(read_proto(path)?, path, options)
    }

    /// Validate and prepare a model already in memory; `path` names it in messages and records.
    pub fn from_proto(proto: ModelProto, path: &Path, options: &LoadOptions) -> Result<Model> {
        let err = |message: String| Error::Model { path: path.into(), message };
        let opset =
            proto.opset_import.iter().find(|o| o.domain.is_empty() || o.domain == "ai.onnx").map_or(1, |o| o.version);
        let g = proto.graph.as_ref().ok_or_else(|| err("holds no graph".into()))?;

        let mut walk = Walk::default();
        for t in &g.initializer {
            let v = tensor_proto::decode(t).map_err(&err)?;
            let bad = v.iter().filter(|x| !x.is_finite()).count();
            if bad > 0 {
                return Err(err(format!(
                    "initializer '{}' holds {bad} NaN or infinite value(s) out of {}; the \
                     weights are damaged (a diverged fit or a broken export). Fix the weights \
                     and export again",
                    t.name,
                    v.len()
                )));
            }
            walk.dtype.insert(t.name.clone(), t.data_type);
            walk.initializer.insert(t.name.clone());
            walk.known.insert(t.name.clone(), v);
        }

        let inputs: Vec<&pb::ValueInfoProto> = g.input.iter().filter(|i| !walk.initializer.contains(&i.name)).collect();
        let input = match inputs.as_slice() {
            [one] => *one,
            [] => return Err(err("the graph has no input; expected one stimulus input".into())),
            many => {
                let names: Vec<_> = many.iter().map(|i| format!("'{}'", i.name)).collect();
                return Err(err(format!(
                    "the graph has {} inputs ({}); sufficit drives models with exactly one \
                     stimulus input. Export a model whose other inputs are fixed as initializers",
                    many.len(),
                    names.join(", ")
                )));
            }
        };
        let shape = input_shape(input, options).map_err(&err)?;
        // The checks below run the graph on a batch of one and two: refuse a declared input too
        // large for that before allocating it (a damaged or hostile file can declare any size).
        crate::memory::check(
            &format!("model '{}': its declared input {:?} on a batch of two", path.display(), &shape[1..]),
            crate::memory::f32_bytes(&shape[1..]).and_then(|b| b.checked_mul(2)),
            0.25,
        )?;
        let order = topological_order(g).map_err(&err)?;
        let transposed = g.node.iter().find(|n| n.input.contains(&input.name)).is_some_and(|n| {
            n.op_type == "Transpose" && n.attribute.iter().any(|a| a.name == "perm" && a.ints == [0, 3, 1, 2])
        });
        let binding = InputBinding::bind(&shape, options.layout, transposed)?;

        let mut values = vec![Value { name: input.name.clone(), source: Source::Input, shape: shape.clone() }];
        let mut ids: HashMap<String, ValueId> = HashMap::from([(input.name.clone(), 0)]);
        walk.known.insert(input.name.clone(), ArrayD::zeros(IxDyn(&shape)));
        walk.dynamic.insert(input.name.clone());
        walk.dtype.insert(input.name.clone(), DataType::Float as i32);

        let mut nodes: Vec<Node> = Vec::new();
        let mut extra_inits: Vec<pb::TensorProto> = Vec::new();
        let mut folded = 0;
        for &i in &order {
            let mut proto_node = g.node[i].clone();
            let name = if proto_node.name.is_empty() {
                proto_node.output.first().cloned().unwrap_or_default()
            } else {
                proto_node.name.clone()
            };
            check_node_shape(&proto_node, &name, g)?;
            let mut built = build_op(&proto_node, &name, opset, &walk)?;
            if let Some((node, init, rebuilt)) = batch_free_reshape(&proto_node, &name, opset, &walk)? {
                walk.known.insert(init.name.clone(), tensor_proto::decode(&init).map_err(&err)?);
                walk.dtype.insert(init.name.clone(), init.data_type);
                extra_inits.push(init);
                proto_node = node;
                built = rebuilt;
            }
            let data_names: Vec<String> = built
                .data_inputs
                .iter()
                .map(|&k| {
                    proto_node.input.get(k).cloned().ok_or_else(|| Error::Node {
                        node: name.clone(),
                        op: proto_node.op_type.clone(),
                        message: format!(
                            "has {} input(s) but the operator needs input {} as well",
                            proto_node.input.len(),
                            k + 1
                        ),
                    })
                })
                .collect::<Result<_>>()?;
            let dummy: Vec<&Tensor> = data_names
                .iter()
                .map(|n| {
                    walk.known.get(n).ok_or_else(|| Error::Node {
                        node: name.clone(),
                        op: proto_node.op_type.clone(),
                        message: format!("input '{n}' is not produced by any node or initializer"),
                    })
                })
                .collect::<Result<_>>()?;
            let out = built.op.forward(&dummy).map_err(|e| Error::Node {
                node: name.clone(),
                op: proto_node.op_type.clone(),
                message: format!("{} (while checking shapes with a batch of one)", e.0),
            })?;
            let out_name = proto_node.output[0].clone();
            walk.dtype.insert(out_name.clone(), output_dtype(&proto_node, &walk));
            let depends = proto_node.op_type != "Shape" && data_names.iter().any(|n| walk.dynamic.contains(n));
            if !depends {
                folded += 1;
                walk.known.insert(out_name, out);
                continue;
            }
            let mut inputs = Vec::with_capacity(data_names.len());
            for n in &data_names {
                let id = match ids.get(n) {
                    Some(&id) => id,
                    None => {
                        let t = walk.known[n].clone();
                        values.push(Value { name: n.clone(), shape: t.shape().to_vec(), source: Source::Param(t) });
                        ids.insert(n.clone(), values.len() - 1);
                        values.len() - 1
                    }
                };
                inputs.push(id);
            }
            values.push(Value {
                name: out_name.clone(),
                source: Source::Node(nodes.len()),
                shape: out.shape().to_vec(),
            });
            let output = values.len() - 1;
            ids.insert(out_name.clone(), output);
            walk.dynamic.insert(out_name.clone());
            walk.known.insert(out_name, out);
            nodes.push(Node { name, op: built.op, inputs, output, proto: proto_node });
        }

        let outputs = g
            .output
            .iter()
            .map(|o| match ids.get(&o.name) {
                Some(&id) if walk.dynamic.contains(&o.name) => Ok(id),
                _ => Err(err(format!("graph output '{}' does not depend on the input", o.name))),
            })
            .collect::<Result<Vec<_>>>()?;
        let node_parameters = nodes
            .iter()
            .map(|n| {
                n.proto
                    .input
                    .iter()
                    .filter(|i| walk.initializer.contains(*i) && is_float(walk.dtype[*i]))
                    .map(|i| walk.known[i].len())
                    .sum()
            })
            .collect();
        let proto = export_proto(&proto, &nodes, &values, &walk, extra_inits, input, &shape, &outputs);
        let graph = Graph { values, nodes, input: 0, outputs };
        crate::memory::check(
            &format!("model '{}': the activations of one sample", path.display()),
            Some(graph.bytes_per_sample() as u64 * 2),
            0.25,
        )?;
        check_batches(&graph, path)?;
        Ok(Model { path: path.into(), graph, binding, opset, proto, folded, node_parameters })
    }
}

fn is_float(dtype: i32) -> bool {
    [DataType::Float as i32, DataType::Double as i32, DataType::Float16 as i32].contains(&dtype)
}

/// The input's shape with the batch set to 1 and symbolic dimensions bound.
fn input_shape(input: &pb::ValueInfoProto, options: &LoadOptions) -> std::result::Result<Vec<usize>, String> {
    let Some(pb::type_proto::Value::TensorType(t)) = input.r#type.as_ref().and_then(|t| t.value.as_ref()) else {
        return Err(format!("input '{}' is not a tensor", input.name));
    };
    if t.elem_type != DataType::Float as i32 {
        return Err(format!(
            "input '{}' has element type {}; sufficit feeds float32 stimuli",
            input.name,
            DataType::try_from(t.elem_type).map(|d| d.as_str_name()).unwrap_or("unknown")
        ));
    }
    let dims = &t.shape.as_ref().ok_or_else(|| format!("input '{}' declares no shape", input.name))?.dim;
    let mut shape = vec![1usize];
    for (k, d) in dims.iter().enumerate().skip(1) {
        let v = match &d.value {
            Some(dimension::Value::DimValue(v)) if *v > 0 => *v as usize,
            Some(dimension::Value::DimParam(p)) => match options.dims.iter().find(|(n, _)| n == p) {
                Some((_, v)) => *v,
                None => {
                    return Err(format!(
                        "input '{}' dimension {k} is symbolic ('{p}'); only the batch (dimension \
                         0) may be. Give it a size with --dim {p}=VALUE",
                        input.name
                    ))
                }
            },
            _ => {
                return Err(format!(
                    "input '{}' dimension {k} has no size; give the model a fixed input shape",
                    input.name
                ))
            }
        };
        shape.push(v);
    }
    if dims.is_empty() {
        return Err(format!("input '{}' is a scalar; expected a batch of stimulus windows", input.name));
    }
    Ok(shape)
}

/// Node indices ordered so every input is available before use.
fn topological_order(g: &pb::GraphProto) -> std::result::Result<Vec<usize>, String> {
    let mut available: HashSet<&str> = g.input.iter().map(|i| i.name.as_str()).collect();
    available.extend(g.initializer.iter().map(|t| t.name.as_str()));
    available.insert("");
    let mut done = vec![false; g.node.len()];
    let mut order = Vec::with_capacity(g.node.len());
    while order.len() < g.node.len() {
        let before = order.len();
        for (i, n) in g.node.iter().enumerate() {
            if !done[i] && n.input.iter().all(|x| available.contains(x.as_str())) {
                done[i] = true;
                order.push(i);
                available.extend(n.output.iter().map(|s| s.as_str()));
            }
        }
        if order.len() == before {
            let (i, n) = g.node.iter().enumerate().find(|(i, _)| !done[*i]).expect("a node is left");
            let missing = n.input.iter().find(|x| !available.contains(x.as_str())).cloned().unwrap_or_default();
            return Err(format!(
                "node '{}' (#{i}, {}) reads '{missing}', which no node, input or initializer \
                 provides (or the graph has a cycle)",
                n.name, n.op_type
            ));
        }
    }
    Ok(order)
}

/// Refuse custom domains and nodes whose extra outputs are used (we compute only the first).
fn check_node_shape(n: &NodeProto, name: &str, g: &pb::GraphProto) -> Result<()> {
    if !n.domain.is_empty() && n.domain != "ai.onnx" {
        return Err(Error::UnsupportedOp {
            node: name.into(),
            op: format!("{}::{}", n.domain, n.op_type),
            supported: ops::supported_list(),
        });
    }
    if n.output.is_empty() {
        return Err(Error::Node { node: name.into(), op: n.op_type.clone(), message: "has no output".into() });
    }
    for extra in n.output.iter().skip(1).filter(|o| !o.is_empty()) {
        let used = g.node.iter().any(|m| m.input.contains(extra)) || g.output.iter().any(|o| &o.name == extra);
        if used {
            return Err(Error::Node {
                node: name.into(),
                op: n.op_type.clone(),
                message: format!("its extra output '{extra}' is used; sufficit computes only the first output"),
            });
        }
    }
    Ok(())
}

fn build_op(n: &NodeProto, name: &str, opset: i64, walk: &Walk) -> Result<Built> {
    let lookup = |s: &str| {
        if walk.dynamic.contains(s) {
            None
        } else {
            walk.known.get(s)
        }
    };
    let ctx = BuildCtx::new(n, opset, &lookup);
    match ops::build(&ctx) {
        None => {
            Err(Error::UnsupportedOp { node: name.into(), op: n.op_type.clone(), supported: ops::supported_list() })
        }
        Some(Err(e)) => Err(Error::Node { node: name.into(), op: n.op_type.clone(), message: e.0 }),
        Some(Ok(b)) => Ok(b),
    }
}

/// For a Reshape of a stimulus-dependent tensor whose constant target starts with the batch
/// (1 at load), return the node rewritten to copy dimension 0 instead, its new shape
/// initializer, and the rebuilt op.
fn batch_free_reshape(
    n: &NodeProto,
    name: &str,
    opset: i64,
    walk: &Walk,
) -> Result<Option<(NodeProto, pb::TensorProto, Built)>> {
    if n.op_type != "Reshape" || n.input.len() < 2 || !walk.dynamic.contains(&n.input[0]) {
        return Ok(None);
    }
    let allow_zero = n.attribute.iter().any(|a| a.name == "allowzero" && a.i != 0);
    let Some(target) = walk.known.get(&n.input[1]) else {
        return Ok(None);
    };
    let data_batch = walk.known.get(&n.input[0]).and_then(|t| t.shape().first().copied());
    if allow_zero || target.first() != Some(&1.0) || data_batch != Some(1) {
        return Ok(None);
    }
    let mut new_target = target.clone();
    new_target[[0]] = 0.0;
    let init = tensor_proto::encode_i64(&format!("{}__sufficit_batch_free", n.input[1]), &new_target);
    let mut node = n.clone();
    node.input[1] = init.name.clone();
    let lookup = |s: &str| {
        if s == init.name {
            Some(&new_target)
        } else if walk.dynamic.contains(s) {
            None
        } else {
            walk.known.get(s)
        }
    };
    let ctx = BuildCtx::new(&node, opset, &lookup);
    let rebuilt = match ops::build(&ctx) {
        Some(Ok(b)) => b,
        _ => {
            return Err(Error::Node {
                node: name.into(),
                op: "Reshape".into(),
                message: "could not free the batch dimension".into(),
            })
        }
    };
    Ok(Some((node, init, rebuilt)))
}

/// ONNX data type of a node's first output, as far as folding needs it.
fn output_dtype(n: &NodeProto, walk: &Walk) -> i32 {
    let int64 = DataType::Int64 as i32;
    let attr = |k: &str| n.attribute.iter().find(|a| a.name == k);
    match n.op_type.as_str() {
        "Shape" => int64,
        "Cast" => attr("to").map_or(DataType::Float as i32, |a| a.i as i32),
        "Constant" => attr("value").and_then(|a| a.t.as_ref()).map(|t| t.data_type).unwrap_or_else(|| {
            if attr("value_int").is_some() || attr("value_ints").is_some() {
                int64
            } else {
                DataType::Float as i32
            }
        }),
        "ConstantOfShape" => attr("value").and_then(|a| a.t.as_ref()).map_or(DataType::Float as i32, |t| t.data_type),
        _ => n.input.first().and_then(|i| walk.dtype.get(i)).copied().unwrap_or(DataType::Float as i32),
    }
}

/// The folded model as ONNX: kept nodes, the constants they read, a symbolic batch.
#[allow(clippy::too_many_arguments)]
fn export_proto(
    original: &ModelProto,
    nodes: &[Node],
    values: &[Value],
    walk: &Walk,
    extra: Vec<pb::TensorProto>,
    input: &pb::ValueInfoProto,
    shape: &[usize],
    outputs: &[ValueId],
) -> ModelProto {
    let mut needed: Vec<String> = Vec::new();
    for n in nodes {
        for i in &n.proto.input {
            if !i.is_empty() && !walk.dynamic.contains(i) && !needed.contains(i) {
                needed.push(i.clone());
            }
        }
    }
    let initializer = needed
        .iter()
        .filter_map(|name| {
            if let Some(t) = extra.iter().find(|t| &t.name == name) {
                return Some(t.clone());
            }
            let v = walk.known.get(name)?;
            Some(if is_float(walk.dtype.get(name).copied().unwrap_or(1)) {
                tensor_proto::encode_f32(name, v)
            } else {
                tensor_proto::encode_i64(name, v)
            })
        })
        .collect();
    // Batch-symbolic dims: `N` first, then the value's own.
    let batch_dims = |shape: &[usize]| -> Vec<pb::tensor_shape_proto::Dimension> {
        shape
            .iter()
            .enumerate()
            .map(|(k, &d)| pb::tensor_shape_proto::Dimension {
                value: Some(if k == 0 {
                    dimension::Value::DimParam("N".into())
                } else {
                    dimension::Value::DimValue(d as i64)
                }),
                ..Default::default()
            })
            .collect()
    };
    let dims = batch_dims(shape);
    let tensor_type = |shape: Option<pb::TensorShapeProto>| pb::TypeProto {
        value: Some(pb::type_proto::Value::TensorType(pb::type_proto::Tensor {
            elem_type: DataType::Float as i32,
            shape,
        })),
        ..Default::default()
    };
    let graph = pb::GraphProto {
        node: nodes.iter().map(|n| n.proto.clone()).collect(),
        name: original.graph.as_ref().map(|g| g.name.clone()).unwrap_or_default(),
        initializer,
        input: vec![pb::ValueInfoProto {
            name: input.name.clone(),
            r#type: Some(tensor_type(Some(pb::TensorShapeProto { dim: dims }))),
            ..Default::default()
        }],
        output: outputs
            .iter()
            .map(|&o| pb::ValueInfoProto {
                name: values[o].name.clone(),
                r#type: Some(tensor_type(Some(pb::TensorShapeProto { dim: batch_dims(&values[o].shape) }))),
                ..Default::default()
            })
            .collect(),
        ..Default::default()
    };
    ModelProto {
        ir_version: original.ir_version,
        opset_import: original.opset_import.clone(),
        producer_name: "sufficit".into(),
        producer_version: env!("CARGO_PKG_VERSION").into(),
        graph: Some(graph),
        ..Default::default()
    }
}

/// Run a batch of two and check every output keeps it: catches batch sizes baked into the graph.
fn check_batches(graph: &Graph, path: &Path) -> Result<()> {
    let mut shape = graph.values[graph.input].shape.clone();
    shape[0] = 2;
    let fail = |detail: String| Error::Model {
        path: path.into(),
        message: format!(
            "the model does not run on a batch of two ({detail}). It probably bakes its batch \
             size into a shape other than a leading Reshape target; export it with a dynamic \
             batch axis (dynamic_axes={{input: {{0: 'N'}}}})"
        ),
    };
    let tape = graph.forward(ArrayD::zeros(IxDyn(&shape)), &[]).map_err(|e| fail(e.to_string()))?;
    for (&o, t) in graph.outputs.iter().zip(tape.outputs()) {
        if t.shape().first() != Some(&2) {
            return Err(fail(format!("output '{}' has shape {:?}", graph.values[o].name, t.shape())));
        }
    }
    Ok(())
}
