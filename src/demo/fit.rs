//! The fitted demo model: a small CNN (two convolutions and a dense readout, lags as channels)
//! trained with the engine's gradients and Adam on the planted sensor's responses to white noise
//! and naturalistic movies, and judged on held-out movies. Reproducible from its seed.

use super::movies::{binary_noise, full_field_flicker, naturalistic};
use super::planted::{synthetic_sensor, LAGS, SIZE};
use super::train::{batch_gradients, Adam, Loss};
use crate::model::builder::{int_attr, OnnxBuilder};
use crate::model::{LoadOptions, Model};
use crate::response::measure::correlation;
use crate::response::{rates, windows_at};
use crate::{Result, Tensor};
use ndarray::{concatenate, Array2, Array3, Axis, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::Serialize;
use std::path::Path;
use std::time::Instant;

/// How to fit.
#[derive(Debug, Clone, Serialize)]
pub struct FitSettings {
    /// Seed of movies, initial weights and batch order.
    pub seed: u64,
    /// Frames of each training movie kind (binary noise; full-field flicker; naturalistic),
    /// fresh every epoch.
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
    /// The objective.
    pub loss: Loss,
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            seed: 1,
            train_frames: 2000,
            heldout_frames: 1000,
            epochs: 20,
            batch: 32,
            lr: 3e-3,
            channels: (8, 8),
            kernels: (15, 15),
            loss: Loss::Poisson,
        }
    }
}

/// How the fit went.
#[derive(Debug, Clone, Serialize)]
pub struct FitReport {
    /// Pearson correlation of fitted and planted rates on the held-out movies, per cell.
    pub heldout_correlation: Vec<f64>,
    /// Mean training loss of each epoch (for the weighted MSE, 1 = predicting each cell's mean).
    pub epoch_loss: Vec<f64>,
    /// The same per cell.
    pub epoch_cell_loss: Vec<Vec<f64>>,
    /// Wall time of the fit, seconds.
    pub seconds: f64,
}

/// Names of the trained parameters of the training graph, in the order of `Student::factors`
/// except that the readout's two factors are trained through `readout.weight`.
const TRAINED: [&str; 7] = [
    "conv1.temporal.weight",
    "conv1.weight",
    "conv1.bias",
    "conv2.weight",
    "conv2.bias",
    "readout.weight",
    "readout.bias",
];

/// The student's trainable factors. The first convolution's kernel of each channel is a spatial
/// map times a temporal filter (space-time separable, common practice for first-layer filters of
/// retinal models), the readout of each cell a spatial mask times feature weights (the factorised
/// readout, common practice). Far fewer parameters than full kernels, so the fit generalises
/// instead of memorising. Training runs the factorised graph (a 1x1 temporal convolution, then a
/// depthwise spatial one: about 40 times less work than the full first layer); the shipped model
/// is written with ordinary Conv and Gemm weights, the products of the factors.
struct Student {
    /// conv1 temporal `[c1, LAGS, 1, 1]`, conv1 spatial `[c1, 1, k1, k1]`, conv1 bias, conv2
    /// weight `[c2, c1, k2, k2]`, conv2 bias, readout mask `[cells, side * side]`, readout
    /// features `[cells, c2]`, readout bias.
    factors: Vec<Tensor>,
    side: usize,
}

impl Student {
    fn init(s: &FitSettings, rng: &mut ChaCha8Rng) -> Student {
        let (c1, c2) = s.channels;
        let (k1, k2) = s.kernels;
        let side = SIZE - k1 + 1 - k2 + 1;
        let mut t = |dims: &[usize], fan_in: usize| {
            let scale = (1.0 / fan_in as f32).sqrt();
            Tensor::from_shape_fn(IxDyn(dims), |_| rng.random_range(-scale..scale))
        };
        // Products of the factors start at the usual 1 / sqrt(fan-in) scale.
        let factors = vec![
            t(&[c1, LAGS, 1, 1], LAGS),
            t(&[c1, 1, k1, k1], k1 * k1),
            Tensor::zeros(IxDyn(&[c1])),
            t(&[c2, c1, k2, k2], c1 * k2 * k2),
            Tensor::zeros(IxDyn(&[c2])),
            t(&[CELLS, side * side], side * side),
            t(&[CELLS, c2], c2),
            Tensor::zeros(IxDyn(&[CELLS])),
        ];
        Student { factors, side }
    }

