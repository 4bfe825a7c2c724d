//! MaxPool and AveragePool over 1-3 spatial axes with strides, pads, auto_pad, dilations and
//! ceil_mode (ONNX MaxPool-12, AveragePool-19; count_include_pad for the average).

use super::conv_plan::{Geometry, WindowAttrs};
use super::{BackwardArgs, BuildCtx, Built, Footprint, Op, OpResult};
use crate::Tensor;
use ndarray::{ArrayD, IxDyn};
use rayon::prelude::*;

/// Which reduction the window applies.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Max,
    Average { include_pad: bool },
}

/// A sliding-window pooling op.
#[derive(Debug)]
pub struct Pool {
    kind: Kind,
    attrs: WindowAttrs,
}

impl Pool {
    fn geometry(&self, x: &ndarray::ArrayViewD<f32>) -> OpResult<(Geometry, usize, usize)> {
        let r = self.attrs.kernel.len();
        if x.ndim() != r + 2 {
            return Err(format!("input {:?} must have rank {} for a {r}-D window", x.shape(), r + 2).into());
        }
        let geo = Geometry::new(&self.attrs, &x.shape()[2..])?;
        Ok((geo, x.shape()[0] * x.shape()[1], x.shape()[2..].iter().product()))
    }

    /// Number of window positions that count for the average at each output position.
    fn divisors(&self, geo: &Geometry) -> Vec<f32> {
        let include_pad = matches!(self.kind, Kind::Average { include_pad: true });
        let ones = vec![1f32; geo.input.iter().product()];
        let mask = geo.pad(&ones, 1, if include_pad { 1.0 } else { 0.0 });
        geo.starts.iter().map(|&s| geo.kernel_offsets.iter().map(|&k| mask[s + k]).sum::<f32>().max(1.0)).collect()
    }

    fn out_shape(&self, x: &ndarray::ArrayViewD<f32>, geo: &Geometry) -> Vec<usize> {
        let mut shape = x.shape()[..2].to_vec();
        shape.extend(&geo.output);
        shape
    }
}

impl Op for Pool {
    fn name(&self) -> &'static str {
        match self.kind {
            Kind::Max => "MaxPool",
            Kind::Average { .. } => "AveragePool",
        }
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let x = inputs[0].as_standard_layout();
        let (geo, planes, ilen) = self.geometry(&x.view())?;
        let xs = x.as_slice().ok_or("input layout")?;
        let olen = geo.starts.len();
        let div = self.divisors(&geo);
        let mut y = vec![0f32; planes * olen];
        y.par_chunks_mut(olen).enumerate().for_each(|(p, ys)| {
            let plane = &xs[p * ilen..(p + 1) * ilen];
            match self.kind {
                Kind::Max => {
                    let xp = geo.pad(plane, 1, f32::NEG_INFINITY);
                    for (o, &s) in ys.iter_mut().zip(&geo.starts) {
                        *o = geo.kernel_offsets.iter().map(|&k| xp[s + k]).fold(f32::NEG_INFINITY, f32::max);
                    }
                }
                Kind::Average { .. } => {
                    let xp = geo.pad(plane, 1, 0.0);
                    for ((o, &s), d) in ys.iter_mut().zip(&geo.starts).zip(&div) {
                        *o = geo.kernel_offsets.iter().map(|&k| xp[s + k]).sum::<f32>() / d;
                    }
                }
            }
        });
        Ok(ArrayD::from_shape_vec(IxDyn(&self.out_shape(&x.view(), &geo)), y).map_err(|e| e.to_string())?)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let x = args.inputs[0].as_standard_layout();
        let g = args.grad.as_standard_layout();
        let (geo, planes, ilen) = self.geometry(&x.view())?;
        let (xs, gs) = (x.as_slice().ok_or("input layout")?, g.as_slice().ok_or("gradient layout")?);
        let olen = geo.starts.len();
        let div = self.divisors(&geo);
        let mut gx = vec![0f32; planes * ilen];
        gx.par_chunks_mut(ilen).enumerate().for_each(|(p, gxs)| {
            let gy = &gs[p * olen..(p + 1) * olen];
            let mut gp = vec![0f32; geo.padded_len()];
            match self.kind {
                Kind::Max => {
                    let xp = geo.pad(&xs[p * ilen..(p + 1) * ilen], 1, f32::NEG_INFINITY);
                    for (&s, &gv) in geo.starts.iter().zip(gy) {
                        // The first maximal position receives the gradient (ties are measure-zero).
                        let best = geo
                            .kernel_offsets
                            .iter()
                            .copied()
                            .fold((f32::NEG_INFINITY, geo.kernel_offsets[0]), |(m, a), k| {
                                if xp[s + k] > m {
                                    (xp[s + k], k)
                                } else {
                                    (m, a)
                                }
                            })
                            .1;
                        gp[s + best] += gv;
                    }
                }
                Kind::Average { .. } => {
                    for ((&s, &gv), d) in geo.starts.iter().zip(gy).zip(&div) {
                        for &k in &geo.kernel_offsets {
                            gp[s + k] += gv / d;
                        }
                    }
                }
            }
            gxs.copy_from_slice(&geo.unpad(&gp, 1));
        });
        Ok(vec![Some(ArrayD::from_shape_vec(IxDyn(x.shape()), gx).map_err(|e| e.to_string())?)])
    }

    fn spatial_footprint(&self) -> Option<Footprint> {
        Some(Footprint { extent: self.attrs.extent(), stride: self.attrs.strides.clone() })
    }
}

