//! Squeeze and Unsqueeze: drop or insert size-1 axes. Axes are an attribute up to opset 12 and a
//! constant input from opset 13 (ONNX Squeeze-13, Unsqueeze-13).

use super::flatten::reshaped;
use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;

/// Remove size-1 axes (all of them when `axes` is empty).
#[derive(Debug)]
pub struct Squeeze {
    axes: Vec<i64>,
}

/// Insert size-1 axes at the given output positions.
#[derive(Debug)]
pub struct Unsqueeze {
    axes: Vec<i64>,
}

impl Op for Squeeze {
    fn name(&self) -> &'static str {
        "Squeeze"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let shape = inputs[0].shape();
        let drop: Vec<usize> = if self.axes.is_empty() {
            (0..shape.len()).filter(|&a| shape[a] == 1).collect()
        } else {
            self.axes.iter().map(|&a| normalize_axis(a, shape.len())).collect::<OpResult<_>>()?
        };
        if let Some(&a) = drop.iter().find(|&&a| shape[a] != 1) {
            return Err(format!("cannot squeeze axis {a} of shape {shape:?}: its size is not 1").into());
        }
        let out: Vec<usize> = (0..shape.len()).filter(|a| !drop.contains(a)).map(|a| shape[a]).collect();
        reshaped(inputs[0], &out)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Ok(vec![Some(reshaped(args.grad, args.inputs[0].shape())?)])
    }
}

impl Op for Unsqueeze {
    fn name(&self) -> &'static str {
        "Unsqueeze"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let shape = inputs[0].shape();
        let rank = shape.len() + self.axes.len();
        let mut at: Vec<usize> = self.axes.iter().map(|&a| normalize_axis(a, rank)).collect::<OpResult<_>>()?;
        at.sort_unstable();
        let mut out = Vec::with_capacity(rank);
        let mut src = shape.iter();
        for i in 0..rank {
            if at.contains(&i) {
                out.push(1);
            } else {
                out.push(*src.next().ok_or("repeated axes")?);
            }
        }
        reshaped(inputs[0], &out)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Ok(vec![Some(reshaped(args.grad, args.inputs[0].shape())?)])
    }
}

fn axes(ctx: &BuildCtx) -> OpResult<Option<Vec<i64>>> {
    if ctx.opset() >= 13 {
        ctx.constant_ints(1, "axes")
    } else {
        Ok(ctx.ints("axes"))
    }
}

/// Build Squeeze.
pub fn build_squeeze(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built { op: Box::new(Squeeze { axes: axes(ctx)?.unwrap_or_default() }), data_inputs: vec![0] })
}

/// Build Unsqueeze (axes are required).
pub fn build_unsqueeze(ctx: &BuildCtx) -> OpResult<Built> {
    let axes = axes(ctx)?.ok_or("axes are required")?;
    Ok(Built { op: Box::new(Unsqueeze { axes }), data_inputs: vec![0] })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io};

    #[test]
    fn squeeze_matches_tract_and_finite_differences() {
        check_graph(node_io("Squeeze", &["x", "a"], &[]), &[&[2, 1, 3, 1]], vec![ints_init("a", &[1, -1])]);
        check_graph(node_io("Squeeze", &["x"], &[]), &[&[1, 3, 1]], vec![]);
    }

    #[test]
    fn unsqueeze_matches_tract_and_finite_differences() {
        check_graph(node_io("Unsqueeze", &["x", "a"], &[]), &[&[2, 3]], vec![ints_init("a", &[0, 3])]);
        check_graph(node_io("Unsqueeze", &["x", "a"], &[]), &[&[2, 3]], vec![ints_init("a", &[-1])]);
    }
}
