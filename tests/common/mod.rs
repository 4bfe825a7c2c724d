//! Small ONNX models built in Rust with tract-onnx's protobuf types, for tests that need a
//! specific defect or shape.

#![allow(dead_code)]

use prost::Message;
use std::path::Path;
use tract_onnx::pb::{self, tensor_proto::DataType, tensor_shape_proto::dimension::Value as Dim};

/// A dimension given as a number or a symbol.
pub enum D {
    /// Fixed size.
    N(i64),
    /// Symbolic (named) size.
    S(&'static str),
}

pub fn value_info(name: &str, dims: &[D]) -> pb::ValueInfoProto {
    let dim = dims
        .iter()
        .map(|d| pb::tensor_shape_proto::Dimension {
            value: Some(match d {
                D::N(v) => Dim::DimValue(*v),
                D::S(s) => Dim::DimParam(s.to_string()),
            }),
            ..Default::default()
        })
        .collect();
    pb::ValueInfoProto {
        name: name.into(),
        r#type: Some(pb::TypeProto {
            value: Some(pb::type_proto::Value::TensorType(pb::type_proto::Tensor {
                elem_type: DataType::Float as i32,
                shape: Some(pb::TensorShapeProto { dim }),
            })),
            ..Default::default()
        }),
        ..Default::default()
    }
}

pub fn floats(name: &str, dims: &[i64], values: Vec<f32>) -> pb::TensorProto {
    pb::TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        float_data: values,
        ..Default::default()
    }
}

pub fn node(op: &str, name: &str, inputs: &[&str], output: &str) -> pb::NodeProto {
    pb::NodeProto {
        op_type: op.into(),
        name: name.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec![output.into()],
        ..Default::default()
    }
}

/// A small valid lags-first model: Conv(3 lags -> 2, 3x3) + Relu + Flatten + Gemm(-> 2 cells).
pub fn tiny_parts() -> (Vec<pb::NodeProto>, Vec<pb::TensorProto>) {
    let nodes = vec![
        node("Conv", "conv", &["x", "w", "b"], "c"),
        node("Relu", "relu", &["c"], "r"),
        node("Flatten", "flatten", &["r"], "f"),
        node("Gemm", "readout", &["f", "k", "kb"], "y"),
    ];
    let inits = vec![
        floats("w", &[2, 3, 3, 3], (0..54).map(|i| ((i * 7) % 11) as f32 * 0.1 - 0.5).collect()),
        floats("b", &[2], vec![0.1, -0.1]),
        floats("k", &[18, 2], (0..36).map(|i| ((i * 5) % 9) as f32 * 0.1 - 0.4).collect()),
        floats("kb", &[2], vec![0.0, 0.2]),
    ];
    (nodes, inits)
}

/// A graph with the tiny model's output `y: [N, 2]`, wrapped as a model.
pub fn model(
    nodes: Vec<pb::NodeProto>,
    inits: Vec<pb::TensorProto>,
    inputs: Vec<pb::ValueInfoProto>,
) -> pb::ModelProto {
    model_of(pb::GraphProto {
        node: nodes,
        name: "test".into(),
        initializer: inits,
        input: inputs,
        output: vec![value_info("y", &[D::S("N"), D::N(2)])],
        ..Default::default()
    })
}

/// Wrap a graph as an opset-13 model.
pub fn model_of(graph: pb::GraphProto) -> pb::ModelProto {
    pb::ModelProto {
        ir_version: 8,
        opset_import: vec![pb::OperatorSetIdProto { domain: String::new(), version: 13 }],
        graph: Some(graph),
        ..Default::default()
    }
}

/// The tiny model's input, `x: [N, 3, 5, 5]`.
pub fn tiny_input() -> pb::ValueInfoProto {
    value_info("x", &[D::S("N"), D::N(3), D::N(5), D::N(5)])
}

/// The valid tiny model.
pub fn tiny() -> pb::ModelProto {
    let (nodes, inits) = tiny_parts();
    model(nodes, inits, vec![tiny_input()])
}

pub fn save(m: &pb::ModelProto, path: &Path) {
    std::fs::write(path, m.encode_to_vec()).unwrap();
}
