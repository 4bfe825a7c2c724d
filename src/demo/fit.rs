//! The fitted demo model: a small CNN (two convolutions and a dense readout, lags as channels)
//! trained with the engine's gradients and Adam on the planted sensor's responses to white noise
//! and naturalistic movies, and judged on held-out movies. Reproducible from its seed.

use super::movies::{
    binary_noise, full_field_flicker, jittering_scene_with_object, naturalistic, reversing_bars, reversing_checkers,
    reversing_lines, reversing_lone_bars, reversing_texture, scene_with_object, steady_bars, steady_lone_bars,
    sweeping_bars,
};
use super::planted::{kernel_terms, DS_THRESHOLD, K1, LAGS, SIZE};
use super::train::{batch_gradients, Adam, Loss, LOG_OFFSET};
use crate::model::builder::{int_attr, OnnxBuilder};
use crate::model::{LoadOptions, Model};
use crate::response::measure::correlation;
use crate::response::{rates, windows_at};
use crate::{Result, Tensor};
use ndarray::{concatenate, Array2, Array3, Axis, IxDyn, Slice};
use rand::rngs::ChaCha8Rng;
use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::Path;
use std::sync::Arc;
use std::time::Instant;

/// How to fit.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct FitSettings {
    /// Seed of movies, initial weights and batch order.
    pub seed: u64,
    /// Frames of each training movie kind (binary noise; full-field flicker; naturalistic),
    /// fresh every epoch.
    pub train_frames: usize,
    /// Frames of naturalistic movie with a moving object ([`scene_with_object`]) per epoch (0:
    /// none; always in the held-out movies).
    pub object_frames: usize,
    /// How the scene and object of the object movie move (the held-out movies' always drift).
    pub object_motion: ObjectMotion,
    /// Frames of reversing movie (`reversal_image`) per epoch (0: none). It reverses its motion
    /// now and then, which drives the reversal cell (rarely, in bursts); off by default until a
    /// fit learns from it (docs/performance.md, sessions 6 and 7).
    pub reversal_frames: usize,
    /// Fraction of the epochs after which the reversing movie joins the training movies (a
    /// curriculum: the network first learns what the other movies teach).
    pub reversal_from: f64,
    /// What the reversing movie shows (also in the held-out movies).
    pub reversal_image: ReversalImage,
    /// Share of the bars swept over the centre (`sweeps`, `sweeps-and-bars`) drawn at full
    /// contrast, the rest at 0.6 to 1 (0: all at 0.6 to 1). The demo's reversing bar is at full
    /// contrast, where the planted reversal units reach their ceiling: a fit must see bars that
    /// saturate them to learn it (docs/performance.md, session 22).
    pub full_contrast_sweeps: f64,
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
    /// Fraction of the epochs after which the step size drops to a fifth (a step decay, common
    /// practice: large steps find the basin, small ones settle in it).
    pub decay_after: f64,
    /// Fit each cell with its own channels (an equal share of both layers; the second layer and
    /// the readout block-diagonal, gradient clipping per cell): one cell's bursts then cannot
    /// wreck the features another cell has learnt. Still one CNN with two convolutions and a
    /// readout; the zero blocks are ordinary zero weights in the shipped model.
    pub separate_cells: bool,
    /// Students trained from consecutive seeds before choosing (1: no restarts). The fit's
    /// outcome hangs on its start (docs/performance.md, runs F/M, Q/R, T/U), so several short
    /// starts are judged on held-out movies.
    pub restarts: usize,
    /// Epochs each restart trains before the choice (they count towards `epochs`).
    pub restart_epochs: usize,
    /// Train only this cell (the others get loss weight 0 and stay untrained): a quick way to
    /// study one cell's fit with all channels on it.
    pub only_cell: Option<usize>,
    /// The hidden layers' nonlinearity.
    pub hidden: Hidden,
    /// Gradient clipping bound, in running means of recent gradient norms (see [`Clip`]); 0
    /// turns clipping off.
    pub clip: f64,
    /// Epochs that train on one draw of movies (1: fresh movies every epoch). The planted
    /// sensor's rates on the movies are a large part of an epoch's time, so reusing each draw
    /// for a few epochs buys epochs.
    pub movies_every: usize,
    /// Deal each epoch's windows into batches so that every batch holds an equal share of the
    /// strongest responses (stratified sampling, common practice for variance reduction): a
    /// sparse cell's bursts then reach every step in equal measure instead of a few steps in
    /// large blows, which Adam turns into large, erratic steps.
    pub stratify: bool,
    /// Keep the readout's spatial mask and feature weights positive (projected after every
    /// step onto a small floor, [`READOUT_FLOOR`]): each cell then sums its second-layer units with positive weights, its floor is
    /// its readout bias, and every sign of the circuit sits in the convolutions, where reduction
    /// reads it. A fit free to read a unit negatively learnt a tonically active unit whose dips
    /// raise the rate (run Y1's reversal cell: a leak during smooth motion). The planted
    /// reversal cell's caps are read negatively (docs/models.md), so a fit of the present
    /// sensor needs the signed readout.
    pub positive_readout: bool,
    /// After every epoch, give each dead hidden channel (never above zero on a sample of the
    /// epoch's windows, at any position) fresh incoming weights scaled to the data and no
    /// outgoing weight, so it can learn again without changing the student's output (dormant
    /// unit recycling after Sokar, Agarwal, Castro & Evci, ICML 2023). A rectified unit that
    /// falls silent gets no gradient and stays silent: run Y1's reversal cell lost one of its
    /// three second-layer units so.
    pub revive: bool,
    /// Ship the mean of the weights over the steps of the low-step tail (the epochs after
    /// `decay_after`; the last [`AVERAGE_STEPS`] steps weigh most) instead of the last step's
    /// weights (iterate averaging: Polyak & Juditsky, SIAM J. Control Optim. 1992; stochastic
    /// weight averaging: Izmailov et al., UAI 2018; the exponential forgetting is common
    /// practice, so a long tail's mean does not lag behind weights that still learn). A
    /// sparse cell's bursts move the weights from step to step, so the last step's model is one
    /// draw from around the minimum: run N1's reversal / smooth ratio swung from 0.1 to 7 between
    /// epochs (docs/performance.md, session 11).
    pub average: bool,
    /// Where each hidden channel starts, in s.d. of its pre-activation below the bend of its
    /// nonlinearity (0: at the bend, half its windows active; 1: about a sixth of them). A
    /// rectified unit centred at its bend stays nearly linear on most inputs; the planted
    /// reversal cell's pathways and units are silent on most frames, and fits started at the
    /// bend learnt channels that answer a bar in both directions instead. Starting one s.d.
    /// below did not change that (docs/performance.md, session 12).
    pub sparse_start: f64,
    /// A probe, not a fit: with `--cell 1`, start the first four first-layer channels at the
    /// planted direction-selective pathways 4-7 (their rank-2 parts and thresholds) and hold
    /// them fixed, so the run shows whether the rest of the student learns the reversal once
    /// its first layer is right (docs/performance.md, session 12).
    pub planted_first_layer: bool,
    /// Weight of a group-sparsity penalty on the second layer: `group_sparsity` times the sum,
    /// over each second-layer unit and each first-layer channel it reads, of the L2 norm of that
    /// unit's kernel on that channel (the group lasso: Yuan & Lin, J. R. Stat. Soc. B 2006). It
    /// pushes each unit to read few channels. The planted reversal units each read one direction
    /// and its delayed copy; fitted units read both directions, and a unit summing both cancels
    /// at the reversal (docs/performance.md, session 12, probes P1 and P2). 0: none.
    pub group_sparsity: f32,
    /// Weight of an L1 penalty on each cell's readout weights: `readout_sparsity` times, per
    /// cell, the sum of the absolute weights of its dense readout (spatial mask times feature
    /// weights, so the sum is |mask|_1 |features|_1 and the split between the factors does not
    /// change it; the lasso: Tibshirani, J. R. Stat. Soc. B 1996). A sparse readout reads its
    /// units at few positions (common practice for encoding models of sensory neurons): the
    /// planted cells read theirs at the 4 central positions, and a fitted readout spread over
    /// several positions smears a bar's timing (docs/performance.md, session 14). 0: none.
    pub readout_sparsity: f32,
    /// Weight of a smoothness penalty on the first layer: `smoothness` times the sum of squared
    /// Laplacians of its spatial factors plus squared second differences of its temporal
    /// factors (see [`super::roughness`]; smooth filters are the usual prior of CNN encoding
    /// models, common practice). 0: none.
    pub smoothness: f32,
    /// Raised cosines on log-stretched time that carry the first layer's temporal filters (see
    /// [`super::temporal_basis`]): after each optimiser step, at the start and when a channel is
    /// revived, every temporal factor is projected onto their span, so it has `temporal_basis`
    /// degrees of freedom instead of one per lag. 0: free lags.
    pub temporal_basis: usize,
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            seed: 1,
            train_frames: 2000,
            object_frames: 0,
            object_motion: ObjectMotion::Drift,
            reversal_frames: 0,
            reversal_from: 0.0,
            reversal_image: ReversalImage::Pink,
            full_contrast_sweeps: 0.0,
            heldout_frames: 1000,
            epochs: 30,
            batch: 16,
            lr: 1e-3,
            channels: (16, 8),
            kernels: (15, 15),
            loss: Loss::Poisson,
            decay_after: 0.7,
            separate_cells: false,
            restarts: 1,
            restart_epochs: 5,
            only_cell: None,
            hidden: Hidden::Softplus,
            clip: 3.0,
            movies_every: 1,
            stratify: false,
            positive_readout: false,
            revive: false,
            average: false,
            sparse_start: 0.0,
            planted_first_layer: false,
            group_sparsity: 0.0,
            readout_sparsity: 0.0,
            smoothness: 0.0,
            temporal_basis: 0,
        }
    }
}

/// The nonlinearity of the student's two hidden layers (its output is always softplus).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum Hidden {
    /// Smooth rectification, `ln(1 + e^x)`: its bend is one unit wide, so a sharp threshold
    /// needs large weights.
    Softplus,
    /// Rectification, `max(0, x)`: a sharp threshold at any weight scale.
    Relu,
}

impl Hidden {
    /// The ONNX operator.
    fn op(self) -> &'static str {
        match self {
            Hidden::Softplus => "Softplus",
            Hidden::Relu => "Relu",
        }
    }
}

/// How the object movie moves.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum ObjectMotion {
    /// Scene and object drift smoothly and independently ([`scene_with_object`]).
    Drift,
    /// The scene jitters; objects jitter with it or on their own
    /// ([`jittering_scene_with_object`]).
    Jitter,
    /// Half the object frames of each kind.
    Both,
}

/// The image a reversing movie moves.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum ReversalImage {
    /// A pink (1/f) texture ([`reversing_texture`]).
    Pink,
    /// Thin lines on gray ([`reversing_lines`]).
    Lines,
    /// Parallel bars on gray ([`reversing_bars`]).
    Bars,
    /// Bars far apart, mostly one in view ([`reversing_lone_bars`]).
    LoneBars,
    /// Parallel bars and lone bars by turns, one short movie each: the bars drive the reversal
    /// cell often, the lone bars show it silent under a lone bar's steady motion.
    MixedBars,
    /// As `mixed-bars`, each velocity held 40 to 160 frames instead of 15 to 60 ([`steady_bars`],
    /// [`steady_lone_bars`]): steady motion long enough for the reversal cell to fall silent.
    SteadyBars,
    /// Parallel bars in short segments (`bars`), then parallel and lone bars in long ones
    /// (`steady-bars`), by turns: the short segments hold most of the reversals that happen
    /// over the receptive field (`scripts/reversal_events.py` on the planted sensor, two draws:
    /// 21 of 34 bursts in `bars` follow a reversal, 3 of 25 in steady parallel bars), the long
    /// ones the steady motion under which the reversal cell falls silent.
    VariedBars,
    /// A binary checkerboard ([`reversing_checkers`]).
    Checkers,
    /// Lone bars swept over the centre, most of them reversing there after a long steady
    /// approach ([`sweeping_bars`]).
    Sweeps,
    /// `sweeps` and `bars` by turns: reversals over the receptive field after long approaches,
    /// and parallel bars reversing anywhere (the fresh held-out movies hold the latter).
    SweepsAndBars,
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
    /// For each cell, the restart whose channels it kept (all 0 without restarts).
    pub chosen_restart: Vec<usize>,
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

/// Separable terms of each first-layer kernel. A space-time oriented (direction-selective) filter
/// is a sum of two separable ones (Adelson & Bergen, J. Opt. Soc. Am. A 1985, motion energy
/// model); one separable term cannot tell directions apart.
const RANK: usize = 2;

