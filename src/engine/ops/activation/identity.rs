//! Pass-through ops at inference: Identity (ONNX Identity-16), Dropout (ONNX Dropout-13, which
//! is the identity when not training) and Cast (ONNX Cast-13; every tensor here is f32, so a cast
//! to an integer type rounds toward zero as the standard does for float-to-int).

use super::{Pointwise, Unary};
use crate::engine::ops::{BuildCtx, Built, OpResult};

/// y = x.
#[derive(Debug)]
pub struct Identity;

impl Pointwise for Identity {
    const NAME: &'static str = "Identity";
    const ENDS_LAYER: bool = false;
    fn value(&self, x: f32) -> f32 {
        x
    }
    fn slope(&self, _x: f32, _y: f32) -> f32 {
        1.0
    }
}

/// Cast to an integer type: truncation toward zero (gradient zero almost everywhere).
#[derive(Debug)]
pub struct TruncatingCast;

impl Pointwise for TruncatingCast {
    const NAME: &'static str = "Cast";
    const ENDS_LAYER: bool = false;
    fn value(&self, x: f32) -> f32 {
        x.trunc()
    }
    fn slope(&self, _x: f32, _y: f32) -> f32 {
        0.0
    }
}

/// Build Identity.
pub fn build(_ctx: &BuildCtx) -> OpResult<Built> {
    Ok(Built::first(Unary(Identity), 1))
}

/// Build Dropout: identity at inference; training mode (a constant true `training_mode`) is refused.
pub fn build_dropout(ctx: &BuildCtx) -> OpResult<Built> {
    if let Some(mode) = ctx.constant_scalar(2, "training_mode")? {
        if mode != 0.0 {
            return Err("training_mode is true; export the model in evaluation mode".into());
        }
    }
    Ok(Built::first(Unary(Identity), 1))
}

/// Build Cast: float targets pass through; integer targets truncate.
pub fn build_cast(ctx: &BuildCtx) -> OpResult<Built> {
    // TensorProto.DataType: FLOAT=1, FLOAT16=10, DOUBLE=11, BFLOAT16=16 are floating point.
    let to = ctx.int_or("to", 1);
    if matches!(to, 1 | 10 | 11 | 16) {
        Ok(Built::first(Unary(Identity), 1))
    } else if matches!(to, 2..=7 | 9 | 12 | 13) {
        Ok(Built::first(Unary(TruncatingCast), 1))
    } else {
        Err(format!("cast to data type {to} is not supported (only numeric types)").into())
    }
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, node_io, Attr};

    #[test]
    fn identity_and_dropout_match_tract() {
        check_node(node("Identity", &[]), &[&[3, 4]]);
        check_node(node("Dropout", &[]), &[&[3, 4]]);
        check_node(node("Cast", &[("to", Attr::I(1))]), &[&[3, 4]]);
    }

    #[test]
    fn cast_to_an_integer_type_truncates_like_tract() {
        // Float to int64 rounds toward zero (ONNX Cast-13); the gradient is zero almost everywhere.
        use crate::engine::ops::testing::{random_tensor, tract_forward};
        use crate::engine::ops::Op;
        let n = node_io("Cast", &["x0"], &[("to", Attr::I(7))]);
        let x = random_tensor(&[3, 4], 5, false).mapv(|v| v * 5.0);
        let ours = super::Unary(super::TruncatingCast).forward(&[&x]).unwrap();
        assert_eq!(ours, tract_forward(&n, &[x], &[]));
    }
}
