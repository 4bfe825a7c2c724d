//! Pad in constant, reflect or edge mode; negative pads crop (ONNX Pad-18: pads, constant_value
//! and axes are inputs from opset 11; Pad-2 took pads and value as attributes).

use super::conv_plan::indices;
use super::{normalize_axis, BackwardArgs, BuildCtx, Built, Op, OpResult};
use crate::Tensor;
use ndarray::{ArrayD, IxDyn};

/// How values outside the input are made.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Mode {
    Constant,
    Reflect,
    Edge,
}

/// Padding with pads known at load time.
#[derive(Debug)]
pub struct Pad {
    mode: Mode,
    pads: Vec<i64>,
    axes: Option<Vec<i64>>,
    value: f32,
}

impl Pad {
    /// For each axis, the source index (or None = constant) of every output index.
    fn maps(&self, shape: &[usize]) -> OpResult<Vec<Vec<Option<usize>>>> {
        let r = shape.len();
        let axes: Vec<usize> = match &self.axes {
            Some(a) => a.iter().map(|&a| normalize_axis(a, r)).collect::<OpResult<_>>()?,
            None => (0..r).collect(),
        };
        if self.pads.len() != 2 * axes.len() {
            return Err(
                format!("pads {:?} must hold two values per padded axis ({} axes)", self.pads, axes.len()).into()
            );
        }
        // Output lengths first (checked arithmetic), and the output's size against the memory
        // bound, before any per-index map is built.
        let mut out_shape = shape.to_vec();
        for (i, &a) in axes.iter().enumerate() {
            let (b, e) = (self.pads[i], self.pads[axes.len() + i]);
            let len = (shape[a] as i64).checked_add(b).and_then(|l| l.checked_add(e));
            match len {
                Some(len) if len >= 0 => out_shape[a] = len as usize,
                Some(_) => return Err(format!("pads {:?} crop more than axis {a} holds", self.pads).into()),
                None => return Err(format!("pads {:?} are too large", self.pads).into()),
            }
        }
        super::check_output_size(&out_shape)?;
        let mut maps: Vec<Vec<Option<usize>>> = shape.iter().map(|&n| (0..n).map(Some).collect()).collect();
        for (i, &a) in axes.iter().enumerate() {
            let n = shape[a] as i64;
            let (b, e) = (self.pads[i], self.pads[axes.len() + i]);
            let len = out_shape[a] as i64;
            if self.mode == Mode::Reflect && (n < 2 || b >= n || e >= n) && (b > 0 || e > 0) {
                return Err(
                    format!("reflect padding of {b}/{e} needs an axis longer than the pad (axis {a} has {n})").into()
                );
            }
            maps[a] = (0..len)
                .map(|o| {
                    let src = o - b;
                    if (0..n).contains(&src) {
                        return Some(src as usize);
                    }
                    match self.mode {
                        Mode::Constant => None,
                        Mode::Edge if n > 0 => Some(src.clamp(0, n - 1) as usize),
                        Mode::Edge => None,
                        Mode::Reflect => {
                            let period = 2 * (n - 1);
                            let m = src.rem_euclid(period);
                            Some((if m < n { m } else { period - m }) as usize)
                        }
                    }
                })
                .collect();
        }
        Ok(maps)
    }
}

impl Op for Pad {
    fn name(&self) -> &'static str {
        "Pad"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let x = inputs[0];
        let maps = self.maps(x.shape())?;
        let out_shape: Vec<usize> = maps.iter().map(Vec::len).collect();
        let mut y = ArrayD::from_elem(IxDyn(&out_shape), self.value);
        for (o, idx) in y.iter_mut().zip(indices(&out_shape)) {
            let src: Option<Vec<usize>> = idx.iter().zip(&maps).map(|(&i, m)| m[i]).collect();
            if let Some(s) = src {
                *o = x[IxDyn(&s)];
            }
        }
        Ok(y)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let x = args.inputs[0];
        let maps = self.maps(x.shape())?;
        let out_shape: Vec<usize> = maps.iter().map(Vec::len).collect();
        let mut g = ArrayD::zeros(IxDyn(x.shape()));
        for (gy, idx) in args.grad.iter().zip(indices(&out_shape)) {
            let src: Option<Vec<usize>> = idx.iter().zip(&maps).map(|(&i, m)| m[i]).collect();
            if let Some(s) = src {
                g[IxDyn(&s)] += gy;
            }
        }
        Ok(vec![Some(g)])
    }
}

/// Build from a node.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let mode = match ctx.string("mode").as_deref().unwrap_or("constant") {
        "constant" => Mode::Constant,
        "reflect" => Mode::Reflect,
        "edge" => Mode::Edge,
        m => return Err(format!("mode '{m}' is not supported (constant, reflect, edge)").into()),
    };
    let op = if ctx.opset() >= 11 {
        Pad {
            mode,
            pads: ctx.constant_ints(1, "pads")?.ok_or("pads are required")?,
            value: ctx.constant_scalar(2, "constant_value")?.unwrap_or(0.0),
            axes: ctx.constant_ints(3, "axes")?,
        }
    } else {
        Pad { mode, pads: ctx.ints("pads").ok_or("pads are required")?, value: ctx.float_or("value", 0.0), axes: None }
    };
    Ok(Built { op: Box::new(op), data_inputs: vec![0] })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, ints_init, node_io, scalar_init, Attr};

    #[test]
    fn matches_tract_and_finite_differences() {
        check_graph(
            node_io("Pad", &["x", "p", "v"], &[("mode", Attr::S("constant"))]),
            &[&[2, 3, 4]],
            vec![ints_init("p", &[0, 1, 2, 0, 2, 1]), scalar_init("v", 0.5)],
        );
        // constant_value only applies to constant mode (ONNX Pad-18), so it is left out here.
        for mode in ["reflect", "edge"] {
            check_graph(
                node_io("Pad", &["x", "p"], &[("mode", Attr::S(mode))]),
                &[&[2, 3, 4]],
                vec![ints_init("p", &[0, 1, 2, 0, 2, 1])],
            );
        }
    }

    #[test]
    fn negative_pads_crop_as_the_standard_says() {
        // ONNX Pad: "a negative value ... means removing pixels". tract refuses negative pads,
        // so the expected values are written out from the specification.
        use super::{Mode, Pad};
        use crate::engine::ops::testing::check_gradients;
        use crate::engine::ops::Op;
        let x = ndarray::ArrayD::from_shape_fn(ndarray::IxDyn(&[3, 5]), |i| (i[0] * 10 + i[1]) as f32);
        let op = Pad { mode: Mode::Constant, pads: vec![1, -1, -1, 2], axes: None, value: 9.0 };
        let y = op.forward(&[&x]).unwrap();
        assert_eq!(y.shape(), &[3, 6]);
        let row0: Vec<f32> = y.index_axis(ndarray::Axis(0), 0).iter().copied().collect();
        assert_eq!(row0, vec![9.0; 6]);
        let row1: Vec<f32> = y.index_axis(ndarray::Axis(0), 1).iter().copied().collect();
        assert_eq!(row1, vec![1.0, 2.0, 3.0, 4.0, 9.0, 9.0]);
        check_gradients(&op, &[x], &y);
    }
}
