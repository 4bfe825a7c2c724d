//! Small measurements on rate traces that protocol metrics share.

use ndarray::ArrayView2;

/// Mean rate of `cell` over frames `[start, end)` (NaN for an empty range).
pub fn mean(rates: &ArrayView2<f32>, cell: usize, start: usize, end: usize) -> f64 {
    let end = end.min(rates.nrows());
    if start >= end {
        return f64::NAN;
    }
    (start..end).map(|t| rates[[t, cell]] as f64).sum::<f64>() / (end - start) as f64
}

/// Largest rate of `cell` in `[start, end)` and the frame where it occurs (first maximum).
pub fn peak(rates: &ArrayView2<f32>, cell: usize, start: usize, end: usize) -> (f64, usize) {
    let end = end.min(rates.nrows());
    (start..end).fold((f64::NEG_INFINITY, start), |(m, at), t| {
        let v = rates[[t, cell]] as f64;
        if v > m {
            (v, t)
        } else {
            (m, at)
        }
    })
}

/// Least-squares slope of `ys` against `xs` (NaN with fewer than two distinct xs).
pub fn slope(xs: &[f64], ys: &[f64]) -> f64 {
    let n = xs.len() as f64;
    let (mx, my) = (xs.iter().sum::<f64>() / n, ys.iter().sum::<f64>() / n);
    let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
    let sxy: f64 = xs.iter().zip(ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    if sxx > 0.0 {
        sxy / sxx
    } else {
        f64::NAN
    }
}

/// (a - b) / (a + b), the usual contrast index; NaN when both are zero.
pub fn index(a: f64, b: f64) -> f64 {
    if a + b == 0.0 {
        f64::NAN
    } else {
        (a - b) / (a + b)
    }
}

/// JSON number, with NaN written as null.
pub fn json(v: f64) -> serde_json::Value {
    if v.is_finite() {
        serde_json::json!(v)
    } else {
        serde_json::Value::Null
    }
}

/// The smallest and largest of `values` ((inf, -inf) when there are none).
pub fn min_max<'a>(values: impl IntoIterator<Item = &'a f64>) -> (f64, f64) {
    values.into_iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)))
}

/// Pearson correlation of two equally long series (NaN when either is constant).
pub fn correlation(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len() as f64;
    let (ma, mb) = (a.iter().sum::<f64>() / n, b.iter().sum::<f64>() / n);
    let cov: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
    let va: f64 = a.iter().map(|x| (x - ma).powi(2)).sum();
    let vb: f64 = b.iter().map(|y| (y - mb).powi(2)).sum();
    cov / (va * vb).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn measurements_on_a_known_trace() {
        let r = Array2::from_shape_fn((10, 1), |(t, _)| if t == 6 { 5.0 } else { t as f32 * 0.1 });
        let v = r.view();
        assert!((mean(&v, 0, 0, 4) - 0.15).abs() < 1e-6);
        assert_eq!(peak(&v, 0, 0, 10), (5.0, 6));
        assert!((slope(&[1.0, 2.0, 3.0], &[2.0, 4.0, 6.0]) - 2.0).abs() < 1e-12);
        assert!((index(3.0, 1.0) - 0.5).abs() < 1e-12);
    }
}
