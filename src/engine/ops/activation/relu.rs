//! Relu: y = max(0, x) (ONNX Relu-14).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Rectified linear unit.
#[derive(Debug)]
pub struct Relu;

impl Pointwise for Relu {
    const NAME: &'static str = "Relu";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        x.max(0.0)
    }
    fn slope(&self, x: f32, _y: f32) -> f32 {
        if x > 0.0 {
            1.0
        } else {
            0.0
        }
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Relu), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Relu", &[]), &[&[2, 3, 4]]);
    }
}
