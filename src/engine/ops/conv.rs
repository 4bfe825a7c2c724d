//! Conv: 1-, 2- and 3-D convolution (cross-correlation) with groups, strides, dilations, pads and
//! auto_pad (ONNX Conv-11). Runs as strided GEMMs over shifted views of the padded input (see
//! `conv_plan`), samples in parallel; backward gives input, weight and bias gradients the same way.

use super::conv_low_rank::LowRank;
use super::conv_packed::Packed;
use super::conv_plan::{Geometry, WindowAttrs};
use super::{BackwardArgs, BuildCtx, Built, Footprint, Op, OpResult};
use crate::engine::gemm::{matmul_acc, Mat, MatMut};
use crate::Tensor;
use ndarray::{ArrayD, Axis, IxDyn};
use rayon::prelude::*;
use std::sync::{Arc, Mutex};

/// Weights last seen by a [`Conv`] and their factorisation (`None`: not low-rank).
type FactorCache = Option<(Vec<f32>, Option<Arc<LowRank>>)>;

/// A convolution layer.
#[derive(Debug)]
pub struct Conv {
    attrs: WindowAttrs,
    group: usize,
    /// The last weights seen and their low-rank factorisation, if any: factorising takes a
    /// singular value decomposition per output channel, so it is done once per weights.
    low_rank: Mutex<FactorCache>,
}

/// Sizes of one call, checked against each other.
pub(super) struct Dims {
    pub n: usize,
    pub cin: usize,
    pub cout: usize,
    /// Input channels per group.
    pub cig: usize,
    /// Output channels per group.
    pub cog: usize,
    /// Kernel volume.
    pub kvol: usize,
    /// Kernel size along the last spatial axis.
    pub kernel_last: usize,
    /// Dilation along the last spatial axis.
    pub dilation_last: usize,
    pub geo: Geometry,
}

impl Conv {
    fn dims(&self, x: &Tensor, w: &Tensor) -> OpResult<Dims> {
        let r = self.attrs.kernel.len();
        if x.ndim() != r + 2 || w.ndim() != r + 2 {
            return Err(format!(
                "input {:?} and weights {:?} must both have rank {} for a {r}-D kernel",
                x.shape(),
                w.shape(),
                r + 2
            )
            .into());
        }
        let (n, cin, cout, cig) = (x.shape()[0], x.shape()[1], w.shape()[0], w.shape()[1]);
        if w.shape()[2..] != self.attrs.kernel[..] {
            return Err(format!("weights {:?} disagree with kernel_shape {:?}", w.shape(), self.attrs.kernel).into());
        }
        if cin != cig * self.group || cout % self.group != 0 {
            return Err(format!(
                "input has {cin} channels, weights {:?} with group={} expect {} input and a \
                 multiple of {} output channels",
                w.shape(),
                self.group,
                cig * self.group,
                self.group
            )
            .into());
        }
        let geo = Geometry::new(&self.attrs, &x.shape()[2..])?;
        let kvol = self.attrs.kernel.iter().product();
        Ok(Dims {
            n,
            cin,
            cout,
            cig,
            cog: cout / self.group,
            kvol,
            kernel_last: *self.attrs.kernel.last().unwrap_or(&1),
            dilation_last: *self.attrs.dilations.last().unwrap_or(&1),
            geo,
        })
    }

    /// The low-rank factorisation of `w` (see [`LowRank`]), cached for the last weights seen.
    fn low_rank(&self, d: &Dims, w: &[f32]) -> Option<Arc<LowRank>> {
        // Single-group weights only: `LowRank::find` refuses the others.
        if !Packed::applies(d) {
            return None;
        }
        let mut cache = self.low_rank.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
        match cache.as_ref() {
            Some((seen, low)) if seen.as_slice() == w => low.clone(),
            _ => {
                let low = LowRank::find(d, w).map(Arc::new);
                *cache = Some((w.to_vec(), low.clone()));
                low
            }
        }
    }
}