    /// The readout's full weight `[cells, c2 * side * side]` (mask times features).
    fn readout(&self) -> Tensor {
        let (mask, feat) = (&self.factors[5], &self.factors[6]);
        let (c2, area) = (feat.shape()[1], self.side * self.side);
        Tensor::from_shape_fn(IxDyn(&[CELLS, c2 * area]), |i| mask[[i[0], i[1] % area]] * feat[[i[0], i[1] / area]])
    }

    /// The first convolution's full kernel `[c1, LAGS, k1, k1]` (spatial map times temporal filter).
    fn conv1(&self) -> Tensor {
        let (tm, sp) = (&self.factors[0], &self.factors[1]);
        let (c1, k1) = (sp.shape()[0], sp.shape()[2]);
        Tensor::from_shape_fn(IxDyn(&[c1, LAGS, k1, k1]), |i| sp[[i[0], 0, i[2], i[3]]] * tm[[i[0], i[1], 0, 0]])
    }

    /// Values of the [`TRAINED`] parameters.
    fn trained(&self) -> Vec<Tensor> {
        let f = &self.factors;
        vec![f[0].clone(), f[1].clone(), f[2].clone(), f[3].clone(), f[4].clone(), self.readout(), f[7].clone()]
    }

    /// Gradients of the factors from gradients of the [`TRAINED`] parameters (chain rule
    /// through the readout's product).
    fn chain(&self, mut g: Vec<Tensor>) -> Vec<Tensor> {
        let (mask, feat) = (&self.factors[5], &self.factors[6]);
        let area = self.side * self.side;
        let mut g_mask = Tensor::zeros(IxDyn(mask.shape()));
        let mut g_feat = Tensor::zeros(IxDyn(feat.shape()));
        let width = g[5].shape()[1];
        for (i, &v) in g[5].iter().enumerate() {
            let (c, j) = (i / width, i % width);
            let (k, p) = (j / area, j % area);
            g_mask[[c, p]] += v * feat[[c, k]];
            g_feat[[c, k]] += v * mask[[c, p]];
        }
        g[5] = g_mask;
        g.insert(6, g_feat);
        g
    }

    /// The factorised graph the fit trains.
    fn training_proto(&self) -> tract_onnx::pb::ModelProto {
        let f = &self.factors;
        let c1 = f[1].shape()[0];
        let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
        m.conv("stimulus", "conv1.temporal", &f[0], &Tensor::zeros(IxDyn(&[c1])));
        let w = m.param("conv1.weight", &f[1]);
        let b = m.param("conv1.bias", &f[2]);
        m.node("Conv", &["conv1.temporal", &w, &b], "conv1", vec![int_attr("group", c1 as i64)]);
        self.rest(m, &f[3], &f[4])
    }

    /// The shipped model: ordinary Conv and Gemm weights.
    fn proto(&self) -> tract_onnx::pb::ModelProto {
        let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
        m.conv("stimulus", "conv1", &self.conv1(), &self.factors[2]);
        self.rest(m, &self.factors[3], &self.factors[4])
    }

    /// Everything after conv1 (shared by both graphs).
    fn rest(&self, mut m: OnnxBuilder, w2: &Tensor, b2: &Tensor) -> tract_onnx::pb::ModelProto {
        m.node("Softplus", &["conv1"], "layer1", vec![]);
        m.conv("layer1", "conv2", w2, b2);
        m.node("Softplus", &["conv2"], "layer2", vec![]);
        m.dense("layer2", "readout", &self.readout(), &self.factors[7]);
        m.node("Softplus", &["readout"], "rates", vec![]);
        m.finish("rates", "synthetic sensor (fitted CNN)")
    }
}

/// Cells of the synthetic sensor.
const CELLS: usize = 3;

fn planted() -> Result<Model> {
    Model::from_proto(synthetic_sensor(), Path::new("synthetic-sensor-planted.onnx"), &LoadOptions::default())
}

