//! sufficit: open up a convolutional encoding model of sensory neurons (exported to ONNX),
//! run physiology protocols on it, attribute its responses to hidden units, and cut it down to
//! the smallest subcircuit that still produces them.
//!
//! Pipeline, one module per stage: [`model`] (intake) → [`engine`] (differentiable
//! interpreter) → stimuli → responses → attribution → reduction → report → studies.

pub mod attribution;
pub mod cli;
pub mod demo;
pub mod engine;
pub mod error;
pub mod figure;
pub mod interrupt;
pub mod memory;
pub mod model;
pub mod output;
pub mod palette;
pub mod reduction;
pub mod report;
pub mod response;
pub mod stimulus;
pub mod study;

pub use error::{Error, Result};

/// The tensor type used everywhere: a dynamic-rank f32 array.
pub type Tensor = ndarray::ArrayD<f32>;
