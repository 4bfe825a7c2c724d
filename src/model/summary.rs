//! What `inspect` reports about a model: input and layout, every node with its output shape and
//! parameter count, and the hidden layers that attribution and reduction can work on, with their
//! receptive fields in input pixels and lags.

use super::{InputBinding, InputLayout, Model};
use crate::engine::{Source, ValueId};
use serde::Serialize;

/// The model input.
#[derive(Debug, Serialize)]
pub struct InputSummary {
    /// ONNX name.
    pub name: String,
    /// Shape; the batch axis is the string "N".
    pub shape: Vec<serde_json::Value>,
    /// Detected or chosen layout.
    pub layout: InputLayout,
    /// Frames per window.
    pub lags: usize,
    /// Frame height in pixels.
    pub height: usize,
    /// Frame width in pixels.
    pub width: usize,
}

/// One output (a set of cells).
#[derive(Debug, Serialize)]
pub struct OutputSummary {
    /// ONNX name.
    pub name: String,
    /// Shape; the batch axis is the string "N".
    pub shape: Vec<serde_json::Value>,
}

/// One node of the graph after folding.
#[derive(Debug, Serialize)]
pub struct NodeSummary {
    /// Node name.
    pub name: String,
    /// ONNX op_type.
    pub op: String,
    /// Output value name.
    pub output: String,
    /// Output shape with the batch shown as "N".
    pub output_shape: Vec<serde_json::Value>,
    /// Number of parameters (float initializer entries) the node reads.
    pub parameters: usize,
}

/// How much of the input one unit of a layer sees.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReceptiveField {
    /// Frames.
    pub lags: usize,
    /// Pixels, vertically.
    pub height: usize,
    /// Pixels, horizontally.
    pub width: usize,
}

/// A layer whose channels are units for attribution and reduction.
#[derive(Debug, Serialize)]
pub struct HiddenLayer {
    /// The value name (use it with `--layer`).
    pub name: String,
    /// The nonlinearity that produces it.
    pub op: String,
    /// Channels (units).
    pub channels: usize,
    /// Shape; the batch axis is the string "N".
    pub shape: Vec<serde_json::Value>,
    /// Extent of the input one position of this layer depends on.
    pub receptive_field: ReceptiveField,
}

/// Everything `inspect` prints.
#[derive(Debug, Serialize)]
pub struct Summary {
    /// The model file.
    pub model: String,
    /// Opset version.
    pub opset: i64,
    /// The input.
    pub input: InputSummary,
    /// The outputs.
    pub outputs: Vec<OutputSummary>,
    /// Nodes after folding.
    pub nodes: Vec<NodeSummary>,
    /// Nodes folded into constants at load.
    pub folded_nodes: usize,
    /// Attributable hidden layers.
    pub hidden_layers: Vec<HiddenLayer>,
    /// Total parameters.
    pub parameters: usize,
}

/// A shape with the batch axis shown as the string "N" and the other axes as numbers.
fn show(shape: &[usize]) -> Vec<serde_json::Value> {
    shape.iter().enumerate().map(|(i, &d)| if i == 0 { "N".into() } else { d.into() }).collect()
}

fn join(shape: &[serde_json::Value]) -> String {
    shape.iter().map(|v| v.as_str().map_or_else(|| v.to_string(), String::from)).collect::<Vec<_>>().join(", ")
}

/// Receptive field bookkeeping per value: extent and jump (cumulative stride) per spatial axis
/// of that value, or `None` once a dense layer has mixed every input position.
#[derive(Clone)]
struct Field {
    extent: Vec<usize>,
    jump: Vec<usize>,
}

fn receptive_fields(model: &Model) -> Vec<Option<Field>> {
    let g = &model.graph;
    let mut fields: Vec<Option<Field>> = vec![None; g.values.len()];
    let spatial = g.values[g.input].shape.len().saturating_sub(2);
    let input_rank = match model.binding.layout {
        InputLayout::LagsLast => 2,
        _ => spatial,
    };
    fields[g.input] = Some(Field { extent: vec![1; input_rank], jump: vec![1; input_rank] });
    for node in &g.nodes {
        let src = node.inputs.iter().find_map(|&i| match g.values[i].source {
            Source::Param(_) => None,
            _ => fields[i].clone(),
        });
        let out_rank = g.values[node.output].shape.len().saturating_sub(2);
        let f = src.and_then(|f| match (node.op.spatial_footprint(), node.op.name()) {
            (Some(fp), _) if fp.extent.len() == f.extent.len() => Some(Field {
                extent: f.extent.iter().zip(&fp.extent).zip(&f.jump).map(|((e, k), j)| e + (k - 1) * j).collect(),
                jump: f.jump.iter().zip(&fp.stride).map(|(j, s)| j * s).collect(),
            }),
            (_, "Gemm" | "MatMul" | "Flatten" | "GlobalAveragePool" | "ReduceMean" | "ReduceSum") => None,
            (_, "Reshape") if out_rank != f.extent.len() => None,
            _ => Some(f),
        });
        fields[node.output] = f;
    }
    fields
}

