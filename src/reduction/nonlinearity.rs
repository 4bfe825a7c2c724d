//! How a kept unit turns its generator signal (filter applied to the stimulus) into activity.
//! First-layer units: the exact curve, evaluating the model's own bias, batch norm and
//! nonlinearity. Deeper units: a scaled softplus fitted to generator vs activation over the
//! stimulus, with its fraction of variance explained.

use super::filters::conv_bias;
use crate::engine::{Node, ValueId};
use crate::model::Model;
use crate::response::measure::min_max;
use crate::{Error, Result, Tensor};
use ndarray::{Array1, IxDyn};
use serde::Serialize;

/// A nonlinearity as a sampled curve with its threshold and gain.
#[derive(Debug, Clone, Serialize)]
pub struct Curve {
    /// `exact` (the model's own ops) or `fitted` (scaled softplus).
    pub kind: &'static str,
    /// Generator signal values.
    pub generator: Vec<f64>,
    /// Activation at each generator value.
    pub activation: Vec<f64>,
    /// Generator value where the slope first reaches half its maximum over the range.
    pub threshold: f64,
    /// Maximum slope (activation per unit generator signal) over the range.
    pub gain: f64,
    /// The fitted parameters and quality, for `fitted` curves.
    pub fit: Option<SoftplusFit>,
}

/// `y = a * softplus(b * (g - theta)) + d`, least squares.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct SoftplusFit {
    /// Output scale.
    pub a: f64,
    /// Input gain.
    pub b: f64,
    /// Generator offset where the curve bends.
    pub theta: f64,
    /// Output offset.
    pub d: f64,
    /// Fraction of the activation's variance the fit explains.
    pub fve: f64,
    /// Root-mean-square error of the fit.
    pub rms_error: f64,
}

fn softplus(v: f64) -> f64 {
    if v > 30.0 {
        v
    } else {
        v.exp().ln_1p()
    }
}

impl SoftplusFit {
    /// The fitted curve at `g`.
    pub fn at(&self, g: f64) -> f64 {
        self.a * softplus(self.b * (g - self.theta)) + self.d
    }
}

fn threshold_and_gain(g: &[f64], y: &[f64]) -> (f64, f64) {
    let slopes: Vec<f64> = g.windows(2).zip(y.windows(2)).map(|(a, b)| (b[1] - b[0]) / (a[1] - a[0])).collect();
    let gain = slopes.iter().copied().fold(0.0f64, |m, s| if s.abs() > m.abs() { s } else { m });
    let at = slopes.iter().position(|s| s.abs() >= gain.abs() / 2.0).unwrap_or(0);
    (g.get(at).copied().unwrap_or(0.0), gain)
}

/// Sample `lo..=hi` at `n` points.
fn grid(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    (0..n).map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64).collect()
}

/// The exact nonlinearity of channel `c` of `layer` fed by the first-layer `conv`: the conv's
/// output without its bias is the generator signal; the bias, batch norm and nonlinearity are the
/// model's own, evaluated on `lo..=hi`.
pub fn exact(model: &Model, conv: &Node, layer: ValueId, c: usize, lo: f64, hi: f64) -> Result<Curve> {
    let g = &model.graph;
    let bias = conv_bias(model, conv, c);
    let gen = grid(lo, hi, 201);
    let rank = g.values[conv.output].shape.len();
    let channels = g.values[conv.output].shape[1];
    let mut shape = vec![gen.len(), channels];
    shape.extend(std::iter::repeat_n(1, rank - 2));
    let mut z = Tensor::zeros(IxDyn(&shape));
    for (i, &u) in gen.iter().enumerate() {
        z.as_slice_mut().ok_or_else(|| Error::Usage("layout".into()))?[i * channels + c] = (u + bias) as f32;
    }
    let tape = g.forward_to(vec![(conv.output, z)], &[layer], &[])?;
    let y = tape.value(layer);
    let y: Vec<f64> = (0..gen.len()).map(|i| y.as_slice().map_or(f64::NAN, |s| s[i * channels + c] as f64)).collect();
    let (threshold, gain) = threshold_and_gain(&gen, &y);
    Ok(Curve { kind: "exact", generator: gen, activation: y, threshold, gain, fit: None })
}

