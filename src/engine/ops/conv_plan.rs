//! Geometry shared by convolution and pooling: padding (explicit or `auto_pad`), output size,
//! and the "shifted view" layout that lets a convolution run as one strided GEMM per kernel
//! offset over the flattened, padded input instead of materialising an im2col matrix.
//!
//! Output position `o` (an N-d index) reads padded input position `o * stride + k * dilation`.
//! Flattening the padded input with strides `ps`, that is flat offset
//! `sum_d o_d * stride_d * ps_d + koff(k)`. When every axis has the same stride `s`, this is
//! `s * q + koff` with `q = sum_d o_d * ps_d`: linear in a "virtual" index `q`, so a single GEMM
//! with column stride `s` covers all outputs (plus a few unused virtual columns between rows).
//! Otherwise each output row (all axes but the last fixed) is its own segment.

use super::{BuildCtx, OpResult};

/// A run of virtual output columns whose input offsets advance by a constant step.
#[derive(Debug, Clone)]
pub struct Segment {
    /// First virtual column.
    pub q0: usize,
    /// Flat padded-input offset of the first column, before adding the kernel offset.
    pub in0: usize,
    /// Number of columns.
    pub len: usize,
}

/// Convolution or pooling attributes, as read from the node.
#[derive(Debug, Clone)]
pub struct WindowAttrs {
    /// Kernel size per spatial axis (from `kernel_shape` or the weights).
    pub kernel: Vec<usize>,
    /// Stride per axis.
    pub strides: Vec<usize>,
    /// Dilation per axis.
    pub dilations: Vec<usize>,
    /// `auto_pad` mode.
    pub auto_pad: String,
    /// Explicit pads: begins then ends.
    pub pads: Vec<usize>,
    /// Pooling only: round output size up instead of down.
    pub ceil_mode: bool,
}

impl WindowAttrs {
    /// Read the attributes; `kernel` is the kernel size when the node does not state it.
    pub fn read(ctx: &BuildCtx, kernel: Option<Vec<usize>>) -> OpResult<Self> {
        let kernel = match ctx.usizes("kernel_shape")? {
            Some(k) => k,
            None => kernel.ok_or("attribute 'kernel_shape' is required")?,
        };
        let r = kernel.len();
        let strides = ctx.usizes("strides")?.unwrap_or_else(|| vec![1; r]);
        let dilations = ctx.usizes("dilations")?.unwrap_or_else(|| vec![1; r]);
        let pads = ctx.usizes("pads")?.unwrap_or_else(|| vec![0; 2 * r]);
        let auto_pad = ctx.string("auto_pad").unwrap_or_else(|| "NOTSET".into());
        if strides.len() != r || dilations.len() != r || pads.len() != 2 * r {
            return Err(format!(
                "kernel has {r} spatial axes but strides {strides:?}, dilations {dilations:?}, \
                 pads {pads:?} do not match"
            )
            .into());
        }
        if strides.contains(&0) || dilations.contains(&0) || kernel.contains(&0) {
            return Err("kernel_shape, strides and dilations must be positive".into());
        }
        if !matches!(auto_pad.as_str(), "NOTSET" | "VALID" | "SAME_UPPER" | "SAME_LOWER") {
            return Err(format!("auto_pad '{auto_pad}' is not one of NOTSET, VALID, SAME_UPPER, SAME_LOWER").into());
        }
        let ceil_mode = ctx.int_or("ceil_mode", 0) != 0;
        Ok(WindowAttrs { kernel, strides, dilations, auto_pad, pads, ceil_mode })
    }

    /// Effective kernel extent per axis, dilation included.
    pub fn extent(&self) -> Vec<usize> {
        self.kernel.iter().zip(&self.dilations).map(|(k, d)| (k - 1) * d + 1).collect()
    }
}

/// Everything needed to run one convolution/pooling over a given input size.
#[derive(Debug, Clone)]
pub struct Geometry {
    /// Unpadded input spatial size.
    pub input: Vec<usize>,
    /// Padded input spatial size.
    pub padded: Vec<usize>,
    /// Output spatial size.
    pub output: Vec<usize>,
    /// Flat padded-input offset of each kernel position (row-major over the kernel).
    pub kernel_offsets: Vec<usize>,
    /// Column stride of every segment in the padded input.
    pub col_stride: usize,
    /// Runs of virtual columns.
    pub segments: Vec<Segment>,
    /// Number of virtual columns.
    pub virtual_len: usize,
    /// Virtual column of each output position (row-major).
    pub valid: Vec<usize>,
    /// Flat padded-input offset where each output position's window starts (row-major).
    pub starts: Vec<usize>,
    /// Flat padded-input offset of every unpadded input position (row-major).
    interior: Vec<usize>,
}