/// Movies and the planted sensor's rates on them, `frames` each, seeded: binary noise (100 um
/// checkers), full-field flicker (holds of 10 to 50 ms) and a naturalistic movie.
fn dataset(planted: &Model, frames: usize, seed: u64) -> Result<Vec<(Array3<f32>, Array2<f32>)>> {
    let movies = [
        binary_noise(frames, SIZE, SIZE, 2, 1.0, seed),
        full_field_flicker(frames, SIZE, SIZE, 0.35, 5, seed + 1),
        naturalistic(frames, SIZE, SIZE, seed + 2),
    ];
    movies
        .into_iter()
        .map(|m| {
            let r = rates(planted, &m, &|_| {})?;
            Ok((m, r))
        })
        .collect()
}

/// Each cell's loss weight from a large calibration sample (fixed for the whole fit, so a bursty
/// cell's weight does not swing with each epoch's movies): 1 / its variance for squared error,
/// 1 / its mean rate for the Poisson deviance (which grows with the rate). Either way every cell
/// counts about equally, whatever its firing rate.
fn cell_weights(loss: Loss, data: &[(Array3<f32>, Array2<f32>)]) -> Vec<f32> {
    (0..CELLS)
        .map(|c| {
            let v: Vec<f64> =
                data.iter().flat_map(|(_, r)| r.column(c).iter().map(|&x| x as f64).collect::<Vec<_>>()).collect();
            let m = v.iter().sum::<f64>() / v.len().max(1) as f64;
            let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len().max(1) as f64;
            let scale = match loss {
                Loss::WeightedMse => var,
                Loss::Poisson => m,
            };
            (1.0 / scale.max(1e-6)) as f32
        })
        .collect()
}

/// Pearson correlation of the student's and the teacher's rates on `data`, per cell: pooled over
/// all movies, and for each movie alone (`[movie][cell]`).
fn correlations(student: &Model, data: &[(Array3<f32>, Array2<f32>)]) -> Result<(Vec<f64>, Vec<Vec<f64>>)> {
    let fitted: Vec<Array2<f32>> = data.iter().map(|(m, _)| rates(student, m, &|_| {})).collect::<Result<_>>()?;
    let pairs = |movies: &[usize], cell: usize| {
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for &i in movies {
            for t in LAGS - 1..data[i].0.shape()[0] {
                a.push(fitted[i][[t, cell]] as f64);
                b.push(data[i].1[[t, cell]] as f64);
            }
        }
        correlation(&a, &b)
    };
    let all: Vec<usize> = (0..data.len()).collect();
    let pooled = (0..CELLS).map(|c| pairs(&all, c)).collect();
    let each = (0..data.len()).map(|i| (0..CELLS).map(|c| pairs(&[i], c)).collect()).collect();
    Ok((pooled, each))
}

/// One batch's loss (overall, per cell) and full-parameter gradients, the batch split in two
/// halves run in parallel (the engine's forward on one small batch uses one core).
fn split_gradients(
    student: &Model,
    ids: &[crate::engine::ValueId],
    data: &[(Array3<f32>, Array2<f32>)],
    batch: &[(usize, usize)],
    (loss, weights): (Loss, &[f32]),
) -> Result<(f64, Vec<f64>, Vec<Tensor>)> {
    let halves: Vec<&[(usize, usize)]> = batch.chunks(batch.len().div_ceil(2).max(1)).collect();
    let parts: Vec<(f64, Vec<f64>, Vec<Tensor>)> = halves
        .par_iter()
        .map(|half| {
            let xs: Vec<_> = half.iter().map(|&(i, t)| windows_at(&data[i].0, LAGS, &[t])).collect();
            let ys: Vec<_> = half.iter().map(|&(i, t)| data[i].1.row(t).to_owned().insert_axis(Axis(0))).collect();
            let x = concatenate(Axis(0), &xs.iter().map(|x| x.view()).collect::<Vec<_>>())
                .map_err(|e| crate::Error::Usage(e.to_string()))?;
            let y = concatenate(Axis(0), &ys.iter().map(|y| y.view()).collect::<Vec<_>>())
                .map_err(|e| crate::Error::Usage(e.to_string()))?;
            let (loss, cells, grads) =
                batch_gradients(&student.graph, ids, (student.binding.to_model_input(x), &y), loss, weights)?;
            let share = half.len() as f64 / batch.len() as f64;
            Ok((
                loss * share,
                cells.iter().map(|c| c * share).collect(),
                grads.into_iter().map(|g| g * share as f32).collect(),
            ))
        })
        .collect::<Result<_>>()?;
    let mut parts = parts.into_iter();
    let first = parts.next().ok_or_else(|| crate::Error::Usage("fit: an empty training batch".into()))?;
    Ok(parts.fold(first, |(l, c, g), (l2, c2, g2)| {
        (l + l2, c.iter().zip(&c2).map(|(a, b)| a + b).collect(), g.into_iter().zip(g2).map(|(a, b)| a + b).collect())
    }))
}