/// The student's trainable factors. The first convolution's kernel of each channel is a sum of
/// [`RANK`] products of a spatial map and a temporal filter (low-rank space-time kernels), the
/// readout of each cell a spatial mask times feature weights (the factorised readout, common
/// practice). Far fewer parameters than full kernels, so the fit generalises instead of
/// memorising. Training runs the factorised graph (a 1x1 temporal convolution to `RANK` maps per
/// channel, then a grouped spatial convolution summing each channel's maps: about 20 times less
/// work than the full first layer); the shipped model is written with ordinary Conv and Gemm
/// weights, the sums of products of the factors.
#[derive(Clone)]
pub(super) struct Student {
    /// conv1 temporal `[c1 * RANK, LAGS, 1, 1]`, conv1 spatial `[c1, RANK, k1, k1]`, conv1 bias,
    /// conv2 weight `[c2, c1, k2, k2]`, conv2 bias, readout mask `[cells, side * side]`, readout
    /// features `[cells, c2]`, readout bias.
    factors: Vec<Tensor>,
    side: usize,
    /// Channels per cell in the two layers, when each cell has its own (see
    /// [`FitSettings::separate_cells`]).
    per_cell: Option<(usize, usize)>,
    /// The hidden layers' nonlinearity.
    hidden: Hidden,
    /// Whether the readout factors are kept positive (see [`FitSettings::positive_readout`]).
    positive_readout: bool,
    /// Where hidden channels start (see [`FitSettings::sparse_start`]).
    sparse_start: f64,
    /// Leading first-layer channels held fixed (see [`FitSettings::planted_first_layer`]).
    frozen: usize,
    /// Projection onto the raised cosines that carry the temporal factors (see
    /// [`FitSettings::temporal_basis`]), computed once; `None` with free lags.
    temporal_projector: Option<Arc<Array2<f64>>>,
}

impl Student {
    /// The student's shape and settings with no weights (to be given its factors).
    fn without_factors(&self) -> Student {
        Student { factors: Vec::new(), temporal_projector: self.temporal_projector.clone(), ..*self }
    }

    /// Random factors at the usual 1 / sqrt(fan-in) scale; the readout bias starts where each
    /// cell's output is its mean rate `mean_rates` (common practice: the first steps then shape
    /// the response instead of finding its level).
    fn init(s: &FitSettings, mean_rates: &[f32], rng: &mut ChaCha8Rng) -> Student {
        let (c1, c2) = s.channels;
        let (k1, k2) = s.kernels;
        let side = SIZE - k1 + 1 - k2 + 1;
        let mut t = |dims: &[usize], fan_in: usize| uniform(dims, fan_in, rng);
        // Products of the factors start at the usual 1 / sqrt(fan-in) scale.
        let factors = vec![
            t(&[c1 * RANK, LAGS, 1, 1], LAGS),
            t(&[c1, RANK, k1, k1], RANK * k1 * k1),
            Tensor::zeros(IxDyn(&[c1])),
            t(&[c2, c1, k2, k2], c1 * k2 * k2),
            Tensor::zeros(IxDyn(&[c2])),
            t(&[CELLS, side * side], side * side),
            t(&[CELLS, c2], c2),
            Tensor::from_shape_fn(IxDyn(&[CELLS]), |i| inverse_softplus(mean_rates[i[0]])),
        ];
        let per_cell = s.separate_cells.then_some((c1 / CELLS, c2 / CELLS));
        let mut student = Student {
            factors,
            side,
            per_cell,
            hidden: s.hidden,
            positive_readout: s.positive_readout,
            sparse_start: s.sparse_start,
            frozen: 0,
            temporal_projector: (s.temporal_basis > 0)
                .then(|| Arc::new(super::temporal_basis::projector(s.temporal_basis, LAGS))),
        };
        student.project_temporal(0..c1 * RANK);
        student.mask_factors();
        if student.positive_readout {
            student.factors[5].mapv_inplace(f32::abs);
            student.factors[6].mapv_inplace(f32::abs);
            student.project();
        }
        student
    }

    /// Which cell owns row `row` (the first axis) of factor `factor`, when cells have their own
    /// channels; `None` when they share them.
    fn owner(&self, factor: usize, row: usize) -> Option<usize> {
        Some(row / rows_per_cell(factor, self.per_cell?))
    }

    /// Zero the entries of `tensors` (factors or their gradients) that join one cell's channels
    /// to another's: second-layer weights across groups and readout features of other cells.
    fn mask(&self, tensors: &mut [Tensor]) {
        let Some((g1, g2)) = self.per_cell else { return };
        for (f, t) in tensors.iter_mut().enumerate() {
            match f {
                3 => t.indexed_iter_mut().filter(|(i, _)| i[0] / g2 != i[1] / g1).for_each(|(_, v)| *v = 0.0),
                6 => t.indexed_iter_mut().filter(|(i, _)| i[0] != i[1] / g2).for_each(|(_, v)| *v = 0.0),
                _ => {}
            }
        }
    }

    /// [`Student::mask`] applied to the student's own factors.
    fn mask_factors(&mut self) {
        let mut factors = std::mem::take(&mut self.factors);
        self.mask(&mut factors);
        self.factors = factors;
    }

    /// Copy cell `cell`'s channels (every row it owns, in every factor) from `other`, a student
    /// of the same shape; with shared channels, the whole student.
    fn take_cell(&mut self, other: &Student, cell: usize) {
        if self.per_cell.is_none() {
            self.factors = other.factors.clone();
            return;
        }
        for f in 0..self.factors.len() {
            for row in 0..self.factors[f].shape()[0] {
                if self.owner(f, row) == Some(cell) {
                    let src = other.factors[f].index_axis(Axis(0), row).to_owned();
                    self.factors[f].index_axis_mut(Axis(0), row).assign(&src);
                }
            }
        }
    }

    /// Write `part` (a student with shared channels trained on cell `cell` alone) as cell
    /// `cell`'s block: its first-layer channels from `o1`, its second-layer channels from `o2`
    /// (its own counts), its readout row into row `cell`.
    fn write_part(&mut self, cell: usize, part: &Student, (o1, o2): (usize, usize)) {
        let p = &part.factors;
        let (n1, n2) = (p[1].shape()[0], p[3].shape()[0]);
        let f = &mut self.factors;
        f[0].slice_axis_mut(Axis(0), Slice::from(RANK * o1..RANK * (o1 + n1))).assign(&p[0]);
        for k in [1, 2] {
            f[k].slice_axis_mut(Axis(0), Slice::from(o1..o1 + n1)).assign(&p[k]);
        }
        f[3].slice_axis_mut(Axis(0), Slice::from(o2..o2 + n2))
            .slice_axis_mut(Axis(1), Slice::from(o1..o1 + n1))
            .assign(&p[3]);
        f[4].slice_axis_mut(Axis(0), Slice::from(o2..o2 + n2)).assign(&p[4]);
        for k in [5, 7] {
            f[k].index_axis_mut(Axis(0), cell).assign(&p[k].index_axis(Axis(0), cell));
        }
        f[6].index_axis_mut(Axis(0), cell)
            .slice_axis_mut(Axis(0), Slice::from(o2..o2 + n2))
            .assign(&p[6].index_axis(Axis(0), cell));
    }

    /// One student with separate cells, cell `k`'s channels and readout row from `parts[k]`, a
    /// student with shared channels trained on cell `k` alone (see [`super::recipe`]). Parts
    /// may differ in channels, not in kernels or hidden nonlinearity. The result is for
    /// shipping (its blocks need not be equal, so it is not trained on).
    pub(super) fn assemble(parts: &[Student]) -> Result<Student> {
        let first = parts.first().filter(|_| parts.len() == CELLS).ok_or_else(|| {
            crate::Error::Usage(format!("fit: assembling needs one part per cell ({CELLS}), got {}", parts.len()))
        })?;
        let kernels = |st: &Student| (st.factors[1].shape()[2], st.factors[3].shape()[2], st.side, st.hidden);
        if let Some(k) = parts.iter().position(|p| kernels(p) != kernels(first)) {
            return Err(crate::Error::Usage(format!(
                "fit: cell {k}'s part differs from cell 0's in kernels or hidden nonlinearity; the cells of one \
                 model need the same"
            )));
        }
        let sizes: Vec<(usize, usize)> =
            parts.iter().map(|p| (p.factors[1].shape()[0], p.factors[3].shape()[0])).collect();
        let (c1, c2) = sizes.iter().fold((0, 0), |(a, b), &(x, y)| (a + x, b + y));
        let factors = first
            .factors
            .iter()
            .enumerate()
            .map(|(f, t)| {
                let mut dims = t.shape().to_vec();
                match f {
                    0 => dims[0] = RANK * c1,
                    1 | 2 => dims[0] = c1,
                    3 => (dims[0], dims[1]) = (c2, c1),
                    4 => dims[0] = c2,
                    6 => dims[1] = c2,
                    _ => {}
                }
                Tensor::zeros(IxDyn(&dims))
            })
            .collect();
        let mut whole = Student { factors, per_cell: None, positive_readout: false, ..first.without_factors() };
        let mut offsets = (0, 0);
        for (cell, (part, &(n1, n2))) in parts.iter().zip(&sizes).enumerate() {
            whole.write_part(cell, part, offsets);
            offsets = (offsets.0 + n1, offsets.1 + n2);
        }
        Ok(whole)
    }

    /// The clipping group of entry `flat` of factor `factor`: its cell when cells have their
    /// own channels, else 0.
    fn group(&self, factor: usize, flat: usize) -> usize {
        let t = &self.factors[factor];
        let row = flat / (t.len() / t.shape()[0]).max(1);
        self.owner(factor, row).unwrap_or(0)
    }

    /// The readout's full weight `[cells, c2 * side * side]` (mask times features).
    fn readout(&self) -> Tensor {
        let (mask, feat) = (&self.factors[5], &self.factors[6]);
        let (c2, area) = (feat.shape()[1], self.side * self.side);
        Tensor::from_shape_fn(IxDyn(&[CELLS, c2 * area]), |i| mask[[i[0], i[1] % area]] * feat[[i[0], i[1] / area]])
    }

