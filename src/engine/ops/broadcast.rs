//! Multidirectional (numpy-style) broadcasting, as the ONNX specification defines it
//! (onnx.ai, Broadcasting.md), and its adjoint: summing a gradient back to an input's shape.

use super::{OpError, OpResult};
use crate::Tensor;
use ndarray::{Axis, IxDyn};

/// The broadcast shape of `a` and `b`, or an error naming both shapes.
pub fn broadcast_shape(a: &[usize], b: &[usize]) -> OpResult<Vec<usize>> {
    let rank = a.len().max(b.len());
    let mut out = vec![0; rank];
    for (i, o) in out.iter_mut().enumerate() {
        let da = dim_from_right(a, rank - 1 - i);
        let db = dim_from_right(b, rank - 1 - i);
        *o = match (da, db) {
            (x, y) if x == y => x,
            (1, y) => y,
            (x, 1) => x,
            _ => return Err(OpError(format!("shapes {a:?} and {b:?} cannot be broadcast together"))),
        };
    }
    Ok(out)
}

fn dim_from_right(shape: &[usize], k: usize) -> usize {
    if k < shape.len() {
        shape[shape.len() - 1 - k]
    } else {
        1
    }
}

/// A read-only view of `t` broadcast to `shape`.
pub fn view_as<'a>(t: &'a Tensor, shape: &[usize]) -> OpResult<ndarray::ArrayViewD<'a, f32>> {
    t.broadcast(IxDyn(shape)).ok_or_else(|| OpError(format!("cannot broadcast {:?} to {:?}", t.shape(), shape)))
}

/// Sum `grad` (shaped like the broadcast output) down to `shape`: the adjoint of broadcasting.
pub fn sum_to_shape(grad: &Tensor, shape: &[usize]) -> Tensor {
    if grad.shape() == shape {
        return grad.clone();
    }
    let extra = grad.ndim() - shape.len();
    let mut g = grad.clone();
    for _ in 0..extra {
        g = g.sum_axis(Axis(0));
    }
    for (axis, &d) in shape.iter().enumerate() {
        if d == 1 && g.shape()[axis] != 1 {
            g = g.sum_axis(Axis(axis)).insert_axis(Axis(axis));
        }
    }
    g
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::ArrayD;

    #[test]
    fn shapes_follow_the_onnx_broadcasting_rules() {
        // Examples from the ONNX specification, Broadcasting.md.
        assert_eq!(broadcast_shape(&[2, 3, 4, 5], &[]).unwrap(), vec![2, 3, 4, 5]);
        assert_eq!(broadcast_shape(&[2, 3, 4, 5], &[5]).unwrap(), vec![2, 3, 4, 5]);
        assert_eq!(broadcast_shape(&[4, 5], &[2, 3, 4, 5]).unwrap(), vec![2, 3, 4, 5]);
        assert_eq!(broadcast_shape(&[1, 4, 5], &[2, 3, 1, 1]).unwrap(), vec![2, 3, 4, 5]);
        assert_eq!(broadcast_shape(&[3, 4, 5], &[2, 1, 1, 1]).unwrap(), vec![2, 3, 4, 5]);
        assert!(broadcast_shape(&[2, 3], &[4]).is_err());
    }

    #[test]
    fn sum_to_shape_is_the_adjoint_of_broadcasting() {
        let g = ArrayD::from_shape_fn(IxDyn(&[2, 3, 4]), |i| (i[0] * 12 + i[1] * 4 + i[2]) as f32);
        let s = sum_to_shape(&g, &[3, 1]);
        assert_eq!(s.shape(), &[3, 1]);
        let expected: f32 = (0..2).flat_map(|a| (0..4).map(move |c| (a * 12 + 4 + c) as f32)).sum();
        assert_eq!(s[[1, 0]], expected);
    }
}