impl Op for Conv {
    fn name(&self) -> &'static str {
        "Conv"
    }

    fn forward(&self, inputs: &[&Tensor]) -> OpResult<Tensor> {
        let (x, w) = (inputs[0], inputs[1]);
        let d = self.dims(x, w)?;
        if let Some(b) = inputs.get(2).filter(|b| b.shape() != [d.cout]) {
            return Err(format!("bias has shape {:?}; expected [{}], one per output channel", b.shape(), d.cout).into());
        }
        let x = x.as_standard_layout();
        let w = w.as_standard_layout();
        let (xs, ws) = (x.as_slice().ok_or("input layout")?, w.as_slice().ok_or("weight layout")?);
        let (ilen, olen) = (d.geo.input.iter().product::<usize>(), d.geo.valid.len());
        let low_rank = self.low_rank(&d, ws);
        let packed = (low_rank.is_none() && Packed::applies(&d)).then(|| Packed::for_forward(&d, ws));
        let mut y = vec![0f32; d.n * d.cout * olen];
        y.par_chunks_mut(d.cout * olen).enumerate().for_each(|(s, ys)| {
            let xp = d.geo.pad(&xs[s * d.cin * ilen..(s + 1) * d.cin * ilen], d.cin, 0.0);
            let (plen, vlen) = (d.geo.padded_len(), d.geo.virtual_len);
            let mut yv = vec![0f32; d.cout * vlen];
            if let Some(l) = &low_rank {
                l.forward(&d, &xp, &mut yv);
            } else if let Some(p) = &packed {
                p.forward(&d, &xp, &mut yv);
            }
            for g in (0..self.group).filter(|_| packed.is_none() && low_rank.is_none()) {
                for (kidx, &koff) in d.geo.kernel_offsets.iter().enumerate() {
                    for seg in &d.geo.segments {
                        matmul_acc(
                            d.cog,
                            seg.len,
                            d.cig,
                            MatMut { data: &mut yv, offset: g * d.cog * vlen + seg.q0, rs: vlen, cs: 1 },
                            Mat { data: ws, offset: g * d.cog * d.cig * d.kvol + kidx, rs: d.cig * d.kvol, cs: d.kvol },
                            Mat {
                                data: &xp,
                                offset: g * d.cig * plen + seg.in0 + koff,
                                rs: plen,
                                cs: d.geo.col_stride,
                            },
                        );
                    }
                }
            }
            for c in 0..d.cout {
                let bias = inputs.get(2).map_or(0.0, |b| b[[c]]);
                for (i, &q) in d.geo.valid.iter().enumerate() {
                    ys[c * olen + i] = yv[c * vlen + q] + bias;
                }
            }
        });
        let mut shape = vec![d.n, d.cout];
        shape.extend(&d.geo.output);
        Ok(ArrayD::from_shape_vec(IxDyn(&shape), y).map_err(|e| e.to_string())?)
    }

    fn backward(&self, args: &BackwardArgs) -> OpResult<Vec<Option<Tensor>>> {
        let (x, w) = (args.inputs[0], args.inputs[1]);
        let d = self.dims(x, w)?;
        let x = x.as_standard_layout();
        let w = w.as_standard_layout();
        let gy = args.grad.as_standard_layout();
        let (xs, ws, gs) = (
            x.as_slice().ok_or("input layout")?,
            w.as_slice().ok_or("weight layout")?,
            gy.as_slice().ok_or("gradient layout")?,
        );
        let (ilen, olen) = (d.geo.input.iter().product::<usize>(), d.geo.valid.len());
        let (plen, vlen) = (d.geo.padded_len(), d.geo.virtual_len);
        let (want_x, want_w) = (args.wants[0], args.wants[1]);
        let wlen = w.len();

        let packed = (want_x && Packed::applies(&d)).then(|| Packed::for_input_gradient(&d, ws));
        // Per sample: scatter dy into the virtual layout, then the two adjoint products.
        let per_sample = |s: usize| -> (Vec<f32>, Vec<f32>) {
            let mut gv = vec![0f32; d.cout * vlen];
            for c in 0..d.cout {
                for (i, &q) in d.geo.valid.iter().enumerate() {
                    gv[c * vlen + q] = gs[(s * d.cout + c) * olen + i];
                }
            }
            let xp = want_w.then(|| d.geo.pad(&xs[s * d.cin * ilen..(s + 1) * d.cin * ilen], d.cin, 0.0));
            let mut gxp = if want_x { vec![0f32; d.cin * plen] } else { Vec::new() };
            let mut gw = if want_w { vec![0f32; wlen] } else { Vec::new() };
            if let (true, Some(packed)) = (want_x, &packed) {
                packed.input_gradient(&d, &gv, &mut gxp);
            }
            for g in 0..self.group {
                for (kidx, &koff) in d.geo.kernel_offsets.iter().enumerate() {
                    for seg in &d.geo.segments {
                        let gv_win = Mat { data: &gv, offset: g * d.cog * vlen + seg.q0, rs: vlen, cs: 1 };
                        if want_x && packed.is_none() {
                            matmul_acc(
                                d.cig,
                                seg.len,
                                d.cog,
                                MatMut {
                                    data: &mut gxp,
                                    offset: g * d.cig * plen + seg.in0 + koff,
                                    rs: plen,
                                    cs: d.geo.col_stride,
                                },
                                Mat {
                                    data: ws,
                                    offset: g * d.cog * d.cig * d.kvol + kidx,
                                    rs: d.kvol,
                                    cs: d.cig * d.kvol,
                                },
                                gv_win,
                            );
                        }
                        if let Some(xp) = &xp {
                            matmul_acc(
                                d.cog,
                                d.cig,
                                seg.len,
                                MatMut {
                                    data: &mut gw,
                                    offset: g * d.cog * d.cig * d.kvol + kidx,
                                    rs: d.cig * d.kvol,
                                    cs: d.kvol,
                                },
                                gv_win,
                                Mat {
                                    data: xp,
                                    offset: g * d.cig * plen + seg.in0 + koff,
                                    rs: d.geo.col_stride,
                                    cs: plen,
                                },
                            );
                        }
                    }
                }
            }
            let gx = if want_x { d.geo.unpad(&gxp, d.cin) } else { Vec::new() };
            (gx, gw)
        };

        let results: Vec<(Vec<f32>, Vec<f32>)> = (0..d.n).into_par_iter().map(per_sample).collect();
        let mut out = vec![None; args.inputs.len()];
        if want_x {
            let flat: Vec<f32> = results.iter().flat_map(|(gx, _)| gx.iter().copied()).collect();
            out[0] = Some(ArrayD::from_shape_vec(IxDyn(x.shape()), flat).map_err(|e| e.to_string())?);
        }
        if want_w {
            let mut total = vec![0f32; wlen];
            for (_, gw) in &results {
                total.iter_mut().zip(gw).for_each(|(t, v)| *t += v);
            }
            out[1] = Some(ArrayD::from_shape_vec(IxDyn(w.shape()), total).map_err(|e| e.to_string())?);
        }
        if args.inputs.len() > 2 && args.wants[2] {
            let mut gb = gy.to_owned();
            while gb.ndim() > 2 {
                gb = gb.sum_axis(Axis(2));
            }
            out[2] = Some(gb.sum_axis(Axis(0)));
        }
        Ok(out)
    }

    fn spatial_footprint(&self) -> Option<Footprint> {
        Some(Footprint { extent: self.attrs.extent(), stride: self.attrs.strides.clone() })
    }
}

