//! GlobalAveragePool: mean over all spatial axes, kept as size-1 axes (ONNX GlobalAveragePool-1).

use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Axis, IxDyn};

/// Spatial mean per channel.
#[derive(Debug)]
pub struct GlobalAveragePool;

impl Op for GlobalAveragePool {
    fn name(&self) -> &'static str {
        "GlobalAveragePool"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let x = inputs[0];
        if x.ndim() < 3 {
            return Err(format!("input {:?} must have spatial axes after [N, C]", x.shape()).into());
        }
        let mut m = x.clone();
        for a in (2..x.ndim()).rev() {
            m = m.mean_axis(Axis(a)).ok_or("empty spatial axis")?.insert_axis(Axis(a));
        }
        Ok(m)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let x = args.inputs[0];
        let count: usize = x.shape()[2..].iter().product();
        let g = args.grad.broadcast(IxDyn(x.shape())).ok_or("gradient shape")?;
        Ok(vec![Some(g.mapv(|v| v / count as f32))])
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(GlobalAveragePool, 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("GlobalAveragePool", &[]), &[&[2, 3, 4, 5]]);
        check_node(node("GlobalAveragePool", &[]), &[&[2, 3, 4]]);
    }
}
