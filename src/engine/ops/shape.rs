//! Shape: the input's dimensions as a 1-D tensor, optionally a [start, end) part of them
//! (ONNX Shape-15). Only used on values whose shape is fixed, so it is folded at load.

use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{ArrayD, IxDyn};

/// Shape of the input.
#[derive(Debug)]
pub struct Shape {
    start: i64,
    end: Option<i64>,
}

impl Op for Shape {
    fn name(&self) -> &'static str {
        "Shape"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let dims = inputs[0].shape();
        let r = dims.len() as i64;
        let fix = |v: i64| (if v < 0 { v + r } else { v }).clamp(0, r) as usize;
        let (s, e) = (fix(self.start), fix(self.end.unwrap_or(r)));
        let v: Vec<f32> = dims[s..e.max(s)].iter().map(|&d| d as f32).collect();
        Ok(ArrayD::from_shape_vec(IxDyn(&[v.len()]), v).map_err(|e| e.to_string())?)
    }

    fn backward(&self, _args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Err("Shape has no gradient".into())
    }
}

/// Build from a node: reads `start` and `end`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Shape { start: ctx.int_or("start", 0), end: ctx.int("end") }, 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract() {
        check_node(node("Shape", &[]), &[&[2, 3, 4]]);
        check_node(node("Shape", &[("start", Attr::I(1)), ("end", Attr::I(-1))]), &[&[2, 3, 4, 5]]);
    }
}