fn field_in_input(f: &Option<Field>, b: &InputBinding) -> ReceptiveField {
    let full = ReceptiveField { lags: b.lags, height: b.height, width: b.width };
    match f {
        None => full,
        Some(f) => match (b.layout, f.extent.as_slice()) {
            (InputLayout::Volume, [l, h, w]) => {
                ReceptiveField { lags: (*l).min(b.lags), height: (*h).min(b.height), width: (*w).min(b.width) }
            }
            (InputLayout::Line, [p]) => ReceptiveField { lags: b.lags, height: 1, width: (*p).min(b.width) },
            (_, [h, w]) => ReceptiveField { lags: b.lags, height: (*h).min(b.height), width: (*w).min(b.width) },
            _ => full,
        },
    }
}

/// The attributable hidden layers, in graph order: outputs of nonlinearities that follow a
/// conv or dense layer, have channels (rank >= 2) and are not model outputs.
pub fn hidden_layer_values(model: &Model) -> Vec<ValueId> {
    let g = &model.graph;
    let mut has_weights_upstream = vec![false; g.values.len()];
    for node in &g.nodes {
        has_weights_upstream[node.output] = matches!(node.op.name(), "Conv" | "Gemm" | "MatMul")
            || node.inputs.iter().any(|&i| has_weights_upstream[i]);
    }
    g.nodes
        .iter()
        .filter(|n| n.op.is_nonlinearity() && !g.outputs.contains(&n.output) && has_weights_upstream[n.output])
        .filter(|n| g.values[n.output].shape.len() >= 2)
        .map(|n| n.output)
        .collect()
}

impl Summary {
    /// Describe `model`.
    pub fn of(model: &Model) -> Summary {
        let g = &model.graph;
        let b = &model.binding;
        let fields = receptive_fields(model);
        let hidden_layers = hidden_layer_values(model)
            .into_iter()
            .map(|id| {
                let n = g.producer(id).expect("hidden layers are node outputs");
                let v = &g.values[id];
                HiddenLayer {
                    name: v.name.clone(),
                    op: n.op.name().into(),
                    channels: v.shape[1],
                    shape: show(&v.shape),
                    receptive_field: field_in_input(&fields[n.output], b),
                }
            })
            .collect();
        let nodes: Vec<NodeSummary> = g
            .nodes
            .iter()
            .zip(&model.node_parameters)
            .map(|(n, &p)| NodeSummary {
                name: n.name.clone(),
                op: n.op.name().into(),
                output: g.values[n.output].name.clone(),
                output_shape: show(&g.values[n.output].shape),
                parameters: p,
            })
            .collect();
        Summary {
            model: model.path.display().to_string(),
            opset: model.opset,
            input: InputSummary {
                name: g.values[g.input].name.clone(),
                shape: show(&g.values[g.input].shape),
                layout: b.layout,
                lags: b.lags,
                height: b.height,
                width: b.width,
            },
            outputs: g
                .outputs
                .iter()
                .map(|&o| OutputSummary { name: g.values[o].name.clone(), shape: show(&g.values[o].shape) })
                .collect(),
            parameters: model.node_parameters.iter().sum(),
            nodes,
            folded_nodes: model.folded,
            hidden_layers,
        }
    }

    /// A plain-text table for the terminal.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let i = &self.input;
        s += &format!("model    {}\nopset    {}\n", self.model, self.opset);
        s += &format!(
            "input    {} [{}]  layout {} ({} lags, {}x{} pixels)\n",
            i.name,
            join(&i.shape),
            serde_json::to_value(i.layout).ok().and_then(|v| v.as_str().map(String::from)).unwrap_or_default(),
            i.lags,
            i.height,
            i.width
        );
        for o in &self.outputs {
            s += &format!("output   {} [{}]\n", o.name, join(&o.shape));
        }
        s += &format!("\nnodes ({} after folding {} constant nodes)\n", self.nodes.len(), self.folded_nodes);
        s += &format!("  {:<28} {:<20} {:<24} {:>10}\n", "name", "op", "output shape", "parameters");
        for n in &self.nodes {
            s += &format!(
                "  {:<28} {:<20} {:<24} {:>10}\n",
                n.name,
                n.op,
                format!("[{}]", join(&n.output_shape)),
                n.parameters
            );
        }
        s += "\nhidden layers (units = channels)\n";
        if self.hidden_layers.is_empty() {
            s += "  none: the model has no nonlinearity after a conv or dense layer before its outputs\n";
        }
        for h in &self.hidden_layers {
            let rf = &h.receptive_field;
            s += &format!(
                "  {:<28} {:<10} {:>4} channels  receptive field {} lags x {}x{} pixels\n",
                h.name, h.op, h.channels, rf.lags, rf.height, rf.width
            );
        }
        s += &format!("\nparameters {}\n", self.parameters);
        s
    }
}