fn build(ctx: &BuildCtx, kind: Kind) -> OpResult<Built> {
    if ctx.node().output.get(1).is_some_and(|s| !s.is_empty()) {
        return Err("the optional Indices output is not supported".into());
    }
    Ok(Built::first(Pool { kind, attrs: WindowAttrs::read(ctx, None)? }, 1))
}

/// Build MaxPool.
pub fn build_max(ctx: &BuildCtx) -> OpResult<Built> {
    build(ctx, Kind::Max)
}

/// Build AveragePool.
pub fn build_average(ctx: &BuildCtx) -> OpResult<Built> {
    build(ctx, Kind::Average { include_pad: ctx.int_or("count_include_pad", 0) != 0 })
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_node, node, Attr};

    #[test]
    fn max_pool_matches_tract_and_finite_differences() {
        check_node(node("MaxPool", &[("kernel_shape", Attr::Is(vec![2, 2]))]), &[&[2, 3, 6, 5]]);
        check_node(
            node(
                "MaxPool",
                &[
                    ("kernel_shape", Attr::Is(vec![3, 3])),
                    ("strides", Attr::Is(vec![2, 2])),
                    ("pads", Attr::Is(vec![1, 1, 1, 1])),
                ],
            ),
            &[&[1, 2, 7, 6]],
        );
        check_node(
            node(
                "MaxPool",
                &[("kernel_shape", Attr::Is(vec![2, 2])), ("strides", Attr::Is(vec![2, 2])), ("ceil_mode", Attr::I(1))],
            ),
            &[&[1, 2, 5, 5]],
        );
        check_node(node("MaxPool", &[("kernel_shape", Attr::Is(vec![3]))]), &[&[2, 2, 8]]);
    }

    #[test]
    fn average_pool_matches_tract_and_finite_differences() {
        check_node(node("AveragePool", &[("kernel_shape", Attr::Is(vec![2, 3]))]), &[&[2, 3, 6, 5]]);
        check_node(
            node("AveragePool", &[("kernel_shape", Attr::Is(vec![3, 3])), ("pads", Attr::Is(vec![1, 1, 1, 1]))]),
            &[&[1, 2, 5, 5]],
        );
        check_node(
            node(
                "AveragePool",
                &[
                    ("kernel_shape", Attr::Is(vec![3, 3])),
                    ("pads", Attr::Is(vec![1, 1, 1, 1])),
                    ("count_include_pad", Attr::I(1)),
                ],
            ),
            &[&[1, 2, 5, 5]],
        );
        check_node(
            node("AveragePool", &[("kernel_shape", Attr::Is(vec![2, 2, 2])), ("strides", Attr::Is(vec![2, 1, 2]))]),
            &[&[1, 2, 4, 5, 6]],
        );
    }
}
