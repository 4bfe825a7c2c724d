//! Gemm: Y = alpha * A' * B' + beta * C, with A' = A or A^T and B' = B or B^T (ONNX Gemm-13).

use super::broadcast::{sum_to_shape, view_as};
use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Array2, ArrayView2, Ix2};

/// General matrix multiply with optional bias.
#[derive(Debug)]
pub struct Gemm {
    alpha: f32,
    beta: f32,
    trans_a: bool,
    trans_b: bool,
}

fn matrix<'a>(t: &'a Tensor, what: &str) -> OpResult<ArrayView2<'a, f32>> {
    t.view()
        .into_dimensionality::<Ix2>()
        .map_err(|_| format!("input {what} must be a matrix, found shape {:?}", t.shape()).into())
}

impl Gemm {
    fn operands<'a>(&self, inputs: &[&'a Tensor]) -> OpResult<(ArrayView2<'a, f32>, ArrayView2<'a, f32>)> {
        let a = matrix(inputs[0], "A")?;
        let b = matrix(inputs[1], "B")?;
        let a = if self.trans_a { a.reversed_axes() } else { a };
        let b = if self.trans_b { b.reversed_axes() } else { b };
        if a.ncols() != b.nrows() {
            return Err(format!(
                "A' is {:?} and B' is {:?}: inner dimensions differ (check transA/transB)",
                a.shape(),
                b.shape()
            )
            .into());
        }
        Ok((a, b))
    }
}

impl Op for Gemm {
    fn name(&self) -> &'static str {
        "Gemm"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let (a, b) = self.operands(inputs)?;
        let mut y: Array2<f32> = a.dot(&b);
        if self.alpha != 1.0 {
            y *= self.alpha;
        }
        if let Some(c) = inputs.get(2) {
            let c = view_as(c, y.shape())?;
            y.zip_mut_with(&c, |y, &c| *y += self.beta * c);
        }
        Ok(y.into_dyn())
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let (a, b) = self.operands(args.inputs)?;
        let g = matrix(args.grad, "grad")?;
        let mut out = vec![None; args.inputs.len()];
        if args.wants[0] {
            // dA' = alpha * G * B'^T; dA = dA'^T when A was transposed.
            let da = g.dot(&b.t()) * self.alpha;
            out[0] =
                Some(if self.trans_a { da.reversed_axes() } else { da }.as_standard_layout().into_owned().into_dyn());
        }
        if args.wants[1] {
            let db = a.t().dot(&g) * self.alpha;
            out[1] =
                Some(if self.trans_b { db.reversed_axes() } else { db }.as_standard_layout().into_owned().into_dyn());
        }
        if args.inputs.len() > 2 && args.wants[2] {
            out[2] = Some(sum_to_shape(&(args.grad * self.beta), args.inputs[2].shape()));
        }
        Ok(out)
    }
}

/// Build from a node: alpha, beta, transA, transB; C is optional.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let op = Gemm {
        alpha: ctx.float_or("alpha", 1.0),
        beta: ctx.float_or("beta", 1.0),
        trans_a: ctx.int_or("transA", 0) != 0,
        trans_b: ctx.int_or("transB", 0) != 0,
    };
    let n = if ctx.has_input(2) { 3 } else { 2 };
    Ok(Built::first(op, n))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Gemm", &[]), &[&[3, 5], &[5, 4], &[4]]);
        check_node(
            node("Gemm", &[("transB", Attr::I(1)), ("alpha", Attr::F(0.5)), ("beta", Attr::F(2.0))]),
            &[&[3, 5], &[4, 5], &[1, 4]],
        );
        check_node(node("Gemm", &[("transA", Attr::I(1))]), &[&[5, 3], &[5, 2]]);
    }
}
