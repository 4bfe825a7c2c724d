//! Flatten: reshape to 2-D, [prod(d[..axis]), prod(d[axis..])] (ONNX Flatten-13, axis default 1).

use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::IxDyn;

/// Flatten to a matrix at `axis`.
#[derive(Debug)]
pub struct Flatten {
    axis: i64,
}

/// Reshape `t` (any layout) to `shape`, copying only when needed.
pub fn reshaped(t: &Tensor, shape: &[usize]) -> OpResult<Tensor> {
    t.as_standard_layout()
        .into_owned()
        .into_shape_with_order(IxDyn(shape))
        .map_err(|e| format!("cannot reshape {:?} to {shape:?}: {e}", t.shape()).into())
}

impl Op for Flatten {
    fn name(&self) -> &'static str {
        "Flatten"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let x = inputs[0];
        let axis = if self.axis == x.ndim() as i64 { x.ndim() } else { normalize_axis(self.axis, x.ndim())? };
        let outer: usize = x.shape()[..axis].iter().product();
        let inner: usize = x.shape()[axis..].iter().product();
        reshaped(x, &[outer, inner])
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Ok(vec![Some(reshaped(args.grad, args.inputs[0].shape())?)])
    }
}

/// Build from a node: reads `axis`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Flatten { axis: ctx.int_or("axis", 1) }, 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Flatten", &[]), &[&[2, 3, 4]]);
        check_node(node("Flatten", &[("axis", Attr::I(2))]), &[&[2, 3, 4, 2]]);
        check_node(node("Flatten", &[("axis", Attr::I(0))]), &[&[2, 3]]);
    }
}
