//! A planted circuit written through sufficit's own ONNX builder: cell 0 depends, by
//! construction, only on first-layer channels 0 (ON, excitatory) and 2 (OFF, inhibitory)
//! through second-layer channel 0; channels 1 and 3 and second-layer channels 1 and 2 feed only
//! cell 1. Every first-layer kernel is separable with a known spatial map and temporal filter.

use ndarray::{Array1, Array2, ArrayD, IxDyn};
use std::path::Path;
use sufficit::model::builder::{to_bytes, OnnxBuilder};

/// Lags, frame size, first-layer kernel size.
pub const LAGS: usize = 8;
/// Frame height and width in pixels.
pub const SIZE: usize = 16;
const K1: usize = 5;

/// A Gaussian spot of width `sigma` centred in a `K1 x K1` kernel, summing to 1.
fn spot(sigma: f32) -> Array2<f32> {
    let c = (K1 - 1) as f32 / 2.0;
    let s = Array2::from_shape_fn((K1, K1), |(y, x)| {
        (-((y as f32 - c).powi(2) + (x as f32 - c).powi(2)) / (2.0 * sigma * sigma)).exp()
    });
    let total = s.sum();
    s / total
}

/// The planted spatial maps and temporal filters (oldest lag first) of the four first-layer channels.
pub fn planted_filters() -> Vec<(Array2<f32>, Array1<f32>)> {
    let ramp = Array2::from_shape_fn((K1, K1), |(_, x)| x as f32 - 2.0) / 10.0;
    let ring = spot(2.0) - spot(0.8);
    vec![
        // 0: ON centre, fast biphasic.
        (spot(1.0), Array1::from(vec![0.0, 0.0, -0.1, -0.3, -0.2, 0.3, 0.8, 1.0])),
        // 1: distractor, horizontal gradient.
        (ramp, Array1::from(vec![0.2, 0.4, 0.6, 0.8, 1.0, 0.6, 0.2, 0.0])),
        // 2: OFF, wider and slower.
        (spot(1.8), Array1::from(vec![-0.1, -0.2, -0.4, -0.6, -0.8, -1.0, -0.7, -0.3])),
        // 3: distractor, ring.
        (ring, Array1::from(vec![1.0, 0.5, 0.0, -0.5, -1.0, -0.5, 0.0, 0.5])),
    ]
}

/// Write the planted circuit to `path`.
pub fn write_planted(path: &Path) {
    let filters = planted_filters();
    let w1 =
        ArrayD::from_shape_fn(IxDyn(&[4, LAGS, K1, K1]), |i| filters[i[0]].1[i[1]] * filters[i[0]].0[[i[2], i[3]]]);
    let b1 = ArrayD::from_elem(IxDyn(&[4]), 0.05f32);
    // Second layer (3x3): channel 0 = ON - OFF; 1 and 2 read only the distractors.
    let mut w2 = ArrayD::<f32>::zeros(IxDyn(&[3, 4, 3, 3]));
    for y in 0..3 {
        for x in 0..3 {
            w2[[0, 0, y, x]] = 0.05;
            w2[[0, 2, y, x]] = -0.05;
            w2[[1, 1, y, x]] = 0.4;
            w2[[1, 3, y, x]] = 0.4;
            w2[[2, 1, y, x]] = -0.3;
            w2[[2, 3, y, x]] = 0.6;
        }
    }
    let b2 = ArrayD::from_shape_vec(IxDyn(&[3]), vec![1.0f32, 0.1, 0.1]).unwrap();
    // Readout: cell 0 pools channel 0 of the second layer near the centre; cell 1 channels 1, 2.
    let s2 = SIZE - K1 + 1 - 2;
    let per = s2 * s2;
    let mut w3 = ArrayD::<f32>::zeros(IxDyn(&[2, 3 * per]));
    for p in 0..per {
        let (y, x) = ((p / s2) as f32 - 4.5, (p % s2) as f32 - 4.5);
        let g = (-(y * y + x * x) / 8.0).exp();
        w3[[0, p]] = g;
        w3[[1, per + p]] = 0.5 * g;
        w3[[1, 2 * per + p]] = 0.5 * g;
    }
    let b3 = ArrayD::zeros(IxDyn(&[2]));
    let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
    m.conv("stimulus", "conv1", &w1, &b1);
    m.node("Relu", &["conv1"], "bipolar", vec![]);
    m.conv("bipolar", "conv2", &w2, &b2);
    m.node("Relu", &["conv2"], "amacrine", vec![]);
    m.dense("amacrine", "readout", &w3, &b3);
    m.node("Softplus", &["readout"], "rates", vec![]);
    std::fs::write(path, to_bytes(&m.finish("rates", "planted"))).unwrap();
}
