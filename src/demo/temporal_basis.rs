//! A smooth low-dimensional basis for the student's temporal filters: raised cosines on
//! log-stretched time, narrow just before the response and wide at long lags (the usual basis of
//! GLM encoding models of retinal ganglion cells; Pillow et al., Nature 2008, methods, from
//! memory). A filter kept in their span has no lag-to-lag jitter and fades smoothly at long
//! lags, where free lags fitted to temporally correlated movies pick up noise
//! (docs/performance.md, session 21).

use ndarray::{Array2, ArrayViewMut, Dimension};

/// Offset of the log stretch, in frames: time `t` frames before the response maps to
/// `ln(t + OFFSET)`. With 3 frames, 10 cosines over 40 lags carry the planted sensor's
/// direction-selective filters (Gaussian bumps at 100 and 180 ms, s.d. 40 ms) at r >= 0.995 and
/// its alpha filters at r > 0.999 (test `the_planted_filter_shapes_lie_in_the_span`).
const OFFSET: f64 = 3.0;

/// The `count` raised cosines over `lags` lags, as columns of a `[lags, count]` matrix; rows
/// are oldest lag first (the stimulus's lag order), so row `lags - 1` is the frame just before
/// the response. Centres are evenly spaced in `ln(t + OFFSET)` from the newest lag to the
/// oldest, each cosine spanning two spacings either side of its centre, so every lag is covered
/// by two to four of them and they sum to 2 between the second and the last-but-one centres.
pub fn raised_cosines(count: usize, lags: usize) -> Array2<f64> {
    let stretch = |t: f64| (t + OFFSET).ln();
    let (first, last) = (stretch(0.0), stretch(lags.saturating_sub(1) as f64));
    let spacing = if count > 1 { (last - first) / (count - 1) as f64 } else { last - first };
    Array2::from_shape_fn((lags, count), |(row, k)| {
        let t = (lags - 1 - row) as f64;
        let centre = first + spacing * k as f64;
        let phase = ((stretch(t) - centre) * std::f64::consts::PI / (2.0 * spacing))
            .clamp(-std::f64::consts::PI, std::f64::consts::PI);
        (phase.cos() + 1.0) / 2.0
    })
}

/// Orthogonal projection onto the span of [`raised_cosines`]`(count, lags)`: the `[lags, lags]`
/// matrix `X (X^T X)^-1 X^T`, computed through the SVD of `X` (its columns are well apart, so
/// all `count` singular values are kept).
pub fn projector(count: usize, lags: usize) -> Array2<f64> {
    let x = raised_cosines(count, lags);
    let m = nalgebra::DMatrix::from_fn(lags, count, |i, j| x[[i, j]]);
    let svd = m.svd(true, false);
    let Some(u) = svd.u else {
        // The thin SVD always has U when asked for it; an empty basis projects onto nothing.
        return Array2::zeros((lags, lags));
    };
    let rank = svd.singular_values.iter().filter(|&&s| s > 1e-9).count();
    let u = u.columns(0, rank);
    let p = u * u.transpose();
    Array2::from_shape_fn((lags, lags), |(i, j)| p[(i, j)])
}

