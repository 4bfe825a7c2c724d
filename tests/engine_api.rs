//! The engine's API on a whole model: reading activations, seeding gradients at hidden nodes,
//! gradients at several values at once, weight gradients, overrides (clamping) with gradients
//! blocked where a value was replaced, and chunked batches. Gradients are checked against
//! central finite differences of the engine's own forward (f64 accumulation).

use ndarray::{ArrayD, Axis, IxDyn};
use std::path::Path;
use sufficit::engine::batch::{chunk_len, join, map_chunks};
use sufficit::engine::{Graph, Override, Part, Source, ValueId};
use sufficit::model::{LoadOptions, Model};

fn model() -> Model {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/models/pytorch_style.onnx");
    Model::load(&p, &LoadOptions::default()).unwrap()
}

fn input(g: &Graph, n: usize) -> ArrayD<f32> {
    let mut shape = g.values[g.input].shape.clone();
    shape[0] = n;
    ArrayD::from_shape_fn(IxDyn(&shape), |i| ((i[1] * 7 + i[2] * 3 + i[3] * 5 + i[0]) % 13) as f32 / 6.0 - 1.0)
}

/// F = sum of value `at` weighted by `w`, for finite differences.
fn objective(g: &Graph, x: &ArrayD<f32>, at: ValueId, w: &ArrayD<f32>, overrides: &[Override]) -> f64 {
    let tape = g.forward(x.clone(), overrides).unwrap();
    tape.value(at).iter().zip(w).map(|(a, b)| *a as f64 * *b as f64).sum()
}

fn assert_close(an: f32, fd: f64, what: &str) {
    let tol = 2e-3 * fd.abs().max(an.abs() as f64) + 2e-4;
    assert!((an as f64 - fd).abs() <= tol, "{what}: backward {an} vs finite difference {fd}");
}

#[test]
fn seeds_at_a_hidden_value_give_input_gradients() {
    let m = model();
    let g = &m.graph;
    let x = input(g, 2);
    let hidden = g.find("relu1").unwrap();
    let tape = g.forward(x.clone(), &[]).unwrap();
    let mut w = ArrayD::zeros(IxDyn(tape.value(hidden).shape()));
    w.index_axis_mut(Axis(1), 1).fill(1.0);
    let grads = tape.gradients(&[(hidden, w.clone())], &[g.input]).unwrap();
    for &j in &[5usize, 300, 777, 1500] {
        let mut up = x.clone();
        let mut down = x.clone();
        let eps = 1e-2;
        up.as_slice_mut().unwrap()[j] += eps;
        down.as_slice_mut().unwrap()[j] -= eps;
        let fd = (objective(g, &up, hidden, &w, &[]) - objective(g, &down, hidden, &w, &[])) / (2.0 * eps as f64);
        assert_close(grads[0].as_slice().unwrap()[j], fd, &format!("input[{j}]"));
    }
}

#[test]
fn weight_gradients_match_finite_differences() {
    let mut m = model();
    let x = input(&m.graph, 3);
    let out = m.graph.outputs[0];
    let weight = m.graph.find("conv1.weight").unwrap();
    let w = ArrayD::from_shape_fn(IxDyn(&[3, 5]), |i| if i[1] == 2 { 1.0 } else { 0.0 });
    let grad = {
        let tape = m.graph.forward(x.clone(), &[]).unwrap();
        tape.gradients(&[(out, w.clone())], &[weight]).unwrap().remove(0)
    };
    let base = match &m.graph.values[weight].source {
        Source::Param(t) => t.clone(),
        _ => panic!("conv1.weight is a parameter"),
    };
    for &j in &[0usize, 123, 640, 799] {
        let eps = 1e-2;
        let mut f = |delta: f32| {
            let mut t = base.clone();
            t.as_slice_mut().unwrap()[j] += delta;
            m.graph.values[weight].source = Source::Param(t);
            objective(&m.graph, &x, out, &w, &[])
        };
        let fd = (f(eps) - f(-eps)) / (2.0 * eps as f64);
        assert_close(grad.as_slice().unwrap()[j], fd, &format!("conv1.weight[{j}]"));
    }
}

#[test]
fn clamping_a_channel_changes_the_output_and_blocks_its_gradient() {
    let m = model();
    let g = &m.graph;
    let x = input(g, 2);
    let hidden = g.find("relu1").unwrap();
    let pre = g.find("conv1_out").unwrap();
    let out = g.outputs[0];
    let free = g.forward(x.clone(), &[]).unwrap();
    let c = free.value(hidden).shape()[1];
    // Clamp channel 1 of relu1 to a constant map, as ablation does.
    let shape = &g.values[hidden].shape;
    let clamp = Override { value: hidden, part: Part::Channels(vec![1]), with: ArrayD::from_elem(IxDyn(shape), 0.25) };
    let tape = g.forward(x.clone(), std::slice::from_ref(&clamp)).unwrap();
    let clamped = tape.value(hidden);
    assert!(clamped.index_axis(Axis(1), 1).iter().all(|&v| v == 0.25));
    for ch in (0..c).filter(|&ch| ch != 1) {
        assert_eq!(clamped.index_axis(Axis(1), ch), free.value(hidden).index_axis(Axis(1), ch));
    }
    assert_ne!(tape.value(out), free.value(out), "clamping must change the output");

    let w = ArrayD::from_elem(IxDyn(tape.value(out).shape()), 1.0);
    let grads = tape.gradients(&[(out, w.clone())], &[pre, g.input]).unwrap();
    assert!(grads[0].index_axis(Axis(1), 1).iter().all(|&v| v == 0.0), "no gradient through the clamped channel");
    assert!(grads[0].index_axis(Axis(1), 0).iter().any(|&v| v != 0.0), "other channels still carry gradient");
    // The input gradient is that of the clamped model.
    for &j in &[11usize, 400, 1234] {
        let eps = 1e-2;
        let mut up = x.clone();
        let mut down = x.clone();
        up.as_slice_mut().unwrap()[j] += eps;
        down.as_slice_mut().unwrap()[j] -= eps;
        let o = std::slice::from_ref(&clamp);
        let fd = (objective(g, &up, out, &w, o) - objective(g, &down, out, &w, o)) / (2.0 * eps as f64);
        assert_close(grads[1].as_slice().unwrap()[j], fd, &format!("clamped input[{j}]"));
    }
}

#[test]
fn chunked_batches_equal_one_big_batch() {
    let m = model();
    let g = &m.graph;
    let x = input(g, 7);
    let whole = g.forward(x.clone(), &[]).unwrap().outputs()[0].clone();
    let chunk = chunk_len(g.bytes_per_sample(), 3 * 2 * g.bytes_per_sample());
    assert_eq!(chunk, 3);
    let parts = map_chunks(&x, chunk, |c| Ok(g.forward(c, &[])?.outputs()[0].clone())).unwrap();
    assert_eq!(parts.len(), 3);
    assert_eq!(join(&parts).unwrap(), whole);
}

#[test]
fn a_wrong_input_shape_is_an_error_not_a_panic() {
    let m = model();
    let e = m.graph.forward(ArrayD::zeros(IxDyn(&[2, 8, 13, 14])), &[]).err().unwrap().to_string();
    assert!(e.contains("[batch, 8, 14, 14]"), "{e}");
}
