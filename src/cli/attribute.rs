//! `sufficit attribute MODEL STIMULUS_DIR --cell C --layer NAME|auto|all --out DIR`.

use crate::attribution::{self, rank::kendall_tau, Attribution, Baseline, Heatmap, Ranking, Request, Rule, Steps};
use crate::figure::svg;
use crate::output::{OutputDir, RunRecord};
use crate::stimulus::{protocols, Meta};
use crate::{Error, Result};
use clap::Args;
use serde_json::json;
use std::time::Instant;

/// Arguments of `attribute`.
#[derive(Debug, Args)]
pub struct AttributeArgs {
    #[command(flatten)]
    pub job: super::Job,
    /// Target cell, or a weighted set as CELL:WEIGHT,CELL:WEIGHT.
    #[arg(long, default_value = "0")]
    pub cell: String,
    /// Hidden layer: a name from `inspect`, auto (the first hidden layer) or all.
    #[arg(long, default_value = "auto")]
    pub layer: String,
    /// Target frames START:END (half-open; frames, or milliseconds with an ms suffix).
    /// Default: the protocol's own analysis window.
    #[arg(long)]
    pub window: Option<String>,
    /// Path steps: a number, or auto (double from 16 until the residual is below --tolerance).
    #[arg(long, default_value = "auto")]
    pub steps: String,
    /// Completeness tolerance for --steps auto (fraction of F(x) - F(x')).
    #[arg(long, default_value_t = 0.01)]
    pub tolerance: f64,
    /// Quadrature: midpoint or gauss-legendre.
    #[arg(long, default_value = "midpoint")]
    pub quadrature: String,
    /// Baseline: gray, shuffled, blurred[:SIGMA_PX], noise:K or file:PATH.npy.
    #[arg(long, default_value = "gray")]
    pub baseline: String,
    /// Also run these baselines (comma separated) and report how well the unit rankings agree.
    #[arg(long)]
    pub compare_baselines: Option<String>,
    /// Also write input integrated gradients (input_ig.npy).
    #[arg(long)]
    pub input_ig: bool,
}

fn parse_cells(s: &str) -> Result<Vec<(usize, f32)>> {
    s.split(',')
        .map(|part| {
            let (c, w) = part.split_once(':').unwrap_or((part, "1"));
            let c = c.trim().parse().map_err(|_| Error::Usage(format!("--cell '{s}': '{c}' is not a cell index")))?;
            let w = w.trim().parse().map_err(|_| Error::Usage(format!("--cell '{s}': '{w}' is not a weight")))?;
            Ok((c, w))
        })
        .collect()
}

pub(super) fn parse_frames(spec: Option<&str>, meta: &Meta) -> Result<Vec<usize>> {
    let Some(spec) = spec else {
        return protocols::target_frames(meta);
    };
    let bad =
        || Error::Usage(format!("--window '{spec}' must be START:END in frames (10:40) or milliseconds (100ms:400ms)"));
    let (a, b) = spec.split_once(':').ok_or_else(bad)?;
    let to_frame = |t: &str| -> Result<usize> {
        let t = t.trim();
        match t.strip_suffix("ms") {
            Some(ms) => {
                ms.trim().parse::<f64>().map(|v| (v * meta.frame_rate_hz / 1000.0).round() as usize).map_err(|_| bad())
            }
            None => t.parse().map_err(|_| bad()),
        }
    };
    let (a, b) = (to_frame(a)?, to_frame(b)?);
    if a >= b || b > meta.frames {
        return Err(Error::Usage(format!(
            "--window {spec} is frames {a}..{b}, outside the stimulus's {} frames or empty",
            meta.frames
        )));
    }
    Ok((a..b).collect())
}

fn units_json(a: &Attribution) -> Vec<serde_json::Value> {
    let mut units: Vec<(String, usize, f64, f64)> = a
        .layers
        .iter()
        .flat_map(|l| l.total.iter().zip(&l.gradient).enumerate().map(move |(c, (&v, &g))| (l.name.clone(), c, v, g)))
        .collect();
    units.sort_by(|x, y| y.2.abs().total_cmp(&x.2.abs()));
    // "sign": of the conductance (did the unit move the target up or down); "effect": of the
    // path-averaged gradient (does the unit excite or inhibit the target).
    units
        .iter()
        .enumerate()
        .map(|(r, (layer, c, v, g))| {
            json!({"layer": layer, "channel": c, "conductance": v, "rank": r + 1, "path_gradient": g,
            "sign": if *v >= 0.0 { 1 } else { -1 }, "effect": if *g >= 0.0 { "excitatory" } else { "inhibitory" }})
        })
        .collect()
}

