//! The reference-size encoding model used by the benchmarks: input [N, 40, 50, 50],
//! Conv 8@15x15 + Softplus, Conv 8@11x11 + Softplus, Flatten, Gemm to 4 cells + Softplus.
//! Random (seeded) weights: it measures speed, not biology.

use prost::Message;
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::path::Path;
use tract_onnx::pb::{self, tensor_proto::DataType, tensor_shape_proto::dimension::Value as Dim};

fn info(name: &str, dims: &[Option<i64>]) -> pb::ValueInfoProto {
    let dim = dims
        .iter()
        .map(|d| pb::tensor_shape_proto::Dimension {
            value: Some(match d {
                Some(v) => Dim::DimValue(*v),
                None => Dim::DimParam("N".into()),
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

fn weights(rng: &mut ChaCha8Rng, name: &str, dims: &[i64]) -> pb::TensorProto {
    let n: i64 = dims.iter().product();
    let fan_in = (n / dims[0]).max(1) as f32;
    let s = 1.0 / fan_in.sqrt();
    pb::TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        float_data: (0..n).map(|_| rng.random_range(-s..s)).collect(),
        ..Default::default()
    }
}

fn node(op: &str, inputs: &[&str], output: &str) -> pb::NodeProto {
    pb::NodeProto {
        op_type: op.into(),
        name: output.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec![output.into()],
        ..Default::default()
    }
}

/// Write the reference model to `path`.
pub fn write_reference_model(path: &Path) {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut gemm = node("Gemm", &["flat", "w3", "b3"], "cells_linear");
    gemm.attribute.push(pb::AttributeProto {
        name: "transB".into(),
        i: 1,
        r#type: 2,
        ..Default::default()
    });
    let graph = pb::GraphProto {
        name: "reference".into(),
        node: vec![
            node("Conv", &["stimulus", "w1", "b1"], "conv1"),
            node("Softplus", &["conv1"], "layer1"),
            node("Conv", &["layer1", "w2", "b2"], "conv2"),
            node("Softplus", &["conv2"], "layer2"),
            node("Flatten", &["layer2"], "flat"),
            gemm,
            node("Softplus", &["cells_linear"], "rates"),
        ],
        initializer: vec![
            weights(&mut rng, "w1", &[8, 40, 15, 15]),
            weights(&mut rng, "b1", &[8]),
            weights(&mut rng, "w2", &[8, 8, 11, 11]),
            weights(&mut rng, "b2", &[8]),
            weights(&mut rng, "w3", &[4, 8 * 26 * 26]),
            weights(&mut rng, "b3", &[4]),
        ],
        input: vec![info("stimulus", &[None, Some(40), Some(50), Some(50)])],
        output: vec![info("rates", &[None, Some(4)])],
        ..Default::default()
    };
    let model = pb::ModelProto {
        ir_version: 8,
        opset_import: vec![pb::OperatorSetIdProto {
            domain: String::new(),
            version: 13,
        }],
        graph: Some(graph),
        ..Default::default()
    };
    std::fs::write(path, model.encode_to_vec()).expect("write the reference model");
}
