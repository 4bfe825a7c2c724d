//! Sigmoid: y = 1 / (1 + exp(-x)) (ONNX Sigmoid-13).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Logistic function.
#[derive(Debug)]
pub struct Sigmoid;

impl Pointwise for Sigmoid {
    const NAME: &'static str = "Sigmoid";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        1.0 / (1.0 + (-x).exp())
    }
    fn slope(&self, _x: f32, y: f32) -> f32 {
        y * (1.0 - y)
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Sigmoid), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Sigmoid", &[]), &[&[4, 6]]);
    }
}
