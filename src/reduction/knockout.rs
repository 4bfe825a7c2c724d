//! Knock-outs: silence units one at a time (and a chosen set together), rerun the protocol, and
//! rank the units by how much the target cell's response and the protocol's metrics change.
//! These are the model's candidates for silencing experiments.

use super::{label, silence, Clamp, Unit};
use crate::model::Model;
use crate::response::PrefixRates;
use crate::stimulus::protocols::{self, Observed};
use crate::stimulus::Stimulus;
use crate::{Error, Result};
use ndarray::Array2;
use serde::Serialize;
use serde_json::Value;

/// The effect of silencing one set of units.
#[derive(Debug, Clone, Serialize)]
pub struct Effect {
    /// The silenced units, `layer:channel`.
    pub units: Vec<String>,
    /// RMS change of the cell's rate over the analysis window, relative to the RMS of the full
    /// rate there: 0 = no effect, 1 = as large as the response itself.
    pub relative_rms_change: f64,
    /// Fraction of the full response's variance in the window that the silenced response
    /// still explains (1 = shape untouched; NaN for a flat response).
    pub fraction_variance_explained: f64,
    /// Mean rate in the window, full and silenced.
    pub mean_full: f64,
    /// Mean rate in the window with the units silenced.
    pub mean_silenced: f64,
    /// Every numeric metric of the protocol for the cell: (name, full, silenced, change).
    pub metrics: Vec<(String, f64, f64, f64)>,
    /// 1 = largest effect.
    pub rank: usize,
}

/// Numeric leaves of a JSON value, with dotted/indexed paths.
fn leaves(v: &Value, path: &str, out: &mut Vec<(String, f64)>) {
    match v {
        Value::Number(n) => out.push((path.to_string(), n.as_f64().unwrap_or(f64::NAN))),
        Value::Object(m) => {
            m.iter().for_each(|(k, x)| leaves(x, &if path.is_empty() { k.clone() } else { format!("{path}.{k}") }, out))
        }
        Value::Array(a) => a.iter().enumerate().for_each(|(i, x)| leaves(x, &format!("{path}[{i}]"), out)),
        _ => {}
    }
}

/// The cell's metrics from a protocol's summary.
fn cell_metrics(summary: &Value, cell: usize) -> Vec<(String, f64)> {
    let mut out = Vec::new();
    if let Some(c) = summary["cells"].get(cell) {
        leaves(c, "", &mut out);
    }
    out.retain(|(k, _)| k != "cell");
    out
}

/// Silence each set in `sets`, measure, and rank by relative RMS change (largest first) over the
/// analysis `frames`.
#[allow(clippy::too_many_arguments)]
pub fn knockouts(
    model: &Model,
    stim: &Stimulus,
    cell: usize,
    frames: &[usize],
    sets: &[Vec<Unit>],
    clamp: Clamp,
    rf_centres: &[(f64, f64)],
    progress: &(dyn Fn() + Sync),
) -> Result<Vec<Effect>> {
    let protocol = protocols::find(&stim.meta.protocol)?;
    if frames.is_empty() {
        return Err(Error::Usage(format!(
            "the stimulus has no '{}' analysis window to judge knock-outs by; give one with --window START:END",
            protocol.target_window()
        )));
    }
    let measure = |r: &Array2<f32>| -> Result<Value> {
        let obs =
            Observed { meta: &stim.meta, movie: &stim.movie, rates: r.view(), lags: model.binding.lags, rf_centres };
        Ok(protocol.measure(&obs)?.summary)
    };
    let prefix = PrefixRates::new(model, &stim.movie)?;
    let full = prefix.rates_with(&[])?;
    if cell >= full.ncols() {
        return Err(Error::Usage(format!("cell {cell} is out of range: the model has {} cells", full.ncols())));
    }
    let full_metrics = cell_metrics(&measure(&full)?, cell);
    let trace = |r: &Array2<f32>| frames.iter().map(|&t| r[[t, cell]] as f64).collect::<Vec<f64>>();
    let f = trace(&full);
    let n = f.len() as f64;
    let mean_full = f.iter().sum::<f64>() / n;
    let rms_full = (f.iter().map(|v| v * v).sum::<f64>() / n).sqrt().max(1e-30);
    let var_full: f64 = f.iter().map(|v| (v - mean_full).powi(2)).sum();
    let mut effects = Vec::with_capacity(sets.len());
    for set in sets {
        let overrides = silence(model, &stim.movie, set, clamp)?;
        let r = prefix.rates_with(&overrides)?;
        let k = trace(&r);
        let sse: f64 = f.iter().zip(&k).map(|(a, b)| (a - b).powi(2)).sum();
        let silenced = cell_metrics(&measure(&r)?, cell);
        let metrics = full_metrics
            .iter()
            .map(|(name, a)| {
                let b = silenced.iter().find(|(m, _)| m == name).map_or(f64::NAN, |(_, v)| *v);
                (name.clone(), *a, b, b - a)
            })
            .collect();
        effects.push(Effect {
            units: set.iter().map(|u| label(model, u)).collect(),
            relative_rms_change: (sse / n).sqrt() / rms_full,
            fraction_variance_explained: if var_full > 0.0 { 1.0 - sse / var_full } else { f64::NAN },
            mean_full,
            mean_silenced: k.iter().sum::<f64>() / n,
            metrics,
            rank: 0,
        });
        progress();
    }
    rank(&mut effects);
    Ok(effects)
}

