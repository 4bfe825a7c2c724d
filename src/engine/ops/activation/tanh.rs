//! Tanh: hyperbolic tangent (ONNX Tanh-13).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Hyperbolic tangent.
#[derive(Debug)]
pub struct Tanh;

impl Pointwise for Tanh {
    const NAME: &'static str = "Tanh";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        x.tanh()
    }
    fn slope(&self, _x: f32, y: f32) -> f32 {
        1.0 - y * y
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Tanh), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Tanh", &[]), &[&[4, 6]]);
    }
}
