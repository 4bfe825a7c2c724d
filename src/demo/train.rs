//! Fitting an encoding model with the engine's own gradients: a loss between the model's rates
//! and target rates (weighted squared error or Poisson deviance), gradients with respect to every
//! parameter by reverse mode, and Adam updates (Kingma & Ba, ICLR 2015: the update rule and default constants below).

use crate::engine::{Graph, ValueId};
use crate::{Error, Result, Tensor};
use ndarray::{Array2, IxDyn, Zip};

/// Adam's state for a list of parameters.
pub struct Adam {
    /// Step size.
    pub lr: f32,
    beta1: f32,
    beta2: f32,
    eps: f32,
    t: i32,
    m: Vec<Tensor>,
    v: Vec<Tensor>,
}

impl Adam {
    /// Fresh state for parameters of these shapes; the paper's defaults beta1 = 0.9,
    /// beta2 = 0.999, eps = 1e-8.
    pub fn new(shapes: &[Vec<usize>], lr: f32) -> Self {
        let zeros = |s: &Vec<usize>| Tensor::zeros(IxDyn(s));
        Adam {
            lr,
            beta1: 0.9,
            beta2: 0.999,
            eps: 1e-8,
            t: 0,
            m: shapes.iter().map(zeros).collect(),
            v: shapes.iter().map(zeros).collect(),
        }
    }

    /// Fresh state for the parameters `params` of `graph`.
    pub fn for_params(graph: &Graph, params: &[ValueId], lr: f32) -> Self {
        let shapes: Vec<Vec<usize>> = params
            .iter()
            .map(|&p| match &graph.values[p].source {
                crate::engine::Source::Param(t) => t.shape().to_vec(),
                _ => graph.values[p].shape.clone(),
            })
            .collect();
        Adam::new(&shapes, lr)
    }

    /// One update of `params` along `grads` (same order as at construction).
    pub fn step(&mut self, params: &mut [&mut Tensor], grads: &[Tensor]) {
        self.t += 1;
        let (b1, b2) = (self.beta1, self.beta2);
        let c1 = 1.0 - b1.powi(self.t);
        let c2 = 1.0 - b2.powi(self.t);
        for (((p, g), m), v) in params.iter_mut().zip(grads).zip(&mut self.m).zip(&mut self.v) {
            Zip::from(&mut **p).and(g).and(m).and(v).for_each(|p, &g, m, v| {
                *m = b1 * *m + (1.0 - b1) * g;
                *v = b2 * *v + (1.0 - b2) * g * g;
                *p -= self.lr * (*m / c1) / ((*v / c2).sqrt() + self.eps);
            });
        }
    }
}

/// Mean squared error of `out` (`[N, cells]` after flattening) against `target` `[N, cells]`,
/// and its gradient with respect to `out`.
pub fn mse(out: &Tensor, target: &Array2<f32>) -> Result<(f64, Tensor)> {
    weighted_mse(out, target, &vec![1.0; target.ncols()])
}

/// As [`mse`], each cell's squared errors weighted (e.g. by 1 / its variance, so cells with large
/// rates do not dominate the fit).
pub fn weighted_mse(out: &Tensor, target: &Array2<f32>, weights: &[f32]) -> Result<(f64, Tensor)> {
    weighted_mean(out, target, weights, squared_error)
}

/// One entry's squared error and its derivative in `o`.
fn squared_error(o: f64, y: f64) -> (f64, f64) {
    ((o - y).powi(2), 2.0 * (o - y))
}

/// Mean over entries of `weight(cell) * term(out, target).0` and its gradient with respect to
/// `out` (`term` gives an entry's loss and its derivative in `out`).
fn weighted_mean(
    out: &Tensor,
    target: &Array2<f32>,
    weights: &[f32],
    term: impl Fn(f64, f64) -> (f64, f64),
) -> Result<(f64, Tensor)> {
    if out.len() != target.len() {
        return Err(Error::Usage(format!(
            "training targets hold {} values but the model gives {}",
            target.len(),
            out.len()
        )));
    }
    let n = out.len() as f64;
    let mut grad = Tensor::zeros(IxDyn(out.shape()));
    let mut loss = 0.0;
    let cells = target.ncols().max(1);
    for (i, ((g, &o), &y)) in grad.iter_mut().zip(out.iter()).zip(target.iter()).enumerate() {
        let w = weights.get(i % cells).copied().unwrap_or(1.0) as f64;
        let (l, d) = term(o as f64, y as f64);
        loss += w * l;
        *g = (w * d / n) as f32;
    }
    Ok((loss / n, grad))
}