/// Build from a node; the kernel size defaults to the weights' spatial shape.
pub fn build(ctx: &BuildCtx) -> OpResult<Built> {
    let kernel = ctx.constant_input(1, "W").ok().map(|w| w.shape().get(2..).unwrap_or_default().to_vec());
    let attrs = WindowAttrs::read(ctx, kernel)?;
    let group = usize::try_from(ctx.int_or("group", 1))
        .ok()
        .filter(|&g| g > 0)
        .ok_or("attribute 'group' must be a positive integer")?;
    let n = if ctx.has_input(2) { 3 } else { 2 };
    Ok(Built::first(Conv { attrs, group, low_rank: Mutex::new(None) }, n))
}

#[cfg(test)]
mod tests {
    use crate::engine::ops::testing::{check_graph, node_io, random_init, Attr};

    fn case(attrs: &[(&str, Attr)], x: &[usize], w: &[usize], bias: bool) {
        let mut inputs = vec!["x", "w"];
        let mut inits = vec![random_init("w", w, 5)];
        if bias {
            inputs.push("b");
            inits.push(random_init("b", &[w[0]], 6));
        }
        check_graph(node_io("Conv", &inputs, attrs), &[x], inits);
    }

    #[test]
    fn conv2d_matches_tract_and_finite_differences() {
        case(&[], &[2, 3, 7, 6], &[4, 3, 3, 2], true);
        case(&[("pads", Attr::Is(vec![1, 2, 0, 1]))], &[1, 2, 5, 5], &[3, 2, 3, 3], true);
        case(&[("strides", Attr::Is(vec![2, 2]))], &[2, 2, 7, 8], &[3, 2, 3, 3], false);
        case(&[("strides", Attr::Is(vec![1, 2]))], &[1, 2, 6, 8], &[2, 2, 2, 3], true);
        case(&[("dilations", Attr::Is(vec![2, 1]))], &[1, 2, 7, 5], &[2, 2, 2, 2], true);
        case(&[("group", Attr::I(2))], &[2, 4, 5, 5], &[6, 2, 3, 3], true);
        case(
            &[("auto_pad", Attr::S("SAME_UPPER")), ("strides", Attr::Is(vec![2, 2]))],
            &[1, 2, 7, 6],
            &[2, 2, 3, 3],
            true,
        );
        case(&[("auto_pad", Attr::S("SAME_LOWER"))], &[1, 2, 6, 6], &[2, 2, 2, 2], true);
    }