    /// The first convolution's full kernel `[c1, LAGS, k1, k1]` (sum of spatial maps times
    /// temporal filters).
    fn conv1(&self) -> Tensor {
        let (tm, sp) = (&self.factors[0], &self.factors[1]);
        let (c1, k1) = (sp.shape()[0], sp.shape()[2]);
        Tensor::from_shape_fn(IxDyn(&[c1, LAGS, k1, k1]), |i| {
            (0..RANK).map(|r| sp[[i[0], r, i[2], i[3]]] * tm[[i[0] * RANK + r, i[1], 0, 0]]).sum()
        })
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

    /// Data-dependent initialisation (after Mishkin & Matas, ICLR 2016, "All you need is a good
    /// init": each layer rescaled so its outputs have a set variance on real inputs): each
    /// first- and second-layer channel is scaled so its pre-activation has s.d. [`INIT_SD`] on
    /// the windows `x`. Random filters at the usual scale leave softplus nearly linear on
    /// low-contrast movies, and a nearly linear network gets no gradient towards cells whose
    /// linear filter is close to zero (ON-OFF cells, cells built on cancellation): both planted
    /// cells 0 and 2 are such cells.
    fn scale_to_data(&mut self, x: &Tensor) -> Result<()> {
        let (c1, c2) = (self.factors[1].shape()[0], self.factors[3].shape()[0]);
        self.scale_channels(x, 1, &(self.frozen..c1).collect::<Vec<_>>())?;
        self.scale_channels(x, 2, &(0..c2).collect::<Vec<_>>())?;
        if self.positive_readout {
            self.scale_readout(x)?;
        }
        Ok(())
    }

    /// Scale a positive readout so each cell's input to its output softplus has s.d.
    /// [`READOUT_SD`] on the windows `x` and the mean the readout bias had (the cell's mean
    /// rate): the same data-dependent start as the hidden layers'. A signed random readout sums
    /// to about zero over the units' positions; a positive one at that scale sums to many times
    /// the cells' rates, and the first steps then silence every unit to bring the rates down
    /// (a first try lost 7 of 9 second-layer units in one epoch).
    fn scale_readout(&mut self, x: &Tensor) -> Result<()> {
        let v = self.value_of(x, "readout")?;
        for c in 0..CELLS {
            let (mean, var) = moments(v.index_axis(Axis(1), c).iter().copied());
            let sd = var.sqrt();
            if sd > 0.0 {
                let k = READOUT_SD / sd;
                self.factors[5].index_axis_mut(Axis(0), c).mapv_inplace(|w| w * k as f32);
                let bias = self.factors[7][[c]] as f64;
                self.factors[7][[c]] = (bias - (mean - bias) * k) as f32;
            }
        }
        Ok(())
    }

    /// Scale channels `channels` of hidden layer `layer` (1 or 2) so their pre-activations have
    /// s.d. [`INIT_SD`] on the windows `x`, centred where the nonlinearity bends or
    /// [`FitSettings::sparse_start`] s.d. below (see [`Student::scale_to_data`]).
    fn scale_channels(&mut self, x: &Tensor, layer: usize, channels: &[usize]) -> Result<()> {
        if channels.is_empty() {
            return Ok(());
        }
        let (name, factor) = if layer == 1 { ("conv1", 1) } else { ("conv2", 3) };
        let v = self.value_of(x, name)?;
        for &c in channels {
            let (mean, var) = moments(v.index_axis(Axis(1), c).iter().copied());
            let sd = var.sqrt();
            if sd > 0.0 {
                let k = (INIT_SD / sd) as f32;
                self.factors[factor].index_axis_mut(Axis(0), c).mapv_inplace(|w| w * k);
                // Centre the channel so it starts where its nonlinearity bends.
                self.factors[factor + 1][[c]] -= ((mean / sd + self.sparse_start) * INIT_SD) as f32;
            }
        }
        Ok(())
    }

    /// The value named `name` in the training graph run on the windows `x`.
    fn value_of(&self, x: &Tensor, name: &str) -> Result<Tensor> {
        let [v] = self.values_of(x, [name])?;
        Ok(v)
    }

    /// The values named `names` in the training graph, from one run on the windows `x`.
    fn values_of<const N: usize>(&self, x: &Tensor, names: [&str; N]) -> Result<[Tensor; N]> {
        let model = Model::from_proto(self.training_proto(), Path::new("student.onnx"), &LoadOptions::default())?;
        let ids = names.map(|name| {
            model.graph.find(name).ok_or_else(|| crate::Error::Usage(format!("fit: the student has no '{name}'")))
        });
        let run = model.graph.forward(x.clone(), &[])?;
        let mut values = Vec::with_capacity(N);
        for id in ids {
            values.push(run.value(id?).clone());
        }
        Ok(values.try_into().unwrap_or_else(|_| unreachable!("one value per name")))
    }

    /// Keep the readout positive when it must be (see [`FitSettings::positive_readout`]): the
    /// projection after each optimiser step, onto weights of at least [`READOUT_FLOOR`] (then
    /// the cross-cell entries back to zero).
    /// The projection also keeps the temporal factors in the span of their basis (see
    /// [`FitSettings::temporal_basis`]).
    fn project(&mut self) {
        if self.positive_readout {
            self.factors[5].mapv_inplace(|v| v.max(READOUT_FLOOR));
            self.factors[6].mapv_inplace(|v| v.max(READOUT_FLOOR));
            self.mask_factors();
        }
        self.project_temporal(self.frozen * RANK..self.factors[0].shape()[0]);
    }

    /// Project the temporal factors `rows` onto the span of the raised cosines (see
    /// [`FitSettings::temporal_basis`]); nothing with free lags.
    fn project_temporal(&mut self, rows: impl IntoIterator<Item = usize>) {
        let Some(p) = &self.temporal_projector else { return };
        for r in rows {
            super::temporal_basis::project(p, self.factors[0].index_axis_mut(Axis(0), r));
        }
    }

    /// Revive the dead hidden channels on the windows `x` (see [`FitSettings::revive`]): fresh
    /// random incoming weights, scaled to `x`, and zero outgoing weights, so the student's
    /// output is unchanged. Returns how many channels were revived in layers 1 and 2.
    fn revive(&mut self, x: &Tensor, rng: &mut ChaCha8Rng) -> Result<(usize, usize)> {
        let (c1, k1) = (self.factors[1].shape()[0], self.factors[1].shape()[2]);
        let k2 = self.factors[3].shape()[2];
        // One run finds both layers' dead channels: reviving a first-layer channel zeroes its
        // outgoing weights, so the second layer's values are the same after it.
        let dead = |v: &Tensor| -> Vec<usize> {
            (0..v.shape()[1]).filter(|&c| v.index_axis(Axis(1), c).iter().all(|&a| a <= DEAD)).collect()
        };
        let [layer1, layer2] = self.values_of(x, ["layer1", "layer2"])?;
        let mut redraw = |t: &mut Tensor, rows: &[usize], fan_in: usize| {
            for &r in rows {
                let fresh = uniform(&t.shape()[1..], fan_in, rng);
                t.index_axis_mut(Axis(0), r).assign(&fresh);
            }
        };
        let first: Vec<usize> = dead(&layer1).into_iter().filter(|&c| c >= self.frozen).collect();
        let temporal: Vec<usize> = first.iter().flat_map(|&c| c * RANK..(c + 1) * RANK).collect();
        redraw(&mut self.factors[0], &temporal, LAGS);
        self.project_temporal(temporal.iter().copied());
        redraw(&mut self.factors[1], &first, RANK * k1 * k1);
        for &c in &first {
            self.factors[2][[c]] = 0.0;
            self.factors[3].index_axis_mut(Axis(1), c).fill(0.0);
        }
        self.scale_channels(x, 1, &first)?;
        let second = dead(&layer2);
        redraw(&mut self.factors[3], &second, c1 * k2 * k2);
        self.mask_factors();
        for &c in &second {
            self.factors[4][[c]] = 0.0;
            self.factors[6].index_axis_mut(Axis(1), c).fill(0.0);
        }
        self.scale_channels(x, 2, &second)?;
        self.project();
        Ok((first.len(), second.len()))
    }

    /// Set the first four first-layer channels to the planted direction-selective pathways 4-7
    /// (the [`RANK`] leading singular terms of each kernel, the planted threshold as bias) and
    /// hold them fixed (see [`FitSettings::planted_first_layer`]).
    fn plant_first_layer(&mut self) -> Result<()> {
        let (c1, k1) = (self.factors[1].shape()[0], self.factors[1].shape()[2]);
        if self.per_cell.is_some() || c1 < 4 || k1 != K1 {
            return Err(crate::Error::Usage(format!(
                "fit: --planted-first-layer puts the 4 planted direction-selective pathways into the first \
                 layer of a one-cell fit (--cell 1, no --separate-cells, at least 4 first-layer channels, \
                 kernels of {K1} px); got {c1} channels of {k1} px{}",
                if self.per_cell.is_some() { " with separate cells" } else { "" }
            )));
        }
        for ch in 0..4 {
            for (r, (temporal, spatial)) in kernel_terms(4 + ch, RANK).into_iter().enumerate() {
                for (l, v) in temporal.into_iter().enumerate() {
                    self.factors[0][[ch * RANK + r, l, 0, 0]] = v;
                }
                for (p, v) in spatial.into_iter().enumerate() {
                    self.factors[1][[ch, r, p / K1, p % K1]] = v;
                }
            }
            self.factors[2][[ch]] = -DS_THRESHOLD;
        }
        self.frozen = 4;
        Ok(())
    }

    /// Add the gradient of the group-sparsity penalty (see [`FitSettings::group_sparsity`]) to
    /// the second layer's weight gradient: `weight * w_g / |w_g|` for each group `w_g` (a unit's
    /// kernel on one input channel); groups at zero (the cross-cell blocks) get none.
    fn penalise_groups(&self, grads: &mut [Tensor], weight: f32) {
        if weight == 0.0 {
            return;
        }
        let w = &self.factors[3];
        for u in 0..w.shape()[0] {
            for c in 0..w.shape()[1] {
                let group = w.index_axis(Axis(0), u);
                let group = group.index_axis(Axis(0), c);
                let norm = group.iter().map(|v| f64::from(*v) * f64::from(*v)).sum::<f64>().sqrt() as f32;
                if norm > 0.0 {
                    let mut g = grads[3].index_axis_mut(Axis(0), u);
                    let mut g = g.index_axis_mut(Axis(0), c);
                    g.zip_mut_with(&group, |gv, &wv| *gv += weight * wv / norm);
                }
            }
        }
    }

    /// Add the gradient of the readout penalty (see [`FitSettings::readout_sparsity`]): per cell
    /// `weight * |features|_1 * sign(mask)` to the mask's gradient and `weight * |mask|_1 *
    /// sign(features)` to the feature weights' (weights at zero get none).
    fn penalise_readout(&self, grads: &mut [Tensor], weight: f32) {
        if weight == 0.0 {
            return;
        }
        let l1 = |t: &Tensor, cell: usize| t.index_axis(Axis(0), cell).iter().map(|v| v.abs()).sum::<f32>();
        for cell in 0..CELLS {
            let (mask, features) = (l1(&self.factors[5], cell), l1(&self.factors[6], cell));
            for (factor, other) in [(5, features), (6, mask)] {
                let w = self.factors[factor].index_axis(Axis(0), cell);
                let mut g = grads[factor].index_axis_mut(Axis(0), cell);
                g.zip_mut_with(&w, |gv, &wv| {
                    if wv != 0.0 {
                        *gv += weight * other * wv.signum();
                    }
                });
            }
        }
    }

    /// Add the gradient of the first layer's smoothness penalty (see
    /// [`FitSettings::smoothness`]) to its temporal and spatial factors' gradients.
    fn penalise_roughness(&self, grads: &mut [Tensor], weight: f32) {
        let (temporal, rest) = grads.split_at_mut(1);
        super::roughness::add_gradient(&self.factors[1], &self.factors[0], &mut rest[0], &mut temporal[0], weight);
    }

    /// Zero the gradients of the first-layer channels held fixed (see
    /// [`Student::plant_first_layer`]): with zero gradients Adam never moves them.
    fn freeze(&self, grads: &mut [Tensor]) {
        for c in 0..self.frozen {
            for r in 0..RANK {
                grads[0].index_axis_mut(Axis(0), c * RANK + r).fill(0.0);
            }
            grads[1].index_axis_mut(Axis(0), c).fill(0.0);
            grads[2][[c]] = 0.0;
        }
    }

    /// The factorised graph the fit trains.
    fn training_proto(&self) -> tract_onnx::pb::ModelProto {
        let f = &self.factors;
        let c1 = f[1].shape()[0];
        let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
        m.conv("stimulus", "conv1.temporal", &f[0], &Tensor::zeros(IxDyn(&[c1 * RANK])));
        let w = m.param("conv1.weight", &f[1]);
        let b = m.param("conv1.bias", &f[2]);
        m.node("Conv", &["conv1.temporal", &w, &b], "conv1", vec![int_attr("group", c1 as i64)]);
        self.rest(m, &f[3], &f[4])
    }

    /// The shipped model: ordinary Conv and Gemm weights.
    pub(super) fn proto(&self) -> tract_onnx::pb::ModelProto {
        let mut m = OnnxBuilder::new("stimulus", &[LAGS, SIZE, SIZE]);
        m.conv("stimulus", "conv1", &self.conv1(), &self.factors[2]);
        self.rest(m, &self.factors[3], &self.factors[4])
    }

    /// Everything after conv1 (shared by both graphs).
    fn rest(&self, mut m: OnnxBuilder, w2: &Tensor, b2: &Tensor) -> tract_onnx::pb::ModelProto {
        m.node(self.hidden.op(), &["conv1"], "layer1", vec![]);
        m.conv("layer1", "conv2", w2, b2);
        m.node(self.hidden.op(), &["conv2"], "layer2", vec![]);
        m.dense("layer2", "readout", &self.readout(), &self.factors[7]);
        m.node("Softplus", &["readout"], "rates", vec![]);
        m.finish("rates", "synthetic sensor (fitted CNN)")
    }
}

/// Cells of the synthetic sensor.
pub(super) const CELLS: usize = 3;

/// Random weights of shape `dims`, uniform at the usual 1 / sqrt(`fan_in`) scale (common
/// practice): the student's start, and a revived channel's fresh start.
fn uniform(dims: &[usize], fan_in: usize, rng: &mut ChaCha8Rng) -> Tensor {
    let scale = (1.0 / fan_in as f32).sqrt();
    Tensor::from_shape_fn(IxDyn(dims), |_| rng.random_range(-scale..scale))
}

/// Rows (first axis) of factor `factor` that each cell owns when cells have their own channels,
/// `groups` = (first-layer, second-layer) channels per cell: a first-layer channel has [`RANK`]
/// temporal rows; the readout factors have one row per cell.
fn rows_per_cell(factor: usize, (g1, g2): (usize, usize)) -> usize {
    match factor {
        0 => RANK * g1,
        1 | 2 => g1,
        3 | 4 => g2,
        _ => 1,
    }
}

/// The least weight of a positive readout (see [`Student::project`]). Not zero: a unit read with
/// zero weight gets no gradient, and a fit that drove a sparse cell's weights to zero in its
/// first epochs left that cell constant for good; Adam's steps do not shrink with the gradient,
/// so at this floor the unit still learns at full speed while adding next to nothing.
const READOUT_FLOOR: f32 = 1e-3;

/// Spread (s.d.) of each cell's input to its output softplus after [`Student::scale_readout`]:
/// the rates start near each cell's mean rate, varying by tens of percent.
const READOUT_SD: f64 = 0.5;

/// Spread (s.d.) of every hidden channel's pre-activation after [`Student::scale_to_data`]: wide
/// enough that softplus rectifies (it is nearly linear within +-1).
const INIT_SD: f64 = 2.0;

/// A hidden unit's output at or below this on every window and position counts as dead (see
/// [`FitSettings::revive`]): exactly zero for ReLU; softplus would have to be below it.
const DEAD: f32 = 1e-6;

/// Contrast (s.d.) of the training flicker; see [`dataset`].
pub const FLICKER_SD: f32 = 0.12;

/// The `x` with `softplus(x) = y` (for `y > 0`; tiny rates are floored).
fn inverse_softplus(y: f32) -> f32 {
    let y = y.max(1e-3) as f64;
    (y + (-(-y).exp_m1()).ln()) as f32
}

/// Movies of the held-out set that are one kind each: noise, flicker, scenes and the scene with
/// object (the held-out set always has object frames); the reversing movies follow.
const HELDOUT_SINGLE_KINDS: usize = 4;

/// Frames of each reversing movie in [`dataset`].
const REVERSAL_CHUNK: usize = 250;

/// Movies and the planted sensor's rates on them, seeded: `frames` each of binary noise (100 um
/// checkers), full-field flicker (holds of 10 to 50 ms) and a naturalistic movie, `object_frames`
/// (if any) of a naturalistic movie with a moving object, and
/// `reversal.0` frames (if any) of a texture or lines (`reversal.1`) that reverse their motion
/// now and then (the reversal cell is told apart from a motion detector only by such movies).
///
/// The flicker's contrast is low (s.d. [`FLICKER_SD`]): measured with onnxruntime on the planted
/// sensor (`scripts/planted_response_statistics.py` and a second draw), flicker of s.d. 0.35
/// now and then drives all the reversal cell's direction-selective pathways over threshold at
/// once (its maximum was 6.4 in one 1,500-frame sample, 161 in another), and such rare bursts
/// dominate any rate loss; at s.d. 0.12 only the omitted-flash cell responds (s.d. 0.70), which
/// is what the flicker is for.
fn dataset(
    planted: &Model,
    (frames, object_frames, object_motion): (usize, usize, ObjectMotion),
    reversal: (usize, ReversalImage, f64),
    seed: u64,
) -> Result<Vec<(Array3<f32>, Array2<f32>)>> {
    let (reversal_frames, image, full) = reversal;
    let sweeps = |frames, height, width, seed| sweeping_bars(frames, height, width, seed, full);
    let mut movies = vec![
        binary_noise(frames, SIZE, SIZE, 2, 1.0, seed),
        full_field_flicker(frames, SIZE, SIZE, FLICKER_SD, 5, seed + 1),
        naturalistic(frames, SIZE, SIZE, seed + 2),
    ];
    // Its own seed stream, like the reversing movies'.
    let object_seed = seed.wrapping_add(1 << 33);
    let (drift, jitter) = match object_motion {
        ObjectMotion::Drift => (object_frames, 0),
        ObjectMotion::Jitter => (0, object_frames),
        ObjectMotion::Both => (object_frames - object_frames / 2, object_frames / 2),
    };
    if drift > 0 {
        movies.push(scene_with_object(drift.max(LAGS + 1), SIZE, SIZE, object_seed));
    }
    if jitter > 0 {
        movies.push(jittering_scene_with_object(jitter.max(LAGS + 1), SIZE, SIZE, object_seed + 1));
    }
    // Several short reversing movies, each with its own image, rather than one long one: how
    // often the reversal cell is driven depends on the image and on the axis of its motion
    // (which a reversal keeps), so one long movie swings from no event to many between draws
    // (numpy replica, 300 lines, 500 frames: above 1 in 0 % to 12.6 % of frames over 8 seeds).
    let make = |k: usize| -> &dyn Fn(usize, usize, usize, u64) -> Array3<f32> {
        match image {
            ReversalImage::Pink => &reversing_texture,
            ReversalImage::Lines => &reversing_lines,
            ReversalImage::Bars => &reversing_bars,
            ReversalImage::LoneBars => &reversing_lone_bars,
            ReversalImage::MixedBars if k % 2 == 0 => &reversing_bars,
            ReversalImage::MixedBars => &reversing_lone_bars,
            ReversalImage::SteadyBars if k % 2 == 0 => &steady_bars,
            ReversalImage::SteadyBars => &steady_lone_bars,
            ReversalImage::VariedBars if k % 3 == 0 => &reversing_bars,
            ReversalImage::VariedBars if k % 3 == 1 => &steady_bars,
            ReversalImage::VariedBars => &steady_lone_bars,
            ReversalImage::Checkers => &reversing_checkers,
            ReversalImage::Sweeps => &sweeps,
            ReversalImage::SweepsAndBars if k % 2 == 0 => &sweeps,
            ReversalImage::SweepsAndBars => &reversing_bars,
        }
    };
    for k in 0..reversal_frames.div_ceil(REVERSAL_CHUNK) {
        // Their own seed stream: seed + 3 is the next epoch's noise seed.
        let frames = REVERSAL_CHUNK.min(reversal_frames - k * REVERSAL_CHUNK).max(LAGS + 1);
        movies.push(make(k)(frames, SIZE, SIZE, seed.wrapping_add(1 << 32).wrapping_add((k as u64) << 40)));
    }
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
/// 1 / its mean rate for the Poisson deviance (which grows with the rate), 1 / the variance of
/// its square-root rate for the squared error of square roots, 1 / the variance of its log rate
/// for the squared error of logs. Either way every cell counts about equally, whatever its
/// firing rate.
fn cell_weights(loss: Loss, data: &[(Array3<f32>, Array2<f32>)]) -> Vec<f32> {
    (0..CELLS)
        .map(|c| {
            let scale = match loss {
                Loss::WeightedMse => moments(cell_rates(data, c)).1,
                Loss::Poisson => moments(cell_rates(data, c)).0,
                Loss::RootMse => moments(cell_rates(data, c).map(|v| v.max(0.0).sqrt())).1,
                Loss::LogMse => moments(cell_rates(data, c).map(|v| (v.max(0.0) as f64 + LOG_OFFSET).ln() as f32)).1,
            };
            (1.0 / scale.max(1e-6)) as f32
        })
        .collect()
}

/// Cell `c`'s rates over all of `data`.
fn cell_rates(data: &[(Array3<f32>, Array2<f32>)], c: usize) -> impl Iterator<Item = f32> + '_ {
    data.iter().flat_map(move |(_, r)| r.column(c).to_vec())
}

/// Each cell's mean rate and variance over all of `data`.
fn cell_moments(data: &[(Array3<f32>, Array2<f32>)]) -> Vec<(f64, f64)> {
    (0..CELLS).map(|c| moments(cell_rates(data, c))).collect()
}

/// Mean and (population) variance of `values`, accumulated in f64.
fn moments(values: impl IntoIterator<Item = f32>) -> (f64, f64) {
    let v: Vec<f64> = values.into_iter().map(f64::from).collect();
    let n = v.len().max(1) as f64;
    let mean = v.iter().sum::<f64>() / n;
    (mean, v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n)
}

/// `n` windows drawn at random from `data` (all movie kinds), as one model input.
fn sample_windows(data: &[(Array3<f32>, Array2<f32>)], n: usize, rng: &mut ChaCha8Rng) -> Result<Tensor> {
    let per = n.div_ceil(data.len().max(1));
    let parts: Vec<_> = data
        .iter()
        .map(|(m, _)| {
            let ends: Vec<usize> = (0..per).map(|_| rng.random_range(LAGS - 1..m.shape()[0].max(LAGS))).collect();
            windows_at(m, LAGS, &ends)
        })
        .collect();
    let views: Vec<_> = parts.iter().map(|p| p.view()).collect();
    concatenate(Axis(0), &views).map(|a| a.into_dyn()).map_err(|e| crate::Error::Usage(format!("fit: {e}")))
}

/// Pearson correlation of the student's and the teacher's rates on `data`, per cell: pooled over
/// all movies, and for each kind alone (`[kind][cell]`; see [`dataset`]; the first `singles`
/// movies are one kind each, the rest one kind).
fn correlations(
    student: &Model,
    data: &[(Array3<f32>, Array2<f32>)],
    singles: usize,
) -> Result<(Vec<f64>, Vec<Vec<f64>>)> {
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
    // The first `singles` movies (noise, flicker, scenes, scene with object) alone; the short
    // reversing movies after them pooled as one kind.
    let mut kinds: Vec<Vec<usize>> = (0..data.len().min(singles)).map(|i| vec![i]).collect();
    if data.len() > singles {
        kinds.push((singles..data.len()).collect());
    }
    let each = kinds.iter().map(|k| (0..CELLS).map(|c| pairs(k, c)).collect()).collect();
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

/// Gradient clipping against bursts: a batch whose gradient norm exceeds `factor` times
/// the running mean of recent (clipped) norms is scaled down to that bound (norm clipping:
/// Pascanu, Mikolov & Bengio, ICML 2013; the adaptive bound is ours). Adam alone turns one
/// gradient 100 times the usual into a step up to about 30 times its step size (its second
/// moment follows with weight 0.001), and the reversal cell's rare bursts give such gradients:
/// without clipping they wrecked the features the other cells had begun to learn.
/// Entries are clipped in groups (`group(factor, flat index)` in [`Clip::apply`]), each with its
/// own bound: one group when cells share channels, one per cell when they do not.
struct Clip {
    /// Running mean of each group's clipped norms (0 before the first batch).
    mean: Vec<f64>,
    /// Bound, in running means (infinite: no clipping).
    factor: f64,
}

impl Clip {
    /// Fresh state for `groups` groups, bounding norms at `factor` running means (0 or less: no
    /// clipping).
    fn new(groups: usize, factor: f64) -> Clip {
        Clip { mean: vec![0.0; groups], factor: if factor > 0.0 { factor } else { f64::INFINITY } }
    }

    /// Clip `grads` in place, group by group.
    fn apply(&mut self, grads: &mut [Tensor], group: &dyn Fn(usize, usize) -> usize) {
        let mut squares = vec![0.0f64; self.mean.len()];
        for (f, g) in grads.iter().enumerate() {
            for (i, &v) in g.iter().enumerate() {
                squares[group(f, i)] += (v as f64).powi(2);
            }
        }
        let mut scale = vec![1.0f32; self.mean.len()];
        for (k, (mean, sq)) in self.mean.iter_mut().zip(&squares).enumerate() {
            let norm = sq.sqrt();
            if !(norm > 0.0 && norm.is_finite()) {
                continue;
            }
            let bound = if *mean > 0.0 { self.factor * *mean } else { norm };
            if norm > bound {
                scale[k] = (bound / norm) as f32;
            }
            let kept = norm.min(bound);
            *mean = if *mean > 0.0 { 0.98 * *mean + 0.02 * kept } else { kept };
        }
        if scale.iter().any(|&k| k != 1.0) {
            for (f, g) in grads.iter_mut().enumerate() {
                g.iter_mut().enumerate().for_each(|(i, v)| *v *= scale[group(f, i)]);
            }
        }
    }
}

/// One epoch's figures, passed to the fit's progress callback.
#[derive(Debug, Clone)]
pub struct Epoch {
    /// Epoch number, from 1.
    pub number: usize,
    /// Which restart this epoch trained (from 0), while restarts train; `None` after.
    pub restart: Option<usize>,
    /// Mean weighted training loss.
    pub loss: f64,
    /// The same per cell.
    pub cell_loss: Vec<f64>,
    /// Held-out correlation per cell after the epoch.
    pub heldout_correlation: Vec<f64>,
    /// The same for each held-out movie kind alone (binary noise, flicker, naturalistic, scene
    /// with object, reversing movie: always held out, whether or not they are trained on).
    pub heldout_by_kind: Vec<Vec<f64>>,
    /// The model after this epoch (as shipped), so a fit stopped early leaves its latest model.
    pub model: tract_onnx::pb::ModelProto,
    /// Dead channels revived after this epoch in hidden layers 1 and 2 (see
    /// [`FitSettings::revive`]).
    pub revived: (usize, usize),
}

/// Movies with the planted sensor's rates on them `[frames, cells]`.
type Movies = Vec<(Array3<f32>, Array2<f32>)>;

/// One fit in progress: the student, its training graph and its optimiser's state.
struct Run {
    student: Student,
    model: Model,
    ids: Vec<crate::engine::ValueId>,
    adam: Adam,
    clip: Clip,
    rng: ChaCha8Rng,
    /// Seed of the training movies.
    seed: u64,
    /// The latest draw of training movies and its key (seed, reversing frames).
    movies: Option<((u64, usize), Movies)>,
    /// Hidden channels revived after the latest epoch, in layers 1 and 2.
    revived: (usize, usize),
    /// The running mean of the factors over the tail's steps and its count (see
    /// [`FitSettings::average`]).
    average: Option<(Vec<Tensor>, usize)>,
}

impl Run {
    /// A fresh student from `seed`, initialised on the calibration sample.
    fn start(s: &FitSettings, seed: u64, calibration: &[(Array3<f32>, Array2<f32>)]) -> Result<Run> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let means: Vec<f32> = cell_moments(calibration).iter().map(|&(m, _)| m as f32).collect();
        let mut student = Student::init(s, &means, &mut rng);
        if s.planted_first_layer {
            student.plant_first_layer()?;
        }
        student.scale_to_data(&sample_windows(calibration, 96, &mut rng)?)?;
        Run::resume(s, student, rng, seed)
    }

    /// Train `student` on from here, with a fresh optimiser.
    fn resume(s: &FitSettings, student: Student, rng: ChaCha8Rng, seed: u64) -> Result<Run> {
        let model = Model::from_proto(student.training_proto(), Path::new("fitted.onnx"), &LoadOptions::default())?;
        let ids: Vec<_> = TRAINED
            .iter()
            .map(|n| model.graph.find(n).ok_or_else(|| crate::Error::Usage(format!("fit: no parameter '{n}'"))))
            .collect::<Result<_>>()?;
        let shapes: Vec<Vec<usize>> = student.factors.iter().map(|t| t.shape().to_vec()).collect();
        let adam = Adam::new(&shapes, s.lr);
        let clip = Clip::new(if s.separate_cells { CELLS } else { 1 }, s.clip);
        Ok(Run { student, model, ids, adam, clip, rng, seed, movies: None, revived: (0, 0), average: None })
    }

    /// Write the student's factors into the training graph's parameters.
    fn sync(&mut self) -> Result<()> {
        for (&id, t) in self.ids.iter().zip(self.student.trained()) {
            let slot = self
                .model
                .graph
                .param_mut(id)
                .ok_or_else(|| crate::Error::Usage("fit: a student parameter is not a graph parameter".into()))?;
            *slot = t;
        }
        Ok(())
    }

    /// Train epoch `epoch` (from 0) on fresh movies; returns the mean loss, overall and per cell.
    fn epoch(&mut self, s: &FitSettings, teacher: &Model, epoch: usize, weights: &[f32]) -> Result<(f64, Vec<f64>)> {
        let tail = epoch as f64 >= s.decay_after * s.epochs as f64;
        if tail {
            self.adam.lr = s.lr / 5.0;
        }
        let reversal = if epoch as f64 >= s.reversal_from * s.epochs as f64 { s.reversal_frames } else { 0 };
        let key = (movie_seed(self.seed, epoch, s.movies_every), reversal);
        let train = match self.movies.take() {
            Some((k, movies)) if k == key => movies,
            _ => dataset(
                teacher,
                (s.train_frames, s.object_frames, s.object_motion),
                (reversal, s.reversal_image, s.full_contrast_sweeps),
                key.0,
            )?,
        };
        let mut windows: Vec<(usize, usize)> =
            train.iter().enumerate().flat_map(|(i, (m, _))| (LAGS - 1..m.shape()[0]).map(move |t| (i, t))).collect();
        windows.shuffle(&mut self.rng);
        let batches = if s.stratify {
            stratified(&windows, &train, weights, s.batch, &mut self.rng)
        } else {
            windows.chunks(s.batch.max(1)).map(|b| b.to_vec()).collect()
        };
        let (mut total, mut cells, mut steps) = (0.0, vec![0.0; CELLS], 0);
        for batch in &batches {
            crate::interrupt::check()?;
            let (loss, per_cell, full) = split_gradients(&self.model, &self.ids, &train, batch, (s.loss, weights))?;
            let mut grads = self.student.chain(full);
            self.student.penalise_groups(&mut grads, s.group_sparsity);
            self.student.penalise_readout(&mut grads, s.readout_sparsity);
            self.student.penalise_roughness(&mut grads, s.smoothness);
            self.student.mask(&mut grads);
            self.student.freeze(&mut grads);
            let student = &self.student;
            self.clip.apply(&mut grads, &|f, i| student.group(f, i));
            {
                let mut refs: Vec<&mut Tensor> = self.student.factors.iter_mut().collect();
                self.adam.step(&mut refs, &grads);
            }
            self.student.project();
            self.sync()?;
            if s.average && tail {
                self.accumulate();
            }
            total += loss;
            cells.iter_mut().zip(per_cell).for_each(|(a, v)| *a += v);
            steps += 1;
        }
        if s.revive {
            // Its own draw, so reviving leaves the batch order of later epochs as it was.
            let mut rng = ChaCha8Rng::seed_from_u64(key.0 ^ REVIVE_SEED ^ epoch as u64);
            let x = sample_windows(&train, REVIVE_WINDOWS, &mut rng)?;
            self.revived = self.student.revive(&x, &mut rng)?;
            self.sync()?;
            if self.revived != (0, 0) {
                // A revived channel's fresh weights do not belong in a mean with its dead ones.
                self.average = None;
            }
        }
        self.movies = Some((key, train));
        let n = steps.max(1) as f64;
        Ok((total / n, cells.iter().map(|c| c / n).collect()))
    }

    /// Add the present factors to the running mean of the tail (see [`FitSettings::average`]).
    fn accumulate(&mut self) {
        match &mut self.average {
            None => self.average = Some((self.student.factors.clone(), 1)),
            Some((mean, n)) => {
                *n += 1;
                let k = 1.0 / (*n).min(AVERAGE_STEPS) as f32;
                for (m, f) in mean.iter_mut().zip(&self.student.factors) {
                    m.zip_mut_with(f, |m, &f| *m += (f - *m) * k);
                }
            }
        }
    }

    /// The student the fit stands at: the tail's mean when averaging has begun, else the
    /// present one.
    fn current(&self) -> Student {
        match &self.average {
            Some((mean, _)) => Student { factors: mean.clone(), ..self.student.without_factors() },
            None => self.student.clone(),
        }
    }
}

/// Steps after which the tail's mean (see [`FitSettings::average`]) turns from a plain mean into
/// an exponential one that forgets with this time constant (about one epoch of a fit with 8,000
/// training windows and batches of 16).
const AVERAGE_STEPS: usize = 500;

/// Windows on which [`FitSettings::revive`] looks for dead channels: drawn from every movie of
/// the epoch, they give a unit that answers a tenth of the frames many chances to show it.
const REVIVE_WINDOWS: usize = 192;

/// Mixed into the seed of the windows that [`FitSettings::revive`] looks at.
const REVIVE_SEED: u64 = 0x7265_7669_7665;

/// Seed of the training movies of epoch `epoch` (from 0) of a fit seeded `seed` that draws new
/// movies every `every` epochs (with `every` = 1, the seeds of every earlier fit).
fn movie_seed(seed: u64, epoch: usize, every: usize) -> u64 {
    seed.wrapping_mul(1000) + 10 + 3 * (epoch / every.max(1)) as u64
}

/// `windows` (movie, frame) dealt into batches of about `batch` that each hold an equal share
/// of the strongest responses: ranked by their largest weighted rate over the trained cells
/// (weight > 0), dealt round-robin, each batch shuffled. Every window lands in exactly one batch.
fn stratified(
    windows: &[(usize, usize)],
    data: &[(Array3<f32>, Array2<f32>)],
    weights: &[f32],
    batch: usize,
    rng: &mut ChaCha8Rng,
) -> Vec<Vec<(usize, usize)>> {
    let score = |&(i, t): &(usize, usize)| {
        let r = data[i].1.row(t);
        weights.iter().zip(r.iter()).filter(|(w, _)| **w > 0.0).map(|(w, v)| w * v).fold(f32::MIN, f32::max)
    };
    let mut ranked: Vec<((usize, usize), f32)> = windows.iter().map(|w| (*w, score(w))).collect();
    ranked.sort_by(|a, b| b.1.total_cmp(&a.1));
    let batches = windows.len().div_ceil(batch.max(1));
    let mut dealt: Vec<Vec<(usize, usize)>> = vec![Vec::new(); batches];
    for (k, (w, _)) in ranked.into_iter().enumerate() {
        dealt[k % batches].push(w);
    }
    dealt.iter_mut().for_each(|b| b.shuffle(rng));
    dealt.shuffle(rng);
    dealt
}

/// For each cell, the candidate whose held-out correlation for that cell is highest (`r[k][c]`:
/// candidate `k`, cell `c`; NaN counts as lowest); with shared channels the candidate with the
/// highest mean over cells, for every cell.
fn best_candidates(r: &[Vec<f64>], separate: bool) -> Vec<usize> {
    let score = |v: f64| if v.is_nan() { f64::NEG_INFINITY } else { v };
    let best = |key: &dyn Fn(usize) -> f64| (0..r.len()).fold(0, |b, k| if key(k) > key(b) { k } else { b });
    if separate {
        (0..CELLS).map(|c| best(&|k| score(r[k][c]))).collect()
    } else {
        let k = best(&|k| r[k].iter().map(|&v| score(v)).sum::<f64>());
        vec![k; CELLS]
    }
}

/// Which candidate each cell keeps (see [`best_candidates`]); when only cell `only` is
/// trained, the candidate best for that cell, for every cell.
fn choose(r: &[Vec<f64>], separate: bool, only: Option<usize>) -> Vec<usize> {
    match only {
        Some(k) => vec![best_candidates(r, true)[k]; CELLS],
        None => best_candidates(r, separate),
    }
}

/// Fit the CNN; `progress` is called after each epoch.
/// Every epoch trains on fresh movies (the planted model gives unlimited data); the held-out
/// movies are never trained on. With restarts, `restarts` students from consecutive seeds train
/// `restart_epochs` epochs each; each cell then keeps the channels of the student that predicts
/// it best on the held-out movies (validation, never the protocols), and the assembled student
/// trains on for the remaining epochs. Returns the model and the report.
pub fn fit(s: &FitSettings, progress: &dyn Fn(&Epoch)) -> Result<(tract_onnx::pb::ModelProto, FitReport)> {
    let (student, report) = fit_student(s, progress)?;
    Ok((student.proto(), report))
}

/// [`fit`], returning the student itself (so a recipe can assemble cells fitted apart).
pub(super) fn fit_student(s: &FitSettings, progress: &dyn Fn(&Epoch)) -> Result<(Student, FitReport)> {
    let t0 = Instant::now();
    if s.separate_cells && (s.channels.0 % CELLS != 0 || s.channels.1 % CELLS != 0) {
        return Err(crate::Error::Usage(format!(
            "fit: with separate cells each of the {CELLS} cells gets an equal share of both layers' channels, \
             so both channel counts must be multiples of {CELLS} (got {},{}; e.g. 18,9)",
            s.channels.0, s.channels.1
        )));
    }
    if let Some(k) = s.only_cell.filter(|&k| k >= CELLS) {
        return Err(crate::Error::Usage(format!(
            "fit: --cell {k} names no cell (the sensor has cells 0 to {})",
            CELLS - 1
        )));
    }
    if s.temporal_basis == 1 || s.temporal_basis > LAGS {
        return Err(crate::Error::Usage(format!(
            "fit: --temporal-basis {} must be 0 (free lags) or 2 to {LAGS} raised cosines (one per lag at most)",
            s.temporal_basis
        )));
    }
    let teacher = super::planted_model()?;
    let h = s.heldout_frames;
    let heldout = dataset(
        &teacher,
        (h, h, ObjectMotion::Drift),
        (h, s.reversal_image, s.full_contrast_sweeps),
        s.seed.wrapping_mul(1000) + 500,
    )?;
    // Calibrated on what will be trained on (without the texture, a fit reproduces the runs made
    // before it existed, e.g. run F).
    let calibration_reversal = if s.reversal_frames > 0 { s.reversal_frames.max(1000) } else { 0 };
    let calibration = dataset(
        &teacher,
        (s.train_frames.max(4000), if s.object_frames > 0 { s.object_frames.max(1000) } else { 0 }, s.object_motion),
        (calibration_reversal, s.reversal_image, s.full_contrast_sweeps),
        s.seed.wrapping_mul(1000) + 700,
    )?;
    let mut weights = cell_weights(s.loss, &calibration);
    if let Some(k) = s.only_cell {
        weights.iter_mut().enumerate().filter(|&(c, _)| c != k).for_each(|(_, w)| *w = 0.0);
    }
    let (mut epoch_loss, mut epoch_cell_loss, mut heldout_correlation) = (Vec::new(), Vec::new(), vec![0.0; CELLS]);
    let mut report = |run: &Run, restart: Option<usize>, epoch: usize, (loss, cells): (f64, Vec<f64>)| {
        let student = run.current();
        // The training graph holds the present weights; the tail's mean needs its own graph.
        let averaged;
        let model = if run.average.is_some() {
            averaged = Model::from_proto(student.training_proto(), Path::new("fitted.onnx"), &LoadOptions::default())?;
            &averaged
        } else {
            &run.model
        };
        let (pooled, by_kind) = correlations(model, &heldout, HELDOUT_SINGLE_KINDS)?;
        progress(&Epoch {
            number: epoch + 1,
            restart,
            loss,
            cell_loss: cells.clone(),
            heldout_correlation: pooled.clone(),
            heldout_by_kind: by_kind,
            model: student.proto(),
            revived: run.revived,
        });
        if restart.is_none() {
            epoch_loss.push(loss);
            epoch_cell_loss.push(cells);
        }
        Ok::<_, crate::Error>(pooled)
    };
    let (mut run, chosen, begin) = if s.restarts > 1 {
        let mut candidates = Vec::new();
        let mut scores = Vec::new();
        for k in 0..s.restarts {
            let mut run = Run::start(s, s.seed + k as u64, &calibration)?;
            let mut r = vec![f64::NAN; CELLS];
            for epoch in 0..s.restart_epochs {
                let losses = run.epoch(s, &teacher, epoch, &weights)?;
                r = report(&run, Some(k), epoch, losses)?;
            }
            candidates.push(run);
            scores.push(r);
        }
        let chosen = choose(&scores, s.separate_cells, s.only_cell);
        let mut student = candidates[chosen[0]].student.clone();
        for (cell, &k) in chosen.iter().enumerate() {
            student.take_cell(&candidates[k].student, cell);
        }
        let run0 = candidates.swap_remove(0);
        (Run::resume(s, student, run0.rng, s.seed)?, chosen, s.restart_epochs)
    } else {
        (Run::start(s, s.seed, &calibration)?, vec![0; CELLS], 0)
    };
    for epoch in begin..s.epochs {
        let losses = run.epoch(s, &teacher, epoch, &weights)?;
        heldout_correlation = report(&run, None, epoch, losses)?;
    }
    Ok((
        run.current(),
        FitReport {
            heldout_correlation,
            epoch_loss,
            epoch_cell_loss,
            chosen_restart: chosen,
            seconds: t0.elapsed().as_secs_f64(),
        },
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_fit_of_one_cell_keeps_the_restart_best_for_that_cell_and_refuses_a_missing_cell() {
        let r = vec![vec![0.9, 0.1, 0.5], vec![0.2, 0.7, 0.6]];
        assert_eq!(choose(&r, false, Some(1)), vec![1, 1, 1]);
        assert_eq!(choose(&r, false, Some(0)), vec![0, 0, 0]);
        assert_eq!(choose(&r, true, None), vec![0, 1, 1]);
        let e = fit(&FitSettings { only_cell: Some(3), ..Default::default() }, &|_| {}).err().unwrap().to_string();
        assert!(e.contains("--cell 3 names no cell") && e.contains("cells 0 to 2"), "{e}");
    }

    #[test]
    fn the_shipped_graph_computes_what_the_training_graph_computes() {
        // The shipped model's full Conv and Gemm weights are the sums of products of the
        // factors the fit trains: both graphs must give the same rates.
        // Both hidden nonlinearities, and the shipped graph names the chosen one.
        for hidden in [Hidden::Softplus, Hidden::Relu] {
            let s = FitSettings { channels: (3, 2), hidden, ..Default::default() };
            let student = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(3));
            let load = |p| Model::from_proto(p, Path::new("student.onnx"), &LoadOptions::default()).unwrap();
            let proto = student.proto();
            let ops: Vec<&str> = proto.graph.as_ref().unwrap().node.iter().map(|n| n.op_type.as_str()).collect();
            assert_eq!(ops.iter().filter(|&&o| o == hidden.op()).count(), if hidden == Hidden::Relu { 2 } else { 3 });
            let (training, shipped) = (load(student.training_proto()), load(proto));
            let movie = naturalistic(LAGS + 4, SIZE, SIZE, 9);
            let (a, b) = (rates(&training, &movie, &|_| {}).unwrap(), rates(&shipped, &movie, &|_| {}).unwrap());
            let worst = a.iter().zip(&b).map(|(x, y)| (x - y).abs()).fold(0.0f32, f32::max);
            assert!(worst < 1e-4, "{hidden:?}: largest difference {worst}");
        }
    }

    #[test]
    fn factor_gradients_match_central_differences() {
        // Every factor the fit trains (through the grouped first layer and the readout's product)
        // against central differences of the loss, a few entries of each.
        let s = FitSettings { channels: (2, 2), ..Default::default() };
        let mut rng = ChaCha8Rng::seed_from_u64(4);
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        let movie = binary_noise(LAGS + 3, SIZE, SIZE, 2, 1.0, 6);
        let target = Array2::from_shape_fn((4, CELLS), |(t, c)| 0.3 + 0.4 * ((t + c) % 3) as f32);
        let x = windows_at(&movie, LAGS, &[LAGS - 1, LAGS, LAGS + 1, LAGS + 2]);
        let loss_and_grads = |st: &Student| {
            let model = Model::from_proto(st.training_proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
            let ids: Vec<_> = TRAINED.iter().map(|n| model.graph.find(n).unwrap()).collect();
            let input = model.binding.to_model_input(x.clone());
            let (l, _, g) = batch_gradients(&model.graph, &ids, (input, &target), Loss::Poisson, &[1.0; 3]).unwrap();
            (l, st.chain(g))
        };
        let (_, grads) = loss_and_grads(&student);
        for (f, grad) in grads.iter().enumerate() {
            let n = student.factors[f].len();
            for k in [0, n / 3, n - 1] {
                let h = 1e-2f32;
                let v = student.factors[f].as_slice().unwrap()[k];
                student.factors[f].as_slice_mut().unwrap()[k] = v + h;
                let plus = loss_and_grads(&student).0;
                student.factors[f].as_slice_mut().unwrap()[k] = v - h;
                let minus = loss_and_grads(&student).0;
                student.factors[f].as_slice_mut().unwrap()[k] = v;
                let fd = (plus - minus) / (2.0 * h as f64);
                let an = grad.as_slice().unwrap()[k] as f64;
                assert!((fd - an).abs() < 2e-3 + 2e-2 * an.abs(), "factor {f} entry {k}: fd {fd} analytic {an}");
            }
        }
    }

    #[test]
    fn data_dependent_init_gives_each_channel_the_set_spread() {
        // Centred at the bend, and one s.d. below it.
        for start in [0.0, 1.0] {
            let s = FitSettings { channels: (3, 2), sparse_start: start, ..Default::default() };
            let mut rng = ChaCha8Rng::seed_from_u64(8);
            let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
            let movie = full_field_flicker(LAGS + 30, SIZE, SIZE, FLICKER_SD, 5, 3);
            let data = vec![(movie, Array2::zeros((LAGS + 30, CELLS)))];
            let x = sample_windows(&data, 24, &mut rng).unwrap();
            student.scale_to_data(&x).unwrap();
            let model =
                Model::from_proto(student.training_proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
            let tape = model.graph.forward(x, &[]).unwrap();
            for layer in ["conv1", "conv2"] {
                let v = tape.value(model.graph.find(layer).unwrap());
                for c in 0..v.shape()[1] {
                    let (mean, var) = moments(v.index_axis(Axis(1), c).iter().copied());
                    let sd = var.sqrt();
                    // conv2 is scaled after conv1, so both hold exactly on these windows.
                    let want = -start * INIT_SD;
                    assert!(
                        (mean - want).abs() < 1e-3 && (sd - INIT_SD).abs() < 1e-3,
                        "{layer}:{c}: mean {mean} sd {sd}"
                    );
                }
            }
        }
    }

    #[test]
    fn clipping_bounds_a_burst_and_leaves_usual_gradients_alone() {
        let mut clip = Clip::new(1, 3.0);
        let g = |v: f32| vec![Tensor::from_elem(IxDyn(&[4]), v)];
        for _ in 0..20 {
            let mut usual = g(1.0);
            clip.apply(&mut usual, &|_, _| 0);
            assert_eq!(usual[0][[0]], 1.0);
        }
        let mut burst = g(100.0);
        clip.apply(&mut burst, &|_, _| 0);
        let norm = (4.0 * burst[0][[0]].powi(2)).sqrt();
        assert!((norm - 3.0 * 2.0).abs() < 1e-3, "clipped norm {norm}");
        // Factor 0: no clipping.
        let mut off = Clip::new(1, 0.0);
        for _ in 0..20 {
            off.apply(&mut g(1.0), &|_, _| 0);
        }
        let mut burst = g(100.0);
        off.apply(&mut burst, &|_, _| 0);
        assert_eq!(burst[0][[0]], 100.0);
    }

    #[test]
    fn clipping_in_groups_bounds_only_the_group_that_bursts() {
        // Entries 0-1 are group 0, entries 2-3 group 1.
        let mut clip = Clip::new(2, 3.0);
        let group = |_: usize, i: usize| i / 2;
        for _ in 0..20 {
            clip.apply(&mut [Tensor::from_elem(IxDyn(&[4]), 1.0)], &group);
        }
        let mut g = vec![Tensor::from_shape_vec(IxDyn(&[4]), vec![1.0, 1.0, 100.0, 100.0]).unwrap()];
        clip.apply(&mut g, &group);
        assert_eq!((g[0][[0]], g[0][[1]]), (1.0, 1.0));
        let norm = (2.0 * g[0][[2]].powi(2)).sqrt();
        assert!((norm - 3.0 * 2f32.sqrt()).abs() < 1e-3, "clipped norm {norm}");
    }

    #[test]
    fn varied_bars_deal_short_steady_and_lone_steady_bars_by_turns() {
        let seed = 11;
        let data = dataset(
            &crate::demo::planted_model().unwrap(),
            (LAGS + 1, 0, ObjectMotion::Drift),
            (3 * REVERSAL_CHUNK, ReversalImage::VariedBars, 0.0),
            seed,
        )
        .unwrap();
        // Noise, flicker and a scene come first, then the three reversing movies.
        assert_eq!(data.len(), 6);
        let own = |k: u64| seed.wrapping_add(1 << 32).wrapping_add(k << 40);
        let n = REVERSAL_CHUNK;
        assert_eq!(data[3].0, reversing_bars(n, SIZE, SIZE, own(0)));
        assert_eq!(data[4].0, steady_bars(n, SIZE, SIZE, own(1)));
        assert_eq!(data[5].0, steady_lone_bars(n, SIZE, SIZE, own(2)));
        // Each with the planted sensor's rates.
        assert!(data.iter().all(|(m, r)| r.nrows() == m.shape()[0] && r.ncols() == CELLS));
    }

    #[test]
    fn a_positive_readout_starts_and_stays_non_negative() {
        let s = FitSettings { channels: (3, 2), positive_readout: true, ..Default::default() };
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(4));
        assert!(student.factors[5].iter().all(|&v| v >= READOUT_FLOOR));
        assert!(student.factors[6].iter().all(|&v| v >= READOUT_FLOOR));
        // An optimiser step that pushes weights below the floor is projected back to it; other
        // factors keep their signs.
        let kept = student.factors[6][[0, 1]];
        student.factors[5][[1, 3]] = -0.5;
        student.factors[6][[2, 0]] = -0.2;
        student.factors[3][[0, 0, 0, 0]] = -0.7;
        student.project();
        assert_eq!((student.factors[5][[1, 3]], student.factors[6][[2, 0]]), (READOUT_FLOOR, READOUT_FLOOR));
        assert_eq!((student.factors[6][[0, 1]], student.factors[3][[0, 0, 0, 0]]), (kept, -0.7));
        // Scaled to data, the readout's input to the output softplus has the set spread and
        // starts at each cell's mean rate.
        let movie = naturalistic(LAGS + 30, SIZE, SIZE, 2);
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let x = sample_windows(&[(movie, Array2::zeros((LAGS + 30, CELLS)))], 24, &mut rng).unwrap();
        let mut scaled = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        scaled.scale_to_data(&x).unwrap();
        let v = scaled.value_of(&x, "readout").unwrap();
        for (c, rate) in [0.5f32, 1.0, 2.0].into_iter().enumerate() {
            let (mean, var) = moments(v.index_axis(Axis(1), c).iter().copied());
            assert!((mean - inverse_softplus(rate) as f64).abs() < 1e-3, "cell {c}: mean {mean}");
            assert!((var.sqrt() - READOUT_SD).abs() < 1e-3, "cell {c}: sd {}", var.sqrt());
        }
        assert!(scaled.factors[5].iter().chain(scaled.factors[6].iter()).all(|&v| v > 0.0));
        // With separate cells the features joining a cell to another's units stay zero.
        let separate = FitSettings { channels: (6, 3), separate_cells: true, ..s.clone() };
        let mut own = Student::init(&separate, &[0.5, 1.0, 2.0], &mut rng);
        own.factors[6].fill(-1.0);
        own.project();
        for (i, &w) in own.factors[6].indexed_iter() {
            assert_eq!(w, if i[0] == i[1] { READOUT_FLOOR } else { 0.0 }, "cell {}, unit {}", i[0], i[1]);
        }
        // Without the option nothing is projected.
        let free = Student::init(
            &FitSettings { positive_readout: false, ..s },
            &[0.5, 1.0, 2.0],
            &mut ChaCha8Rng::seed_from_u64(4),
        );
        assert!(free.factors[5].iter().any(|&v| v < 0.0));
    }

    #[test]
    fn reviving_dead_channels_leaves_the_output_alone_and_makes_them_answer() {
        let s = FitSettings { channels: (6, 3), separate_cells: true, hidden: Hidden::Relu, ..Default::default() };
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        let movie = naturalistic(LAGS + 30, SIZE, SIZE, 2);
        let data = vec![(movie.clone(), Array2::zeros((LAGS + 30, CELLS)))];
        let x = sample_windows(&data, 24, &mut rng).unwrap();
        student.scale_to_data(&x).unwrap();
        // Kill first-layer channel 3 (cell 1's) and second-layer channel 2 (cell 2's).
        student.factors[2][[3]] = -1e4;
        student.factors[4][[2]] = -1e4;
        let load = |st: &Student| Model::from_proto(st.proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
        let before = rates(&load(&student), &movie, &|_| {}).unwrap();
        let alive = student.clone();
        assert_eq!(student.revive(&x, &mut rng).unwrap(), (1, 1));
        let after = rates(&load(&student), &movie, &|_| {}).unwrap();
        let moved = before.iter().zip(after.iter()).map(|(a, b)| (a - b).abs()).fold(0.0, f32::max);
        assert!(moved < 1e-5, "reviving changed the rates by {moved}");
        for (layer, c) in [("layer1", 3), ("layer2", 2)] {
            let v = student.value_of(&x, layer).unwrap();
            let on = v.index_axis(Axis(1), c).iter().filter(|&&a| a > DEAD).count();
            assert!(on > v.index_axis(Axis(1), c).len() / 10, "{layer}:{c} answers {on} times");
        }
        // The live channels keep their incoming weights; the revived ones lose their outgoing
        // weights and, across cells, stay disconnected.
        assert_eq!(student.factors[1].index_axis(Axis(0), 2), alive.factors[1].index_axis(Axis(0), 2));
        assert_eq!(student.factors[3].index_axis(Axis(0), 0), alive.factors[3].index_axis(Axis(0), 0));
        assert!(student.factors[3].index_axis(Axis(1), 3).iter().all(|&w| w == 0.0));
        assert!(student.factors[6].index_axis(Axis(1), 2).iter().all(|&w| w == 0.0));
        assert!(student.factors[3].index_axis(Axis(0), 2).slice(ndarray::s![0..4, .., ..]).iter().all(|&w| w == 0.0));
        assert!(student.factors[3].index_axis(Axis(0), 2).iter().any(|&w| w != 0.0));
        // Nothing dead, nothing revived.
        assert_eq!(student.clone().revive(&x, &mut rng).unwrap(), (0, 0));
    }

    #[test]
    fn a_temporal_basis_keeps_every_temporal_factor_in_its_span() {
        let s = FitSettings { channels: (6, 3), hidden: Hidden::Relu, temporal_basis: 8, ..Default::default() };
        let p = crate::demo::temporal_basis::projector(8, LAGS);
        let outside = |st: &Student| {
            (0..st.factors[0].shape()[0])
                .map(|r| {
                    let f: Vec<f64> = st.factors[0].index_axis(Axis(0), r).iter().map(|&v| f64::from(v)).collect();
                    let norm = f.iter().map(|v| v * v).sum::<f64>().sqrt();
                    let off = (0..LAGS)
                        .map(|i| (p.row(i).iter().zip(&f).map(|(a, b)| a * b).sum::<f64>() - f[i]).powi(2))
                        .sum::<f64>();
                    off.sqrt() / norm
                })
                .fold(0.0, f64::max)
        };
        let mut rng = ChaCha8Rng::seed_from_u64(6);
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        assert!(outside(&student) < 1e-5, "at the start: {}", outside(&student));
        // Free lags start outside the span (a random filter keeps about 8 / 40 of its energy).
        let free = Student::init(&FitSettings { temporal_basis: 0, ..s.clone() }, &[0.5, 1.0, 2.0], &mut rng);
        assert!(outside(&free) > 0.5, "free lags: {}", outside(&free));
        // An optimiser step moves the lags anyhow; the projection after it brings them back.
        student.factors[0].iter_mut().enumerate().for_each(|(i, v)| *v += 0.05 * ((i * 7 % 11) as f32 - 5.0));
        assert!(outside(&student) > 0.1);
        student.project();
        assert!(outside(&student) < 1e-5, "after a step: {}", outside(&student));
        // A revived channel's fresh filter lies in the span too.
        let movie = naturalistic(LAGS + 30, SIZE, SIZE, 2);
        let x = sample_windows(&[(movie, Array2::zeros((LAGS + 30, CELLS)))], 24, &mut rng).unwrap();
        student.scale_to_data(&x).unwrap();
        student.factors[2][[1]] = -1e4;
        assert_eq!(student.revive(&x, &mut rng).unwrap().0, 1);
        assert!(outside(&student) < 1e-5, "after reviving: {}", outside(&student));
        // One cosine, or more than one per lag, is refused by name.
        for n in [1, LAGS + 1] {
            let e = fit(&FitSettings { temporal_basis: n, ..Default::default() }, &|_| {}).err().unwrap().to_string();
            assert!(e.contains(&format!("--temporal-basis {n}")) && e.contains("2 to 40"), "{e}");
        }
    }

    #[test]
    fn the_planted_first_layer_probe_holds_the_planted_pathways_fixed() {
        let s = FitSettings { channels: (6, 4), only_cell: Some(1), planted_first_layer: true, ..Default::default() };
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(2));
        student.plant_first_layer().unwrap();
        let full = student.conv1();
        for ch in 0..4 {
            // Rank 2 holds 98.5 % of each planted kernel's energy: r about 0.99.
            let planted: Vec<f64> = crate::demo::planted::kernel(4 + ch).iter().map(|&v| v as f64).collect();
            let held: Vec<f64> = full.index_axis(Axis(0), ch).iter().map(|&v| v as f64).collect();
            let r = correlation(&planted, &held);
            assert!(r > 0.99, "channel {ch}: r {r}");
            assert_eq!(student.factors[2][[ch]], -DS_THRESHOLD);
        }
        // Their gradients are zeroed; the other channels' are not.
        let mut grads: Vec<Tensor> = student.factors.iter().map(|f| f.mapv(|_| 1.0)).collect();
        student.freeze(&mut grads);
        assert!(grads[0].slice_axis(Axis(0), Slice::from(0..4 * RANK)).iter().all(|&g| g == 0.0));
        assert!(grads[1].slice_axis(Axis(0), Slice::from(0..4)).iter().all(|&g| g == 0.0));
        assert!(grads[1].slice_axis(Axis(0), Slice::from(4..6)).iter().all(|&g| g == 1.0));
        assert!(grads[3].iter().all(|&g| g == 1.0));
        // Only a one-cell fit with room for the four pathways takes them.
        let s = FitSettings { channels: (6, 3), separate_cells: true, ..Default::default() };
        let e = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(2)).plant_first_layer();
        assert!(e.unwrap_err().to_string().contains("--planted-first-layer"));
    }

    #[test]
    fn the_group_penalty_gradient_matches_central_differences_and_skips_zero_groups() {
        // The penalty weight * sum over (unit, channel) of |w_g|: its gradient against central
        // differences in f64, on a student with one group zeroed.
        let s = FitSettings { channels: (3, 2), kernels: (5, 3), ..Default::default() };
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(4));
        student.factors[3].index_axis_mut(Axis(0), 1).index_axis_mut(Axis(0), 2).fill(0.0);
        let weight = 0.3f32;
        let penalty = |w: &Tensor| -> f64 {
            let (units, channels) = (w.shape()[0], w.shape()[1]);
            (0..units * channels)
                .map(|i| {
                    let g = w.index_axis(Axis(0), i / channels);
                    g.index_axis(Axis(0), i % channels).iter().map(|&v| f64::from(v).powi(2)).sum::<f64>().sqrt()
                })
                .sum::<f64>()
                * f64::from(weight)
        };
        let mut grads: Vec<Tensor> = student.factors.iter().map(|f| f.mapv(|_| 0.0)).collect();
        student.penalise_groups(&mut grads, weight);
        let h = 1e-3f32;
        for (i, &g) in grads[3].iter().enumerate() {
            let (unit, channel) = (i / 27, i / 9 % 3);
            if unit == 1 && channel == 2 {
                assert_eq!(g, 0.0, "a zero group gets no gradient");
                continue;
            }
            let mut w = student.factors[3].clone();
            let v = w.as_slice_mut().unwrap();
            v[i] += h;
            let up = penalty(&w);
            w.as_slice_mut().unwrap()[i] -= 2.0 * h;
            let numeric = (up - penalty(&w)) / (2.0 * f64::from(h));
            assert!((numeric - f64::from(g)).abs() < 2e-3, "weight {i}: analytic {g}, numeric {numeric}");
        }
        // No weight, no change.
        let mut none: Vec<Tensor> = student.factors.iter().map(|f| f.mapv(|_| 0.0)).collect();
        student.penalise_groups(&mut none, 0.0);
        assert!(none[3].iter().all(|&g| g == 0.0));
    }

    #[test]
    fn the_readout_penalty_gradient_matches_central_differences() {
        // The penalty weight * sum over cells of |mask_c|_1 |features_c|_1 (the L1 norm of the
        // cell's dense readout): its gradient against central differences in f64, on a student
        // with one mask weight at zero (no gradient there: the subgradient 0).
        let s = FitSettings { channels: (3, 2), kernels: (5, 3), ..Default::default() };
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(4));
        student.factors[5][[1, 7]] = 0.0;
        let weight = 0.3f32;
        let penalty = |f: &[Tensor]| -> f64 {
            let l1 = |t: &Tensor, c: usize| t.index_axis(Axis(0), c).iter().map(|v| f64::from(v.abs())).sum::<f64>();
            (0..CELLS).map(|c| l1(&f[5], c) * l1(&f[6], c)).sum::<f64>() * f64::from(weight)
        };
        // The dense readout's L1 norm is the same number.
        let dense: f64 = student.readout().iter().map(|v| f64::from(v.abs())).sum();
        assert!((dense * f64::from(weight) - penalty(&student.factors)).abs() < 1e-4);
        let mut grads: Vec<Tensor> = student.factors.iter().map(|f| f.mapv(|_| 0.0)).collect();
        student.penalise_readout(&mut grads, weight);
        let h = 1e-4f32;
        for factor in [5, 6] {
            for (i, &g) in grads[factor].iter().enumerate() {
                let w = student.factors[factor].as_slice().unwrap()[i];
                if w == 0.0 {
                    assert_eq!(g, 0.0, "a zero weight gets no gradient");
                    continue;
                }
                if w.abs() <= h {
                    // Central differences straddle the kink of |w| at 0.
                    continue;
                }
                let mut f = student.factors.clone();
                f[factor].as_slice_mut().unwrap()[i] += h;
                let up = penalty(&f);
                f[factor].as_slice_mut().unwrap()[i] -= 2.0 * h;
                let numeric = (up - penalty(&f)) / (2.0 * f64::from(h));
                assert!(
                    (numeric - f64::from(g)).abs() < 2e-3,
                    "factor {factor} weight {i}: analytic {g}, numeric {numeric}"
                );
            }
        }
        assert!(grads[5].iter().chain(grads[6].iter()).any(|&g| g != 0.0));
        let mut none: Vec<Tensor> = student.factors.iter().map(|f| f.mapv(|_| 0.0)).collect();
        student.penalise_readout(&mut none, 0.0);
        assert!(none.iter().all(|t| t.iter().all(|&g| g == 0.0)));
    }

