//! Fitting with the engine's own gradients: a student CNN trained for a few Adam steps on a
//! teacher's responses to noise lowers its loss (smoke test of the demo model's training).

use ndarray::{Array2, ArrayD, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use sufficit::demo::train::{train_step, Adam};
use sufficit::model::builder::{to_bytes, OnnxBuilder};
use sufficit::model::{LoadOptions, Model};

/// A small CNN (4 lags, 10 x 10 pixels, conv 3@5x5 + softplus, dense to 2 cells + softplus).
fn cnn(rng: &mut ChaCha8Rng, path: &std::path::Path) -> Model {
    let mut t = |dims: &[usize], s: f32| ArrayD::from_shape_fn(IxDyn(dims), |_| rng.random_range(-s..s));
    let (w1, b1, w2, b2) = (t(&[3, 4, 5, 5], 0.3), t(&[3], 0.1), t(&[2, 3 * 36], 0.3), t(&[2], 0.1));
    let mut m = OnnxBuilder::new("x", &[4, 10, 10]);
    m.conv("x", "conv1", &w1, &b1);
    m.node("Softplus", &["conv1"], "hidden", vec![]);
    m.dense("hidden", "readout", &w2, &b2);
    m.node("Softplus", &["readout"], "rates", vec![]);
    std::fs::write(path, to_bytes(&m.finish("rates", "cnn"))).unwrap();
    Model::load(path, &LoadOptions::default()).unwrap()
}

#[test]
fn a_student_fits_its_teacher_and_the_loss_falls() {
    let d = tempfile::tempdir().unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let teacher = cnn(&mut rng, &d.path().join("teacher.onnx"));
    let mut student = cnn(&mut rng, &d.path().join("student.onnx"));
    let params = student.graph.params();
    let mut adam = Adam::for_params(&student.graph, &params, 0.02);
    let batch =
        |rng: &mut ChaCha8Rng| ArrayD::from_shape_fn(IxDyn(&[32, 4, 10, 10]), |_| rng.random_range(-1.0f32..1.0));
    let target = |x: &ArrayD<f32>| -> Array2<f32> {
        let out = teacher.graph.forward(x.clone(), &[]).unwrap().outputs()[0].clone();
        out.into_shape_with_order((32, 2)).unwrap()
    };
    // A fixed held-out batch measures the loss before and after.
    let held = batch(&mut rng);
    let held_y = target(&held);
    let held_loss = |m: &Model| {
        let out = m.graph.forward(held.clone(), &[]).unwrap().outputs()[0].clone();
        sufficit::demo::train::mse(&out, &held_y).unwrap().0
    };
    let before = held_loss(&student);
    for _ in 0..150 {
        let x = batch(&mut rng);
        let y = target(&x);
        let (loss, _) = train_step(&mut student.graph, &params, &mut adam, (x, &y), &[1.0, 1.0]).unwrap();
        assert!(loss.is_finite());
    }
    let after = held_loss(&student);
    assert!(after < 0.5 * before, "held-out loss {before} -> {after}");
}
