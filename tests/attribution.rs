//! Attribution against the properties its papers state and against an outside reference.
//! Integrated gradients: Sundararajan, Taly & Yan (2017, ICML), completeness, linearity,
//! sensitivity/dummy, implementation invariance. Layer conductance: Dhamdhere, Sundararajan &
//! Yan (2019, ICLR). Reference values: JAX (scripts/make_reference_models.py).

mod common;

use common::*;
use ndarray::{Array3, ArrayD, Axis, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::path::{Path, PathBuf};
use sufficit::attribution::path::{integrate, Endpoints, PathJob};
use sufficit::attribution::{attribute, frontier, resolve_layers, Baseline, Request, Rule, Steps};
use sufficit::model::{LoadOptions, Model};
use tract_onnx::pb;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(name)
}

fn load(path: &Path) -> Model {
    Model::load(path, &LoadOptions::default()).unwrap()
}

fn movie(model: &Model, frames: usize, seed: u64) -> Array3<f32> {
    let b = &model.binding;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array3::from_shape_fn((frames, b.height, b.width), |_| rng.random_range(-1.0f32..1.0))
}

fn request(model: &Model, layer: &str, frames: Vec<usize>, rule: Rule, steps: Steps) -> Request {
    Request {
        cells: vec![(0, 1.0)],
        frames,
        layers: resolve_layers(model, layer).unwrap_or_default(),
        baseline: Baseline::Gray,
        rule,
        steps,
        input_ig: true,
        seed: 1,
    }
}

#[test]
fn completeness_holds_within_tolerance_on_every_test_model() {
    // Completeness (Sundararajan et al. 2017): attributions sum to F(x) - F(x'); for layer
    // conductance the sum over a layer's units does too (Dhamdhere et al. 2019).
    for name in ["pytorch_style", "lags_last_fixed_batch", "volume", "line"] {
        let model = load(&fixture(&format!("models/{name}.onnx")));
        let lags = model.binding.lags;
        let m = movie(&model, lags + 6, 3);
        let req = request(&model, "all", (lags..lags + 6).collect(), Rule::Midpoint, Steps::Auto(0.01));
        let a = attribute(&model, &m, &req).unwrap();
        assert!((a.f_input - a.f_baseline).abs() > 1e-6, "{name}: the target must change along the path");
        for l in &a.layers {
            assert!(l.residual <= 0.01, "{name}/{}: conductance residual {}", l.name, l.residual);
        }
        let (_, r) = a.input_ig.as_ref().unwrap();
        assert!(*r <= 0.01, "{name}: input IG residual {r}");
        assert!(a.warnings.is_empty(), "{name}: {:?}", a.warnings);
    }
}

