//! The straight path from gray to the stimulus windows, started where the affine prefix ends
//! (see [`crate::attribution::frontier`]): values there are interpolated, not recomputed, and a
//! gradient summed over steps and windows crosses the prefix back to the stimulus once.

use crate::attribution::frontier;
use crate::engine::{Graph, ValueId};
use crate::{Result, Tensor};
use ndarray::{Axis, IxDyn};

/// Gray-to-stimulus path for a batch of windows.
pub struct GrayPath<'g> {
    graph: &'g Graph,
    /// Where path points are given: the end of the affine prefix, or the model input.
    pub start: ValueId,
    z0: Tensor,
    dz: Tensor,
}

impl<'g> GrayPath<'g> {
    /// The path for model inputs `x` (`[n, ...]`).
    pub fn new(graph: &'g Graph, x: &Tensor) -> Result<Self> {
        let start = frontier(graph).unwrap_or(graph.input);
        let mut gray_shape = x.shape().to_vec();
        gray_shape[0] = 1;
        let gray = Tensor::zeros(IxDyn(&gray_shape));
        let at = |input: Tensor| -> Result<Tensor> {
            Ok(graph.forward_to(vec![(graph.input, input)], &[start], &[])?.value(start).clone())
        };
        let z0 = at(gray)?;
        let dz = &at(x.clone())? - &z0;
        Ok(GrayPath { graph, start, z0, dz })
    }

    /// Number of windows.
    pub fn windows(&self) -> usize {
        self.dz.shape()[0]
    }

    /// The value at `start` for path fraction `alpha`, every window.
    pub fn at(&self, alpha: f64) -> Tensor {
        &self.z0 + &self.dz.mapv(|v| v * alpha as f32)
    }

    /// Carry a gradient at `start`, summed over windows (`[1, ...]`), back to the model input.
    pub fn to_input(&self, grad: Tensor) -> Result<Tensor> {
        if self.start == self.graph.input {
            return Ok(grad);
        }
        let mut shape = self.graph.values[self.graph.input].shape.clone();
        shape[0] = 1;
        let tape = self.graph.forward_to(vec![(self.graph.input, Tensor::zeros(IxDyn(&shape)))], &[self.start], &[])?;
        Ok(tape.gradients(&[(self.start, grad)], &[self.graph.input])?.remove(0))
    }
}

/// Sum over the batch axis, keeping it (`[1, ...]`).
pub fn batch_sum(t: &Tensor) -> Tensor {
    t.sum_axis(Axis(0)).insert_axis(Axis(0))
}
