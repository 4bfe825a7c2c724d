//! The readable pieces of each kept unit: what it looks at (kernel or effective filter, split
//! into space and time), how it transforms that (its nonlinearity), its signed effect on the
//! cell and when it acts (conductance time course).

use super::circuit::Circuit;
use super::filters::{conv_bias, effective_filters, first_conv, generator, hot_position, kernel, separate, Separable};
use super::gray_path::GrayPath;
use super::nonlinearity::{exact, fitted, Curve};
use crate::attribution::LayerAttribution;
use crate::engine::ValueId;
use crate::model::Model;
use crate::response::measure::min_max;
use crate::response::windows_at;
use crate::Result;
use ndarray::{Array1, Array3};

/// Everything sufficit reads out of one kept unit.
#[derive(Debug, Clone)]
pub struct UnitReadout {
    /// The layer.
    pub layer: ValueId,
    /// The channel.
    pub channel: usize,
    /// Its conductance for the target (full model).
    pub conductance: f64,
    /// Path-averaged dF/dy: positive excites the cell, negative inhibits it.
    pub gradient: f64,
    /// The position (flat index) carrying the most conductance, where the filters are read.
    pub position: usize,
    /// First-layer units: the convolution kernel, separated.
    pub kernel: Option<Separable>,
    /// The effective filter at `position` in the reduced circuit, separated.
    pub effective: Separable,
    /// Exact (first layer) or fitted (deeper) nonlinearity.
    pub nonlinearity: Option<Curve>,
    /// Conductance per movie frame.
    pub time_course: Vec<f32>,
}

/// Read out every kept channel of `circuit`. `attributions` match `layers` in order; `steps`
/// steps along `path` (gray to the analysis windows) average the effective filters.
pub fn read_out(
    model: &Model,
    movie: &Array3<f32>,
    path: &GrayPath,
    circuit: &Circuit,
    layers: &[ValueId],
    attributions: &[LayerAttribution],
    steps: usize,
) -> Result<Vec<UnitReadout>> {
    let g = &model.graph;
    let overrides = circuit.overrides();
    // Every frame of the movie (up to 512, evenly spaced) samples the nonlinearities.
    let total = movie.shape()[0];
    let sample: Vec<usize> = (0..total).step_by(total.div_ceil(512).max(1)).collect();
    let mut out = Vec::new();
    let b = &model.binding;
    let mut kept: Vec<&super::circuit::LayerCircuit> = circuit.layers.iter().collect();
    kept.sort_by_key(|l| l.layer);
    for l in kept {
        let Some(i) = layers.iter().position(|&x| x == l.layer) else { continue };
        let att = &attributions[i];
        let conv = first_conv(model, l.layer);
        // The layer's activity over the sample frames in the reduced circuit.
        let x = b.to_model_input(windows_at(movie, b.lags, &sample));
        let tape = g.forward_to(vec![(g.input, x)], &[l.layer], &overrides)?;
        let activity = tape.value(l.layer);
        let per: usize = activity.shape()[2..].iter().product();
        let cs = activity.shape()[1];
        let flat = activity.as_standard_layout();
        let flat = flat.as_slice().unwrap_or(&[]);
        let sites: Vec<(usize, usize)> = l.channels.iter().map(|&c| (c, hot_position(&att.space, c))).collect();
        let filters = effective_filters(model, path, l.layer, &sites, &overrides, steps.clamp(1, 16))?;
        for (&(c, position), eff) in sites.iter().zip(filters) {
            let y = Array1::from_iter((0..sample.len()).map(|s| flat[(s * cs + c) * per + position] as f64));
            let (kern, nonlinearity) = match conv.and_then(|cv| kernel(model, cv, c).map(|k| (cv, k))) {
                Some((cv, k)) => {
                    // The generator range: the conv's output at the unit's position, bias removed.
                    let bias = conv_bias(model, cv, c);
                    let z = tape.try_value(cv.output).map(|z| z.as_standard_layout().into_owned());
                    let gen: Vec<f64> = z
                        .as_ref()
                        .and_then(|z| z.as_slice())
                        .map(|z| (0..sample.len()).map(|s| z[(s * cs + c) * per + position] as f64 - bias).collect())
                        .unwrap_or_default();
                    let (lo, hi) = min_max(&gen);
                    let (lo, hi) =
                        if hi > lo { (lo - 0.1 * (hi - lo), hi + 0.1 * (hi - lo)) } else { (lo - 1.0, hi + 1.0) };
                    (Some(separate(k)), exact(model, cv, l.layer, c, lo, hi).ok())
                }
                None => (None, fitted(&generator(model, movie, &sample, &eff), &y)),
            };
            out.push(UnitReadout {
                layer: l.layer,
                channel: c,
                conductance: att.total[c],
                gradient: att.gradient[c],
                position,
                kernel: kern,
                effective: separate(eff),
                nonlinearity,
                time_course: att.time.row(c).to_vec(),
            });
        }
    }
    Ok(out)
}
