//! A smoothness penalty for the student's first layer: the sum of squared discrete Laplacians
//! of its spatial factors (5-point stencil, zero outside the kernel) plus the sum of squared
//! second differences of its temporal factors. Smooth filters are the usual prior of CNN
//! encoding models of sensory neurons (common practice): a 15 x 15 x 40 kernel has far more
//! weights than the training movies pin down, and the rough part of it is noise.

use crate::Tensor;
use ndarray::{ArrayView2, ArrayViewMut2, Axis};

/// The 5-point Laplacian of `w` (zero outside), added into `out` times `scale`.
fn add_laplacian(w: ArrayView2<f32>, mut out: ArrayViewMut2<f32>, scale: f32) {
    let (h, wd) = w.dim();
    for y in 0..h {
        for x in 0..wd {
            let mut v = -4.0 * w[[y, x]];
            if y > 0 {
                v += w[[y - 1, x]];
            }
            if y + 1 < h {
                v += w[[y + 1, x]];
            }
            if x > 0 {
                v += w[[y, x - 1]];
            }
            if x + 1 < wd {
                v += w[[y, x + 1]];
            }
            out[[y, x]] += scale * v;
        }
    }
}

/// The spatial maps of a factor `[.., .., K, K]`, one per leading pair of indices.
fn maps(t: &Tensor) -> Vec<ArrayView2<'_, f32>> {
    let (a, b) = (t.shape()[0], t.shape()[1]);
    (0..a * b)
        .map(|i| {
            t.index_axis(Axis(0), i / b)
                .index_axis_move(Axis(0), i % b)
                .into_dimensionality()
                .expect("a 4-d spatial factor")
        })
        .collect()
}

/// The temporal filters of a factor `[n, LAGS, 1, 1]`, as `[n, LAGS]`.
fn filters(t: &Tensor) -> ArrayView2<'_, f32> {
    let (n, lags) = (t.shape()[0], t.shape()[1]);
    t.view().into_shape_with_order((n, lags)).expect("a [n, lags, 1, 1] temporal factor")
}

/// Add `weight` times the penalty's gradient to `grad_spatial` and `grad_temporal` (same shapes
/// as the factors): `2 L(L w)` for each map (the Laplacian with zero outside is symmetric) and
/// `2 D'D w` for each filter (`D` the second difference).
pub fn add_gradient(
    spatial: &Tensor,
    temporal: &Tensor,
    grad_spatial: &mut Tensor,
    grad_temporal: &mut Tensor,
    weight: f32,
) {
    if weight == 0.0 {
        return;
    }
    let b = spatial.shape()[1];
    for (i, m) in maps(spatial).into_iter().enumerate() {
        let mut lap = ndarray::Array2::<f32>::zeros(m.dim());
        add_laplacian(m, lap.view_mut(), 1.0);
        let mut g = grad_spatial.index_axis_mut(Axis(0), i / b);
        let g = g.index_axis_mut(Axis(0), i % b).into_dimensionality().expect("a 4-d spatial gradient");
        add_laplacian(lap.view(), g, 2.0 * weight);
    }
    let (n, lags) = (temporal.shape()[0], temporal.shape()[1]);
    let f = filters(temporal);
    let mut g = grad_temporal.view_mut().into_shape_with_order((n, lags)).expect("a [n, lags, 1, 1] gradient");
    for r in 0..n {
        for i in 0..lags.saturating_sub(2) {
            let d = 2.0 * weight * (f[[r, i]] - 2.0 * f[[r, i + 1]] + f[[r, i + 2]]);
            g[[r, i]] += d;
            g[[r, i + 1]] -= 2.0 * d;
            g[[r, i + 2]] += d;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::IxDyn;
    use rand::rngs::ChaCha8Rng;
    use rand::{RngExt, SeedableRng};

    /// The penalty: sum of squared Laplacians of every map of `spatial` plus sum of squared second
    /// differences of every filter of `temporal`, in f64.
    fn roughness(spatial: &Tensor, temporal: &Tensor) -> f64 {
        let mut total = 0.0;
        for m in maps(spatial) {
            let mut lap = ndarray::Array2::<f32>::zeros(m.dim());
            add_laplacian(m, lap.view_mut(), 1.0);
            total += lap.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>();
        }
        for f in filters(temporal).rows() {
            total += f.windows(3).into_iter().map(|w| f64::from(w[0] - 2.0 * w[1] + w[2]).powi(2)).sum::<f64>();
        }
        total
    }

    fn random(shape: &[usize], rng: &mut ChaCha8Rng) -> Tensor {
        Tensor::from_shape_fn(IxDyn(shape), |_| rng.random_range(-1.0f32..1.0))
    }

    #[test]
    fn the_gradient_matches_central_differences() {
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        let (spatial, temporal) = (random(&[2, 2, 5, 5], &mut rng), random(&[4, 7, 1, 1], &mut rng));
        let weight = 0.7f32;
        let (mut gs, mut gt) = (spatial.mapv(|_| 0.0), temporal.mapv(|_| 0.0));
        add_gradient(&spatial, &temporal, &mut gs, &mut gt, weight);
        let h = 1e-2f32;
        let check = |which: usize, i: usize, analytic: f32| {
            let (mut s, mut t) = (spatial.clone(), temporal.clone());
            let target = if which == 0 { &mut s } else { &mut t };
            target.as_slice_mut().unwrap()[i] += h;
            let up = roughness(&s, &t);
            let target = if which == 0 { &mut s } else { &mut t };
            target.as_slice_mut().unwrap()[i] -= 2.0 * h;
            let down = roughness(&s, &t);
            // The penalty is quadratic: central differences are exact up to rounding.
            let numeric = f64::from(weight) * (up - down) / (2.0 * f64::from(h));
            assert!(
                (numeric - f64::from(analytic)).abs() < 1e-3 * (1.0 + numeric.abs()),
                "{which} {i}: {numeric} vs {analytic}"
            );
        };
        for (i, &g) in gs.iter().enumerate() {
            check(0, i, g);
        }
        for (i, &g) in gt.iter().enumerate() {
            check(1, i, g);
        }
    }

    #[test]
    fn planes_and_lines_are_smooth_and_a_checkerboard_is_not() {
        // A linear ramp in time has no second difference; a constant map has a Laplacian only at
        // the border (zero outside); a checkerboard's Laplacian is 8 at every inner pixel.
        let ramp = Tensor::from_shape_fn(IxDyn(&[1, 6, 1, 1]), |i| i[1] as f32);
        let zero_map = Tensor::zeros(IxDyn(&[1, 1, 4, 4]));
        assert_eq!(roughness(&zero_map, &ramp), 0.0);
        let checker = Tensor::from_shape_fn(IxDyn(&[1, 1, 4, 4]), |i| if (i[2] + i[3]) % 2 == 0 { 1.0 } else { -1.0 });
        let flat = Tensor::from_elem(IxDyn(&[1, 1, 4, 4]), 1.0);
        let still = Tensor::zeros(IxDyn(&[1, 3, 1, 1]));
        assert!(roughness(&checker, &still) > 10.0 * roughness(&flat, &still));
        // 4 inner pixels at 8^2, 8 edge pixels at 7^2, 4 corners at 6^2.
        assert_eq!(roughness(&checker, &still), 4.0 * 64.0 + 8.0 * 49.0 + 4.0 * 36.0);
    }
}