/// Rank by relative RMS change, largest first (an undefined change, from a flat response, last),
/// and sort by rank.
fn rank(effects: &mut [Effect]) {
    let key = |e: &Effect| if e.relative_rms_change.is_nan() { f64::NEG_INFINITY } else { e.relative_rms_change };
    let mut order: Vec<usize> = (0..effects.len()).collect();
    order.sort_by(|&a, &b| key(&effects[b]).total_cmp(&key(&effects[a])));
    for (rank, &i) in order.iter().enumerate() {
        effects[i].rank = rank + 1;
    }
    effects.sort_by_key(|e| e.rank);
}

/// The single-unit knock-outs of `units` read back from a `knockout` folder (knockouts.json and
/// run.json), re-ranked among themselves, so `reduce` need not silence them again. The folder
/// must hold the same stimulus, cell, clamp and frames (its `--window` setting); otherwise the
/// error names what differs.
pub fn read_back(
    dir: &std::path::Path,
    stimulus: &std::path::Path,
    (cell, clamp, window): (usize, &str, Option<&str>),
    units: &[String],
) -> crate::Result<Vec<Effect>> {
    use crate::Error;
    let read = |name: &str| crate::output::read_json(&dir.join(name));
    let (doc, run) = (read("knockouts.json")?, read("run.json")?);
    let same_stimulus =
        run.pointer("/settings/stimulus").and_then(Value::as_str).map(std::fs::canonicalize).and_then(|p| p.ok())
            == std::fs::canonicalize(stimulus).ok();
    let checks = [
        ("stimulus", same_stimulus),
        ("cell", doc["cell"].as_u64() == Some(cell as u64)),
        ("clamp", doc["clamp"].as_str() == Some(clamp)),
        ("window", run.pointer("/settings/window").and_then(Value::as_str) == window),
    ];
    if let Some((what, _)) = checks.iter().find(|(_, ok)| !ok) {
        return Err(Error::Usage(format!(
            "the knock-outs in '{}' do not match this request (different {what}); leave out --knockouts or rerun \
             knockout with matching settings",
            dir.display()
        )));
    }
    let f = |v: &Value| v.as_f64().unwrap_or(f64::NAN);
    let rows = doc["knockouts"].as_array().cloned().unwrap_or_default();
    let mut effects = Vec::new();
    for u in units {
        let row = rows
            .iter()
            .find(|r| r["units"].as_array().is_some_and(|x| x.len() == 1 && x[0] == u.as_str()))
            .ok_or_else(|| Error::input(dir.join("knockouts.json"), format!("has no knock-out of {u} alone")))?;
        effects.push(Effect {
            units: vec![u.clone()],
            relative_rms_change: f(&row["relative_rms_change"]),
            fraction_variance_explained: f(&row["fraction_variance_explained"]),
            mean_full: f(&row["mean_full"]),
            mean_silenced: f(&row["mean_silenced"]),
            metrics: row["metrics"]
                .as_array()
                .map(|m| {
                    m.iter()
                        .map(|x| {
                            (
                                x["metric"].as_str().unwrap_or("").to_string(),
                                f(&x["full"]),
                                f(&x["silenced"]),
                                f(&x["change"]),
                            )
                        })
                        .collect()
                })
                .unwrap_or_default(),
            rank: 0,
        });
    }
    rank(&mut effects);
    Ok(effects)
}
