//! MatMul: numpy-style matrix product with batch broadcasting and 1-D promotion (ONNX MatMul-13).

use super::broadcast::{broadcast_shape, sum_to_shape, view_as};
use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{s, Array3, Axis, IxDyn};

/// Matrix product.
#[derive(Debug)]
pub struct MatMul;

/// Shapes of one product after 1-D promotion and batch broadcasting.
struct Plan {
    a: Vec<usize>,
    b: Vec<usize>,
    batch: Vec<usize>,
    m: usize,
    k: usize,
    n: usize,
    out: Vec<usize>,
}

fn plan(a: &[usize], b: &[usize]) -> OpResult<Plan> {
    if a.is_empty() || b.is_empty() {
        return Err("MatMul inputs must have rank >= 1".into());
    }
    let pa = if a.len() == 1 { vec![1, a[0]] } else { a.to_vec() };
    let pb = if b.len() == 1 { vec![b[0], 1] } else { b.to_vec() };
    let (m, k) = (pa[pa.len() - 2], pa[pa.len() - 1]);
    let (k2, n) = (pb[pb.len() - 2], pb[pb.len() - 1]);
    if k != k2 {
        return Err(format!("shapes {a:?} and {b:?}: inner dimensions {k} and {k2} differ").into());
    }
    let batch = broadcast_shape(&pa[..pa.len() - 2], &pb[..pb.len() - 2])?;
    let mut out = batch.clone();
    if a.len() > 1 {
        out.push(m);
    }
    if b.len() > 1 {
        out.push(n);
    }
    Ok(Plan { a: pa, b: pb, batch, m, k, n, out })
}

/// `t` broadcast to `batch ++ [r, c]` and copied as a stack of matrices.
fn stacked(t: &Tensor, promoted: &[usize], batch: &[usize], r: usize, c: usize) -> OpResult<Array3<f32>> {
    let t = t.view().into_shape_with_order(IxDyn(promoted)).map_err(|e| e.to_string())?.to_owned();
    let mut full = batch.to_vec();
    full.extend([r, c]);
    let v = view_as(&t, &full)?;
    let count = batch.iter().product::<usize>();
    Ok(v.as_standard_layout().into_owned().into_shape_with_order((count, r, c)).map_err(|e| e.to_string())?)
}

fn batched_product(a: &Array3<f32>, b: &Array3<f32>, ta: bool, tb: bool) -> Array3<f32> {
    let rows = if ta { a.shape()[2] } else { a.shape()[1] };
    let cols = if tb { b.shape()[1] } else { b.shape()[2] };
    let mut out = Array3::zeros((a.shape()[0], rows, cols));
    for (i, mut o) in out.axis_iter_mut(Axis(0)).enumerate() {
        let x = a.slice(s![i, .., ..]);
        let y = b.slice(s![i, .., ..]);
        let x = if ta { x.reversed_axes() } else { x };
        let y = if tb { y.reversed_axes() } else { y };
        o.assign(&x.dot(&y));
    }
    out
}

impl Op for MatMul {
    fn name(&self) -> &'static str {
        "MatMul"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let p = plan(inputs[0].shape(), inputs[1].shape())?;
        let a = stacked(inputs[0], &p.a, &p.batch, p.m, p.k)?;
        let b = stacked(inputs[1], &p.b, &p.batch, p.k, p.n)?;
        let y = batched_product(&a, &b, false, false);
        Ok(y.into_shape_with_order(IxDyn(&p.out)).map_err(|e| e.to_string())?)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let (ia, ib) = (args.inputs[0], args.inputs[1]);
        let p = plan(ia.shape(), ib.shape())?;
        let count = p.batch.iter().product::<usize>();
        let g = args.grad.view().into_shape_with_order((count, p.m, p.n)).map_err(|e| e.to_string())?.to_owned();
        let mut out = vec![None, None];
        let fold = |full: Array3<f32>, promoted: &[usize], original: &[usize]| -> OpResult<Tensor> {
            let (r, c) = (full.shape()[1], full.shape()[2]);
            let mut shape = p.batch.clone();
            shape.extend([r, c]);
            let full = full.into_shape_with_order(IxDyn(&shape)).map_err(|e| e.to_string())?;
            let summed = sum_to_shape(&full, promoted);
            Ok(summed.into_shape_with_order(IxDyn(original)).map_err(|e| e.to_string())?)
        };
        if args.wants[0] {
            let b = stacked(ib, &p.b, &p.batch, p.k, p.n)?;
            out[0] = Some(fold(batched_product(&g, &b, false, true), &p.a, ia.shape())?);
        }
        if args.wants[1] {
            let a = stacked(ia, &p.a, &p.batch, p.m, p.k)?;
            out[1] = Some(fold(batched_product(&a, &g, true, false), &p.b, ib.shape())?);
        }
        Ok(out)
    }
}

/// Build from a node (no attributes).
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(MatMul, 2))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("MatMul", &[]), &[&[3, 5], &[5, 4]]);
        check_node(node("MatMul", &[]), &[&[2, 3, 5], &[5, 4]]);
        check_node(node("MatMul", &[]), &[&[2, 1, 3, 5], &[3, 5, 2]]);
        check_node(node("MatMul", &[]), &[&[5], &[5, 4]]);
        check_node(node("MatMul", &[]), &[&[3, 5], &[5]]);
    }
}
