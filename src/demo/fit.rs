//! The fitted demo model: a small CNN (two convolutions and a dense readout, lags as channels)
//! trained with the engine's gradients and Adam on the planted sensor's responses to white noise
//! and naturalistic movies, and judged on held-out movies. Reproducible from its seed.

use super::movies::{binary_noise, naturalistic};
use super::planted::{synthetic_sensor, LAGS, SIZE};
use super::train::{train_step, Adam};
use crate::model::builder::OnnxBuilder;
use crate::model::{LoadOptions, Model};
use crate::response::measure::correlation;
use crate::response::{rates, windows_at};
use crate::{Result, Tensor};
use ndarray::{concatenate, Array2, Array3, Axis, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng};
use serde::Serialize;
use std::path::Path;
use std::time::Instant;

/// How to fit.
#[derive(Debug, Clone, Serialize)]
pub struct FitSettings {
    /// Seed of movies, initial weights and batch order.
    pub seed: u64,
    /// Frames of each training movie kind (binary noise; naturalistic).
    pub train_frames: usize,
    /// Frames of each held-out movie kind.
    pub heldout_frames: usize,
    /// Passes over the training windows.
    pub epochs: usize,
    /// Windows per Adam step.
    pub batch: usize,
    /// Adam step size.
    pub lr: f32,
    /// Channels of the two convolutions.
    pub channels: (usize, usize),
    /// Kernel sizes of the two convolutions (pixels).
    pub kernels: (usize, usize),
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            seed: 1,
            train_frames: 6000,
            heldout_frames: 1000,
            epochs: 8,
            batch: 32,
            lr: 2e-3,
            channels: (8, 8),
            kernels: (15, 15),
        }
    }
}

/// How the fit went.
#[derive(Debug, Clone, Serialize)]
pub struct FitReport {
    /// Pearson correlation of fitted and planted rates on the held-out movies, per cell.
    pub heldout_correlation: Vec<f64>,
    /// Mean training loss of each epoch (1 = predicting each cell's mean).
    pub epoch_loss: Vec<f64>,
    /// The same per cell (weighted MSE: 1 - roughly the fraction of variance explained).
    pub epoch_cell_loss: Vec<Vec<f64>>,
    /// Wall time of the fit, seconds.
    pub seconds: f64,
}

/// The student CNN's tensors.
struct Cnn {
    tensors: Vec<(String, Tensor)>,
}

impl Cnn {
    fn init(s: &FitSettings, rng: &mut ChaCha8Rng) -> Cnn {
        let (c1, c2) = s.channels;
        let (k1, k2) = s.kernels;
        let side = SIZE - k1 + 1 - k2 + 1;
        let mut t = |dims: &[usize], fan_in: usize| {
            let scale = (1.0 / fan_in as f32).sqrt();
            Tensor::from_shape_fn(IxDyn(dims), |_| rng.random_range(-scale..scale))
        };
        Cnn {
            tensors: vec![
                ("conv1.weight".into(), t(&[c1, LAGS, k1, k1], LAGS * k1 * k1)),
                ("conv1.bias".into(), Tensor::zeros(IxDyn(&[c1]))),
                ("conv2.weight".into(), t(&[c2, c1, k2, k2], c1 * k2 * k2)),
                ("conv2.bias".into(), Tensor::zeros(IxDyn(&[c2]))),
                ("readout.weight".into(), t(&[3, c2 * side * side], c2 * side * side)),
                ("readout.bias".into(), Tensor::zeros(IxDyn(&[3]))),
            ],
        }
    }

    fn proto(&self) -> tract_onnx::pb::ModelProto {
        let t = |i: usize| &self.tensors[i].1;
        let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
        m.conv("stimulus", "conv1", t(0), t(1));
        m.node("Softplus", &["conv1"], "layer1", vec![]);
        m.conv("layer1", "conv2", t(2), t(3));
        m.node("Softplus", &["conv2"], "layer2", vec![]);
        m.dense("layer2", "readout", t(4), t(5));
        m.node("Softplus", &["readout"], "rates", vec![]);
        m.finish("rates", "synthetic sensor (fitted CNN)")
    }
}

fn planted() -> Result<Model> {
    Model::from_proto(synthetic_sensor(), Path::new("synthetic-sensor-planted.onnx"), &LoadOptions::default())
}

