//! Reading a node's attributes and constant inputs while building its op.

use super::{OpError, OpResult};
use crate::Tensor;
use tract_onnx::pb::{AttributeProto, NodeProto};

/// Everything an op builder may look at: the node, the model's opset, and the values of inputs
/// that are constant (initializers or folded subgraphs).
pub struct BuildCtx<'a> {
    node: &'a NodeProto,
    opset: i64,
    constant: &'a dyn Fn(&str) -> Option<&'a Tensor>,
}

impl<'a> BuildCtx<'a> {
    /// A context for `node` under `opset`; `constant` looks up constant values by name.
    pub fn new(node: &'a NodeProto, opset: i64, constant: &'a dyn Fn(&str) -> Option<&'a Tensor>) -> Self {
        BuildCtx { node, opset, constant }
    }

    /// The ONNX op_type.
    pub fn op_type(&self) -> &str {
        &self.node.op_type
    }

    /// The default-domain opset version the model declares.
    pub fn opset(&self) -> i64 {
        self.opset
    }

    /// The node this context describes.
    pub fn node(&self) -> &NodeProto {
        self.node
    }

    /// Number of inputs, counting trailing optional inputs given as "" as absent.
    pub fn input_count(&self) -> usize {
        let inputs = &self.node.input;
        inputs.iter().rposition(|s| !s.is_empty()).map_or(0, |i| i + 1)
    }

    /// True when input `i` is given (present and not the empty name).
    pub fn has_input(&self, i: usize) -> bool {
        self.node.input.get(i).is_some_and(|s| !s.is_empty())
    }

    /// The constant value of input `i`, or an error naming the input when it is not constant.
    pub fn constant_input(&self, i: usize, what: &str) -> OpResult<&'a Tensor> {
        let name = self
            .node
            .input
            .get(i)
            .filter(|s| !s.is_empty())
            .ok_or_else(|| OpError(format!("input {i} ({what}) is missing")))?;
        (self.constant)(name).ok_or_else(|| {
            OpError(format!(
                "input '{name}' ({what}) must be a constant (an initializer or a shape \
                 computation on fixed shapes), but it depends on the model input"
            ))
        })
    }

    /// Input `i` as a list of integers, when given.
    pub fn constant_ints(&self, i: usize, what: &str) -> OpResult<Option<Vec<i64>>> {
        if !self.has_input(i) {
            return Ok(None);
        }
        let t = self.constant_input(i, what)?;
        Ok(Some(t.iter().map(|&v| v as i64).collect()))
    }

    /// Input `i` as a scalar, when given.
    pub fn constant_scalar(&self, i: usize, what: &str) -> OpResult<Option<f32>> {
        if !self.has_input(i) {
            return Ok(None);
        }
        let t = self.constant_input(i, what)?;
        match t.len() {
            1 => Ok(t.iter().next().copied()),
            n => Err(OpError(format!("input {i} ({what}) must be a scalar, found {n} values"))),
        }
    }

    fn attr(&self, name: &str) -> Option<&'a AttributeProto> {
        self.node.attribute.iter().find(|a| a.name == name)
    }

    /// An integer attribute.
    pub fn int(&self, name: &str) -> Option<i64> {
        self.attr(name).map(|a| a.i)
    }

    /// An integer attribute with a default.
    pub fn int_or(&self, name: &str, default: i64) -> i64 {
        self.int(name).unwrap_or(default)
    }

    /// A float attribute with a default.
    pub fn float_or(&self, name: &str, default: f32) -> f32 {
        self.attr(name).map_or(default, |a| a.f)
    }

    /// A list-of-integers attribute.
    pub fn ints(&self, name: &str) -> Option<Vec<i64>> {
        self.attr(name).map(|a| a.ints.clone())
    }

    /// A string attribute.
    pub fn string(&self, name: &str) -> Option<String> {
        self.attr(name).map(|a| String::from_utf8_lossy(&a.s).into_owned())
    }

    /// The raw attribute, for ops that read tensors from attributes.
    pub fn raw(&self, name: &str) -> Option<&'a AttributeProto> {
        self.attr(name)
    }

    /// A list of non-negative integers (kernel shapes, strides), validated.
    pub fn usizes(&self, name: &str) -> OpResult<Option<Vec<usize>>> {
        match self.ints(name) {
            None => Ok(None),
            Some(v) => v
                .iter()
                .map(|&x| {
                    usize::try_from(x)
                        .map_err(|_| OpError(format!("attribute '{name}' must be non-negative, found {v:?}")))
                })
                .collect::<OpResult<Vec<_>>>()
                .map(Some),
        }
    }
}
