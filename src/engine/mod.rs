//! The differentiable engine: interprets the ONNX graph with the operator semantics of the open
//! standard, keeps every activation of a forward pass on a [`Tape`], and runs reverse mode
//! (vector-Jacobian products, one `backward` per op) to give gradients at any set of values.
//! Values can be overridden during forward (clamping units for ablation).

pub mod batch;
pub mod gemm;
pub mod graph;
pub mod ops;
mod run;

pub use graph::{Graph, Node, Source, Value, ValueId};
pub use run::{Override, Part, Tape};