/// The fit's objective: how far a model's rates are from the target rates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum Loss {
    /// Squared error, each cell weighted (e.g. by 1 / its variance).
    WeightedMse,
    /// Poisson deviance (half of it: negative log-likelihood minus the saturated model's), the
    /// loss of firing-rate encoding models (common practice). Far less dominated by rare bursts
    /// than squared error. Each cell's deviance is weighted (e.g. by 1 / its mean rate, since the
    /// deviance grows with the rate).
    Poisson,
    /// Squared error of square-root rates, each cell weighted (e.g. by 1 / the variance of its
    /// square-root rate). The square root stabilises the variance of Poisson counts (Anscombe,
    /// Biometrika 1948), so a burst of 30 pulls on the fit like an error of about 5, not 30:
    /// for the exact (noise-free) targets of a teacher model every loss has the same minimum,
    /// and this one reaches it without rare bursts dominating the gradient.
    RootMse,
    /// Squared error of log rates `(ln(o + e) - ln(y + e))^2` with `e` = [`LOG_OFFSET`], each
    /// cell weighted (by 1 / the variance of its log rate). Relative errors count alike at every
    /// rate, so a resting rate 40 % too high (0.43 for 0.31) costs as much as a burst 40 % too
    /// low: the quotient metrics of the protocols (reversal / smooth) are quotients of a burst
    /// and a floor.
    LogMse,
}

impl Loss {
    /// One entry's loss and its derivative in the model's rate `o` (target `y`).
    fn term(self) -> fn(f64, f64) -> (f64, f64) {
        match self {
            Loss::WeightedMse => squared_error,
            Loss::Poisson => poisson_term,
            Loss::RootMse => root_squared_error,
            Loss::LogMse => log_squared_error,
        }
    }

    /// The loss (mean over all entries) and its gradient with respect to `out`.
    pub fn value_and_gradient(self, out: &Tensor, target: &Array2<f32>, weights: &[f32]) -> Result<(f64, Tensor)> {
        weighted_mean(out, target, weights, self.term())
    }

    /// Each cell's loss, mean over the batch.
    pub fn per_cell(self, out: &Tensor, target: &Array2<f32>, weights: &[f32]) -> Vec<f64> {
        let cells = target.ncols().max(1);
        let mut sums = vec![0.0; cells];
        for (i, (&o, &y)) in out.iter().zip(target.iter()).enumerate() {
            let w = weights.get(i % cells).copied().unwrap_or(1.0) as f64;
            sums[i % cells] += w * self.term()(o as f64, y as f64).0;
        }
        let n = (target.nrows().max(1)) as f64;
        sums.iter().map(|s| s / n).collect()
    }
}

/// Rates at or below zero are clamped to this before the logarithm.
const RATE_FLOOR: f64 = 1e-6;

/// One entry's half Poisson deviance `o - y ln o - (y - y ln y)` and its derivative in `o`.
fn poisson_term(o: f64, y: f64) -> (f64, f64) {
    let o = o.max(RATE_FLOOR);
    let y = y.max(0.0);
    let saturated = if y > 0.0 { y - y * y.ln() } else { 0.0 };
    (o - y * o.ln() - saturated, 1.0 - y / o)
}

/// One entry's squared error of square roots `(sqrt o - sqrt y)^2` and its derivative in `o`.
fn root_squared_error(o: f64, y: f64) -> (f64, f64) {
    let (ro, ry) = (o.max(RATE_FLOOR).sqrt(), y.max(0.0).sqrt());
    ((ro - ry).powi(2), (ro - ry) / ro)
}

/// Offset added to rates before the logarithm of [`Loss::LogMse`]: well below the demo cells'
/// resting rates (0.31 and up), so the floor is resolved, and large enough that rates near zero
/// do not dominate.
pub const LOG_OFFSET: f64 = 0.05;

/// One entry's squared error of log rates `(ln(o + e) - ln(y + e))^2` and its derivative in `o`.
fn log_squared_error(o: f64, y: f64) -> (f64, f64) {
    let (lo, ly) = ((o.max(0.0) + LOG_OFFSET).ln(), (y.max(0.0) + LOG_OFFSET).ln());
    let d = if o < 0.0 { 0.0 } else { 2.0 * (lo - ly) / (o + LOG_OFFSET) };
    ((lo - ly).powi(2), d)
}

