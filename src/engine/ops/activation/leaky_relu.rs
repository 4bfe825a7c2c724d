//! LeakyRelu: y = x for x >= 0, alpha * x otherwise (ONNX LeakyRelu-16, alpha default 0.01).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Leaky rectifier with negative slope `alpha`.
#[derive(Debug)]
pub struct LeakyRelu {
    alpha: f32,
}

impl Pointwise for LeakyRelu {
    const NAME: &'static str = "LeakyRelu";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        if x >= 0.0 {
            x
        } else {
            self.alpha * x
        }
    }
    fn slope(&self, x: f32, _y: f32) -> f32 {
        if x >= 0.0 {
            1.0
        } else {
            self.alpha
        }
    }
}

/// Build from a node: reads `alpha`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(LeakyRelu { alpha: ctx.float_or("alpha", 0.01) }), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("LeakyRelu", &[("alpha", Attr::F(0.2))]), &[&[2, 3, 4]]);
        check_node(node("LeakyRelu", &[]), &[&[5, 7]]);
    }
}