fn row_major_strides(shape: &[usize]) -> Vec<usize> {
    let mut s = vec![1; shape.len()];
    for d in (0..shape.len().saturating_sub(1)).rev() {
        s[d] = s[d + 1] * shape[d + 1];
    }
    s
}

/// Every N-d index of `shape`, row-major.
pub fn indices(shape: &[usize]) -> Vec<Vec<usize>> {
    let total: usize = shape.iter().product();
    let strides = row_major_strides(shape);
    (0..total).map(|i| shape.iter().zip(&strides).map(|(&n, &s)| (i / s) % n.max(1)).collect()).collect()
}

impl Geometry {
    /// Plan a window op over an input of spatial size `input`.
    pub fn new(a: &WindowAttrs, input: &[usize]) -> OpResult<Self> {
        let r = a.kernel.len();
        if r == 0 {
            return Err("a convolution or pooling needs at least one spatial axis".into());
        }
        if input.len() != r {
            return Err(format!("input has {} spatial axes but the kernel has {r}", input.len()).into());
        }
        // Attributes (pads, dilations, kernel_shape of pooling) come from the file: sizes are
        // computed with checked arithmetic and bounded before anything is allocated.
        let too_large =
            || format!("kernel {:?}, dilations {:?} and pads {:?} are too large", a.kernel, a.dilations, a.pads);
        let extent: Vec<usize> = a
            .kernel
            .iter()
            .zip(&a.dilations)
            .map(|(&k, &d)| (k - 1).checked_mul(d).and_then(|e| e.checked_add(1)))
            .collect::<Option<_>>()
            .ok_or_else(too_large)?;
        super::check_output_size(&a.kernel)?;
        let (mut pad_begin, mut pad_end) = (vec![0; r], vec![0; r]);
        for d in 0..r {
            match a.auto_pad.as_str() {
                "SAME_UPPER" | "SAME_LOWER" => {
                    let out = input[d].div_ceil(a.strides[d]).max(1);
                    let need = ((out - 1) * a.strides[d]).saturating_add(extent[d]).saturating_sub(input[d]);
                    let small = need / 2;
                    let (b, e) = if a.auto_pad == "SAME_UPPER" { (small, need - small) } else { (need - small, small) };
                    pad_begin[d] = b;
                    pad_end[d] = e;
                }
                "VALID" => {}
                _ => {
                    pad_begin[d] = a.pads[d];
                    pad_end[d] = a.pads[r + d];
                }
            }
        }
        let mut padded: Vec<usize> = (0..r)
            .map(|d| input[d].checked_add(pad_begin[d]).and_then(|p| p.checked_add(pad_end[d])))
            .collect::<Option<_>>()
            .ok_or_else(too_large)?;
        super::check_output_size(&padded)?;
        let mut output = Vec::with_capacity(r);
        for d in 0..r {
            if padded[d] < extent[d] {
                return Err(format!(
                    "spatial axis {d}: input of size {} (padded {}) is smaller than the kernel \
                     extent {}",
                    input[d], padded[d], extent[d]
                )
                .into());
            }
            let span = padded[d] - extent[d];
            let o = if a.ceil_mode { span.div_ceil(a.strides[d]) } else { span / a.strides[d] } + 1;
            // With ceil_mode the last window may start past the padded input: the standard drops it.
            let o = if a.ceil_mode && (o - 1) * a.strides[d] >= input[d] + pad_begin[d] { o - 1 } else { o };
            output.push(o);
        }
        // Pooling with ceil_mode may read past the padded end: pad the buffer so it can.
        for d in 0..r {
            let needed = (output[d] - 1) * a.strides[d] + extent[d];
            padded[d] = padded[d].max(needed);
        }
        let ps = row_major_strides(&padded);
        let kernel_offsets =
            indices(&a.kernel).iter().map(|k| (0..r).map(|d| k[d] * a.dilations[d] * ps[d]).sum()).collect();
        let out_idx = indices(&output);
        let starts = out_idx.iter().map(|o| (0..r).map(|d| o[d] * a.strides[d] * ps[d]).sum()).collect();
        let uniform = a.strides.iter().all(|&s| s == a.strides[0]);
        let (col_stride, segments, virtual_len, valid) = if uniform {
            let s = a.strides[0];
            let valid: Vec<usize> = out_idx.iter().map(|o| (0..r).map(|d| o[d] * ps[d]).sum()).collect();
            let len = valid.last().map_or(0, |&q| q + 1);
            (s, vec![Segment { q0: 0, in0: 0, len }], len, valid)
        } else {
            let last = output[r - 1];
            let rows = out_idx.len() / last;
            let segments = (0..rows)
                .map(|row| {
                    let o = &out_idx[row * last];
                    let in0 = (0..r - 1).map(|d| o[d] * a.strides[d] * ps[d]).sum();
                    Segment { q0: row * last, in0, len: last }
                })
                .collect();
            (a.strides[r - 1], segments, out_idx.len(), (0..out_idx.len()).collect())
        };
        let interior = indices(input).iter().map(|i| (0..r).map(|d| (i[d] + pad_begin[d]) * ps[d]).sum()).collect();
        Ok(Geometry {
            interior,
            input: input.to_vec(),
            padded,
            output,
            kernel_offsets,
            col_stride,
            segments,
            virtual_len,
            valid,
            starts,
        })
    }