    #[test]
    fn averaging_ships_the_mean_of_the_tails_steps() {
        let s = FitSettings { channels: (2, 2), average: true, ..Default::default() };
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        let mut run = Run::resume(&s, student, rng, 1).unwrap();
        // Before the tail: the present student.
        assert_eq!(run.current().factors, run.student.factors);
        let steps: Vec<Vec<Tensor>> = (0..3)
            .map(|k| run.student.factors.iter().map(|f| f.mapv(|v| v * (k + 1) as f32 + k as f32)).collect())
            .collect();
        for step in &steps {
            run.student.factors = step.clone();
            run.accumulate();
        }
        for (f, mean) in run.current().factors.iter().enumerate() {
            for (i, &m) in mean.iter().enumerate() {
                let want = steps.iter().map(|st| st[f].as_slice().unwrap()[i] as f64).sum::<f64>() / 3.0;
                assert!((m as f64 - want).abs() < 1e-5 * (1.0 + want.abs()), "factor {f}[{i}]: {m} vs {want}");
            }
        }
        // The optimiser's own weights are the last step's.
        assert_eq!(run.student.factors, steps[2]);
        // Past AVERAGE_STEPS steps the mean forgets: a step after that many zeros weighs
        // 1 / AVERAGE_STEPS (a plain mean would give it 1 / (AVERAGE_STEPS + 1)).
        run.average = None;
        let zeros: Vec<Tensor> = steps[0].iter().map(|f| f.mapv(|_| 0.0)).collect();
        run.student.factors = zeros;
        (0..AVERAGE_STEPS).for_each(|_| run.accumulate());
        run.student.factors.iter_mut().for_each(|f| f.fill(1.0));
        run.accumulate();
        let want = 1.0 / AVERAGE_STEPS as f32;
        assert!(run.current().factors.iter().flatten().all(|&m| (m - want).abs() < 1e-7));
    }

