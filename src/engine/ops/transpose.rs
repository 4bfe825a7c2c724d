//! Transpose: permute axes (ONNX Transpose-13; default reverses them).

use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;

/// Axis permutation.
#[derive(Debug)]
pub struct Transpose {
    /// Output axis i is input axis perm[i]; `None` reverses.
    pub perm: Option<Vec<usize>>,
}

impl Transpose {
    fn perm_for(&self, rank: usize) -> OpResult<Vec<usize>> {
        let p = self.perm.clone().unwrap_or_else(|| (0..rank).rev().collect());
        let mut seen = vec![false; rank];
        if p.len() != rank || p.iter().any(|&a| a >= rank || std::mem::replace(&mut seen[a], true)) {
            return Err(format!("perm {p:?} is not a permutation of {rank} axes").into());
        }
        Ok(p)
    }
}

impl Op for Transpose {
    fn name(&self) -> &'static str {
        "Transpose"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let p = self.perm_for(inputs[0].ndim())?;
        Ok(inputs[0].view().permuted_axes(p).as_standard_layout().into_owned())
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let p = self.perm_for(args.grad.ndim())?;
        let mut inverse = vec![0; p.len()];
        for (i, &a) in p.iter().enumerate() {
            inverse[a] = i;
        }
        Ok(vec![Some(args.grad.view().permuted_axes(inverse).as_standard_layout().into_owned())])
    }
}

/// Build from a node: reads `perm`.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Transpose { perm: ctx.usizes("perm")? }, 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_node(node("Transpose", &[("perm", Attr::Is(vec![0, 3, 1, 2]))]), &[&[2, 3, 4, 5]]);
        check_node(node("Transpose", &[]), &[&[2, 3, 4]]);
    }
}
