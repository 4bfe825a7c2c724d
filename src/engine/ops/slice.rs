//! Slice with constant starts/ends/axes/steps, clamped as the standard says, negative steps
//! included (ONNX Slice-13; Slice-1 took starts/ends/axes as attributes).

use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{ArrayD, IxDyn, Slice as NdSlice};

/// A strided window.
#[derive(Debug)]
pub struct Slice {
    starts: Vec<i64>,
    ends: Vec<i64>,
    axes: Option<Vec<i64>>,
    steps: Option<Vec<i64>>,
}

impl Slice {
    /// The (axis, ndarray slice) for each sliced axis of an input of `shape`.
    fn plan(&self, shape: &[usize]) -> OpResult<Vec<(usize, NdSlice)>> {
        let r = shape.len();
        let axes = self.axes.clone().unwrap_or_else(|| (0..self.starts.len() as i64).collect());
        let steps = self.steps.clone().unwrap_or_else(|| vec![1; self.starts.len()]);
        if self.ends.len() != self.starts.len() || axes.len() != self.starts.len() || steps.len() != self.starts.len() {
            return Err("starts, ends, axes and steps must have the same length".into());
        }
        let mut out = Vec::new();
        for i in 0..self.starts.len() {
            let a = normalize_axis(axes[i], r)?;
            let dim = shape[a] as i64;
            let step = steps[i];
            if step == 0 {
                return Err("a step of 0 is not allowed".into());
            }
            let fix = |v: i64| if v < 0 { v + dim } else { v };
            let (s, e) = (fix(self.starts[i]), fix(self.ends[i]));
            let (lo, hi) = if dim == 0 {
                (0, 0)
            } else if step > 0 {
                (s.clamp(0, dim), e.clamp(0, dim))
            } else {
                // Negative step: walk from s (clamped to dim-1) down to e (exclusive, may be -1).
                let s = s.clamp(0, dim - 1);
                let e = e.clamp(-1, dim - 1);
                (e + 1, s + 1)
            };
            let (lo, hi) = (lo.min(hi), hi);
            out.push((a, NdSlice::new(lo as isize, Some(hi as isize), step as isize)));
        }
        Ok(out)
    }
}

impl Op for Slice {
    fn name(&self) -> &'static str {
        "Slice"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let mut v = inputs[0].view();
        for (a, s) in self.plan(inputs[0].shape())? {
            v.slice_axis_inplace(ndarray::Axis(a), s);
        }
        Ok(v.to_owned())
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let x = args.inputs[0];
        let mut g = ArrayD::zeros(IxDyn(x.shape()));
        let mut v = g.view_mut();
        for (a, s) in self.plan(x.shape())? {
            v.slice_axis_inplace(ndarray::Axis(a), s);
        }
        v.assign(args.grad);
        Ok(vec![Some(g)])
    }
}

/// Build from a node.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let op = if ctx.opset() >= 10 {
        Slice {
            starts: ctx.constant_ints(1, "starts")?.ok_or("starts are required")?,
            ends: ctx.constant_ints(2, "ends")?.ok_or("ends are required")?,
            axes: ctx.constant_ints(3, "axes")?,
            steps: ctx.constant_ints(4, "steps")?,
        }
    } else {
        Slice {
            starts: ctx.ints("starts").ok_or("starts are required")?,
            ends: ctx.ints("ends").ok_or("ends are required")?,
            axes: ctx.ints("axes"),
            steps: None,
        }
    };
    Ok(Built { op: Box::new(op), data_inputs: vec![0] })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io};

    fn case(starts: &[i64], ends: &[i64], axes: &[i64], steps: &[i64]) {
        check_graph(
            node_io("Slice", &["x", "s", "e", "a", "t"], &[]),
            &[&[4, 6, 5]],
            vec![ints_init("s", starts), ints_init("e", ends), ints_init("a", axes), ints_init("t", steps)],
        );
    }

    #[test]
    fn matches_tract_and_finite_differences() {
        case(&[1, 0], &[3, 4], &[0, 2], &[1, 2]);
        case(&[-2], &[i64::MAX], &[1], &[1]);
        case(&[4, -1], &[0, -100], &[1, 2], &[-2, -1]);
    }
}