    #[test]
    fn with_separate_cells_each_cells_rate_depends_only_on_its_own_channels() {
        let s = FitSettings { channels: (6, 3), separate_cells: true, ..Default::default() };
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let mut student = Student::init(&s, &[0.5, 1.0, 2.0], &mut rng);
        let movie = naturalistic(LAGS + 4, SIZE, SIZE, 9);
        let load = |st: &Student| Model::from_proto(st.proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
        let before = rates(&load(&student), &movie, &|_| {}).unwrap();
        // Cell 1 owns first-layer channels 2-3 (temporal rows 4-7) and second-layer channel 1.
        for r in 4..8 {
            student.factors[0].index_axis_mut(Axis(0), r).mapv_inplace(|w| -3.0 * w);
        }
        student.factors[4][[1]] += 1.0;
        let after = rates(&load(&student), &movie, &|_| {}).unwrap();
        for t in LAGS - 1..movie.shape()[0] {
            assert_eq!(before[[t, 0]], after[[t, 0]]);
            assert_eq!(before[[t, 2]], after[[t, 2]]);
        }
        let moved = (LAGS - 1..movie.shape()[0]).map(|t| (before[[t, 1]] - after[[t, 1]]).abs()).fold(0.0, f32::max);
        assert!(moved > 1e-3, "cell 1 did not change ({moved})");
        // The gradients of the joining weights are masked, and each entry's clipping group is
        // its cell.
        let mut g: Vec<Tensor> = student.factors.iter().map(|f| Tensor::from_elem(IxDyn(f.shape()), 1.0)).collect();
        student.mask(&mut g);
        assert_eq!(g[3].iter().filter(|&&v| v != 0.0).count(), 3 * 2 * 15 * 15);
        assert_eq!(g[6].iter().filter(|&&v| v != 0.0).count(), 3);
        assert_eq!((student.group(0, 0), student.group(1, 2 * RANK * 15 * 15), student.group(6, 2 * 3)), (0, 1, 2));
    }

    #[test]
    fn each_cell_keeps_the_restart_that_predicts_it_best() {
        let r = vec![vec![0.9, 0.1, f64::NAN], vec![0.5, 0.6, 0.2], vec![0.7, 0.3, 0.1]];
        assert_eq!(best_candidates(&r, true), [0, 1, 1]);
        // Shared channels: one student for all, the best on average (NaN counts as lowest).
        assert_eq!(best_candidates(&r, false), [1; 3]);
    }

    #[test]
    fn taking_a_cells_channels_from_another_student_moves_that_cells_rates_only() {
        let s = FitSettings { channels: (6, 3), separate_cells: true, ..Default::default() };
        let a = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(1));
        let b = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(2));
        let mut mixed = a.clone();
        mixed.take_cell(&b, 1);
        let movie = naturalistic(LAGS + 4, SIZE, SIZE, 9);
        let rates_of = |st: &Student| {
            let m = Model::from_proto(st.proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
            rates(&m, &movie, &|_| {}).unwrap()
        };
        let (ra, rb, rm) = (rates_of(&a), rates_of(&b), rates_of(&mixed));
        for t in LAGS - 1..movie.shape()[0] {
            assert_eq!((rm[[t, 0]], rm[[t, 2]]), (ra[[t, 0]], ra[[t, 2]]));
            assert!((rm[[t, 1]] - rb[[t, 1]]).abs() < 1e-6);
        }
        assert!((LAGS - 1..movie.shape()[0]).any(|t| ra[[t, 1]] != rb[[t, 1]]), "the two students differ");
    }

