//! Reduction and knock-outs. A unit is one channel of one hidden layer (a "cell type" of a
//! convolutional layer); silencing it clamps it to its activation under the baseline stimulus
//! (the counterfactual attribution uses), to its mean over the stimulus, or to zero.

pub mod circuit;
pub mod edges;
pub mod export;
pub mod fidelity;
pub mod filters;
pub mod gray_path;
pub mod knockout;
pub mod nonlinearity;
pub mod plot;
pub mod readout;
pub mod search;

use crate::engine::{Override, Part, ValueId};
use crate::model::Model;
use crate::response::windows_at;
use crate::{Error, Result, Tensor};
use ndarray::{Array3, Axis};

/// One channel of one hidden layer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Unit {
    /// The layer's value id.
    pub layer: ValueId,
    /// Channel index.
    pub channel: usize,
}

/// What a silenced unit is clamped to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Clamp {
    /// Its activation under the gray (mean-luminance) stimulus: the default.
    Baseline,
    /// Its mean activation over the stimulus.
    Mean,
    /// Zero.
    Zero,
}

impl Clamp {
    /// Parse `baseline`, `mean` or `zero`.
    pub fn parse(s: &str) -> Result<Clamp> {
        match s {
            "baseline" => Ok(Clamp::Baseline),
            "mean" => Ok(Clamp::Mean),
            "zero" => Ok(Clamp::Zero),
            _ => Err(Error::Usage(format!("--clamp '{s}': use baseline, mean or zero"))),
        }
    }
}

/// Parse `LAYER:CHANNEL,LAYER:CHANNEL` against the model's hidden layers.
pub fn parse_units(model: &Model, spec: &str) -> Result<Vec<Unit>> {
    let hidden = crate::attribution::hidden_layers(model);
    spec.split(',')
        .map(|part| {
            let (name, ch) = part.trim().rsplit_once(':').ok_or_else(|| {
                Error::Usage(format!(
                    "unit '{part}' must be LAYER:CHANNEL, e.g. {}:0",
                    hidden.first().map_or("layer", |s| s)
                ))
            })?;
            if !hidden.iter().any(|h| h == name) {
                return Err(Error::Usage(format!("unknown layer '{name}'; units live in: {}", hidden.join(", "))));
            }
            let layer = model.graph.find(name).ok_or_else(|| Error::Usage(format!("no value '{name}'")))?;
            let channels = model.graph.values[layer].shape.get(1).copied().unwrap_or(0);
            let channel: usize =
                ch.parse().map_err(|_| Error::Usage(format!("unit '{part}': '{ch}' is not a channel index")))?;
            if channel >= channels {
                return Err(Error::Usage(format!(
                    "unit '{part}' does not exist: '{name}' has {channels} channels (0..={})",
                    channels.saturating_sub(1)
                )));
            }
            Ok(Unit { layer, channel })
        })
        .collect()
}

/// Every unit of every hidden layer.
pub fn all_units(model: &Model) -> Vec<Unit> {
    crate::model::summary::hidden_layer_values(model)
        .into_iter()
        .flat_map(|layer| (0..model.graph.values[layer].shape[1]).map(move |channel| Unit { layer, channel }))
        .collect()
}

/// `layer:channel` for reports.
pub fn label(model: &Model, u: &Unit) -> String {
    format!("{}:{}", model.graph.values[u.layer].name, u.channel)
}

/// The value each layer is clamped to, `[1, C, spatial...]` (one sample, broadcast to all).
pub(crate) fn clamp_value(model: &Model, movie: &Array3<f32>, layer: ValueId, clamp: Clamp) -> Result<Tensor> {
    let g = &model.graph;
    let b = &model.binding;
    Ok(match clamp {
        Clamp::Zero => Tensor::zeros(ndarray::IxDyn(&g.values[layer].shape)),
        Clamp::Baseline => {
            let gray = b.to_model_input(ndarray::Array4::zeros((1, b.lags, b.height, b.width)));
            g.forward(gray, &[])?.value(layer).clone()
        }
        Clamp::Mean => {
            let frames: Vec<usize> = (0..movie.shape()[0]).step_by((movie.shape()[0] / 256).max(1)).collect();
            let tape = g.forward(b.to_model_input(windows_at(movie, b.lags, &frames)), &[])?;
            tape.value(layer)
                .mean_axis(Axis(0))
                .ok_or_else(|| Error::Usage("empty stimulus".into()))?
                .insert_axis(Axis(0))
        }
    })
}

/// The engine overrides that silence `units`.
pub fn silence(model: &Model, movie: &Array3<f32>, units: &[Unit], clamp: Clamp) -> Result<Vec<Override>> {
    let mut layers: Vec<ValueId> = units.iter().map(|u| u.layer).collect();
    layers.sort_unstable();
    layers.dedup();
    layers
        .into_iter()
        .map(|layer| {
            Ok(Override {
                value: layer,
                part: Part::Channels(units.iter().filter(|u| u.layer == layer).map(|u| u.channel).collect()),
                with: clamp_value(model, movie, layer, clamp)?,
            })
        })
        .collect()
}
