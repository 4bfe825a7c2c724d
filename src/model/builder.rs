//! Writing encoding models as ONNX: the planted-circuit models of the tests and the demo are
//! built here, so their units, kernels and signs are known exactly. Produces standard ONNX
//! (opset 17) with a symbolic batch axis `N`.

use super::tensor_proto::encode_f32;
use crate::Tensor;
use prost::Message;
use tract_onnx::pb::{self, tensor_shape_proto::dimension, AttributeProto, ModelProto, NodeProto};

/// An ONNX graph under construction: one input, nodes added in order, one output.
#[derive(Debug, Clone)]
pub struct OnnxBuilder {
    input: (String, Vec<usize>),
    nodes: Vec<NodeProto>,
    params: Vec<pb::TensorProto>,
}

fn tensor_type(dims: Option<Vec<dimension::Value>>) -> pb::TypeProto {
    pb::TypeProto {
        value: Some(pb::type_proto::Value::TensorType(pb::type_proto::Tensor {
            elem_type: pb::tensor_proto::DataType::Float as i32,
            shape: dims.map(|d| pb::TensorShapeProto {
                dim: d
                    .into_iter()
                    .map(|v| pb::tensor_shape_proto::Dimension { value: Some(v), ..Default::default() })
                    .collect(),
            }),
        })),
        ..Default::default()
    }
}

/// An integer attribute.
pub fn int_attr(name: &str, v: i64) -> AttributeProto {
    AttributeProto {
        name: name.into(),
        i: v,
        r#type: pb::attribute_proto::AttributeType::Int as i32,
        ..Default::default()
    }
}

impl OnnxBuilder {
    /// A graph whose input `name` has shape `[N, dims...]` (batch symbolic).
    pub fn new(name: &str, dims: &[usize]) -> Self {
        OnnxBuilder { input: (name.into(), dims.to_vec()), nodes: Vec::new(), params: Vec::new() }
    }

    /// Add a constant tensor; returns its name.
    pub fn param(&mut self, name: &str, t: &Tensor) -> String {
        self.params.push(encode_f32(name, t));
        name.into()
    }

    /// Add a node `op(inputs) -> output` with attributes; returns the output name.
    pub fn node(&mut self, op: &str, inputs: &[&str], output: &str, attributes: Vec<AttributeProto>) -> String {
        self.nodes.push(NodeProto {
            op_type: op.into(),
            name: output.into(),
            input: inputs.iter().map(|s| s.to_string()).collect(),
            output: vec![output.into()],
            attribute: attributes,
            ..Default::default()
        });
        output.into()
    }

    /// A valid (unpadded, stride 1) convolution with weights `[out, in, k...]` and bias `[out]`.
    pub fn conv(&mut self, input: &str, output: &str, w: &Tensor, b: &Tensor) -> String {
        let w = self.param(&format!("{output}.weight"), w);
        let b = self.param(&format!("{output}.bias"), b);
        self.node("Conv", &[input, &w, &b], output, vec![])
    }

    /// `Flatten` then `Gemm` with weights `[out, in]` (transB) and bias `[out]`.
    pub fn dense(&mut self, input: &str, output: &str, w: &Tensor, b: &Tensor) -> String {
        let flat = self.node("Flatten", &[input], &format!("{output}.flat"), vec![int_attr("axis", 1)]);
        let w = self.param(&format!("{output}.weight"), w);
        let b = self.param(&format!("{output}.bias"), b);
        self.node("Gemm", &[&flat, &w, &b], output, vec![int_attr("transB", 1)])
    }

    /// The finished model with `output` as its only output.
    pub fn finish(self, output: &str, graph_name: &str) -> ModelProto {
        let mut dims = vec![dimension::Value::DimParam("N".into())];
        dims.extend(self.input.1.iter().map(|&d| dimension::Value::DimValue(d as i64)));
        ModelProto {
            ir_version: 8,
            opset_import: vec![pb::OperatorSetIdProto { domain: String::new(), version: 17 }],
            producer_name: "sufficit".into(),
            producer_version: env!("CARGO_PKG_VERSION").into(),
            graph: Some(pb::GraphProto {
                name: graph_name.into(),
                node: self.nodes,
                initializer: self.params,
                input: vec![pb::ValueInfoProto {
                    name: self.input.0,
                    r#type: Some(tensor_type(Some(dims))),
                    ..Default::default()
                }],
                output: vec![pb::ValueInfoProto {
                    name: output.into(),
                    r#type: Some(tensor_type(None)),
                    ..Default::default()
                }],
                ..Default::default()
            }),
            ..Default::default()
        }
    }
}

/// The serialized bytes of `model`.
pub fn to_bytes(model: &ModelProto) -> Vec<u8> {
    model.encode_to_vec()
}
