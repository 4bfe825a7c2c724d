//! Rates for many variants of one model on one movie (knock-outs): the affine prefix (input to
//! the first nonlinearity, usually the first convolution and most of the work) is evaluated once,
//! and each variant runs only the rest of the graph.

use crate::attribution::frontier;
use crate::engine::batch::{budget_bytes, chunk_len};
use crate::engine::{Override, ValueId};
use crate::model::Model;
use crate::{Error, Result, Tensor};
use ndarray::{Array2, Array3};
use rayon::prelude::*;

/// The prefix's output for every frame of a movie, in chunks.
pub struct PrefixRates<'m> {
    model: &'m Model,
    start: ValueId,
    /// Whether each value depends on `start` (so an override there takes effect).
    downstream: Vec<bool>,
    chunks: Vec<Tensor>,
}

impl<'m> PrefixRates<'m> {
    /// Evaluate the prefix over every frame of `movie`.
    pub fn new(model: &'m Model, movie: &Array3<f32>) -> Result<Self> {
        super::check_size(model, movie)?;
        let g = &model.graph;
        let start = frontier(g).unwrap_or(g.input);
        let mut downstream = vec![false; g.values.len()];
        for node in &g.nodes {
            downstream[node.output] = node.inputs.iter().any(|&i| i == start || downstream[i]);
        }
        let frames = movie.shape()[0];
        let chunk = chunk_len(g.bytes_per_sample(), budget_bytes()).min(256);
        let starts: Vec<usize> = (0..frames).step_by(chunk).collect();
        let chunks = starts
            .par_iter()
            .map(|&first| {
                let ends: Vec<usize> = (first..(first + chunk).min(frames)).collect();
                let x = model.binding.to_model_input(super::windows_at(movie, model.binding.lags, &ends));
                Ok(g.forward_to(vec![(g.input, x)], &[start], &[])?.value(start).clone())
            })
            .collect::<Result<_>>()?;
        Ok(PrefixRates { model, start, downstream, chunks })
    }

    /// Rates `[frames, cells]` (output 0) with `overrides`, which must lie after the prefix.
    pub fn rates_with(&self, overrides: &[Override]) -> Result<Array2<f32>> {
        let g = &self.model.graph;
        if let Some(o) = overrides.iter().find(|o| !self.downstream[o.value]) {
            return Err(Error::Usage(format!(
                "'{}' lies inside the model's affine prefix and cannot be silenced here",
                g.values[o.value].name
            )));
        }
        let parts: Vec<Array2<f32>> = self
            .chunks
            .par_iter()
            .map(|z| super::per_sample(g.forward_from(vec![(self.start, z.clone())], overrides)?.outputs()[0]))
            .collect::<Result<_>>()?;
        super::stack(&parts)
    }
}
