//! Property tests (proptest, 256 cases each) on random small encoding models built from the
//! supported ops (one or two convolutions with a pointwise nonlinearity, a dense readout,
//! softplus rates) and random inputs:
//! - the engine's forward equals tract's (an independent implementation of the ONNX semantics);
//! - input gradients equal central finite differences (smooth activations);
//! - layer conductance is complete: conductances sum to F(x) - F(x') (Sundararajan, Taly & Yan,
//!   ICML 2017, completeness axiom; conductance: Dhamdhere, Sundararajan & Yan, ICLR 2019);
//! - silencing every unit of a layer and then running without the override gives back the
//!   original output exactly, and overriding a layer with its own values changes nothing.

use ndarray::{Array3, ArrayD, IxDyn};
use proptest::prelude::*;
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::path::Path;
use sufficit::attribution::{attribute, Baseline, Request, Rule, Steps};
use sufficit::engine::{Override, Part};
use sufficit::model::builder::OnnxBuilder;
use sufficit::model::{FastPath, LoadOptions, Model};

/// A random model: shape and op choices from the strategy, weights from `seed`.
#[derive(Debug, Clone)]
struct Spec {
    lags: usize,
    size: usize,
    c1: usize,
    k1: usize,
    second: Option<(usize, usize)>,
    cells: usize,
    activation: &'static str,
    seed: u64,
}

fn spec(activations: &'static [&'static str]) -> impl Strategy<Value = Spec> {
    (
        2usize..5,
        6usize..10,
        1usize..4,
        1usize..4,
        prop::option::of((1usize..4, 1usize..3)),
        1usize..3,
        0..activations.len(),
        any::<u64>(),
    )
        .prop_map(move |(lags, size, c1, k1, second, cells, a, seed)| Spec {
            lags,
            size,
            c1,
            k1,
            second,
            cells,
            activation: activations[a],
            seed,
        })
}

fn build(s: &Spec) -> Model {
    let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
    let mut t = |dims: &[usize], scale: f32| ArrayD::from_shape_fn(IxDyn(dims), |_| rng.random_range(-scale..scale));
    let mut m = OnnxBuilder::new("x", &[s.lags, s.size, s.size]);
    // Weights at 1.5 / sqrt(fan-in): pre-activations of order one, as in trained models.
    let w1 = t(&[s.c1, s.lags, s.k1, s.k1], 1.5 / ((s.lags * s.k1 * s.k1) as f32).sqrt());
    let b1 = t(&[s.c1], 0.2);
    m.conv("x", "conv1", &w1, &b1);
    m.node(s.activation, &["conv1"], "layer1", vec![]);
    let (mut last, mut channels, mut side) = ("layer1".to_string(), s.c1, s.size - s.k1 + 1);
    if let Some((c2, k2)) = s.second {
        let (w2, b2) = (t(&[c2, s.c1, k2, k2], 1.5 / ((s.c1 * k2 * k2) as f32).sqrt()), t(&[c2], 0.2));
        m.conv("layer1", "conv2", &w2, &b2);
        m.node(s.activation, &["conv2"], "layer2", vec![]);
        (last, channels, side) = ("layer2".into(), c2, side - k2 + 1);
    }
    let (w3, b3) = (t(&[s.cells, channels * side * side], 0.3), t(&[s.cells], 0.2));
    m.dense(&last, "readout", &w3, &b3);
    m.node("Softplus", &["readout"], "rates", vec![]);
    Model::from_proto(m.finish("rates", "random"), Path::new("random.onnx"), &LoadOptions::default()).unwrap()
}

fn input(s: &Spec, batch: usize, seed: u64) -> ArrayD<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    ArrayD::from_shape_fn(IxDyn(&[batch, s.lags, s.size, s.size]), |_| rng.random_range(-1.0f32..1.0))
}

