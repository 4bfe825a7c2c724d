//! Concat: join tensors along an axis (ONNX Concat-13).

use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Axis, Slice};

/// Concatenation along `axis`.
#[derive(Debug)]
pub struct Concat {
    axis: i64,
}

impl Op for Concat {
    fn name(&self) -> &'static str {
        "Concat"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let axis = normalize_axis(self.axis, inputs[0].ndim())?;
        if inputs.iter().any(|t| t.ndim() != inputs[0].ndim()) {
            let shapes: Vec<_> = inputs.iter().map(|t| t.shape().to_vec()).collect();
            return Err(format!("shapes {shapes:?} have different ranks; Concat joins tensors of one rank").into());
        }
        let views: Vec<_> = inputs.iter().map(|t| t.view()).collect();
        ndarray::concatenate(Axis(axis), &views).map_err(|_| {
            let shapes: Vec<_> = inputs.iter().map(|t| t.shape().to_vec()).collect();
            format!("shapes {shapes:?} cannot be joined on axis {axis}").into()
        })
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let axis = normalize_axis(self.axis, args.grad.ndim())?;
        let mut start = 0;
        let mut out = Vec::with_capacity(args.inputs.len());
        for (t, &want) in args.inputs.iter().zip(args.wants) {
            let len = t.shape()[axis];
            out.push(want.then(|| args.grad.slice_axis(Axis(axis), Slice::from(start..start + len)).to_owned()));
            start += len;
        }
        Ok(out)
    }
}

/// Build from a node: every input is data.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let axis = ctx.int("axis").ok_or("attribute 'axis' is required")?;
    Ok(Built::first(Concat { axis }, ctx.input_count()))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Concat", &[("axis", Attr::I(1))]), &[&[2, 3, 2], &[2, 1, 2], &[2, 2, 2]]);
        check_node(node("Concat", &[("axis", Attr::I(-1))]), &[&[2, 3], &[2, 4]]);
    }
}
