//! The forward-only fast path: tract's optimised plan for the (folded) model, used when no
//! gradients or overrides are needed.

use super::Model;
use crate::{Error, Result, Tensor};
use std::sync::Arc;
use tract_onnx::prelude::*;

/// tract's runnable plan for a model with a symbolic batch.
pub struct FastPath {
    plan: Arc<TypedRunnableModel>,
}

impl FastPath {
    /// Build and optimise the plan for batches of exactly `batch` samples; a fixed batch lets
    /// tract choose its fastest kernels.
    pub fn with_batch(model: &Model, batch: usize) -> Result<Self> {
        let fail = |e: TractError| Error::Model {
            path: model.path.clone(),
            message: format!("tract could not prepare the forward plan: {e:#}"),
        };
        let mut shape = model.graph.values[model.graph.input].shape.clone();
        shape[0] = batch;
        let plan = tract_onnx::onnx()
            .model_for_proto_model(&model.proto)
            .and_then(|m| m.with_input_fact(0, f32::fact(&shape).into()))
            .and_then(|m| m.into_optimized())
            .and_then(|m| m.into_runnable())
            .map_err(fail)?;
        Ok(FastPath { plan })
    }

    /// Build and optimise the plan (takes a moment; build once, run many batches).
    pub fn new(model: &Model) -> Result<Self> {
        let fail = |e: TractError| Error::Model {
            path: model.path.clone(),
            message: format!("tract could not prepare the forward plan: {e:#}"),
        };
        let plan = tract_onnx::onnx()
            .model_for_proto_model(&model.proto)
            .and_then(|m| m.into_optimized())
            .and_then(|m| m.into_runnable())
            .map_err(fail)?;
        Ok(FastPath { plan })
    }

    /// Run one batch (any batch size) and return the model outputs.
    pub fn run(&self, input: Tensor) -> Result<Vec<Tensor>> {
        let out = self
            .plan
            .run(tvec![input.into_tvalue()])
            .map_err(|e| Error::Usage(format!("tract forward failed: {e:#}")))?;
        out.iter()
            .map(|t| {
                t.to_plain_array_view::<f32>()
                    .map(|v| v.to_owned())
                    .map_err(|e| Error::Usage(format!("tract output is not f32: {e}")))
            })
            .collect()
    }
}
