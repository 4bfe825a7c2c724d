//! The supported ONNX operators, one file each. Every op owns its attribute parsing (`build`),
//! its shape rules and evaluation (`forward`), and its vector-Jacobian product (`backward`),
//! side by side. Semantics follow the ONNX operator specification (onnx.ai, Operators.md).

use crate::Tensor;
use std::fmt::Debug;

pub mod activation;
mod attrs;
pub mod broadcast;
mod concat;
mod constant;
mod conv;
mod conv_low_rank;
mod conv_packed;
mod conv_plan;
mod elementwise;
mod flatten;
mod gather;
mod gemm;
mod global_average_pool;
mod matmul;
mod normalization;
mod pad;
mod pool;
mod reduce;
mod reshape;
mod shape;
mod slice;
mod squeeze;
mod transpose;

pub use attrs::BuildCtx;

/// An operator failure, without the node context (the engine adds node name and op).
#[derive(Debug, Clone, PartialEq)]
pub struct OpError(pub String);

impl<T: Into<String>> From<T> for OpError {
    fn from(s: T) -> Self {
        OpError(s.into())
    }
}

/// Result of an op's build, forward or backward.
pub type OpResult<T> = std::result::Result<T, OpError>;

/// What an op's backward pass is given.
pub struct BackwardArgs<'a> {
    /// The op's data inputs, as seen in forward.
    pub inputs: &'a [&'a Tensor],
    /// The op's output from forward.
    pub output: &'a Tensor,
    /// dF/d(output), same shape as `output`.
    pub grad: &'a Tensor,
    /// Which inputs need a gradient; the op may return `None` for the others.
    pub wants: &'a [bool],
}

/// One operator, with its static parameters already resolved.
pub trait Op: Debug + Send + Sync {
    /// The ONNX op_type this implements.
    fn name(&self) -> &'static str;
    /// Compute the output from the data inputs.
    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor>;
    /// Vector-Jacobian product: dF/d(input_i) for every wanted input.
    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>>;
    /// True when the op is elementwise and monotone-nonlinear (marks a hidden layer's output).
    fn is_nonlinearity(&self) -> bool {
        false
    }
    /// Kernel extent and stride per spatial axis, for receptive-field bookkeeping.
    fn spatial_footprint(&self) -> Option<Footprint> {
        None
    }
}

/// How an op maps input positions to output positions along its spatial axes.
#[derive(Debug, Clone, PartialEq)]
pub struct Footprint {
    /// Effective kernel extent per spatial axis (dilation included).
    pub extent: Vec<usize>,
    /// Stride per spatial axis.
    pub stride: Vec<usize>,
}

/// A built op and the positions (in the node's input list) of its data inputs.
pub struct Built {
    /// The op.
    pub op: Box<dyn Op>,
    /// Indices into the node's inputs that are passed to forward, in order.
    pub data_inputs: Vec<usize>,
}

impl Built {
    /// An op whose data inputs are the first `n` node inputs.
    pub fn first(op: impl Op + 'static, n: usize) -> Self {
        Built { op: Box::new(op), data_inputs: (0..n).collect() }
    }
}

type Builder = fn(&BuildCtx) -> OpResult<Built>;

/// Every supported op_type with its builder, in the order shown to users.
const REGISTRY: &[(&str, Builder)] = &[
    ("Conv", conv::build),
    ("Gemm", gemm::build),
    ("MatMul", matmul::build),
    ("Add", elementwise::build_add),
    ("Sub", elementwise::build_sub),
    ("Mul", elementwise::build_mul),
    ("Div", elementwise::build_div),
    ("Relu", activation::relu::build),
    ("LeakyRelu", activation::leaky_relu::build),
    ("Elu", activation::elu::build),
    ("Softplus", activation::softplus::build),
    ("Sigmoid", activation::sigmoid::build),
    ("Tanh", activation::tanh::build),
    ("Exp", activation::exp::build),
    ("Log", activation::log::build),
    ("Clip", activation::clip::build),
    ("BatchNormalization", normalization::build),
    ("Flatten", flatten::build),
    ("Reshape", reshape::build),
    ("Transpose", transpose::build),
    ("Squeeze", squeeze::build_squeeze),
    ("Unsqueeze", squeeze::build_unsqueeze),
    ("Concat", concat::build),
    ("Slice", slice::build),
    ("Pad", pad::build),
    ("MaxPool", pool::build_max),
    ("AveragePool", pool::build_average),
    ("GlobalAveragePool", global_average_pool::build),
    ("ReduceMean", reduce::build_mean),
    ("ReduceSum", reduce::build_sum),
    ("Identity", activation::identity::build),
    ("Dropout", activation::identity::build_dropout),
    ("Cast", activation::identity::build_cast),
    ("Constant", constant::build),
    ("Shape", shape::build),
    ("Gather", gather::build),
    ("ConstantOfShape", constant::build_of_shape),
];

/// Ops that only make sense on constants (folded at load, never differentiated).
pub const FOLD_ONLY: &[&str] = &["Constant", "Shape", "Gather", "ConstantOfShape"];

/// Build the op for a node, or `None` when the op_type is not supported.
pub fn build(ctx: &BuildCtx) -> Option<OpResult<Built>> {
    REGISTRY.iter().find(|(name, _)| *name == ctx.op_type()).map(|(_, builder)| builder(ctx))
}

/// The supported op_types, comma separated, for error messages.
pub fn supported_list() -> String {
    REGISTRY.iter().map(|(n, _)| *n).collect::<Vec<_>>().join(", ")
}

/// Refuse an output whose shape comes from the model's constants (pads, shapes) rather than from
/// data it holds, when it would exceed a quarter of the memory bound: a damaged or hostile file
/// could otherwise make a single op allocate without limit.
pub fn check_output_size(shape: &[usize]) -> OpResult<()> {
    crate::memory::check(&format!("an output of shape {shape:?}"), crate::memory::f32_bytes(shape), 0.25)
        .map_err(|e| OpError(e.to_string()))
}

/// Resolve a possibly negative axis against `rank`.
pub fn normalize_axis(axis: i64, rank: usize) -> OpResult<usize> {
    let r = rank as i64;
    let a = if axis < 0 { axis + r } else { axis };
    if a < 0 || a >= r {
        return Err(OpError(format!("axis {axis} is out of range for a tensor of rank {rank}")));
    }
    Ok(a as usize)
}

#[cfg(test)]
pub(crate) mod testing;
