//! Elementwise operators (activations and pass-throughs). Each file defines the function and its
//! derivative; [`Unary`] turns that into an [`Op`] with forward and backward.

use super::{BackwardArgs, Op, OpResult};
use crate::Tensor;
use ndarray::Zip;

pub mod clip;
pub mod elu;
pub mod exp;
pub mod identity;
pub mod leaky_relu;
pub mod log;
pub mod relu;
pub mod sigmoid;
pub mod softplus;
pub mod tanh;

/// A scalar function applied elementwise, with its derivative.
pub trait Pointwise: std::fmt::Debug + Send + Sync {
    /// ONNX op_type.
    const NAME: &'static str;
    /// True for the nonlinearities that end a hidden layer (not for Exp/Log/Identity).
    const ENDS_LAYER: bool;
    /// y = f(x).
    fn value(&self, x: f32) -> f32;
    /// dy/dx, given both x and y = f(x) (whichever is cheaper).
    fn slope(&self, x: f32, y: f32) -> f32;
}

/// The op made from a [`Pointwise`] function.
#[derive(Debug)]
pub struct Unary<P: Pointwise>(pub P);

impl<P: Pointwise> Op for Unary<P> {
    fn name(&self) -> &'static str {
        P::NAME
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        Ok(inputs[0].mapv(|x| self.0.value(x)))
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let mut g = args.grad.clone();
        Zip::from(&mut g).and(args.inputs[0]).and(args.output).for_each(|g, &x, &y| *g *= self.0.slope(x, y));
        Ok(vec![Some(g)])
    }

    fn is_nonlinearity(&self) -> bool {
        P::ENDS_LAYER
    }
}
