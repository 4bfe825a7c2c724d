//! The engine's forward on small random valid graphs (shapes, activation and weights all taken
//! from the fuzz input): either both the engine and tract run and agree, or the engine reports a
//! numerical failure naming a node. Never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use ndarray::{ArrayD, IxDyn};
use std::path::Path;
use sufficit::model::builder::OnnxBuilder;
use sufficit::model::{FastPath, LoadOptions, Model};

const ACTIVATIONS: [&str; 6] = ["Relu", "Softplus", "Tanh", "Sigmoid", "LeakyRelu", "Elu"];

fuzz_target!(|data: &[u8]| {
    let mut bytes = data.iter().copied().cycle();
    if data.is_empty() {
        return;
    }
    let mut pick = |n: usize| bytes.next().unwrap_or(0) as usize % n;
    let (lags, size, c1, k1, cells) = (1 + pick(3), 3 + pick(5), 1 + pick(3), 1 + pick(3), 1 + pick(2));
    let second = (pick(2) == 1).then(|| (1 + pick(3), 1 + pick(2)));
    let activation = ACTIVATIONS[pick(ACTIVATIONS.len())];
    let mut values = data.iter().copied().cycle().skip(8);
    // Weights and inputs in -2..2 from the remaining bytes.
    let mut t = |dims: &[usize]| {
        ArrayD::from_shape_fn(IxDyn(dims), |_| (values.next().unwrap_or(128) as f32 - 128.0) / 64.0)
    };
    let mut m = OnnxBuilder::new("x", &[lags, size, size]);
    m.conv("x", "conv1", &t(&[c1, lags, k1, k1]), &t(&[c1]));
    m.node(activation, &["conv1"], "layer1", vec![]);
    let (mut last, mut channels, mut side) = ("layer1".to_string(), c1, size - k1 + 1);
    if let Some((c2, k2)) = second.filter(|&(_, k2)| k2 <= side) {
        m.conv("layer1", "conv2", &t(&[c2, c1, k2, k2]), &t(&[c2]));
        m.node(activation, &["conv2"], "layer2", vec![]);
        (last, channels, side) = ("layer2".into(), c2, side - k2 + 1);
    }
    m.dense(&last, "readout", &t(&[cells, channels * side * side]), &t(&[cells]));
    let model = match Model::from_proto(m.finish("readout", "fuzz"), Path::new("fuzz.onnx"), &LoadOptions::default()) {
        Ok(model) => model,
        Err(e) => panic!("a valid generated model was refused: {e}"),
    };
    let x = t(&[2, lags, size, size]);
    match model.graph.forward(x.clone(), &[]) {
        Ok(tape) => {
            let ours = tape.outputs()[0].clone();
            let theirs = FastPath::new(&model).expect("tract plan").run(x).expect("tract run").remove(0);
            assert_eq!(ours.shape(), theirs.shape());
            // Softplus(x) = ln(exp(x) + 1) (ONNX operator specification) is finite for every
            // finite x; evaluated as written, exp overflows f32 above x = 88.7 (ln of f32::MAX).
            // tract then gives infinity (or NaN once infinities cancel) where the engine, which
            // uses x + ln(1 + exp(-x)) there, stays finite: only such entries are excused.
            let overflows = activation == "Softplus"
                && ["conv1", "conv2"].iter().filter_map(|n| model.graph.find(n)).any(|id| {
                    tape.try_value(id).is_some_and(|v| v.iter().any(|&p| p > 88.7))
                });
            for (a, b) in ours.iter().zip(theirs.iter()) {
                if overflows && !b.is_finite() {
                    assert!(a.is_finite(), "engine {a} where tract overflowed");
                    continue;
                }
                assert!((a - b).abs() <= 1e-3 * (1.0 + b.abs()), "engine {a} vs tract {b}");
            }
        }
        Err(sufficit::Error::Numerical { .. }) => {}
        Err(e) => panic!("forward failed: {e}"),
    }
});
