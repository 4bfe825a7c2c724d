//! Attribution: which hidden units carry a response, and when. Input integrated gradients
//! (Sundararajan, Taly & Yan 2017) and layer conductance (Dhamdhere, Sundararajan & Yan 2019)
//! along the straight path from a baseline movie to the stimulus, for a target that is one cell
//! or a weighted set of cells summed over an analysis window.

mod affine;
pub mod baseline;
pub mod path;
mod plot;
pub mod quadrature;
pub mod rank;
pub mod stored;

pub use affine::frontier;
pub use baseline::Baseline;
pub use plot::{rows_of, Heatmap, Ranking};
pub use quadrature::Rule;

use crate::engine::ValueId;
use crate::model::summary::hidden_layer_values;
use crate::model::Model;
use crate::response::windows_at;
use crate::{Error, Result, Tensor};
use ndarray::{Array2, Array3, Axis, IxDyn};
use path::{integrate, Endpoints, PathJob};

/// Number of path steps: fixed, or doubled from 16 until the completeness residual is small.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Steps {
    /// Exactly this many.
    Fixed(usize),
    /// Double from 16 up to 1,024 until the residual is below this fraction.
    Auto(f64),
}

/// What to attribute.
#[derive(Debug, Clone)]
pub struct Request {
    /// Target cells and their weights.
    pub cells: Vec<(usize, f32)>,
    /// Movie frames whose responses are summed into the target.
    pub frames: Vec<usize>,
    /// Hidden layers (value ids) whose units are attributed.
    pub layers: Vec<ValueId>,
    /// The counterfactual stimulus.
    pub baseline: Baseline,
    /// Quadrature rule.
    pub rule: Rule,
    /// Step count.
    pub steps: Steps,
    /// Also compute input integrated gradients.
    pub input_ig: bool,
    /// Seed for random baselines.
    pub seed: u64,
}

/// The attribution of one layer.
#[derive(Debug, Clone)]
pub struct LayerAttribution {
    /// Value name.
    pub name: String,
    /// Conductance per channel (unit), summed over windows and positions.
    pub total: Vec<f64>,
    /// Conductance per channel and movie frame `[channels, frames]`.
    pub time: Array2<f32>,
    /// Conductance per channel and position `[channels, spatial...]`.
    pub space: Tensor,
    /// |sum of conductances - (F(x) - F(x'))| / |F(x) - F(x')|.
    pub residual: f64,
    /// Per channel: dF/dy summed over windows and positions and averaged along the path; its
    /// sign says whether the unit excites (+) or inhibits (-) the target.
    pub gradient: Vec<f64>,
}

/// Everything `attribute` computes.
#[derive(Debug, Clone)]
pub struct Attribution {
    /// Target at the stimulus.
    pub f_input: f64,
    /// Target at the baseline (averaged over noise baselines).
    pub f_baseline: f64,
    /// Steps used.
    pub steps: usize,
    /// Per layer.
    pub layers: Vec<LayerAttribution>,
    /// Input IG `[frames, H, W]` and its completeness residual, when asked for.
    pub input_ig: Option<(Array3<f32>, f64)>,
    /// Whether the affine prefix shortcut was used.
    pub affine_prefix: Option<String>,
    /// Things the user should know (e.g. tolerance not reached).
    pub warnings: Vec<String>,
}

/// The names of the model's attributable hidden layers, in graph order.
pub fn hidden_layers(model: &Model) -> Vec<String> {
    hidden_layer_values(model).into_iter().map(|id| model.graph.values[id].name.clone()).collect()
}