    #[test]
    fn movies_are_drawn_anew_every_so_many_epochs() {
        // Every epoch: the seeds earlier fits used (seed * 1000 + 10 + 3 * epoch).
        assert_eq!((0..4).map(|e| movie_seed(2, e, 1)).collect::<Vec<_>>(), [2010, 2013, 2016, 2019]);
        assert_eq!((0..7).map(|e| movie_seed(2, e, 3)).collect::<Vec<_>>(), [2010, 2010, 2010, 2013, 2013, 2013, 2016]);
        assert_eq!(movie_seed(2, 5, 0), movie_seed(2, 5, 1));
    }

    #[test]
    fn stratified_batches_share_the_strongest_responses_and_keep_every_window() {
        // 64 windows of one movie; cell 1 (weight 1) bursts on 8 of them, cell 0 has weight 0
        // and is ignored even where it is larger.
        let mut rates = Array2::from_elem((64, CELLS), 0.1f32);
        for t in 0..8 {
            rates[[8 * t, 1]] = 20.0;
        }
        rates[[5, 0]] = 100.0;
        let data = vec![(Array3::zeros((64, 1, 1)), rates)];
        let windows: Vec<(usize, usize)> = (0..64).map(|t| (0, t)).collect();
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        let out = stratified(&windows, &data, &[0.0, 1.0, 1.0], 8, &mut rng);
        let mut sorted = out.concat();
        sorted.sort();
        assert_eq!(sorted, windows);
        assert_eq!(out.len(), 8);
        for b in &out {
            assert_eq!(b.iter().filter(|&&(_, t)| t % 8 == 0).count(), 1, "{b:?}");
        }
    }