#[test]
fn conductances_equal_jax_with_the_same_path_and_steps() {
    let text = std::fs::read_to_string(fixture("reference/pytorch_style_attribution.json")).unwrap();
    let r: serde_json::Value = serde_json::from_str(&text).unwrap();
    let model = load(&fixture("models/pytorch_style.onnx"));
    let g = &model.graph;
    let shape: Vec<usize> = r["input_shape"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap() as usize).collect();
    let x = ArrayD::from_shape_vec(
        IxDyn(&shape),
        r["input"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap() as f32).collect(),
    )
    .unwrap();
    let x0 = ArrayD::zeros(IxDyn(&shape));
    let mut seed = ArrayD::zeros(IxDyn(&[1, 5]));
    seed[[0, r["cell"].as_u64().unwrap() as usize]] = 1.0;
    let layer = g.find("relu1").unwrap();
    let job = PathJob {
        graph: g,
        x: &x,
        x0: &x0,
        seed: &seed,
        layers: &[layer],
        rule: Rule::Midpoint,
        steps: r["steps"].as_u64().unwrap() as usize,
        input_ig: true,
        progress: &|_, _| {},
    };
    let ends = Endpoints::new(g, &x, std::slice::from_ref(&x0), &seed, frontier(g)).unwrap();
    let res = integrate(&job, &ends, 0).unwrap();
    let ours: Vec<f64> = (0..4).map(|c| res.conductance[0].index_axis(Axis(1), c).sum()).collect();
    let theirs: Vec<f64> =
        r["conductance_per_channel"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let scale = theirs.iter().fold(0f64, |m, v| m.max(v.abs()));
    for (a, b) in ours.iter().zip(&theirs) {
        assert!((a - b).abs() <= 1e-4 * scale, "conductance {ours:?} vs JAX {theirs:?}");
    }
    let ig = res.input_ig.unwrap();
    let want: Vec<f64> = r["input_ig"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let scale = want.iter().fold(0f64, |m, v| m.max(v.abs()));
    let err = ig.iter().zip(&want).fold(0f64, |m, (a, b)| m.max((*a as f64 - b).abs()));
    assert!(err <= 1e-4 * scale, "input IG differs from JAX by {err} (scale {scale})");
}

/// Write a model built from nodes/initializers with input x [N, 3, 5, 5] and output y [N, 2].
fn build(nodes: Vec<pb::NodeProto>, inits: Vec<pb::TensorProto>, dir: &Path, name: &str) -> Model {
    let p = dir.join(name);
    save(&model(nodes, inits, vec![tiny_input()]), &p);
    load(&p)
}

#[test]
fn integrated_gradients_of_a_linear_model_are_exactly_input_times_weight() {
    // Linearity (Sundararajan et al. 2017): for F(x) = w . x + b, IG_i = (x_i - x'_i) w_i.
    let d = tempfile::tempdir().unwrap();
    let (mut nodes, inits) = tiny_parts();
    nodes.remove(1); // no Relu: Conv -> Flatten -> Gemm is linear
    nodes[1].input[0] = "c".into();
    let m = build(nodes, inits, d.path(), "linear.onnx");
    let mv = movie(&m, 6, 5);
    let req = Request { input_ig: true, ..request(&m, "auto", vec![4], Rule::Midpoint, Steps::Fixed(1)) };
    let a = attribute(&m, &mv, &req).unwrap();
    let (ig, _) = a.input_ig.unwrap();
    // The weight: dF/dx of the single window ending at frame 4 (lags 3: frames 2, 3, 4).
    let x = m.binding.to_model_input(sufficit::response::windows_at(&mv, 3, &[4]));
    let tape = m.graph.forward(x.clone(), &[]).unwrap();
    let mut seed = ArrayD::zeros(IxDyn(&[1, 2]));
    seed[[0, 0]] = 1.0;
    let w = tape.gradients(&[(m.graph.outputs[0], seed)], &[m.graph.input]).unwrap().remove(0);
    for l in 0..3 {
        for y in 0..5 {
            for xx in 0..5 {
                let want = x[[0, l, y, xx]] * w[[0, l, y, xx]];
                assert!((ig[[2 + l, y, xx]] - want).abs() <= 1e-6 * (1.0 + want.abs()), "lag {l} ({y},{xx})");
            }
        }
    }
}

#[test]
fn a_unit_without_outgoing_weights_gets_zero_conductance_and_an_unread_pixel_zero_attribution() {
    // Dummy / sensitivity (Sundararajan et al. 2017; Dhamdhere et al. 2019).
    let d = tempfile::tempdir().unwrap();
    let (mut nodes, mut inits) = tiny_parts();
    // Readout weights k [18, 2]: rows 9..18 read channel 1 of r [N, 2, 3, 3]; zero them.
    for row in 9..18 {
        inits[2].float_data[row * 2] = 0.0;
        inits[2].float_data[row * 2 + 1] = 0.0;
    }
    // Never read the last input column: slice x to width 4 and pad it back with zeros.
    let mut slice = node("Slice", "crop", &["x", "s0", "s1", "s2"], "xc");
    slice.input = vec!["x".into(), "s0".into(), "s1".into(), "s2".into()];
    let ints = |n: &str, v: Vec<i64>| pb::TensorProto {
        name: n.into(),
        dims: vec![v.len() as i64],
        data_type: 7,
        int64_data: v,
        ..Default::default()
    };
    inits.extend([
        ints("s0", vec![0]),
        ints("s1", vec![4]),
        ints("s2", vec![3]),
        ints("pads", vec![0, 0, 0, 0, 0, 0, 0, 1]),
    ]);
    let pad = node("Pad", "pad_back", &["xc", "pads"], "xp");
    nodes[0].input[0] = "xp".into();
    nodes.insert(0, pad);
    nodes.insert(0, slice);
    let m = build(nodes, inits, d.path(), "dummy.onnx");
    let mv = movie(&m, 8, 7);
    let a = attribute(&m, &mv, &request(&m, "r", (3..8).collect(), Rule::Midpoint, Steps::Fixed(32))).unwrap();
    assert_eq!(a.layers[0].total[1], 0.0, "channel 1 has no outgoing weights");
    assert!(a.layers[0].total[0] != 0.0);
    let (ig, _) = a.input_ig.unwrap();
    assert!(ig.index_axis(Axis(2), 4).iter().all(|&v| v == 0.0), "column 4 is never read");
    assert!(ig.index_axis(Axis(2), 3).iter().any(|&v| v != 0.0));
}

#[test]
fn functionally_identical_networks_get_the_same_input_attributions() {
    // Implementation invariance (Sundararajan et al. 2017): Conv + BatchNorm and the same
    // convolution with the normalisation folded into its weights compute the same function.
    let d = tempfile::tempdir().unwrap();
    let (mut nodes, mut inits) = tiny_parts();
    let (gain, shift) = ([1.5f32, 0.5], [0.2f32, -0.3]);
    inits.extend([
        floats("bn_s", &[2], gain.to_vec()),
        floats("bn_b", &[2], shift.to_vec()),
        floats("bn_m", &[2], vec![0.0, 0.0]),
        floats("bn_v", &[2], vec![1.0 - 1e-5, 1.0 - 1e-5]),
    ]);
    let mut bn = node("BatchNormalization", "bn", &["c", "bn_s", "bn_b", "bn_m", "bn_v"], "cb");
    bn.attribute.push(pb::AttributeProto { name: "epsilon".into(), f: 1e-5, r#type: 1, ..Default::default() });
    nodes[1].input[0] = "cb".into();
    nodes.insert(1, bn);
    let with_bn = build(nodes, inits, d.path(), "bn.onnx");
    let (nodes, mut folded) = tiny_parts();
    for (i, w) in folded[0].float_data.iter_mut().enumerate() {
        *w *= gain[i / 27];
    }
    for (c, b) in folded[1].float_data.iter_mut().enumerate() {
        *b = *b * gain[c] + shift[c];
    }
    let plain = build(nodes, folded, d.path(), "folded.onnx");
    let mv = movie(&plain, 8, 11);
    let run =
        |m: &Model| attribute(m, &mv, &request(m, "auto", (3..8).collect(), Rule::Midpoint, Steps::Fixed(64))).unwrap();
    let (a, b) = (run(&with_bn), run(&plain));
    let (ia, _) = a.input_ig.unwrap();
    let (ib, _) = b.input_ig.unwrap();
    let scale = ib.iter().fold(0f32, |m, v| m.max(v.abs()));
    let err = ia.iter().zip(&ib).fold(0f32, |m, (x, y)| m.max((x - y).abs()));
    assert!(err <= 1e-4 * scale, "attributions differ by {err} (scale {scale})");
}

/// A smooth model: Conv + Softplus + Conv + Softplus + Flatten + Gemm.
fn softplus_model(dir: &Path) -> Model {
    let (mut nodes, mut inits) = tiny_parts();
    nodes[1] = node("Softplus", "sp1", &["c"], "r");
    inits.push(floats("w2", &[2, 2, 1, 1], vec![0.8, -0.6, 0.5, 0.9]));
    let conv2 = node("Conv", "conv2", &["r", "w2"], "c2");
    let sp2 = node("Softplus", "sp2", &["c2"], "r2");
    nodes[2].input[0] = "r2".into();
    nodes.insert(2, sp2);
    nodes.insert(2, conv2);
    build(nodes, inits, dir, "smooth.onnx")
}

#[test]
fn residuals_fall_with_steps_and_gauss_legendre_needs_fewer() {
    let d = tempfile::tempdir().unwrap();
    let m = softplus_model(d.path());
    let mv = movie(&m, 8, 13);
    let res = |rule, steps| {
        let a = attribute(&m, &mv, &request(&m, "r", (3..8).collect(), rule, Steps::Fixed(steps))).unwrap();
        (a.layers[0].residual, a.input_ig.unwrap().1)
    };
    // Midpoint rule: error ~ 1/m^2, so quadrupling m divides it by about 16.
    let (c4, i4) = res(Rule::Midpoint, 4);
    let (c16, i16) = res(Rule::Midpoint, 16);
    assert!(c4 / c16 > 8.0, "conductance residual {c4:e} -> {c16:e}");
    assert!(i4 / i16 > 8.0, "input IG residual {i4:e} -> {i16:e}");
    // Gauss-Legendre with 4 nodes beats the midpoint rule with 16 steps.
    let (gc4, gi4) = res(Rule::GaussLegendre, 4);
    assert!(gi4 < i16 && gc4 < c16, "GL(4) {gi4:e}/{gc4:e} vs midpoint(16) {i16:e}/{c16:e}");
    let steps_to =
        |rule| attribute(&m, &mv, &request(&m, "r", (3..8).collect(), rule, Steps::Auto(2e-6))).unwrap().steps;
    // To a tight tolerance (above the f32 rounding floor of ~5e-7 here): 16 nodes against 128 steps.
    let (gl, mid) = (steps_to(Rule::GaussLegendre), steps_to(Rule::Midpoint));
    assert!(gl < mid, "Gauss-Legendre {gl} steps, midpoint {mid}");
}

#[test]
fn bad_attribution_requests_are_refused_clearly() {
    let model = load(&fixture("models/pytorch_style.onnx"));
    let mv = movie(&model, 12, 1);
    let base = request(&model, "auto", (8..12).collect(), Rule::Midpoint, Steps::Fixed(4));
    let e = attribute(&model, &mv, &Request { cells: vec![(9, 1.0)], ..base.clone() }).err().unwrap().to_string();
    assert!(e.contains("cell 9 is out of range") && e.contains("5 cells"), "{e}");
    let e = resolve_layers(&model, "conv7").err().unwrap().to_string();
    assert!(e.contains("unknown layer 'conv7'") && e.contains("relu1"), "{e}");
    let e = attribute(&model, &mv, &Request { frames: vec![11, 12, 13], ..base.clone() }).err().unwrap().to_string();
    assert!(e.contains("frame 12") && e.contains("12 frames"), "{e}");
    let d = tempfile::tempdir().unwrap();
    let wrong = d.path().join("b.npy");
    ndarray_npy::write_npy(&wrong, &Array3::<f32>::zeros((12, 14, 13))).unwrap();
    let e = attribute(&model, &mv, &Request { baseline: Baseline::File(wrong), ..base }).err().unwrap().to_string();
    assert!(e.contains("baseline movie") && e.contains("[12, 14, 13]"), "{e}");
}