/// Run attribution and write its results.
pub fn run(a: &AttributeArgs) -> Result<()> {
    let t0 = Instant::now();
    let (model, stim) = a.job.load()?;
    let rule = Rule::parse(&a.quadrature)
        .ok_or_else(|| Error::Usage(format!("--quadrature '{}': use midpoint or gauss-legendre", a.quadrature)))?;
    let steps = match a.steps.as_str() {
        "auto" => Steps::Auto(a.tolerance),
        s => Steps::Fixed(
            s.parse()
                .ok()
                .filter(|&n: &usize| n > 0)
                .ok_or_else(|| Error::Usage(format!("--steps '{s}': a positive number or auto")))?,
        ),
    };
    let request = Request {
        cells: parse_cells(&a.cell)?,
        frames: parse_frames(a.window.as_deref(), &stim.meta)?,
        layers: attribution::resolve_layers(&model, &a.layer)?,
        baseline: Baseline::parse(&a.baseline)?,
        rule,
        steps,
        input_ig: a.input_ig,
        seed: a.job.common.seed,
    };
    let others: Vec<Baseline> =
        a.compare_baselines.as_deref().map_or(Ok(vec![]), |s| s.split(',').map(Baseline::parse).collect())?;
    let record = RunRecord::new(
        "attribute",
        Some(&a.job.model),
        json!({"stimulus": a.job.stimulus.display().to_string(), "cell": a.cell,
        "layer": a.layer, "window": a.window, "steps": a.steps, "tolerance": a.tolerance, "quadrature": a.quadrature,
        "baseline": a.baseline, "compare_baselines": a.compare_baselines, "input_ig": a.input_ig}),
        a.job.common.seed,
    )?;
    let t1 = Instant::now();
    let bar = super::progress_bar(a.job.common.quiet, 1, "path steps");
    let tick = |done: usize, total: usize| {
        bar.set_length(total as u64);
        bar.set_position(done as u64);
    };
    let result = attribution::attribute_with_progress(&model, &stim.movie, &request, &tick)?;
    let mut agreement = Vec::new();
    for other in &others {
        bar.set_message(format!("baseline {}", other.label()));
        let r = attribution::attribute_with_progress(
            &model,
            &stim.movie,
            &Request { baseline: other.clone(), ..request.clone() },
            &tick,
        )?;
        let flat = |x: &Attribution| x.layers.iter().flat_map(|l| l.total.clone()).collect::<Vec<f64>>();
        agreement.push(json!({"baseline": other.label(), "kendall_tau": crate::response::measure::json(kendall_tau(&flat(&result), &flat(&r))),
            "f_baseline": r.f_baseline, "completeness_residual": r.layers.iter().map(|l| l.residual).fold(0.0, f64::max)}));
    }
    bar.finish_and_clear();
    let compute = t1.elapsed().as_secs_f64();

    let out = OutputDir::create(&a.job.out)?;
    let frames = stim.meta.frames;
    let time: Vec<f32> = result.layers.iter().flat_map(|l| l.time.iter().copied()).collect();
    let units = result.layers.iter().map(|l| l.total.len()).sum::<usize>();
    out.write_npy(
        "conductance_time.npy",
        &ndarray::Array2::from_shape_vec((units, frames), time).map_err(|e| Error::Usage(e.to_string()))?,
    )?;
    if let [only] = result.layers.as_slice() {
        out.write_npy("conductance_space.npy", &only.space)?;
    } else {
        for l in &result.layers {
            out.write_npy(&format!("conductance_space.{}.npy", l.name), &l.space)?;
        }
    }
    if let Some((ig, _)) = &result.input_ig {
        out.write_npy("input_ig.npy", ig)?;
    }
    let (first, last) = (request.frames[0], request.frames[request.frames.len() - 1] + 1);
    let rows = attribution::rows_of(&result.layers.iter().map(|l| (l.name.clone(), &l.time)).collect::<Vec<_>>());
    let heat = svg(&Heatmap { rows: &rows, first, last, frame_ms: 1000.0 / stim.meta.frame_rate_hz })?;
    out.write_bytes("conductance_time.svg", heat.as_bytes())?;
    let ranked: Vec<(String, f64)> = units_json(&result)
        .iter()
        .map(|u| {
            (
                format!("{}:{}", u["layer"].as_str().unwrap_or(""), u["channel"]),
                u["conductance"].as_f64().unwrap_or(0.0),
            )
        })
        .collect();
    out.write_bytes("conductance_ranking.svg", svg(&Ranking { units: &ranked })?.as_bytes())?;
    let json = json!({
        "schema": "sufficit/1",
        "protocol": stim.meta.protocol,
        "frame_rate_hz": stim.meta.frame_rate_hz,
        "target": {"cells": request.cells.iter().map(|(c, w)| json!({"cell": c, "weight": w})).collect::<Vec<_>>(),
                   "frames": [first, last], "summed_over_frames": request.frames.len()},
        "baseline": request.baseline.label(),
        "quadrature": a.quadrature,
        "steps": result.steps,
        "f_input": result.f_input,
        "f_baseline": result.f_baseline,
        "completeness_residual": result.layers.iter().map(|l| l.residual).fold(0.0, f64::max),
        "layers": result.layers.iter().map(|l| json!({"name": l.name, "channels": l.total.len(), "completeness_residual": l.residual})).collect::<Vec<_>>(),
        "input_ig_completeness_residual": result.input_ig.as_ref().map(|(_, r)| *r),
        "affine_prefix_end": result.affine_prefix,
        "units": units_json(&result),
        "baseline_agreement": agreement,
        "warnings": result.warnings,
    });
    out.write_json("attribution.json", &json)?;
    let mut record = record;
    record.timings = vec![("load".into(), t1.duration_since(t0).as_secs_f64()), ("attribution".into(), compute)];
    out.write_json("run.json", &record)?;
    if !a.job.common.quiet {
        for w in &result.warnings {
            eprintln!("sufficit: warning: {w}");
        }
        println!(
            "{} units, {} steps, completeness residual {:.2e}; results in {}",
            units,
            result.steps,
            json["completeness_residual"].as_f64().unwrap_or(f64::NAN),
            a.job.out.display()
        );
    }
    Ok(())
}
