//! The program the engine interprets: values (the model input, parameters, node outputs) and
//! nodes in topological order, each holding its built op. Built by `model::load`.

use super::ops::Op;
use crate::Tensor;
use tract_onnx::pb::NodeProto;

/// Index of a value in [`Graph::values`].
pub type ValueId = usize;

/// Where a value comes from.
#[derive(Debug)]
pub enum Source {
    /// The model input (the stimulus window batch).
    Input,
    /// A parameter (initializer) used as data by some op, e.g. convolution weights.
    Param(Tensor),
    /// The output of `nodes[i]`.
    Node(usize),
}

/// A named tensor of the graph.
#[derive(Debug)]
pub struct Value {
    /// The ONNX name.
    pub name: String,
    /// Where it comes from.
    pub source: Source,
    /// Shape for a batch of one (batch axis included), found when the model was loaded.
    pub shape: Vec<usize>,
}

/// One operation.
#[derive(Debug)]
pub struct Node {
    /// Node name (its first output's name when the file leaves it empty).
    pub name: String,
    /// The op with its static parameters resolved.
    pub op: Box<dyn Op>,
    /// Data inputs, in the order the op expects.
    pub inputs: Vec<ValueId>,
    /// The single output.
    pub output: ValueId,
    /// The node as it will be written back to ONNX (after load-time rewrites).
    pub proto: NodeProto,
}

/// A differentiable program.
#[derive(Debug)]
pub struct Graph {
    /// All values; ids index this list.
    pub values: Vec<Value>,
    /// Nodes in an order where every input is computed before it is used.
    pub nodes: Vec<Node>,
    /// The model input.
    pub input: ValueId,
    /// The model outputs (cells).
    pub outputs: Vec<ValueId>,
}

impl Graph {
    /// The id of the value named `name`.
    pub fn find(&self, name: &str) -> Option<ValueId> {
        self.values.iter().position(|v| v.name == name)
    }

    /// The node producing `id`, if any.
    pub fn producer(&self, id: ValueId) -> Option<&Node> {
        match self.values[id].source {
            Source::Node(i) => Some(&self.nodes[i]),
            _ => None,
        }
    }

    /// The parameters (weights, biases), in value order.
    pub fn params(&self) -> Vec<ValueId> {
        (0..self.values.len()).filter(|&i| matches!(self.values[i].source, Source::Param(_))).collect()
    }

    /// Mutable access to parameter `id` (training), or `None` if `id` is not a parameter.
    pub fn param_mut(&mut self, id: ValueId) -> Option<&mut Tensor> {
        match &mut self.values[id].source {
            Source::Param(t) => Some(t),
            _ => None,
        }
    }

    /// Bytes of activations one sample occupies (all node outputs, f32).
    pub fn bytes_per_sample(&self) -> usize {
        self.values
            .iter()
            .filter(|v| !matches!(v.source, Source::Param(_)))
            .map(|v| v.shape.iter().product::<usize>() * 4)
            .sum()
    }
}