    #[test]
    fn a_part_written_into_a_student_with_separate_cells_drives_that_cell_alone() {
        let s = FitSettings { channels: (6, 3), separate_cells: true, ..Default::default() };
        let whole = Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(1));
        let one_cell = FitSettings { channels: (2, 1), ..Default::default() };
        let part = Student::init(&one_cell, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(2));
        let movie = naturalistic(LAGS + 4, SIZE, SIZE, 9);
        let rates_of = |st: &Student| {
            let m = Model::from_proto(st.proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
            rates(&m, &movie, &|_| {}).unwrap()
        };
        let (rw, rp) = (rates_of(&whole), rates_of(&part));
        let mut mixed = whole.clone();
        // Cell 1's block: its 2 first-layer and 1 second-layer channels.
        mixed.write_part(1, &part, (2, 1));
        let rm = rates_of(&mixed);
        // That cell's rates become the part's, the others stay.
        for t in LAGS - 1..movie.shape()[0] {
            assert_eq!((rm[[t, 0]], rm[[t, 2]]), (rw[[t, 0]], rw[[t, 2]]));
            assert!((rm[[t, 1]] - rp[[t, 1]]).abs() < 1e-5, "frame {t}: {} vs {}", rm[[t, 1]], rp[[t, 1]]);
            assert!((rm[[t, 1]] - rw[[t, 1]]).abs() > 1e-4, "frame {t}: the part changed nothing");
        }
    }