/// Replace `filter` (its lags oldest first in logical order, any trailing axes of length 1, as
/// the student's `[lags, 1, 1]` temporal factors) by its projection `p filter`, summing in f64.
pub fn project<D: Dimension>(p: &Array2<f64>, mut filter: ArrayViewMut<f32, D>) {
    let old: Vec<f64> = filter.iter().map(|&v| f64::from(v)).collect();
    for (i, v) in filter.iter_mut().enumerate() {
        *v = p.row(i).iter().zip(&old).map(|(a, b)| a * b).sum::<f64>() as f32;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array1;

    fn correlation(a: &[f64], b: &[f64]) -> f64 {
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        let (ma, mb) = (mean(a), mean(b));
        let cov: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
        let var = |v: &[f64], m: f64| v.iter().map(|x| (x - m) * (x - m)).sum::<f64>();
        cov / (var(a, ma) * var(b, mb)).sqrt()
    }

    /// `shape(t_ms)` at each lag, oldest first, at 10 ms per frame (the synthetic sensor's rate).
    fn filter(shape: impl Fn(f64) -> f64) -> Vec<f64> {
        (0..40).map(|row| shape((39 - row) as f64 * 10.0)).collect()
    }

    fn projected(p: &Array2<f64>, f: &[f64]) -> Vec<f64> {
        (0..f.len()).map(|i| p.row(i).iter().zip(f).map(|(a, b)| a * b).sum()).collect()
    }

    #[test]
    fn the_cosines_peak_at_their_centres_and_tile_the_lags_between_them() {
        let x = raised_cosines(10, 40);
        // The first cosine peaks at the newest lag, the last at the oldest.
        assert!((x[[39, 0]] - 1.0).abs() < 1e-12 && (x[[0, 9]] - 1.0).abs() < 1e-12);
        // Every lag is covered, by at most a sum of 2, and exactly 2 from 20 to 270 ms before
        // the response (between the second and the last-but-one centres).
        for row in 0..40 {
            let sum: f64 = x.row(row).sum();
            assert!((1.5 - 1e-9..=2.0 + 1e-9).contains(&sum), "lag row {row}: bumps sum to {sum}");
        }
        for row in 12..38 {
            assert!((x.row(row).sum() - 2.0).abs() < 1e-9);
        }
        // Narrow near the response, wide at long lags: the newest bump covers fewer lags.
        let width = |k: usize| x.column(k).iter().filter(|&&v| v > 0.0).count();
        assert!(width(0) < width(9), "widths {} and {}", width(0), width(9));
    }

    #[test]
    fn the_projector_is_symmetric_idempotent_and_keeps_the_span() {
        let p = projector(8, 40);
        let pp = p.dot(&p);
        for i in 0..40 {
            for j in 0..40 {
                assert!((p[[i, j]] - p[[j, i]]).abs() < 1e-9);
                assert!((pp[[i, j]] - p[[i, j]]).abs() < 1e-9);
            }
        }
        let x = raised_cosines(8, 40);
        let inside: Vec<f64> = (0..40).map(|i| 0.7 * x[[i, 2]] - 1.3 * x[[i, 5]]).collect();
        let back = projected(&p, &inside);
        assert!(inside.iter().zip(&back).all(|(a, b)| (a - b).abs() < 1e-9));
        // Its trace is the basis's dimension.
        assert!((p.diag().sum() - 8.0).abs() < 1e-9);
    }

    #[test]
    fn the_planted_filter_shapes_lie_in_the_span() {
        // The planted sensor's temporal filters (docs/models.md): direction-selective Gaussian
        // envelopes at 100 ms and their delayed copies at 180 ms (s.d. 40 ms), the ON transient
        // alpha(30) - 0.4356 alpha(70), the fast ON alpha(25).
        let gauss = |mu: f64| filter(move |t| (-0.5 * ((t - mu) / 40.0).powi(2)).exp());
        let alpha = |p: f64| move |t: f64| (t / p) * (1.0 - t / p).exp();
        let transient = filter(|t| alpha(30.0)(t) - 0.4356 * alpha(70.0)(t));
        let p = projector(10, 40);
        for (name, f, at_least) in [
            ("bump at 100 ms", gauss(100.0), 0.995),
            ("bump at 180 ms", gauss(180.0), 0.99),
            ("on-transient", transient, 0.999),
            ("on-fast", filter(alpha(25.0)), 0.999),
        ] {
            let r = correlation(&projected(&p, &f), &f);
            assert!(r >= at_least, "{name}: r {r:.4} < {at_least}");
        }
    }

    #[test]
    fn projecting_removes_lag_to_lag_jitter() {
        // A smooth bump plus alternating jitter: the projection keeps the bump and drops most
        // of the jitter, which no smooth basis can carry.
        let bump = filter(|t| (-0.5 * ((t - 100.0) / 40.0).powi(2)).exp());
        let noisy: Vec<f64> = bump.iter().enumerate().map(|(i, b)| b + if i % 2 == 0 { 0.2 } else { -0.2 }).collect();
        let p = projector(10, 40);
        let before = correlation(&noisy, &bump);
        let after = correlation(&projected(&p, &noisy), &bump);
        assert!(after > 0.98 && after > before + 0.1, "r with the bump {before:.3} -> {after:.3}");
        // `project` does the same on an f32 view.
        let mut v = Array1::from_iter(noisy.iter().map(|&x| x as f32));
        project(&p, v.view_mut());
        let expected = projected(&p, &noisy);
        assert!(v.iter().zip(&expected).all(|(a, b)| (f64::from(*a) - b).abs() < 1e-5));
    }
}
