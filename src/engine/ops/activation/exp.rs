//! Exp: y = e^x (ONNX Exp-13). Common as the output nonlinearity of Poisson encoding models.

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Natural exponential.
#[derive(Debug)]
pub struct Exp;

impl Pointwise for Exp {
    const NAME: &'static str = "Exp";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        x.exp()
    }
    fn slope(&self, _x: f32, y: f32) -> f32 {
        y
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Exp), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Exp", &[]), &[&[4, 6]]);
    }
}
