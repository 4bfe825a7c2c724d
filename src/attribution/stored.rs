//! An attribution read back from the folder `attribute` wrote (attribution.json,
//! conductance_time.npy, conductance_space*.npy), so `reduce` can reuse it instead of running
//! the same path integral again. Reused only when it answers exactly the request: same
//! stimulus, cell, frames, layers, baseline, quadrature, step setting and seed.

use super::{Attribution, LayerAttribution, Request};
use crate::model::Model;
use crate::output::{read_json, read_npy};
use crate::{Error, Result};
use ndarray::Axis;
use serde_json::Value;
use std::path::Path;

/// Read the attribution in `dir` for `request` on `stimulus` (folder) with the step setting
/// `steps` ("auto" or a number); a mismatch is an error naming what differs.
pub fn read_back(dir: &Path, model: &Model, stimulus: &Path, request: &Request, steps: &str) -> Result<Attribution> {
    let doc = read_json(&dir.join("attribution.json"))?;
    let run = read_json(&dir.join("run.json"))?;
    let differs = |what: &str, theirs: String, ours: String| {
        Error::Usage(format!(
            "the attribution in '{}' does not match this request: its {what} is {theirs}, this run's is {ours}; \
             leave out --attribution or rerun attribute with matching settings",
            dir.display(),
            ours = ours
        ))
    };
    let same_path = |a: &str| std::fs::canonicalize(a).ok() == std::fs::canonicalize(stimulus).ok();
    let theirs_stim = run.pointer("/settings/stimulus").and_then(Value::as_str).unwrap_or("");
    if !same_path(theirs_stim) {
        return Err(differs("stimulus", theirs_stim.into(), stimulus.display().to_string()));
    }
    let cells: Vec<(u64, f64)> = doc["target"]["cells"]
        .as_array()
        .map(|c| {
            c.iter().map(|x| (x["cell"].as_u64().unwrap_or(u64::MAX), x["weight"].as_f64().unwrap_or(0.0))).collect()
        })
        .unwrap_or_default();
    let ours: Vec<(u64, f64)> = request.cells.iter().map(|&(c, w)| (c as u64, w as f64)).collect();
    if cells != ours {
        return Err(differs("target", format!("{cells:?}"), format!("{ours:?}")));
    }
    let (first, last) = (request.frames[0], request.frames[request.frames.len() - 1] + 1);
    let frames = (
        doc.pointer("/target/frames/0").and_then(Value::as_u64),
        doc.pointer("/target/frames/1").and_then(Value::as_u64),
        doc.pointer("/target/summed_over_frames").and_then(Value::as_u64),
    );
    if frames != (Some(first as u64), Some(last as u64), Some(request.frames.len() as u64)) {
        return Err(differs("frames", format!("{frames:?}"), format!("{first}..{last} ({})", request.frames.len())));
    }
    let names: Vec<String> = request.layers.iter().map(|&l| model.graph.values[l].name.clone()).collect();
    let layers = doc["layers"].as_array().cloned().unwrap_or_default();
    let theirs: Vec<String> = layers.iter().map(|l| l["name"].as_str().unwrap_or("").to_string()).collect();
    if theirs != names {
        return Err(differs("layers", theirs.join(","), names.join(",")));
    }
    let checks = [
        ("baseline", doc["baseline"].as_str().unwrap_or("").to_string(), request.baseline.label()),
        (
            "quadrature",
            format!("{:?}", super::Rule::parse(doc["quadrature"].as_str().unwrap_or(""))),
            format!("{:?}", Some(request.rule)),
        ),
        (
            "step setting",
            run.pointer("/settings/steps").and_then(Value::as_str).unwrap_or("").to_string(),
            steps.to_string(),
        ),
        ("seed", run["seed"].to_string(), request.seed.to_string()),
    ];
    for (what, a, b) in checks {
        if a != b {
            return Err(differs(what, a, b));
        }
    }
    let time = read_npy(&dir.join("conductance_time.npy"))?
        .into_dimensionality::<ndarray::Ix2>()
        .map_err(|_| Error::input(dir.join("conductance_time.npy"), "should be [units, frames]"))?;
    let units = doc["units"].as_array().cloned().unwrap_or_default();
    let mut row = 0;
    let mut out = Vec::new();
    for l in &layers {
        let name = l["name"].as_str().unwrap_or("").to_string();
        let channels = l["channels"].as_u64().unwrap_or(0) as usize;
        let mut total = vec![f64::NAN; channels];
        let mut gradient = vec![f64::NAN; channels];
        for u in units.iter().filter(|u| u["layer"] == name.as_str()) {
            let c = u["channel"].as_u64().unwrap_or(u64::MAX) as usize;
            if c < channels {
                total[c] = u["conductance"].as_f64().unwrap_or(f64::NAN);
                gradient[c] = u["path_gradient"].as_f64().unwrap_or(f64::NAN);
            }
        }
        if total.iter().chain(&gradient).any(|v| !v.is_finite()) || row + channels > time.nrows() {
            return Err(Error::input(
                dir.join("attribution.json"),
                format!(
                    "lacks the conductance or path gradient of some unit of '{name}' (written by an older \
                     sufficit?); rerun attribute"
                ),
            ));
        }
        let space_file = if layers.len() == 1 {
            "conductance_space.npy".to_string()
        } else {
            format!("conductance_space.{name}.npy")
        };
        out.push(LayerAttribution {
            space: read_npy(&dir.join(space_file))?,
            time: time.slice_axis(Axis(0), (row..row + channels).into()).to_owned(),
            residual: l["completeness_residual"].as_f64().unwrap_or(f64::NAN),
            name,
            total,
            gradient,
        });
        row += channels;
    }
    Ok(Attribution {
        f_input: doc["f_input"].as_f64().unwrap_or(f64::NAN),
        f_baseline: doc["f_baseline"].as_f64().unwrap_or(f64::NAN),
        steps: doc["steps"].as_u64().unwrap_or(0) as usize,
        layers: out,
        input_ig: None,
        affine_prefix: doc["affine_prefix_end"].as_str().map(String::from),
        warnings: doc["warnings"]
            .as_array()
            .map(|w| w.iter().filter_map(|x| x.as_str().map(String::from)).collect())
            .unwrap_or_default(),
    })
}
