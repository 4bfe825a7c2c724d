//! Reshape to a constant target shape; 0 copies the input's dimension (unless allowzero) and
//! one -1 is inferred (ONNX Reshape-14; Reshape-1 took the shape as an attribute).

use super::flatten::reshaped;
use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;

/// Reshape with a target known at load time.
#[derive(Debug)]
pub struct Reshape {
    /// Target shape as written in the model (0 and -1 keep their meaning).
    pub target: Vec<i64>,
    allow_zero: bool,
}

impl Reshape {
    /// The concrete output shape for an input of `shape`.
    pub fn resolve(&self, shape: &[usize]) -> OpResult<Vec<usize>> {
        let total: usize = shape.iter().product();
        let mut out = Vec::with_capacity(self.target.len());
        let mut infer = None;
        for (i, &t) in self.target.iter().enumerate() {
            match t {
                -1 if infer.is_none() => {
                    infer = Some(i);
                    out.push(1);
                }
                0 if !self.allow_zero => out.push(*shape.get(i).ok_or_else(|| {
                    format!("target {:?} copies dimension {i}, which input {shape:?} lacks", self.target)
                })?),
                t if t >= 0 => out.push(t as usize),
                _ => return Err(format!("invalid target shape {:?}", self.target).into()),
            }
        }
        let known: usize = out.iter().product();
        if let Some(i) = infer {
            if known == 0 || total % known != 0 {
                return Err(format!("cannot reshape {shape:?} to {:?}", self.target).into());
            }
            out[i] = total / known;
        }
        if out.iter().product::<usize>() != total {
            return Err(format!(
                "cannot reshape {shape:?} ({total} values) to {:?}; if the model was exported \
                 with a fixed batch size, its batch must be the first dimension",
                self.target
            )
            .into());
        }
        Ok(out)
    }
}

impl Op for Reshape {
    fn name(&self) -> &'static str {
        "Reshape"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        reshaped(inputs[0], &self.resolve(inputs[0].shape())?)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Ok(vec![Some(reshaped(args.grad, args.inputs[0].shape())?)])
    }
}

/// Build from a node: the target comes from the constant second input (or the old attribute).
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let target = match ctx.constant_ints(1, "shape")? {
        Some(t) => t,
        None => ctx.ints("shape").ok_or("the target shape is missing")?,
    };
    let allow_zero = ctx.int_or("allowzero", 0) != 0;
    Ok(Built { op: Box::new(Reshape { target, allow_zero }), data_inputs: vec![0] })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io};

    #[test]
    fn matches_tract_and_finite_differences() {
        for target in [vec![0, -1], vec![3, 2, 4], vec![-1, 8], vec![2, 0, 2, 2]] {
            check_graph(node_io("Reshape", &["x", "s"], &[]), &[&[2, 3, 4]], vec![ints_init("s", &target)]);
        }
    }
}
