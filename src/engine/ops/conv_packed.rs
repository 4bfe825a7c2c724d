//! Faster convolution products for stride 1 (the common case in encoding models). The generic
//! path runs one GEMM per kernel position whose outer or inner size is a channel count; with few
//! channels (8 is typical) those products are too thin to run at speed. Here the last kernel axis
//! (size KW) is folded into the products:
//! - forward: per remaining kernel position, `Z[(co, j), p] += W[co, :, o, j] . x[:, off(o) + p]`
//!   (a GEMM with KW times more rows), then `y[co, q] = sum_j Z[(co, j), q + j * dilation]`;
//! - input gradient: dy is copied as KW shifted rows (a partial im2col), and each remaining
//!   kernel position is one GEMM with inner size `Cout/group * KW`.
//!
//! Block-diagonal weights (output channels in contiguous runs that each read only their own
//! contiguous run of input channels, all other kernels exactly zero) run block by block: a model
//! whose cells have separate pathways, or a pruned one, then costs only its nonzero blocks.

use super::conv::Dims;
use crate::engine::gemm::{matmul_acc, Mat, MatMut};
use std::ops::Range;

/// Output columns per tile: keeps a tile's operands within a core's L2 cache.
const TILE: usize = 1024;

/// Packed weights: one part per diagonal block (one part for ordinary weights).
pub(super) struct Packed {
    parts: Vec<Part>,
}

/// One diagonal block: output channels `out` read input channels `inp` only. Its weights are
/// repacked as `[group][outer kernel position][rows][channels * kw]` (forward: rows = (output
/// channel, kw), channels = input channels; input gradient: rows = input channels, channels =
/// output channels).
struct Part {
    out: Range<usize>,
    inp: Range<usize>,
    groups: usize,
    /// Input and output channels per group within the part.
    cig: usize,
    cog: usize,
    outer: usize,
    weights: Vec<f32>,
}

impl Packed {
    /// True when the geometry is one contiguous run (all strides 1).
    pub fn applies(d: &Dims) -> bool {
        d.geo.segments.len() == 1 && d.geo.col_stride == 1
    }

    /// Packed for the forward product.
    pub fn for_forward(d: &Dims, w: &[f32]) -> Self {
        Self::pack(d, w, true)
    }

    /// Packed for the input gradient.
    pub fn for_input_gradient(d: &Dims, w: &[f32]) -> Self {
        Self::pack(d, w, false)
    }

    fn pack(d: &Dims, w: &[f32], forward: bool) -> Self {
        let groups = d.cin / d.cig;
        let blocks = if groups == 1 { diagonal_blocks(d.cout, d.cin, d.kvol, w) } else { None };
        let blocks = blocks.unwrap_or_else(|| vec![(0..d.cout, 0..d.cin)]);
        let parts = blocks
            .into_iter()
            .map(|(out, inp)| {
                let (cog, cig) = ((out.end - out.start) / groups, (inp.end - inp.start) / groups);
                let kw = d.kernel_last;
                let outer = d.kvol / kw;
                let (rows, chans) = if forward { (cog * kw, cig) } else { (cig, cog * kw) };
                let mut weights = vec![0f32; groups * outer * rows * chans];
                for g in 0..groups {
                    for o in 0..outer {
                        for co in 0..cog {
                            for ci in 0..cig {
                                let from = ((g * d.cog + out.start + co) * d.cig + inp.start + ci) * d.kvol + o * kw;
                                for j in 0..kw {
                                    let (r, c) = if forward { (co * kw + j, ci) } else { (ci, co * kw + j) };
                                    weights[((g * outer + o) * rows + r) * chans + c] = w[from + j];
                                }
                            }
                        }
                    }
                }
                Part { out, inp, groups, cig, cog, outer, weights }
            })
            .collect();
        Packed { parts }
    }

    /// `yv += W * x` for one sample: `xp` is the padded input, `yv` the virtual output.
    pub fn forward(&self, d: &Dims, xp: &[f32], yv: &mut [f32]) {
        let (vlen, plen) = (d.geo.virtual_len, d.geo.padded_len());
        for p in &self.parts {
            p.forward(d, &xp[p.inp.start * plen..p.inp.end * plen], &mut yv[p.out.start * vlen..p.out.end * vlen]);
        }
    }

    /// `gxp += W^T * dy` for one sample; `gv` is dy in the virtual layout.
    pub fn input_gradient(&self, d: &Dims, gv: &[f32], gxp: &mut [f32]) {
        let (vlen, plen) = (d.geo.virtual_len, d.geo.padded_len());
        for p in &self.parts {
            p.input_gradient(
                d,
                &gv[p.out.start * vlen..p.out.end * vlen],
                &mut gxp[p.inp.start * plen..p.inp.end * plen],
            );
        }
    }
}

impl Part {
    /// Columns are processed in tiles so the working set stays in the core's L2 cache.
    fn forward(&self, d: &Dims, xp: &[f32], yv: &mut [f32]) {
        let (vlen, plen, kw, dil) = (d.geo.virtual_len, d.geo.padded_len(), d.kernel_last, d.dilation_last);
        let rows = self.cog * kw;
        let halo = (kw - 1) * dil;
        let mut z = vec![0f32; rows * (TILE + halo)];
        for start in (0..vlen).step_by(TILE) {
            let len = TILE.min(vlen - start);
            let n = len + halo;
            for g in 0..self.groups {
                z[..rows * n].fill(0.0);
                for o in 0..self.outer {
                    matmul_acc(
                        rows,
                        n,
                        self.cig,
                        MatMut { data: &mut z, offset: 0, rs: n, cs: 1 },
                        Mat {
                            data: &self.weights,
                            offset: (g * self.outer + o) * rows * self.cig,
                            rs: self.cig,
                            cs: 1,
                        },
                        Mat {
                            data: xp,
                            offset: g * self.cig * plen + d.geo.kernel_offsets[o * kw] + start,
                            rs: plen,
                            cs: 1,
                        },
                    );
                }
                for co in 0..self.cog {
                    let at = (g * self.cog + co) * vlen + start;
                    let out = &mut yv[at..at + len];
                    for j in 0..kw {
                        let from = (co * kw + j) * n + j * dil;
                        out.iter_mut().zip(&z[from..from + len]).for_each(|(y, v)| *y += v);
                    }
                }
            }
        }
    }

