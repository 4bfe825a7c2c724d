//! ReduceSum and ReduceMean over constant axes with keepdims and noop_with_empty_axes
//! (ONNX ReduceSum-13 and ReduceMean-18 take axes as an input; earlier versions as an attribute).

use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Axis, IxDyn};

/// A sum or mean over axes.
#[derive(Debug)]
pub struct Reduce {
    mean: bool,
    axes: Option<Vec<i64>>,
    keep_dims: bool,
    noop_when_empty: bool,
}

impl Reduce {
    fn axes_for(&self, rank: usize) -> OpResult<Vec<usize>> {
        let mut a: Vec<usize> = match &self.axes {
            Some(a) if !a.is_empty() => a.iter().map(|&a| normalize_axis(a, rank)).collect::<OpResult<_>>()?,
            _ if self.noop_when_empty => vec![],
            _ => (0..rank).collect(),
        };
        a.sort_unstable();
        a.dedup();
        Ok(a)
    }
}

impl Op for Reduce {
    fn name(&self) -> &'static str {
        if self.mean {
            "ReduceMean"
        } else {
            "ReduceSum"
        }
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let x = inputs[0];
        let axes = self.axes_for(x.ndim())?;
        let count: usize = axes.iter().map(|&a| x.shape()[a]).product();
        let mut y = x.clone();
        for &a in axes.iter().rev() {
            y = y.sum_axis(Axis(a));
            if self.keep_dims {
                y = y.insert_axis(Axis(a));
            }
        }
        if self.mean && count > 0 {
            y /= count as f32;
        }
        Ok(y)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let x = args.inputs[0];
        let axes = self.axes_for(x.ndim())?;
        let count: usize = axes.iter().map(|&a| x.shape()[a]).product();
        let mut g = args.grad.clone();
        if !self.keep_dims {
            for &a in &axes {
                g = g.insert_axis(Axis(a));
            }
        }
        let scale = if self.mean && count > 0 { 1.0 / count as f32 } else { 1.0 };
        let g = g.broadcast(IxDyn(x.shape())).ok_or("gradient shape")?.mapv(|v| v * scale);
        Ok(vec![Some(g)])
    }
}

fn build(ctx: &BuildCtx, mean: bool) -> OpResult<Built> {
    let axes_are_input = if mean { ctx.opset() >= 18 } else { ctx.opset() >= 13 };
    let axes = if axes_are_input { ctx.constant_ints(1, "axes")? } else { ctx.ints("axes") };
    let op = Reduce {
        mean,
        axes,
        keep_dims: ctx.int_or("keepdims", 1) != 0,
        noop_when_empty: ctx.int_or("noop_with_empty_axes", 0) != 0,
    };
    Ok(Built { op: Box::new(op), data_inputs: vec![0] })
}

/// Build ReduceMean.
pub fn build_mean(ctx: &BuildCtx) -> OpResult<Built> {
    build(ctx, true)
}

/// Build ReduceSum.
pub fn build_sum(ctx: &BuildCtx) -> OpResult<Built> {
    build(ctx, false)
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io, Attr};

    #[test]
    fn reduce_sum_and_mean_match_tract_and_finite_differences() {
        for op in ["ReduceSum", "ReduceMean"] {
            check_graph(node_io(op, &["x", "a"], &[]), &[&[2, 3, 4]], vec![ints_init("a", &[1])]);
            check_graph(
                node_io(op, &["x", "a"], &[("keepdims", Attr::I(0))]),
                &[&[2, 3, 4]],
                vec![ints_init("a", &[0, -1])],
            );
            check_graph(node_io(op, &["x"], &[("keepdims", Attr::I(0))]), &[&[2, 3]], vec![]);
        }
    }
}