/// Half the Poisson deviance of rates `out` for target rates `target` `[N, cells]`, each cell's
/// terms weighted by `weights` (missing weights are 1), mean over entries, and its gradient.
/// Zero exactly when `out == target`.
pub fn poisson_deviance(out: &Tensor, target: &Array2<f32>, weights: &[f32]) -> Result<(f64, Tensor)> {
    weighted_mean(out, target, weights, poisson_term)
}

/// A batch's loss (overall and per cell) and its gradients with respect to `params`:
/// forward `x`, compare with `target` (per-cell `weights` for the weighted MSE), reverse mode.
/// Nothing is updated.
pub fn batch_gradients(
    graph: &Graph,
    params: &[ValueId],
    (x, target): (Tensor, &Array2<f32>),
    loss: Loss,
    weights: &[f32],
) -> Result<(f64, Vec<f64>, Vec<Tensor>)> {
    let out = graph.outputs[0];
    let tape = graph.forward(x, &[])?;
    let (value, seed) = loss.value_and_gradient(tape.value(out), target, weights)?;
    let cells = loss.per_cell(tape.value(out), target, weights);
    Ok((value, cells, tape.gradients(&[(out, seed)], params)?))
}

/// One Adam step on a batch (see [`batch_gradients`]). Returns the batch loss before the
/// update, overall and per cell.
pub fn train_step(
    graph: &mut Graph,
    params: &[ValueId],
    adam: &mut Adam,
    batch: (Tensor, &Array2<f32>),
    weights: &[f32],
) -> Result<(f64, Vec<f64>)> {
    let (loss, cells, grads) = batch_gradients(graph, params, batch, Loss::WeightedMse, weights)?;
    let mut tensors: Vec<Tensor> = params
        .iter()
        .map(|&p| graph.param_mut(p).map(std::mem::take))
        .collect::<Option<_>>()
        .ok_or_else(|| Error::Usage("train_step: a listed parameter is not a parameter of the graph".into()))?;
    {
        let mut refs: Vec<&mut Tensor> = tensors.iter_mut().collect();
        adam.step(&mut refs, &grads);
    }
    for (&p, t) in params.iter().zip(tensors) {
        if let Some(slot) = graph.param_mut(p) {
            *slot = t;
        }
    }
    Ok((loss, cells))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn adam_minimises_a_quadratic() {
        // f(p) = sum (p - 3)^2 from p = 0: Adam with step 0.1 reaches the minimum.
        let mut p = Tensor::zeros(IxDyn(&[4]));
        let mut adam = Adam::new(&[vec![4]], 0.1);
        for _ in 0..300 {
            let g = p.mapv(|v| 2.0 * (v - 3.0));
            adam.step(&mut [&mut p], &[g]);
        }
        assert!(p.iter().all(|&v| (v - 3.0).abs() < 0.05), "{p}");
    }

    #[test]
    fn mse_gradient_matches_its_definition() {
        let out = Tensor::from_shape_vec(IxDyn(&[2, 2]), vec![1.0, 2.0, 3.0, 4.0]).unwrap();
        let y = Array2::from_shape_vec((2, 2), vec![1.0, 1.0, 1.0, 1.0]).unwrap();
        let (loss, g) = mse(&out, &y).unwrap();
        assert!((loss - (0.0 + 1.0 + 4.0 + 9.0) / 4.0).abs() < 1e-12);
        assert_eq!(g.iter().copied().collect::<Vec<_>>(), vec![0.0, 0.5, 1.0, 1.5]);
    }

    #[test]
    fn poisson_deviance_gradient_matches_finite_differences() {
        // Central differences of the loss itself (f64), at rates away from the floor.
        let out = Tensor::from_shape_vec(IxDyn(&[3, 2]), vec![0.5, 2.0, 3.0, 0.1, 1.2, 4.0]).unwrap();
        let y = Array2::from_shape_vec((3, 2), vec![1.0, 0.0, 2.5, 0.3, 1.2, 7.0]).unwrap();
        let w = [0.5, 2.0];
        let (_, g) = poisson_deviance(&out, &y, &w).unwrap();
        let h = 1e-3f32;
        for i in 0..out.len() {
            let mut plus = out.clone();
            let mut minus = out.clone();
            plus.as_slice_mut().unwrap()[i] += h;
            minus.as_slice_mut().unwrap()[i] -= h;
            let fd = (poisson_deviance(&plus, &y, &w).unwrap().0 - poisson_deviance(&minus, &y, &w).unwrap().0)
                / (2.0 * h as f64);
            let an = g.as_slice().unwrap()[i] as f64;
            assert!((fd - an).abs() < 1e-4 * (1.0 + an.abs()), "entry {i}: fd {fd} analytic {an}");
        }
    }

    /// Check `loss`'s gradient against central finite differences (relative tolerance `tol`)
    /// on a small batch with a burst, a zero and a low rate, and its value at the target
    /// (below `at_target`); returns the target for further checks.
    fn check_gradient(loss: Loss, tol: f64, at_target: f64) -> Array2<f32> {
        let out = Tensor::from_shape_vec(IxDyn(&[2, 2]), vec![0.5, 2.0, 3.0, 0.1]).unwrap();
        let y = Array2::from_shape_vec((2, 2), vec![1.0, 0.0, 30.0, 0.3]).unwrap();
        let w = [0.5, 2.0];
        let (_, g) = loss.value_and_gradient(&out, &y, &w).unwrap();
        let h = 1e-3f32;
        for i in 0..out.len() {
            let (mut plus, mut minus) = (out.clone(), out.clone());
            plus.as_slice_mut().unwrap()[i] += h;
            minus.as_slice_mut().unwrap()[i] -= h;
            let value = |o: &Tensor| loss.value_and_gradient(o, &y, &w).unwrap().0;
            let fd = (value(&plus) - value(&minus)) / (2.0 * h as f64);
            let an = g.as_slice().unwrap()[i] as f64;
            assert!((fd - an).abs() < tol * (1.0 + an.abs()), "{loss:?} entry {i}: fd {fd} analytic {an}");
        }
        assert!(loss.value_and_gradient(&y.clone().into_dyn(), &y, &w).unwrap().0.abs() < at_target);
        y
    }

    #[test]
    fn root_squared_error_gradient_matches_finite_differences() {
        // Zero at the target (up to the rate floor).
        check_gradient(Loss::RootMse, 1e-4, 1e-5);
        // A missed burst (30 predicted as 0.3) pulls on the log-rate (derivative times rate) by
        // o - sqrt(o y) = -2.7, eleven times less than under the Poisson deviance, whose pull is
        // o - y = -29.7.
        let root_pull = root_squared_error(0.3, 30.0).1 * 0.3;
        let poisson_pull = poisson_term(0.3, 30.0).1 * 0.3;
        assert!((root_pull + 2.7).abs() < 1e-9 && (poisson_pull + 29.7).abs() < 1e-9, "{poisson_pull} vs {root_pull}");
    }

    #[test]
    fn log_squared_error_gradient_matches_finite_differences() {
        check_gradient(Loss::LogMse, 1e-3, 1e-9);
        // Relative errors cost alike: a floor 40 % high and a burst 40 % high, the same loss.
        let floor = log_squared_error(0.31 * 1.4 + 0.4 * LOG_OFFSET, 0.31).0;
        let burst = log_squared_error(2.44 * 1.4 + 0.4 * LOG_OFFSET, 2.44).0;
        assert!((floor - burst).abs() < 1e-9, "{floor} vs {burst}");
    }

    #[test]
    fn poisson_deviance_is_zero_only_at_the_target() {
        // The deviance of a saturated model is zero and positive elsewhere (McCullagh & Nelder,
        // Generalized Linear Models, 1989, ch. 2, from memory).
        let y = Array2::from_shape_vec((2, 2), vec![0.0, 1.0, 2.0, 5.0]).unwrap();
        let exact = Tensor::from_shape_vec(IxDyn(&[2, 2]), vec![0.0, 1.0, 2.0, 5.0]).unwrap();
        assert!(poisson_deviance(&exact, &y, &[]).unwrap().0.abs() < 1e-5);
        let off = exact.mapv(|v| v + 0.5);
        assert!(poisson_deviance(&off, &y, &[]).unwrap().0 > 0.05);
        let per_cell = Loss::Poisson.per_cell(&off, &y, &[]);
        assert!(per_cell.iter().all(|&c| c > 0.0), "{per_cell:?}");
    }
}
