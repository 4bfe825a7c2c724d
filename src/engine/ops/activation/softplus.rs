//! Softplus: y = ln(exp(x) + 1) (ONNX Softplus-1), evaluated in an overflow-safe form.

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Smooth rectifier; its derivative is the logistic sigmoid.
#[derive(Debug)]
pub struct Softplus;

impl Pointwise for Softplus {
    const NAME: &'static str = "Softplus";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        x.max(0.0) + (-x.abs()).exp().ln_1p()
    }
    fn slope(&self, x: f32, _y: f32) -> f32 {
        1.0 / (1.0 + (-x).exp())
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Softplus), 1))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Softplus", &[]), &[&[4, 6]]);
    }

    #[test]
    fn stays_finite_for_large_inputs() {
        assert_eq!(Softplus.value(200.0), 200.0);
        assert!(Softplus.value(-200.0) >= 0.0 && Softplus.value(-200.0) < 1e-30);
    }
}