    #[test]
    fn assembling_parts_gives_each_cell_its_parts_rates_and_refuses_parts_of_other_shapes() {
        let one_cell = FitSettings { channels: (2, 1), ..Default::default() };
        // Cells may have channels of their own counts.
        let parts: Vec<Student> = (0..CELLS)
            .map(|k| {
                let s = FitSettings { channels: (2 + k, 1 + k % 2), ..one_cell.clone() };
                Student::init(&s, &[0.5, 1.0, 2.0], &mut ChaCha8Rng::seed_from_u64(10 + k as u64))
            })
            .collect();
        let movie = naturalistic(LAGS + 4, SIZE, SIZE, 9);
        let rates_of = |st: &Student| {
            let m = Model::from_proto(st.proto(), Path::new("s.onnx"), &LoadOptions::default()).unwrap();
            rates(&m, &movie, &|_| {}).unwrap()
        };
        let whole = rates_of(&Student::assemble(&parts).unwrap());
        for (k, part) in parts.iter().enumerate() {
            let alone = rates_of(part);
            for t in LAGS - 1..movie.shape()[0] {
                assert!((whole[[t, k]] - alone[[t, k]]).abs() < 1e-5, "cell {k}, frame {t}");
            }
        }
        let other_kernels = FitSettings { channels: (2, 1), kernels: (13, 15), ..Default::default() };
        let odd = Student::init(&other_kernels, &[1.0; 3], &mut ChaCha8Rng::seed_from_u64(1));
        let e = Student::assemble(&[parts[0].clone(), odd, parts[2].clone()]).err().unwrap().to_string();
        assert!(e.contains("cell 1's part differs"), "{e}");
        assert!(Student::assemble(&parts[..2]).is_err());
    }

    #[test]
    fn the_reversing_frames_come_as_short_movies_each_with_its_own_image() {
        let planted = crate::demo::planted_model().unwrap();
        let data = dataset(
            &planted,
            (LAGS + 1, 0, ObjectMotion::Drift),
            (2 * REVERSAL_CHUNK + 60, ReversalImage::Lines, 0.0),
            7,
        )
        .unwrap();
        let frames: Vec<usize> = data.iter().map(|(m, _)| m.shape()[0]).collect();
        assert_eq!(frames, [LAGS + 1, LAGS + 1, LAGS + 1, REVERSAL_CHUNK, REVERSAL_CHUNK, 60]);
        // Different images: the first frames of the reversing movies differ.
        assert!(data[3].0.index_axis(Axis(0), 0) != data[4].0.index_axis(Axis(0), 0));
        assert!(data.iter().all(|(m, r)| r.nrows() == m.shape()[0]));
        // Mixed bars: parallel bars, then lone bars, by turns, each as drawn alone.
        let seed = 7u64.wrapping_add(1 << 32);
        let data = dataset(
            &planted,
            (LAGS + 1, 0, ObjectMotion::Drift),
            (2 * REVERSAL_CHUNK, ReversalImage::MixedBars, 0.0),
            7,
        )
        .unwrap();
        assert_eq!(data[3].0, reversing_bars(REVERSAL_CHUNK, SIZE, SIZE, seed));
        assert_eq!(data[4].0, reversing_lone_bars(REVERSAL_CHUNK, SIZE, SIZE, seed.wrapping_add(1 << 40)));
    }

    #[test]
    fn the_readout_bias_starts_at_each_cells_mean_rate() {
        for y in [0.05f32, 0.7, 3.0, 20.0] {
            let x = inverse_softplus(y);
            assert!(((1.0 + (x as f64).exp()).ln() - y as f64).abs() < 1e-4 * y as f64, "{y}");
        }
    }
}