/// Resolve `--layer` (a name, `auto` = the first hidden layer, or `all`) to value ids.
pub fn resolve_layers(model: &Model, spec: &str) -> Result<Vec<ValueId>> {
    let hidden = hidden_layers(model);
    if hidden.is_empty() {
        return Err(Error::Usage(format!("model '{}' has no attributable hidden layer", model.path.display())));
    }
    let names: Vec<String> = match spec {
        "auto" => vec![hidden[0].clone()],
        "all" => hidden.clone(),
        s => s.split(',').map(|x| x.trim().to_string()).collect(),
    };
    names
        .iter()
        .map(|n| {
            if !hidden.contains(n) {
                return Err(Error::Usage(format!(
                    "unknown layer '{n}'; attributable layers: {} (or auto, all)",
                    hidden.join(", ")
                )));
            }
            model.graph.find(n).ok_or_else(|| Error::Usage(format!("no value '{n}'")))
        })
        .collect()
}

/// dF/d(output) for one window: the target cells' weights (checked against the model's cells).
pub(crate) fn seed_for(model: &Model, cells: &[(usize, f32)]) -> Result<Tensor> {
    let g = &model.graph;
    let shape = &g.values[g.outputs[0]].shape;
    let count: usize = shape[1..].iter().product();
    let mut seed = Tensor::zeros(IxDyn(shape));
    for &(c, w) in cells {
        if c >= count {
            return Err(Error::Usage(format!(
                "cell {c} is out of range: the model has {count} cells (0..={})",
                count - 1
            )));
        }
        seed.as_slice_mut().ok_or_else(|| Error::Usage("output layout".into()))?[c] += w;
    }
    Ok(seed)
}

fn residual(total: f64, df: f64) -> f64 {
    if df == 0.0 {
        if total == 0.0 {
            0.0
        } else {
            f64::INFINITY
        }
    } else {
        (total - df).abs() / df.abs()
    }
}

/// One fixed-step attribution, averaged over the baselines.
struct Once {
    fx: f64,
    fx0: f64,
    sums: Vec<ndarray::ArrayD<f64>>,
    ig: Option<Tensor>,
    gradient: Vec<Vec<f64>>,
}

/// One attribution with a fixed step count, averaged over the baseline movies.
/// Progress callback: (finished, total) work items of the current path integral.
pub type Progress<'a> = &'a (dyn Fn(usize, usize) + Sync);

#[allow(clippy::too_many_arguments)]
fn once(
    model: &Model,
    x: &Tensor,
    baselines: &[Tensor],
    ends: &Endpoints,
    seed: &Tensor,
    req: &Request,
    steps: usize,
    progress: Progress,
) -> Result<Once> {
    let k = baselines.len() as f64;
    let (mut fx, mut fx0) = (0.0, 0.0);
    let mut sums: Option<Vec<ndarray::ArrayD<f64>>> = None;
    let mut ig: Option<Tensor> = None;
    let mut gradient: Vec<Vec<f64>> = Vec::new();
    for (b, x0) in baselines.iter().enumerate() {
        let job = PathJob {
            graph: &model.graph,
            x,
            x0,
            seed,
            layers: &req.layers,
            rule: req.rule,
            steps,
            input_ig: req.input_ig,
            progress,
        };
        let r = integrate(&job, ends, b)?;
        fx = r.f_x.iter().sum();
        fx0 += r.f_x0.iter().sum::<f64>() / k;
        if gradient.is_empty() {
            gradient = r.gradient.iter().map(|l| vec![0.0; l.len()]).collect();
        }
        for (acc, l) in gradient.iter_mut().zip(&r.gradient) {
            acc.iter_mut().zip(l).for_each(|(a, v)| *a += v / k);
        }
        match &mut sums {
            None => sums = Some(r.conductance.into_iter().map(|c| c / k).collect()),
            Some(s) => s.iter_mut().zip(r.conductance).for_each(|(a, c)| *a += &(c / k)),
        }
        if let Some(a) = r.input_ig {
            let a = a.mapv(|v| v / k as f32);
            ig = Some(match ig {
                None => a,
                Some(prev) => prev + a,
            });
        }
    }
    Ok(Once { fx, fx0, sums: sums.unwrap_or_default(), ig, gradient })
}

/// Attribute the target's response to hidden units (and optionally input pixels).
pub fn attribute(model: &Model, movie: &Array3<f32>, req: &Request) -> Result<Attribution> {
    attribute_with_progress(model, movie, req, &|_, _| {})
}

