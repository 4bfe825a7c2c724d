//! Add, Sub, Mul, Div with multidirectional broadcasting (ONNX Add-14, Sub-14, Mul-14, Div-14).

use super::broadcast::{broadcast_shape, sum_to_shape, view_as};
use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::Zip;

/// Which arithmetic operation.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Add,
    Sub,
    Mul,
    Div,
}

/// A broadcasting binary arithmetic op.
#[derive(Debug)]
pub struct Binary {
    kind: Kind,
}

impl Op for Binary {
    fn name(&self) -> &'static str {
        match self.kind {
            Kind::Add => "Add",
            Kind::Sub => "Sub",
            Kind::Mul => "Mul",
            Kind::Div => "Div",
        }
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let shape = broadcast_shape(inputs[0].shape(), inputs[1].shape())?;
        let a = view_as(inputs[0], &shape)?;
        let b = view_as(inputs[1], &shape)?;
        let f: fn(f32, f32) -> f32 = match self.kind {
            Kind::Add => |a, b| a + b,
            Kind::Sub => |a, b| a - b,
            Kind::Mul => |a, b| a * b,
            Kind::Div => |a, b| a / b,
        };
        Ok(Zip::from(&a).and(&b).map_collect(|&a, &b| f(a, b)))
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let (a, b, g) = (args.inputs[0], args.inputs[1], args.grad);
        let shape = g.shape().to_vec();
        let (ga, gb) = match self.kind {
            Kind::Add => (g.clone(), g.clone()),
            Kind::Sub => (g.clone(), g.mapv(|v| -v)),
            Kind::Mul => {
                let (av, bv) = (view_as(a, &shape)?, view_as(b, &shape)?);
                (Zip::from(g).and(&bv).map_collect(|&g, &b| g * b), Zip::from(g).and(&av).map_collect(|&g, &a| g * a))
            }
            Kind::Div => {
                let bv = view_as(b, &shape)?;
                (
                    Zip::from(g).and(&bv).map_collect(|&g, &b| g / b),
                    Zip::from(g).and(&bv).and(args.output).map_collect(|&g, &b, &y| -g * y / b),
                )
            }
        };
        Ok(vec![
            args.wants[0].then(|| sum_to_shape(&ga, a.shape())),
            args.wants[1].then(|| sum_to_shape(&gb, b.shape())),
        ])
    }
}

fn binary(kind: Kind) -> Built {
    Built::first(Binary { kind }, 2)
}

/// Build Add.
pub fn build_add(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(binary(Kind::Add))
}

/// Build Sub.
pub fn build_sub(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(binary(Kind::Sub))
}

/// Build Mul.
pub fn build_mul(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(binary(Kind::Mul))
}

/// Build Div.
pub fn build_div(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(binary(Kind::Div))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, check_node_positive, node};

    #[test]
    fn add_sub_mul_match_tract_and_finite_differences_with_broadcasting() {
        for op in ["Add", "Sub", "Mul"] {
            check_node(node(op, &[]), &[&[2, 3, 4], &[3, 1]]);
            check_node(node(op, &[]), &[&[1, 4], &[3, 1]]);
            check_node(node(op, &[]), &[&[2, 3], &[2, 3]]);
        }
    }

    #[test]
    fn div_matches_tract_and_finite_differences_with_broadcasting() {
        check_node_positive(node("Div", &[]), &[&[2, 3, 4], &[4]]);
    }
}