    #[test]
    fn block_diagonal_weights_run_by_blocks_and_match_tract_and_finite_differences() {
        // Output channels 0-1 read inputs 0-1, 2-4 read 2-4 (channel 3 only through 2-4's
        // kernels), 5 reads 5: the packed path splits them, tract runs them whole. The weight
        // gradient of the zero kernels is checked too.
        let (x, w) = ([2, 6, 7, 6], [6usize, 6, 3, 2]);
        let mut init = random_init("w", &w, 5);
        let block = |c: usize| [0, 0, 1, 1, 1, 2][c];
        for (i, v) in init.float_data.iter_mut().enumerate() {
            let (co, ci) = (i / (6 * 6), (i / 6) % 6);
            if block(co) != block(ci) {
                *v = 0.0;
            }
        }
        check_graph(node_io("Conv", &["x", "w"], &[]), &[&x], vec![init]);
    }

    #[test]
    fn low_rank_kernels_run_factorised_and_match_tract_and_finite_differences() {
        // Each output channel's [12 channels, 5 x 5] kernel is a sum of two products of a
        // channel profile and a spatial map (as a space-time separable first layer exported with
        // full kernels), so the forward runs as those products (see conv_low_rank).
        let (x, w) = ([2, 12, 9, 8], [3usize, 12, 5, 5]);
        let profiles = crate::engine::ops::testing::random_tensor(&[3, 2, 12], 7, false);
        let maps = crate::engine::ops::testing::random_tensor(&[3, 2, 25], 8, false);
        let mut init = random_init("w", &w, 5);
        for (i, v) in init.float_data.iter_mut().enumerate() {
            let (co, ci, k) = (i / 300, (i / 25) % 12, i % 25);
            *v = (0..2).map(|r| profiles[[co, r, ci]] * maps[[co, r, k]]).sum();
        }
        check_graph(node_io("Conv", &["x", "w"], &[("pads", Attr::Is(vec![1, 2, 0, 1]))]), &[&x], vec![init]);
    }

    #[test]
    fn conv1d_and_conv3d_match_tract_and_finite_differences() {
        case(&[], &[2, 3, 11], &[4, 3, 4], true);
        case(&[("pads", Attr::Is(vec![1, 1])), ("strides", Attr::Is(vec![2]))], &[2, 3, 9], &[2, 3, 3], true);
        case(&[], &[2, 1, 5, 6, 6], &[3, 1, 3, 3, 2], true);
        case(&[("pads", Attr::Is(vec![0, 1, 1, 1, 0, 0]))], &[1, 2, 4, 5, 5], &[2, 2, 2, 3, 3], false);
    }
}