    fn input_gradient(&self, d: &Dims, gv: &[f32], gxp: &mut [f32]) {
        let (vlen, plen, kw, dil) = (d.geo.virtual_len, d.geo.padded_len(), d.kernel_last, d.dilation_last);
        let n = vlen + (kw - 1) * dil;
        let cout = self.out.end - self.out.start;
        // shifted[co][j][p] = dy[co][p - j * dilation]
        let mut shifted = vec![0f32; cout * kw * n];
        for c in 0..cout {
            for j in 0..kw {
                let at = (c * kw + j) * n + j * dil;
                shifted[at..at + vlen].copy_from_slice(&gv[c * vlen..(c + 1) * vlen]);
            }
        }
        let inner = self.cog * kw;
        for start in (0..n).step_by(TILE) {
            let len = TILE.min(n - start);
            for g in 0..self.groups {
                for o in 0..self.outer {
                    matmul_acc(
                        self.cig,
                        len,
                        inner,
                        MatMut {
                            data: gxp,
                            offset: g * self.cig * plen + d.geo.kernel_offsets[o * kw] + start,
                            rs: plen,
                            cs: 1,
                        },
                        Mat { data: &self.weights, offset: (g * self.outer + o) * self.cig * inner, rs: inner, cs: 1 },
                        Mat { data: &shifted, offset: g * inner * n + start, rs: n, cs: 1 },
                    );
                }
            }
        }
    }
}

/// The diagonal blocks of single-group weights `[cout, cin, kernel...]`, as (output channels,
/// input channels) ranges in order, when there are at least two: every nonzero kernel of an
/// output channel lies in its block's input range, and the input ranges do not overlap. Output
/// channels whose kernels are all zero join the block before them (or the first block).
fn diagonal_blocks(cout: usize, cin: usize, kvol: usize, w: &[f32]) -> Option<Vec<(Range<usize>, Range<usize>)>> {
    let reads = |co: usize| -> Option<(usize, usize)> {
        let nonzero = |ci: usize| w[(co * cin + ci) * kvol..][..kvol].iter().any(|&v| v != 0.0);
        let lo = (0..cin).find(|&ci| nonzero(ci))?;
        let hi = (0..cin).rev().find(|&ci| nonzero(ci))?;
        Some((lo, hi + 1))
    };
    // Each block: first output channel, input range.
    let mut blocks: Vec<(usize, Range<usize>)> = Vec::new();
    for co in 0..cout {
        let Some((lo, hi)) = reads(co) else { continue };
        // Where the input range of the block before the current one ends.
        let before = blocks.len().checked_sub(2).map_or(0, |b| blocks[b].1.end);
        match blocks.last_mut() {
            Some((_, inp)) if lo < inp.end => {
                if lo < before {
                    return None;
                }
                *inp = inp.start.min(lo)..inp.end.max(hi);
            }
            _ => blocks.push((if blocks.is_empty() { 0 } else { co }, lo..hi)),
        }
    }
    if blocks.len() < 2 {
        return None;
    }
    let ends: Vec<usize> = blocks.iter().skip(1).map(|b| b.0).chain([cout]).collect();
    Some(blocks.into_iter().zip(ends).map(|((start, inp), end)| (start..end, inp)).collect())
}

#[cfg(test)]
mod tests {
    use super::diagonal_blocks;

    /// Weights `[cout, cin, 1]` with ones where `pattern` has a 1 (rows: output channels).
    fn blocks(pattern: &[&str]) -> Option<Vec<(std::ops::Range<usize>, std::ops::Range<usize>)>> {
        let w: Vec<f32> = pattern.iter().flat_map(|r| r.chars().map(|c| if c == '1' { 1.0 } else { 0.0 })).collect();
        diagonal_blocks(pattern.len(), pattern[0].len(), 1, &w)
    }

    #[test]
    fn block_diagonal_weights_split_into_their_blocks() {
        // Three cells' separate channels of unequal counts; a zero row joins the block before it.
        let found = blocks(&["110000", "010000", "001100", "000000", "001000", "000011"]);
        assert_eq!(found, Some(vec![(0..2, 0..2), (2..5, 2..4), (5..6, 4..6)]));
        // Leading zero rows join the first block; unread input channels are left out.
        assert_eq!(blocks(&["0000", "1000", "0001"]), Some(vec![(0..2, 0..1), (2..3, 3..4)]));
    }

    #[test]
    fn weights_without_separate_blocks_stay_whole() {
        assert_eq!(blocks(&["1100", "0110", "0011"]), None, "a chain of overlaps is one block");
        assert_eq!(blocks(&["0011", "1100"]), None, "blocks out of order");
        assert_eq!(blocks(&["1100", "0011", "0100"]), None, "a later row reads an earlier block");
        assert_eq!(blocks(&["0000", "0000"]), None);
    }
}
