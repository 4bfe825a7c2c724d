//! Convolutions whose kernels are sums of a few products of a channel profile and a spatial map
//! (low-rank kernels), run as those products: for each term, the input channels are first mixed
//! by the profile (one GEMM for all terms) and the mixture is then convolved with the term's
//! map alone. Encoding models are often trained this way (space-time separable first layers,
//! lags as channels) and exported with full kernels; a 40-lag, 15 x 15 kernel of rank 2 then
//! costs 2 x (40 + 225) multiplications per output instead of 40 x 225.
//!
//! The rank of each output channel's kernel (its `[channels, kernel volume]` matrix) comes from
//! its singular values: the fewest terms whose dropped remainder is below [`TOLERANCE`] of the
//! kernel's norm, so the products equal the kernel to float precision.

use super::conv::Dims;
use crate::engine::gemm::{matmul_acc, Mat, MatMut};
use nalgebra::DMatrix;

/// Largest relative Frobenius norm of a kernel's dropped singular values.
const TOLERANCE: f64 = 1e-6;

/// Most terms a kernel may have. A kernel with a long spectrum (many small singular values) runs
/// in full: each term adds its own rounding, and a circuit with sharp thresholds can turn that
/// into differences far above float precision (the planted direction-selective pathways, whose
/// singular values fall off slowly, moved a reduced circuit's response by 2e-5 of its size).
const MAX_RANK: usize = 4;

/// The factorised path runs only when it needs at most this share of the full kernel's
/// multiplications (below that the two passes' memory traffic eats the gain).
const WORTH: f64 = 0.25;

/// The terms of every output channel's kernel.
#[derive(Debug)]
pub(super) struct LowRank {
    /// Output channel of each term.
    owner: Vec<usize>,
    /// Channel profile of each term, `[terms, cin]`.
    profiles: Vec<f32>,
    /// Spatial map of each term, `[terms, kvol]` (singular value folded in).
    maps: Vec<f32>,
}

impl LowRank {
    /// The factorisation of single-group weights, when it is exact to float precision and
    /// saves most of the work; `None` otherwise.
    pub fn find(d: &Dims, w: &[f32]) -> Option<Self> {
        if d.cig != d.cin {
            return None;
        }
        let (cin, kvol) = (d.cin, d.kvol);
        let mut low = LowRank { owner: Vec::new(), profiles: Vec::new(), maps: Vec::new() };
        for co in 0..d.cout {
            let kernel = &w[co * cin * kvol..(co + 1) * cin * kvol];
            let m = DMatrix::from_fn(cin, kvol, |c, k| kernel[c * kvol + k] as f64);
            let svd = m.svd(true, true);
            let (u, vt) = (svd.u?, svd.v_t?);
            let mut order: Vec<usize> = (0..svd.singular_values.len()).collect();
            order.sort_by(|&a, &b| svd.singular_values[b].total_cmp(&svd.singular_values[a]));
            let energy: f64 = svd.singular_values.iter().map(|s| s * s).sum();
            let mut dropped = energy;
            for (kept, &i) in order.iter().enumerate() {
                if dropped <= (TOLERANCE * TOLERANCE) * energy {
                    break;
                }
                if kept == MAX_RANK {
                    return None;
                }
                let s = svd.singular_values[i];
                dropped -= s * s;
                low.owner.push(co);
                low.profiles.extend((0..cin).map(|c| u[(c, i)] as f32));
                low.maps.extend((0..kvol).map(|k| (s * vt[(i, k)]) as f32));
            }
        }
        let terms = low.owner.len() as f64;
        let full = (d.cout * cin * kvol) as f64;
        (terms * (cin + kvol) as f64 <= WORTH * full).then_some(low)
    }

    /// `yv += W * x` for one sample: `xp` is the padded input, `yv` the virtual output (stride 1,
    /// one segment: see `Packed::applies`).
    pub fn forward(&self, d: &Dims, xp: &[f32], yv: &mut [f32]) {
        let (vlen, plen) = (d.geo.virtual_len, d.geo.padded_len());
        let terms = self.owner.len();
        let mut mixed = vec![0f32; terms * plen];
        matmul_acc(
            terms,
            plen,
            d.cin,
            MatMut { data: &mut mixed, offset: 0, rs: plen, cs: 1 },
            Mat { data: &self.profiles, offset: 0, rs: d.cin, cs: 1 },
            Mat { data: xp, offset: 0, rs: plen, cs: 1 },
        );
        for (t, &co) in self.owner.iter().enumerate() {
            let out = &mut yv[co * vlen..(co + 1) * vlen];
            let m = &mixed[t * plen..(t + 1) * plen];
            for (k, &koff) in d.geo.kernel_offsets.iter().enumerate() {
                let s = self.maps[t * d.kvol + k];
                out.iter_mut().zip(&m[koff..koff + vlen]).for_each(|(y, v)| *y += s * v);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::LowRank;
    use crate::engine::ops::conv::Dims;
    use crate::engine::ops::conv_plan::{Geometry, WindowAttrs};
    use crate::engine::ops::testing::random_tensor;

    fn dims(cout: usize, cin: usize) -> Dims {
        dims_k(cout, cin, 5)
    }

    fn dims_k(cout: usize, cin: usize, k: usize) -> Dims {
        let attrs = WindowAttrs {
            kernel: vec![k, k],
            strides: vec![1, 1],
            dilations: vec![1, 1],
            auto_pad: "NOTSET".into(),
            pads: vec![0; 4],
            ceil_mode: false,
        };
        let geo = Geometry::new(&attrs, &[k + 4, k + 4]).expect("geometry");
        Dims { n: 1, cin, cout, cig: cin, cog: cout, kvol: k * k, kernel_last: k, dilation_last: 1, geo }
    }

    /// Kernels `[cout, 12, 25]`, each the sum of `rank` products.
    fn kernels(cout: usize, rank: usize) -> Vec<f32> {
        let (p, m) = (random_tensor(&[cout, rank, 12], 1, false), random_tensor(&[cout, rank, 25], 2, false));
        (0..cout * 300)
            .map(|i| (0..rank).map(|r| p[[i / 300, r, (i / 25) % 12]] * m[[i / 300, r, i % 25]]).sum())
            .collect()
    }

    #[test]
    fn the_rank_of_each_kernel_is_found_and_full_rank_kernels_are_left_alone() {
        let low = LowRank::find(&dims(3, 12), &kernels(3, 2)).expect("rank-2 kernels factorise");
        assert_eq!(low.owner, vec![0, 0, 1, 1, 2, 2]);
        // Rank 3 needs 3 x (12 + 25) = 111 multiplications per output against 300 x 0.25: not worth it.
        assert!(LowRank::find(&dims(3, 12), &kernels(3, 3)).is_none());
        assert!(LowRank::find(&dims(2, 12), &random_tensor(&[600], 3, false).into_raw_vec_and_offset().0).is_none());
        // 40 channels x 9 x 9: rank 4 factorises; rank 5 would still save work (5 x 121 against
        // 3240 x 0.25) but has more terms than MAX_RANK allows.
        let of_rank = |rank: usize| -> Vec<f32> {
            let (p, m) = (random_tensor(&[rank, 40], 4, false), random_tensor(&[rank, 81], 5, false));
            (0..40 * 81).map(|i| (0..rank).map(|r| p[[r, i / 81]] * m[[r, i % 81]]).sum()).collect()
        };
        assert_eq!(LowRank::find(&dims_k(1, 40, 9), &of_rank(4)).map(|l| l.owner.len()), Some(4));
        assert!(LowRank::find(&dims_k(1, 40, 9), &of_rank(5)).is_none());
    }
}