/// One epoch's figures, passed to the fit's progress callback.
#[derive(Debug, Clone)]
pub struct Epoch {
    /// Epoch number, from 1.
    pub number: usize,
    /// Mean weighted training loss.
    pub loss: f64,
    /// The same per cell.
    pub cell_loss: Vec<f64>,
    /// Held-out correlation per cell after the epoch.
    pub heldout_correlation: Vec<f64>,
    /// The same for each held-out movie kind alone (binary noise, flicker, naturalistic).
    pub heldout_by_kind: Vec<Vec<f64>>,
}

/// Fit the CNN; `progress` is called after each epoch.
/// Every epoch trains on fresh movies (the planted model gives unlimited data); the held-out
/// movies are never trained on. Returns the model and the report.
pub fn fit(s: &FitSettings, progress: &dyn Fn(&Epoch)) -> Result<(tract_onnx::pb::ModelProto, FitReport)> {
    let t0 = Instant::now();
    let teacher = planted()?;
    let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
    let heldout = dataset(&teacher, s.heldout_frames, s.seed.wrapping_mul(1000) + 500)?;
    let weights = cell_weights(s.loss, &dataset(&teacher, s.train_frames.max(4000), s.seed.wrapping_mul(1000) + 700)?);
    let mut student = Student::init(s, &mut rng);
    let mut model = Model::from_proto(student.training_proto(), Path::new("fitted.onnx"), &LoadOptions::default())?;
    let ids: Vec<_> = TRAINED
        .iter()
        .map(|n| model.graph.find(n).ok_or_else(|| crate::Error::Usage(format!("fit: no parameter '{n}'"))))
        .collect::<Result<_>>()?;
    let shapes: Vec<Vec<usize>> = student.factors.iter().map(|t| t.shape().to_vec()).collect();
    let mut adam = Adam::new(&shapes, s.lr);
    let (mut epoch_loss, mut epoch_cell_loss, mut heldout_correlation) = (Vec::new(), Vec::new(), vec![0.0; CELLS]);
    for epoch in 0..s.epochs {
        let train = dataset(&teacher, s.train_frames, s.seed.wrapping_mul(1000) + 10 + 3 * epoch as u64)?;
        let mut windows: Vec<(usize, usize)> =
            train.iter().enumerate().flat_map(|(i, (m, _))| (LAGS - 1..m.shape()[0]).map(move |t| (i, t))).collect();
        windows.shuffle(&mut rng);
        let (mut total, mut cells, mut steps) = (0.0, [0.0; CELLS], 0);
        for batch in windows.chunks(s.batch) {
            crate::interrupt::check()?;
            let (loss, per_cell, full) = split_gradients(&model, &ids, &train, batch, (s.loss, &weights))?;
            let grads = student.chain(full);
            {
                let mut refs: Vec<&mut Tensor> = student.factors.iter_mut().collect();
                adam.step(&mut refs, &grads);
            }
            for (&id, t) in ids.iter().zip(student.trained()) {
                let slot = model
                    .graph
                    .param_mut(id)
                    .ok_or_else(|| crate::Error::Usage("fit: a student parameter is not a graph parameter".into()))?;
                *slot = t;
            }
            total += loss;
            cells.iter_mut().zip(per_cell).for_each(|(a, v)| *a += v);
            steps += 1;
        }
        let loss = total / steps.max(1) as f64;
        let cells: Vec<f64> = cells.iter().map(|c| c / steps.max(1) as f64).collect();
        let (pooled, by_kind) = correlations(&model, &heldout)?;
        heldout_correlation = pooled;
        progress(&Epoch {
            number: epoch + 1,
            loss,
            cell_loss: cells.clone(),
            heldout_correlation: heldout_correlation.clone(),
            heldout_by_kind: by_kind,
        });
        epoch_loss.push(loss);
        epoch_cell_loss.push(cells);
    }
    Ok((
        student.proto(),
        FitReport { heldout_correlation, epoch_loss, epoch_cell_loss, seconds: t0.elapsed().as_secs_f64() },
    ))
}