/// As [`attribute`], reporting progress of each path integral.
pub fn attribute_with_progress(
    model: &Model,
    movie: &Array3<f32>,
    req: &Request,
    progress: Progress,
) -> Result<Attribution> {
    let b = &model.binding;
    let frames = movie.shape()[0];
    if let Some(&bad) = req.frames.iter().find(|&&f| f >= frames) {
        return Err(Error::Usage(format!(
            "the target window reaches frame {bad}, but the stimulus has {frames} frames"
        )));
    }
    if req.frames.is_empty() {
        return Err(Error::Usage("the target window holds no frames".into()));
    }
    let seed = seed_for(model, &req.cells)?;
    let x = b.to_model_input(windows_at(movie, b.lags, &req.frames));
    let baselines: Vec<Tensor> = req
        .baseline
        .movies(movie, req.seed)?
        .iter()
        .map(|m| b.to_model_input(windows_at(m, b.lags, &req.frames)))
        .collect();
    let ends = Endpoints::new(&model.graph, &x, &baselines, &seed, frontier(&model.graph))?;
    let mut warnings = Vec::new();
    let (mut steps, tolerance) = match req.steps {
        Steps::Fixed(n) => (n.max(1), None),
        Steps::Auto(t) => (16, Some(t)),
    };
    let Once { fx, fx0, sums, ig, gradient } = loop {
        let r = once(model, &x, &baselines, &ends, &seed, req, steps, progress)?;
        let Some(tol) = tolerance else { break r };
        let mut worst = r.sums.iter().map(|c| residual(c.sum(), r.fx - r.fx0)).fold(0.0, f64::max);
        if let Some(a) = &r.ig {
            worst = worst.max(residual(a.iter().map(|&v| v as f64).sum(), r.fx - r.fx0));
        }
        if worst <= tol {
            break r;
        }
        if steps >= 1024 {
            warnings
                .push(format!("the completeness residual {worst:.2e} is above the tolerance {tol} after 1,024 steps"));
            break r;
        }
        steps *= 2;
    };
    let layers = req
        .layers
        .iter()
        .zip(&sums)
        .zip(gradient)
        .map(|((&l, c), gradient)| {
            let channels = c.shape()[1];
            let total: Vec<f64> = (0..channels).map(|ch| c.index_axis(Axis(1), ch).sum()).collect();
            let mut time = Array2::<f32>::zeros((channels, frames));
            for (w, &f) in req.frames.iter().enumerate() {
                let win = c.index_axis(Axis(0), w);
                for ch in 0..channels {
                    time[[ch, f]] += win.index_axis(Axis(0), ch).sum() as f32;
                }
            }
            let space = c.sum_axis(Axis(0)).mapv(|v| v as f32);
            LayerAttribution {
                name: model.graph.values[l].name.clone(),
                residual: residual(total.iter().sum(), fx - fx0),
                total,
                time,
                space,
                gradient,
            }
        })
        .collect();
    let input_ig = match ig {
        None => None,
        Some(a) => {
            let res = residual(a.iter().map(|&v| v as f64).sum(), fx - fx0);
            let w = b.from_model_input(&a)?;
            let mut per_frame = Array3::<f32>::zeros(movie.dim());
            for (n, &end) in req.frames.iter().enumerate() {
                for l in 0..b.lags {
                    if let Some(f) = (end + l + 1).checked_sub(b.lags) {
                        let mut dst = per_frame.index_axis_mut(Axis(0), f);
                        dst += &w.slice(ndarray::s![n, l, .., ..]);
                    }
                }
            }
            Some((per_frame, res))
        }
    };
    Ok(Attribution {
        f_input: fx,
        f_baseline: fx0,
        steps,
        layers,
        input_ig,
        affine_prefix: frontier(&model.graph).map(|z| model.graph.values[z].name.clone()),
        warnings,
    })
}