/// The least-squares scale and offset of `softplus(b (g - theta))` for `y`, and its SSE.
fn solve(g: &Array1<f64>, y: &Array1<f64>, b: f64, theta: f64) -> Option<(f64, f64, f64)> {
    let n = g.len() as f64;
    let s: Vec<f64> = g.iter().map(|&v| softplus(b * (v - theta))).collect();
    let ms = s.iter().sum::<f64>() / n;
    let my = y.sum() / n;
    let sxx: f64 = s.iter().map(|v| (v - ms).powi(2)).sum();
    if sxx < 1e-18 {
        return None;
    }
    let a = s.iter().zip(y.iter()).map(|(p, q)| (p - ms) * (q - my)).sum::<f64>() / sxx;
    let d = my - a * ms;
    Some((a, d, s.iter().zip(y.iter()).map(|(p, q)| (a * p + d - q).powi(2)).sum()))
}

/// Least-squares scaled softplus through (g, y): a grid over the bend and the input gain (the
/// output scale and offset solved exactly at each point), then a compass search that halves its
/// steps around the best point until they are 1e-4 of the grid's.
pub fn fit_softplus(g: &Array1<f64>, y: &Array1<f64>) -> Option<SoftplusFit> {
    if g.len() < 4 {
        return None;
    }
    let (gmin, gmax) = min_max(g);
    let span = (gmax - gmin).max(1e-12);
    // Search in (theta, log10 b).
    let sse = |t: f64, lb: f64| solve(g, y, 10f64.powf(lb), t).map_or(f64::INFINITY, |r| r.2);
    let mut best = (gmin, (0.5 / span).log10(), f64::INFINITY);
    for ti in 0..=40 {
        let t = gmin - 0.25 * span + 1.5 * span * ti as f64 / 40.0;
        for bi in 0..=30 {
            let lb = (0.5 / span).log10() + bi as f64 * 3.5 / 30.0;
            let e = sse(t, lb);
            if e < best.2 {
                best = (t, lb, e);
            }
        }
    }
    let (mut st, mut sb) = (1.5 * span / 40.0, 3.5 / 30.0);
    while st > 1e-4 * span / 40.0 {
        let mut moved = false;
        for (dt, db) in [(st, 0.0), (-st, 0.0), (0.0, sb), (0.0, -sb)] {
            let e = sse(best.0 + dt, best.1 + db);
            if e < best.2 {
                best = (best.0 + dt, best.1 + db, e);
                moved = true;
            }
        }
        if !moved {
            st /= 2.0;
            sb /= 2.0;
        }
    }
    let (theta, b) = (best.0, 10f64.powf(best.1));
    let (a, d, e) = solve(g, y, b, theta)?;
    let n = g.len() as f64;
    let my = y.sum() / n;
    let var_y: f64 = y.iter().map(|v| (v - my).powi(2)).sum();
    let fve = if var_y > 0.0 { 1.0 - e / var_y } else { 1.0 };
    Some(SoftplusFit { a, b, theta, d, fve, rms_error: (e / n).sqrt() })
}

/// A fitted curve over the range of `g`.
pub fn fitted(g: &Array1<f64>, y: &Array1<f64>) -> Option<Curve> {
    let fit = fit_softplus(g, y)?;
    let (lo, hi) = min_max(g);
    let gen = grid(lo, hi, 201);
    let act: Vec<f64> = gen.iter().map(|&v| fit.at(v)).collect();
    let (threshold, gain) = threshold_and_gain(&gen, &act);
    Some(Curve { kind: "fitted", generator: gen, activation: act, threshold, gain, fit: Some(fit) })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn softplus_fit_recovers_planted_parameters() {
        let g = Array1::from_iter((0..200).map(|i| -2.0 + 4.0 * i as f64 / 199.0));
        let truth = SoftplusFit { a: 1.5, b: 3.0, theta: 0.4, d: 0.2, fve: 1.0, rms_error: 0.0 };
        let y = g.mapv(|v| truth.at(v));
        let fit = fit_softplus(&g, &y).expect("enough points");
        assert!(fit.fve > 0.99999, "fve {}", fit.fve);
        for &v in g.iter() {
            assert!((fit.at(v) - truth.at(v)).abs() < 0.01, "at {v}");
        }
        assert!((fit.b - 3.0).abs() < 0.05 && (fit.theta - 0.4).abs() < 0.01, "{fit:?}");
    }

    #[test]
    fn threshold_of_a_rectifier_is_its_kink() {
        let g = grid(-1.0, 1.0, 201);
        let y: Vec<f64> = g.iter().map(|&v| (v - 0.3f64).max(0.0) * 2.0).collect();
        let (t, gain) = threshold_and_gain(&g, &y);
        assert!((t - 0.3).abs() < 0.011, "threshold {t}");
        assert!((gain - 2.0).abs() < 1e-9);
    }
}
