//! Gather: pick entries along an axis by (possibly negative) indices (ONNX Gather-13). Exporters
//! use it on shapes (Shape -> Gather -> Concat -> Reshape), so it is folded at load.

use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Axis, IxDyn};

/// Gather along `axis`.
#[derive(Debug)]
pub struct Gather {
    axis: i64,
}

impl Op for Gather {
    fn name(&self) -> &'static str {
        "Gather"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let (data, idx) = (inputs[0], inputs[1]);
        let axis = normalize_axis(self.axis, data.ndim())?;
        let n = data.shape()[axis] as i64;
        let picks: Vec<usize> = idx
            .iter()
            .map(|&i| {
                let i = i as i64;
                let j = if i < 0 { i + n } else { i };
                usize::try_from(j)
                    .ok()
                    .filter(|&j| (j as i64) < n)
                    .ok_or_else(|| format!("index {i} is out of range for an axis of length {n}").into())
            })
            .collect::<OpResult<_>>()?;
        let taken = data.select(Axis(axis), &picks);
        let mut shape = data.shape()[..axis].to_vec();
        shape.extend(idx.shape());
        shape.extend(&data.shape()[axis + 1..]);
        Ok(taken.into_shape_with_order(IxDyn(&shape)).map_err(|e| e.to_string())?)
    }

    fn backward(&self, _args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Err("Gather is only supported on constant shapes and has no gradient here".into())
    }
}

/// Build from a node: reads `axis`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Gather { axis: ctx.int_or("axis", 0) }, 2))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io, Attr};

    #[test]
    fn matches_tract() {
        check_graph(node_io("Gather", &["x", "i"], &[]), &[&[4, 3]], vec![ints_init("i", &[0, -1])]);
        check_graph(node_io("Gather", &["x", "i"], &[("axis", Attr::I(1))]), &[&[2, 3]], vec![ints_init("i", &[2])]);
    }
}