fn config() -> ProptestConfig {
    // A fixed seed: CI runs the same 256 cases every time (set PROPTEST_RNG_SEED to explore).
    let seed = std::env::var("PROPTEST_RNG_SEED").ok().and_then(|v| v.parse().ok()).unwrap_or(20261202);
    ProptestConfig {
        cases: 256,
        failure_persistence: None,
        rng_seed: proptest::test_runner::RngSeed::Fixed(seed),
        ..ProptestConfig::default()
    }
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn engine_forward_equals_tract(s in spec(&["Relu", "Softplus", "Tanh", "Sigmoid", "LeakyRelu", "Elu"]), x_seed in any::<u64>()) {
        let model = build(&s);
        let x = input(&s, 3, x_seed);
        let ours = model.graph.forward(x.clone(), &[]).unwrap().outputs()[0].clone();
        let theirs = FastPath::new(&model).unwrap().run(x).unwrap().remove(0);
        prop_assert_eq!(ours.shape(), theirs.shape());
        for (a, b) in ours.iter().zip(theirs.iter()) {
            prop_assert!((a - b).abs() <= 1e-4 * (1.0 + b.abs()), "engine {} vs tract {}", a, b);
        }
    }

    #[test]
    fn input_gradients_equal_finite_differences(s in spec(&["Softplus", "Tanh", "Sigmoid"]), x_seed in any::<u64>(), pick in any::<u64>()) {
        let model = build(&s);
        let g = &model.graph;
        let x = input(&s, 1, x_seed);
        let tape = g.forward(x.clone(), &[]).unwrap();
        let out = g.outputs[0];
        let seed = ArrayD::from_elem(IxDyn(tape.value(out).shape()), 1.0f32);
        let grad = tape.gradients(&[(out, seed)], &[g.input]).unwrap().remove(0);
        // Central differences on 4 random coordinates, the output summed in f64.
        let f = |x: &ArrayD<f32>| g.forward(x.clone(), &[]).unwrap().outputs()[0].iter().map(|&v| v as f64).sum::<f64>();
        let mut rng = ChaCha8Rng::seed_from_u64(pick);
        for _ in 0..4 {
            let i = rng.random_range(0..x.len());
            let h = 1e-2f32;
            let (mut up, mut down) = (x.clone(), x.clone());
            up.as_slice_mut().unwrap()[i] += h;
            down.as_slice_mut().unwrap()[i] -= h;
            let fd = (f(&up) - f(&down)) / (2.0 * h as f64);
            let ad = grad.as_slice().unwrap()[i] as f64;
            prop_assert!((fd - ad).abs() <= 2e-3 + 2e-2 * ad.abs(), "coordinate {}: reverse mode {} vs finite difference {}", i, ad, fd);
        }
    }

    #[test]
    fn layer_conductance_is_complete(s in spec(&["Softplus", "Tanh", "Sigmoid", "Relu"]), x_seed in any::<u64>()) {
        let model = build(&s);
        let frames = s.lags + 3;
        let mut rng = ChaCha8Rng::seed_from_u64(x_seed);
        let movie = Array3::from_shape_fn((frames, s.size, s.size), |_| rng.random_range(-1.0f32..1.0));
        let layers = sufficit::model::summary::hidden_layer_values(&model);
        let req = Request {
            cells: vec![(0, 1.0)],
            frames: (s.lags - 1..frames).collect(),
            layers,
            baseline: Baseline::Gray,
            rule: Rule::Midpoint,
            steps: Steps::Auto(0.01),
            input_ig: true,
            seed: 1,
        };
        let att = attribute(&model, &movie, &req).unwrap();
        let change = att.f_input - att.f_baseline;
        for l in &att.layers {
            let sum: f64 = l.total.iter().sum();
            // The reported residual is what it says: |sum - change| / |change|.
            if change.abs() > 1e-6 {
                let residual = (sum - change).abs() / change.abs();
                prop_assert!((l.residual - residual).abs() <= 1e-3 * residual.max(1e-3), "reported {} vs {}", l.residual, residual);
            }
            // Smooth models: the midpoint rule converges as 1/steps^2 and the auto rule reaches
            // 1 % without a warning. (ReLU kinks slow it to 1/steps: the residual is then
            // reported, with a warning, rather than promised.)
            if s.activation != "Relu" {
                prop_assert!(att.warnings.is_empty(), "{:?}", att.warnings);
                prop_assert!((sum - change).abs() <= 0.01 * change.abs() + 1e-5,
                    "{}: sum {} vs change {} (residual {}, {} steps)", l.name, sum, change, l.residual, att.steps);
            }
        }
        if let (Some((ig, residual)), true) = (&att.input_ig, s.activation != "Relu") {
            let sum: f64 = ig.iter().map(|&v| v as f64).sum();
            prop_assert!((sum - change).abs() <= 0.02 * change.abs() + 1e-4,
                "input IG sum {} vs change {} (residual {})", sum, change, residual);
        }
    }

    #[test]
    fn silencing_a_layer_then_restoring_it_gives_back_the_output(s in spec(&["Relu", "Softplus", "Tanh"]), x_seed in any::<u64>()) {
        let model = build(&s);
        let g = &model.graph;
        let x = input(&s, 2, x_seed);
        let layer = g.find("layer1").unwrap();
        let tape = g.forward(x.clone(), &[]).unwrap();
        let original = tape.outputs()[0].clone();
        let own = tape.value(layer).clone();
        // Every unit silenced (clamped to zero) changes nothing afterwards.
        let zeros = ArrayD::zeros(IxDyn(&[1, s.c1, 1, 1]));
        let silenced = Override { value: layer, part: Part::Channels((0..s.c1).collect()), with: zeros };
        let _ = g.forward(x.clone(), &[silenced]).unwrap();
        let restored = g.forward(x.clone(), &[]).unwrap().outputs()[0].clone();
        prop_assert_eq!(&restored, &original);
        // The layer overridden with its own values is the unmodified model.
        let same = Override { value: layer, part: Part::Whole, with: own };
        let again = g.forward(x, &[same]).unwrap().outputs()[0].clone();
        prop_assert_eq!(&again, &original);
    }
}