    /// Number of padded input positions.
    pub fn padded_len(&self) -> usize {
        self.padded.iter().product()
    }

    /// Copy one channel-major sample `[C, input...]` into a padded buffer `[C, padded...]`
    /// filled with `fill` outside the input.
    pub fn pad(&self, x: &[f32], channels: usize, fill: f32) -> Vec<f32> {
        let (plen, ilen) = (self.padded_len(), self.input.iter().product::<usize>());
        let mut out = vec![fill; channels * plen];
        for c in 0..channels {
            let (src, dst) = (&x[c * ilen..(c + 1) * ilen], &mut out[c * plen..(c + 1) * plen]);
            for (i, &o) in self.interior.iter().enumerate() {
                dst[o] = src[i];
            }
        }
        out
    }

    /// Inverse of [`Geometry::pad`] for gradients: read the interior back out.
    pub fn unpad(&self, xp: &[f32], channels: usize) -> Vec<f32> {
        let plen = self.padded_len();
        let mut out = Vec::with_capacity(channels * self.interior.len());
        for c in 0..channels {
            out.extend(self.interior.iter().map(|&o| xp[c * plen + o]));
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn attrs(kernel: &[usize], strides: &[usize], auto_pad: &str) -> WindowAttrs {
        let r = kernel.len();
        WindowAttrs {
            kernel: kernel.to_vec(),
            strides: strides.to_vec(),
            dilations: vec![1; r],
            auto_pad: auto_pad.into(),
            pads: vec![0; 2 * r],
            ceil_mode: false,
        }
    }

    #[test]
    fn output_sizes_follow_the_onnx_formulas() {
        // ONNX Conv: out = floor((in + pads - extent) / stride) + 1; SAME_*: out = ceil(in / stride).
        let g = Geometry::new(&attrs(&[15, 15], &[1, 1], "NOTSET"), &[50, 50]).unwrap();
        assert_eq!(g.output, vec![36, 36]);
        let g = Geometry::new(&attrs(&[3, 3], &[2, 2], "SAME_UPPER"), &[7, 8]).unwrap();
        assert_eq!(g.output, vec![4, 4]);
        // Padded to 9x9 with the input's first pixel at row 1, column 0 (pads before: 1, 0).
        assert_eq!((g.padded.clone(), g.interior[0]), (vec![9, 9], 9));
        let g = Geometry::new(&attrs(&[3, 3], &[2, 2], "SAME_LOWER"), &[7, 8]).unwrap();
        // Pads before: 1, 1.
        assert_eq!((g.padded.clone(), g.interior[0]), (vec![9, 9], 10));
    }

    #[test]
    fn virtual_columns_map_to_the_right_input_offsets() {
        let a = attrs(&[2, 3], &[2, 2], "VALID");
        let g = Geometry::new(&a, &[6, 9]).unwrap();
        let ps = [9usize, 1];
        for (o, &q) in indices(&g.output).iter().zip(&g.valid) {
            assert_eq!(g.col_stride * q, o[0] * 2 * ps[0] + o[1] * 2 * ps[1]);
        }
    }

    #[test]
    fn a_kernel_larger_than_the_input_is_refused() {
        assert!(Geometry::new(&attrs(&[5], &[1], "VALID"), &[3]).is_err());
    }
}
