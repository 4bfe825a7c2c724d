//! Whole models against outside references. The models and values come from
//! `scripts/make_reference_models.py`: forward outputs from onnxruntime (the ONNX reference
//! runtime), gradients from JAX in float64 (a general-purpose autodiff library). Library
//! versions are recorded in each fixture.

use ndarray::{ArrayD, IxDyn};
use serde_json::Value;
use std::path::{Path, PathBuf};
use sufficit::model::{FastPath, InputLayout, LoadOptions, Model};

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures")
}

struct Reference {
    model: Model,
    input: ArrayD<f32>,
    output: ArrayD<f32>,
    cell: usize,
    grad_input: ArrayD<f32>,
    hidden: String,
    grad_hidden: ArrayD<f32>,
}

fn array(v: &Value, data: &str, shape: &str) -> ArrayD<f32> {
    let shape: Vec<usize> = v[shape].as_array().unwrap().iter().map(|d| d.as_u64().unwrap() as usize).collect();
    let data: Vec<f32> = v[data].as_array().unwrap().iter().map(|d| d.as_f64().unwrap() as f32).collect();
    ArrayD::from_shape_vec(IxDyn(&shape), data).unwrap()
}

fn load(name: &str) -> Reference {
    let text = std::fs::read_to_string(fixtures().join(format!("reference/{name}.json"))).unwrap();
    let v: Value = serde_json::from_str(&text).unwrap();
    let model = Model::load(&fixtures().join(format!("models/{name}.onnx")), &LoadOptions::default()).unwrap();
    Reference {
        model,
        input: array(&v, "input", "input_shape"),
        output: array(&v, "output_onnxruntime", "output_shape"),
        cell: v["cell"].as_u64().unwrap() as usize,
        grad_input: array(&v, "grad_input_jax_f64", "input_shape"),
        hidden: v["hidden"].as_str().unwrap().to_string(),
        grad_hidden: array(&v, "grad_hidden_jax_f64", "hidden_shape"),
    }
}

/// max |a - b| / max |b|: the error relative to the reference's scale.
fn relative_error(a: &ArrayD<f32>, b: &ArrayD<f32>) -> f64 {
    assert_eq!(a.shape(), b.shape());
    let scale = b.iter().fold(0f64, |m, &x| m.max(x.abs() as f64)).max(1e-30);
    a.iter().zip(b).fold(0f64, |m, (&x, &y)| m.max((x as f64 - y as f64).abs())) / scale
}

fn check(name: &str, layout: InputLayout) {
    let r = load(name);
    assert_eq!(r.model.binding.layout, layout, "{name}: detected layout");
    let g = &r.model.graph;

    // Forward: our engine and tract's plan both equal onnxruntime within 1e-5 (relative to scale).
    let tape = g.forward(r.input.clone(), &[]).unwrap();
    let ours = tape.outputs()[0].clone();
    let e = relative_error(&ours, &r.output);
    assert!(e <= 1e-5, "{name}: engine forward differs from onnxruntime by {e:e}");
    let fast = FastPath::new(&r.model).unwrap().run(r.input.clone()).unwrap();
    let e = relative_error(&fast[0], &r.output);
    assert!(e <= 1e-5, "{name}: tract forward differs from onnxruntime by {e:e}");

    // Backward: F = sum over the batch of output[:, cell]; gradients equal JAX's within 1e-4.
    let out = g.outputs[0];
    let mut seed = ArrayD::zeros(IxDyn(ours.shape()));
    for b in 0..ours.shape()[0] {
        seed[[b, r.cell]] = 1.0;
    }
    let hidden = g.find(&r.hidden).unwrap_or_else(|| panic!("{name}: no value '{}'", r.hidden));
    let grads = tape.gradients(&[(out, seed)], &[g.input, hidden]).unwrap();
    let e = relative_error(&grads[0], &r.grad_input);
    assert!(e <= 1e-4, "{name}: input gradient differs from JAX by {e:e}");
    let e = relative_error(&grads[1], &r.grad_hidden);
    assert!(e <= 1e-4, "{name}: hidden gradient differs from JAX by {e:e}");
}

#[test]
fn pytorch_style_export_matches_onnxruntime_and_jax() {
    check("pytorch_style", InputLayout::LagsFirst);
}

#[test]
fn channels_last_fixed_batch_export_matches_onnxruntime_and_jax() {
    check("lags_last_fixed_batch", InputLayout::LagsLast);
}

#[test]
fn volume_model_matches_onnxruntime_and_jax() {
    check("volume", InputLayout::Volume);
}

#[test]
fn line_model_matches_onnxruntime_and_jax() {
    check("line", InputLayout::Line);
}

#[test]
fn fixed_batch_exports_run_batched() {
    // The channels-last fixture is exported with batch 1 and a Reshape target [1, -1]; it must
    // still run a batch of 5, each sample giving what it gives alone.
    let r = load("lags_last_fixed_batch");
    let g = &r.model.graph;
    let one = r.input.clone();
    let mut shape = one.shape().to_vec();
    shape[0] = 5;
    let batch = ArrayD::from_shape_fn(IxDyn(&shape), |i| {
        let mut j = i.clone();
        j[0] = 0;
        one[j] * (1.0 + i[0] as f32 * 0.1)
    });
    let tape = g.forward(batch.clone(), &[]).unwrap();
    let all = tape.outputs()[0].clone();
    assert_eq!(all.shape()[0], 5);
    for b in 0..5 {
        let single = batch.index_axis(ndarray::Axis(0), b).insert_axis(ndarray::Axis(0)).to_owned();
        let alone = g.forward(single.clone(), &[]).unwrap().outputs()[0].clone();
        let e = relative_error(&all.index_axis(ndarray::Axis(0), b).insert_axis(ndarray::Axis(0)).to_owned(), &alone);
        assert!(e < 1e-6, "sample {b} differs when batched: {e:e}");
    }
    let fast = FastPath::new(&r.model).unwrap().run(batch).unwrap();
    assert!(relative_error(&fast[0], &all) < 1e-5);
}
