//! BatchNormalization in inference mode: y = scale * (x - mean) / sqrt(var + epsilon) + bias,
//! per channel (axis 1) (ONNX BatchNormalization-15 with training_mode = 0).

use super::{BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{Axis, Zip};

/// Batch normalization with frozen statistics: a per-channel affine map.
#[derive(Debug)]
pub struct BatchNorm {
    /// Per-channel gain: scale / sqrt(var + epsilon).
    pub gain: Vec<f32>,
    /// Per-channel offset: bias - mean * gain.
    pub offset: Vec<f32>,
}

impl BatchNorm {
    fn check(&self, x: &Tensor) -> OpResult<()> {
        if x.ndim() < 2 || x.shape()[1] != self.gain.len() {
            return Err(format!("input {:?} must have {} channels on axis 1", x.shape(), self.gain.len()).into());
        }
        Ok(())
    }

    fn per_channel(&self, t: &Tensor, f: impl Fn(f32, usize) -> f32 + Sync) -> Tensor {
        let mut out = t.clone();
        for mut sample in out.axis_iter_mut(Axis(0)) {
            for (c, mut plane) in sample.axis_iter_mut(Axis(0)).enumerate() {
                plane.mapv_inplace(|v| f(v, c));
            }
        }
        out
    }
}

impl Op for BatchNorm {
    fn name(&self) -> &'static str {
        "BatchNormalization"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        self.check(inputs[0])?;
        Ok(self.per_channel(inputs[0], |v, c| v * self.gain[c] + self.offset[c]))
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        Ok(vec![Some(self.per_channel(args.grad, |g, c| g * self.gain[c]))])
    }
}

/// Build from a node: the four statistics inputs must be constant.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    if ctx.int_or("training_mode", 0) != 0 {
        return Err("training_mode = 1; export the model in evaluation mode".into());
    }
    let eps = ctx.float_or("epsilon", 1e-5);
    let scale = ctx.constant_input(1, "scale")?;
    let bias = ctx.constant_input(2, "B")?;
    let mean = ctx.constant_input(3, "input_mean")?;
    let var = ctx.constant_input(4, "input_var")?;
    let c = scale.len();
    if [bias.len(), mean.len(), var.len()].iter().any(|&l| l != c) {
        return Err("scale, B, mean and var must all have one value per channel".into());
    }
    let mut gain = vec![0f32; c];
    let mut offset = vec![0f32; c];
    Zip::from(&mut gain[..])
        .and(&mut offset[..])
        .and(scale.as_slice_memory_order().ok_or("scale layout")?)
        .and(bias.as_slice_memory_order().ok_or("bias layout")?)
        .and(mean.as_slice_memory_order().ok_or("mean layout")?)
        .and(var.as_slice_memory_order().ok_or("var layout")?)
        .for_each(|g, o, &s, &b, &m, &v| {
            *g = s / (v + eps).sqrt();
            *o = b - m * *g;
        });
    Ok(Built { op: Box::new(BatchNorm { gain, offset }), data_inputs: vec![0] })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, node_io, random_tensor, Attr};
    use crate::model::tensor_proto::encode_f32;

    #[test]
    fn matches_tract_and_finite_differences() {
        let init = |name: &str, seed: u64, positive: bool| encode_f32(name, &random_tensor(&[3], seed, positive));
        let n = node_io("BatchNormalization", &["x", "s", "b", "m", "v"], &[("epsilon", Attr::F(1e-3))]);
        check_graph(
            n,
            &[&[2, 3, 4, 5]],
            vec![init("s", 1, false), init("b", 2, false), init("m", 3, false), init("v", 4, true)],
        );
    }
}
