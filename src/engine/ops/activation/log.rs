//! Log: natural logarithm (ONNX Log-13).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// Natural logarithm.
#[derive(Debug)]
pub struct Log;

impl Pointwise for Log {
    const NAME: &'static str = "Log";
    const ENDS_LAYER: bool = false;
    fn value(&self, x: f32) -> f32 {
        x.ln()
    }
    fn slope(&self, x: f32, _y: f32) -> f32 {
        1.0 / x
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Log), 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node_positive, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node_positive(node("Log", &[]), &[&[4, 6]]);
    }
}
