//! A bounds-checked front to the `gemm` crate's strided f32 kernel: `dst += lhs * rhs`, where
//! each matrix is a (possibly strided) window into a slice. Convolutions use it on shifted views
//! of the input, so no im2col copy is ever made.

/// A read-only strided matrix window into a slice.
#[derive(Clone, Copy)]
pub struct Mat<'a> {
    /// Backing storage.
    pub data: &'a [f32],
    /// Index of element (0, 0).
    pub offset: usize,
    /// Step between rows.
    pub rs: usize,
    /// Step between columns.
    pub cs: usize,
}

/// A mutable strided matrix window into a slice.
pub struct MatMut<'a> {
    /// Backing storage.
    pub data: &'a mut [f32],
    /// Index of element (0, 0).
    pub offset: usize,
    /// Step between rows.
    pub rs: usize,
    /// Step between columns.
    pub cs: usize,
}

fn last_index(offset: usize, rows: usize, cols: usize, rs: usize, cs: usize) -> usize {
    offset + (rows - 1) * rs + (cols - 1) * cs
}

/// `dst[m x n] += lhs[m x k] * rhs[k x n]`, single-threaded (callers parallelise outside).
///
/// Panics if a window reaches past its slice: that would be a bug in the caller's geometry,
/// never a property of user input.
pub fn matmul_acc(m: usize, n: usize, k: usize, dst: MatMut, lhs: Mat, rhs: Mat) {
    if m == 0 || n == 0 || k == 0 {
        return;
    }
    assert!(last_index(dst.offset, m, n, dst.rs, dst.cs) < dst.data.len(), "dst window");
    assert!(last_index(lhs.offset, m, k, lhs.rs, lhs.cs) < lhs.data.len(), "lhs window");
    assert!(last_index(rhs.offset, k, n, rhs.rs, rhs.cs) < rhs.data.len(), "rhs window");
    // SAFETY: the three windows were checked to lie inside their slices; `dst` is borrowed
    // mutably, so it cannot alias `lhs` or `rhs`.
    unsafe {
        gemm::gemm(
            m,
            n,
            k,
            dst.data.as_mut_ptr().add(dst.offset),
            dst.cs as isize,
            dst.rs as isize,
            true,
            lhs.data.as_ptr().add(lhs.offset),
            lhs.cs as isize,
            lhs.rs as isize,
            rhs.data.as_ptr().add(rhs.offset),
            rhs.cs as isize,
            rhs.rs as isize,
            1.0f32,
            1.0f32,
            false,
            false,
            false,
            gemm::Parallelism::None,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn strided_product_matches_the_naive_sum() {
        let a: Vec<f32> = (0..24).map(|i| i as f32 * 0.5 - 3.0).collect();
        let b: Vec<f32> = (0..30).map(|i| (i % 7) as f32 - 2.0).collect();
        let mut c = vec![1.0f32; 40];
        // lhs: 3x4 window with row stride 6, col stride 1; rhs: 4x5 transposed view of b.
        matmul_acc(
            3,
            5,
            4,
            MatMut { data: &mut c, offset: 2, rs: 10, cs: 2 },
            Mat { data: &a, offset: 1, rs: 6, cs: 1 },
            Mat { data: &b, offset: 0, rs: 1, cs: 6 },
        );
        for i in 0..3 {
            for j in 0..5 {
                let want: f32 = 1.0 + (0..4).map(|p| a[1 + i * 6 + p] * b[p + j * 6]).sum::<f32>();
                assert!((c[2 + i * 10 + j * 2] - want).abs() < 1e-4);
            }
        }
        assert_eq!(c[0], 1.0, "untouched outside the window");
    }
}
