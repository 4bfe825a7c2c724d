//! Constant (ONNX Constant-13: value, value_float(s), value_int(s)) and ConstantOfShape
//! (ONNX ConstantOfShape-9). Both are folded at load.

use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::model::tensor_proto;
use crate::Tensor;
use ndarray::{arr0, ArrayD, IxDyn};

/// A fixed value.
#[derive(Debug)]
pub struct Constant {
    value: Tensor,
}

/// A tensor of a given (constant) shape filled with one value.
#[derive(Debug)]
pub struct ConstantOfShape {
    value: f32,
}

fn not_differentiable(name: &str) -> OpResult<Vec<Option<Tensor>>> {
    Err(format!("{name} only computes constants and has no gradient").into())
}

impl Op for Constant {
    fn name(&self) -> &'static str {
        "Constant"
    }
    fn forward(&self, _inputs: &[&Tensor]) -> OpResult<Tensor> {
        Ok(self.value.clone())
    }
    fn backward(&self, _args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        not_differentiable("Constant")
    }
}

impl Op for ConstantOfShape {
    fn name(&self) -> &'static str {
        "ConstantOfShape"
    }
    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let shape: Vec<usize> = inputs[0].iter().map(|&v| v.max(0.0) as usize).collect();
        super::check_output_size(&shape)?;
        Ok(ArrayD::from_elem(IxDyn(&shape), self.value))
    }
    fn backward(&self, _args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        not_differentiable("ConstantOfShape")
    }
}

/// Build Constant from whichever value attribute is present.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let value = if let Some(a) = ctx.raw("value") {
        let t = a.t.as_ref().ok_or("attribute 'value' holds no tensor")?;
        tensor_proto::decode(t)?
    } else if let Some(a) = ctx.raw("value_float") {
        arr0(a.f).into_dyn()
    } else if let Some(a) = ctx.raw("value_floats") {
        ArrayD::from_shape_vec(IxDyn(&[a.floats.len()]), a.floats.clone()).map_err(|e| e.to_string())?
    } else if let Some(a) = ctx.raw("value_int") {
        arr0(a.i as f32).into_dyn()
    } else if let Some(a) = ctx.raw("value_ints") {
        let v: Vec<f32> = a.ints.iter().map(|&i| i as f32).collect();
        ArrayD::from_shape_vec(IxDyn(&[v.len()]), v).map_err(|e| e.to_string())?
    } else {
        return Err("no value attribute (value, value_float(s), value_int(s)) is set".into());
    };
    Ok(Built { op: Box::new(Constant { value }), data_inputs: vec![] })
}

/// Build ConstantOfShape: the fill value is a one-element tensor attribute (default 0).
pub fn build_of_shape(ctx: &BuildCtx) -> OpResult<Built> {
    let value = match ctx.raw("value").and_then(|a| a.t.as_ref()) {
        Some(t) => tensor_proto::decode(t)?.iter().next().copied().unwrap_or(0.0),
        None => 0.0,
    };
    Ok(Built::first(ConstantOfShape { value }, 1))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io, Attr};

    #[test]
    fn constant_matches_tract() {
        check_graph(node_io("Constant", &[], &[("value_ints", Attr::Is(vec![3, 1, 4]))]), &[], vec![]);
    }

    #[test]
    fn constant_of_shape_matches_tract() {
        check_graph(node_io("ConstantOfShape", &["s"], &[]), &[], vec![ints_init("s", &[2, 3])]);
    }
}
