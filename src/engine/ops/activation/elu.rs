//! Elu: y = x for x >= 0, alpha * (exp(x) - 1) otherwise (ONNX Elu-6, alpha default 1).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Exponential linear unit.
#[derive(Debug)]
pub struct Elu {
    alpha: f32,
}

impl Pointwise for Elu {
    const NAME: &'static str = "Elu";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        if x >= 0.0 {
            x
        } else {
            self.alpha * x.exp_m1()
        }
    }
    fn slope(&self, x: f32, y: f32) -> f32 {
        if x >= 0.0 {
            1.0
        } else {
            y + self.alpha
        }
    }
}

/// Build from a node: reads `alpha`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Elu { alpha: ctx.float_or("alpha", 1.0) }), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Elu", &[("alpha", Attr::F(0.7))]), &[&[3, 4, 5]]);
    }
}
