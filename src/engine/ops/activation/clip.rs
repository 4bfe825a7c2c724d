//! Clip: y = min(max(x, lo), hi). Bounds are attributes up to opset 10 and optional constant
//! inputs from opset 11 (ONNX Clip-6 / Clip-11 / Clip-13).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Clamp to `[lo, hi]`; the gradient passes where `lo <= x <= hi`.
#[derive(Debug)]
pub struct Clip {
    lo: f32,
    hi: f32,
}

impl Pointwise for Clip {
    const NAME: &'static str = "Clip";
    const ENDS_LAYER: bool = true;
    fn value(&self, x: f32) -> f32 {
        x.max(self.lo).min(self.hi)
    }
    fn slope(&self, x: f32, _y: f32) -> f32 {
        if x >= self.lo && x <= self.hi {
            1.0
        } else {
            0.0
        }
    }
}

/// Build from a node: bounds from attributes (opset < 11) or constant inputs 1 and 2.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let (lo, hi) = if ctx.opset() < 11 {
        (ctx.float_or("min", f32::MIN), ctx.float_or("max", f32::MAX))
    } else {
        (ctx.constant_scalar(1, "min")?.unwrap_or(f32::MIN), ctx.constant_scalar(2, "max")?.unwrap_or(f32::MAX))
    };
    if lo > hi {
        return Err(format!("min ({lo}) is larger than max ({hi})").into());
    }
    Ok(Built::first(Unary(Clip { lo, hi }), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, node_io, scalar_init};

    #[test]
    fn matches_tract_and_finite_differences() {
        let n = node_io("Clip", &["x", "lo", "hi"], &[]);
        check_graph(n, &[&[3, 5]], vec![scalar_init("lo", -0.5), scalar_init("hi", 0.7)]);
    }
}
