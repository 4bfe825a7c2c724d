//! Faster convolution products for stride 1 (the common case in encoding models). The generic
//! path runs one GEMM per kernel position whose outer or inner size is a channel count; with few
//! channels (8 is typical) those products are too thin to run at speed. Here the last kernel axis
//! (size KW) is folded into the products:
//! - forward: per remaining kernel position, `Z[(co, j), p] += W[co, :, o, j] . x[:, off(o) + p]`
//!   (a GEMM with KW times more rows), then `y[co, q] = sum_j Z[(co, j), q + j * dilation]`;
//! - input gradient: dy is copied as KW shifted rows (a partial im2col), and each remaining
//!   kernel position is one GEMM with inner size `Cout/group * KW`.

use super::conv::Dims;
use crate::engine::gemm::{matmul_acc, Mat, MatMut};

/// Output columns per tile: keeps a tile's operands within a core's L2 cache.
const TILE: usize = 1024;

/// Weights repacked as `[group][outer kernel position][rows][channels * kw]`.
pub(super) struct Packed {
    weights: Vec<f32>,
    outer: usize,
}

impl Packed {
    /// True when the geometry is one contiguous run (all strides 1).
    pub fn applies(d: &Dims) -> bool {
        d.geo.segments.len() == 1 && d.geo.col_stride == 1
    }

    fn groups(d: &Dims) -> usize {
        d.cin / d.cig
    }

    /// Rows = (output channel, kw), columns = input channels.
    pub fn for_forward(d: &Dims, w: &[f32]) -> Self {
        let kw = d.kernel_last;
        let outer = d.kvol / kw;
        let rows = d.cog * kw;
        let mut weights = vec![0f32; Self::groups(d) * outer * rows * d.cig];
        for g in 0..Self::groups(d) {
            for o in 0..outer {
                for co in 0..d.cog {
                    for j in 0..kw {
                        for ci in 0..d.cig {
                            weights[((g * outer + o) * rows + co * kw + j) * d.cig + ci] =
                                w[((g * d.cog + co) * d.cig + ci) * d.kvol + o * kw + j];
                        }
                    }
                }
            }
        }
        Packed { weights, outer }
    }

    /// `yv += W * x` for one sample: `xp` is the padded input, `yv` the virtual output.
    /// Columns are processed in tiles so the working set stays in the core's L2 cache.
    pub fn forward(&self, d: &Dims, xp: &[f32], yv: &mut [f32]) {
        let (vlen, plen, kw, dil) = (d.geo.virtual_len, d.geo.padded_len(), d.kernel_last, d.dilation_last);
        let rows = d.cog * kw;
        let halo = (kw - 1) * dil;
        let mut z = vec![0f32; rows * (TILE + halo)];
        for start in (0..vlen).step_by(TILE) {
            let len = TILE.min(vlen - start);
            let n = len + halo;
            for g in 0..Self::groups(d) {
                z[..rows * n].fill(0.0);
                for o in 0..self.outer {
                    matmul_acc(
                        rows,
                        n,
                        d.cig,
                        MatMut { data: &mut z, offset: 0, rs: n, cs: 1 },
                        Mat { data: &self.weights, offset: (g * self.outer + o) * rows * d.cig, rs: d.cig, cs: 1 },
                        Mat {
                            data: xp,
                            offset: g * d.cig * plen + d.geo.kernel_offsets[o * kw] + start,
                            rs: plen,
                            cs: 1,
                        },
                    );
                }
                for co in 0..d.cog {
                    let at = (g * d.cog + co) * vlen + start;
                    let out = &mut yv[at..at + len];
                    for j in 0..kw {
                        let from = (co * kw + j) * n + j * dil;
                        out.iter_mut().zip(&z[from..from + len]).for_each(|(y, v)| *y += v);
                    }
                }
            }
        }
    }

    /// Rows = input channels, columns = (output channel, kw).
    pub fn for_input_gradient(d: &Dims, w: &[f32]) -> Self {
        Self::pack(d, w, d.cig, d.cog, |g, o, ci, co, j| {
            ((g * d.cog + co) * d.cig + ci) * d.kvol + o * d.kernel_last + j
        })
    }

    fn pack(
        d: &Dims,
        w: &[f32],
        rows: usize,
        chans: usize,
        source: impl Fn(usize, usize, usize, usize, usize) -> usize,
    ) -> Self {
        let kw = d.kernel_last;
        let outer = d.kvol / kw;
        let inner = chans * kw;
        let mut weights = vec![0f32; Self::groups(d) * outer * rows * inner];
        for g in 0..Self::groups(d) {
            for o in 0..outer {
                for r in 0..rows {
                    for c in 0..chans {
                        for j in 0..kw {
                            weights[((g * outer + o) * rows + r) * inner + c * kw + j] = w[source(g, o, r, c, j)];
                        }
                    }
                }
            }
        }
        Packed { weights, outer }
    }

    /// `gxp += W^T * dy` for one sample; `gv` is dy in the virtual layout.
    pub fn input_gradient(&self, d: &Dims, gv: &[f32], gxp: &mut [f32]) {
        let (vlen, plen, kw, dil) = (d.geo.virtual_len, d.geo.padded_len(), d.kernel_last, d.dilation_last);
        let n = vlen + (kw - 1) * dil;
        // shifted[co][j][p] = dy[co][p - j * dilation]
        let mut shifted = vec![0f32; d.cout * kw * n];
        for c in 0..d.cout {
            for j in 0..kw {
                let at = (c * kw + j) * n + j * dil;
                shifted[at..at + vlen].copy_from_slice(&gv[c * vlen..(c + 1) * vlen]);
            }
        }
        let inner = d.cog * kw;
        for start in (0..n).step_by(TILE) {
            let len = TILE.min(n - start);
            for g in 0..Self::groups(d) {
                for o in 0..self.outer {
                    matmul_acc(
                        d.cig,
                        len,
                        inner,
                        MatMut {
                            data: gxp,
                            offset: g * d.cig * plen + d.geo.kernel_offsets[o * kw] + start,
                            rs: plen,
                            cs: 1,
                        },
                        Mat { data: &self.weights, offset: (g * self.outer + o) * d.cig * inner, rs: inner, cs: 1 },
                        Mat { data: &shifted, offset: g * inner * n + start, rs: n, cs: 1 },
                    );
                }
            }
        }
    }
}