/// Movies and the planted sensor's rates on them: binary noise (100 um checkers) and
/// naturalistic movies, `frames` each, seeded.
fn dataset(planted: &Model, frames: usize, seed: u64) -> Result<Vec<(Array3<f32>, Array2<f32>)>> {
    let movies = [binary_noise(frames, SIZE, SIZE, 2, 1.0, seed), naturalistic(frames, SIZE, SIZE, seed + 1)];
    movies
        .into_iter()
        .map(|m| {
            let r = rates(planted, &m, &|_| {})?;
            Ok((m, r))
        })
        .collect()
}

/// Fit the CNN; `progress(epoch, loss, per-cell loss)` after each epoch. Returns the model and
/// the report.
pub fn fit(s: &FitSettings, progress: &dyn Fn(usize, f64, &[f64])) -> Result<(tract_onnx::pb::ModelProto, FitReport)> {
    let t0 = Instant::now();
    let teacher = planted()?;
    let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
    let train = dataset(&teacher, s.train_frames, s.seed.wrapping_mul(1000) + 1)?;
    let heldout = dataset(&teacher, s.heldout_frames, s.seed.wrapping_mul(1000) + 500)?;
    let cnn = Cnn::init(s, &mut rng);
    let mut student = Model::from_proto(cnn.proto(), Path::new("fitted.onnx"), &LoadOptions::default())?;
    let params = student.graph.params();
    let mut adam = Adam::for_params(&student.graph, &params, s.lr);
    // Every window whose history lies inside its movie: (movie, end frame).
    let mut windows: Vec<(usize, usize)> =
        train.iter().enumerate().flat_map(|(i, (m, _))| (LAGS - 1..m.shape()[0]).map(move |t| (i, t))).collect();
    // Each cell's errors weighted by 1 / its training variance.
    let weights: Vec<f32> = (0..3)
        .map(|c| {
            let v: Vec<f64> =
                train.iter().flat_map(|(_, r)| r.column(c).iter().map(|&x| x as f64).collect::<Vec<_>>()).collect();
            let m = v.iter().sum::<f64>() / v.len() as f64;
            let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len() as f64;
            (1.0 / var.max(1e-6)) as f32
        })
        .collect();
    let mut epoch_loss = Vec::new();
    let mut epoch_cell_loss = Vec::new();
    for epoch in 0..s.epochs {
        windows.shuffle(&mut rng);
        let mut total = 0.0;
        let mut cells = [0.0; 3];
        let mut steps = 0;
        for batch in windows.chunks(s.batch) {
            let parts: Vec<_> = batch
                .iter()
                .map(|&(i, t)| (windows_at(&train[i].0, LAGS, &[t]), train[i].1.row(t).to_owned().insert_axis(Axis(0))))
                .collect();
            let xs: Vec<_> = parts.iter().map(|p| p.0.view()).collect();
            let ys: Vec<_> = parts.iter().map(|p| p.1.view()).collect();
            let x = concatenate(Axis(0), &xs).map_err(|e| crate::Error::Usage(e.to_string()))?;
            let y = concatenate(Axis(0), &ys).map_err(|e| crate::Error::Usage(e.to_string()))?;
            let x = student.binding.to_model_input(x);
            let (loss, per_cell) = train_step(&mut student.graph, &params, &mut adam, (x, &y), &weights)?;
            total += loss;
            cells.iter_mut().zip(per_cell).for_each(|(a, v)| *a += v);
            steps += 1;
        }
        let loss = total / steps.max(1) as f64;
        epoch_loss.push(loss);
        let cells: Vec<f64> = cells.iter().map(|c| c / steps.max(1) as f64).collect();
        progress(epoch + 1, loss, &cells);
        epoch_cell_loss.push(cells);
    }
    let mut heldout_correlation = vec![0.0; 3];
    for cell in 0..3 {
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for (m, r) in &heldout {
            let fitted = rates(&student, m, &|_| {})?;
            for t in LAGS - 1..m.shape()[0] {
                a.push(fitted[[t, cell]] as f64);
                b.push(r[[t, cell]] as f64);
            }
        }
        heldout_correlation[cell] = correlation(&a, &b);
    }
    // Write the trained parameters back into the ONNX model.
    let mut trained = Cnn { tensors: Vec::new() };
    for (name, _) in &cnn.tensors {
        let id = student.graph.find(name).ok_or_else(|| crate::Error::Usage(format!("no parameter '{name}'")))?;
        let t = student
            .graph
            .param_mut(id)
            .map(|t| t.clone())
            .ok_or_else(|| crate::Error::Usage(format!("'{name}' is not a parameter of the fitted graph")))?;
        trained.tensors.push((name.clone(), t));
    }
    Ok((
        trained.proto(),
        FitReport { heldout_correlation, epoch_loss, epoch_cell_loss, seconds: t0.elapsed().as_secs_f64() },
    ))
}
