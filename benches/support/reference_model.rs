//! The reference-size encoding model used by the benchmarks: input [N, 40, 50, 50],
//! Conv 8@15x15 + Softplus, Conv 8@11x11 + Softplus, Flatten, Gemm to 4 cells + Softplus.
//! Random (seeded) weights: it measures speed, not biology.

use crate::common::{model_of, node, save, value_info, D};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::path::Path;
use tract_onnx::pb::{self, tensor_proto::DataType};

fn weights(rng: &mut ChaCha8Rng, name: &str, dims: &[i64]) -> pb::TensorProto {
    let n: i64 = dims.iter().product();
    let s = 1.0 / ((n / dims[0]).max(1) as f32).sqrt();
    pb::TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        float_data: (0..n).map(|_| rng.random_range(-s..s)).collect(),
        ..Default::default()
    }
}

/// Write the reference model to `path`.
pub fn write_reference_model(path: &Path) {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut gemm = node("Gemm", "readout", &["flat", "w3", "b3"], "cells_linear");
    gemm.attribute.push(pb::AttributeProto { name: "transB".into(), i: 1, r#type: 2, ..Default::default() });
    let graph = pb::GraphProto {
        name: "reference".into(),
        node: vec![
            node("Conv", "conv1", &["stimulus", "w1", "b1"], "conv1"),
            node("Softplus", "layer1", &["conv1"], "layer1"),
            node("Conv", "conv2", &["layer1", "w2", "b2"], "conv2"),
            node("Softplus", "layer2", &["conv2"], "layer2"),
            node("Flatten", "flatten", &["layer2"], "flat"),
            gemm,
            node("Softplus", "rates", &["cells_linear"], "rates"),
        ],
        initializer: vec![
            weights(&mut rng, "w1", &[8, 40, 15, 15]),
            weights(&mut rng, "b1", &[8]),
            weights(&mut rng, "w2", &[8, 8, 11, 11]),
            weights(&mut rng, "b2", &[8]),
            weights(&mut rng, "w3", &[4, 8 * 26 * 26]),
            weights(&mut rng, "b3", &[4]),
        ],
        input: vec![value_info("stimulus", &[D::S("N"), D::N(40), D::N(50), D::N(50)])],
        output: vec![value_info("rates", &[D::S("N"), D::N(4)])],
        ..Default::default()
    };
    save(&model_of(graph), path);
}

/// The reference job's stimulus: 40 gray history frames then 99 frames of binary white noise
/// (50 um checkers) at 100 Hz on 50 x 50 pixels, 139 frames in all.
#[allow(dead_code)] // not every benchmark uses it
pub fn reference_noise() -> sufficit::stimulus::Stimulus {
    use sufficit::stimulus::{protocols, Canvas, Params, Stimulus};
    let canvas = Canvas { height: 50, width: 50, lags: 40, frame_rate_hz: 100.0, pixel_um: 50.0 };
    let p = protocols::find("white-noise").expect("white-noise");
    let params =
        Params::parse(p.name(), p.specs(), &["duration_ms=990".into(), "checker_um=50".into()]).expect("params");
    let stim = Stimulus::assemble(p.name(), &params, &canvas, 1, p.draw(&params, &canvas, 1).expect("draw"));
    assert_eq!(stim.meta.frames, 139);
    stim
}
