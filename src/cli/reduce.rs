//! `sufficit reduce MODEL STIMULUS_DIR --cell C [--layer NAME|auto|all] [--fidelity 0.9]
//! [--metric fve|peak] [--positions] --out DIR`.

use super::attribute::parse_frames;
use super::knockout::write_knockouts;
use crate::attribution::{self, Baseline, Request, Rule, Steps};
use crate::figure::svg;
use crate::model::{LoadOptions, Model};
use crate::output::{OutputDir, RunRecord};
use crate::reduction::circuit::{reduce, Plan};
use crate::reduction::edges::edges;
use crate::reduction::export::export;
use crate::reduction::fidelity::Criterion;
use crate::reduction::gray_path::GrayPath;
use crate::reduction::knockout::knockouts;
use crate::reduction::readout::{read_out, UnitReadout};
use crate::reduction::{plot, Clamp, Unit};
use crate::response::{measure::json as num, rf_centres, windows_at};
use crate::{Error, Result};
use clap::Args;
use serde_json::json;
use std::time::Instant;

/// Arguments of `reduce`.
#[derive(Debug, Args)]
pub struct ReduceArgs {
    #[command(flatten)]
    pub job: super::Job,
    /// The cell whose response is reduced.
    #[arg(long, default_value_t = 0)]
    pub cell: usize,
    /// Hidden layer(s) to reduce: a name from `inspect`, several comma separated, auto (the
    /// first hidden layer) or all (every hidden layer, nearest the cell first).
    #[arg(long, default_value = "auto")]
    pub layer: String,
    /// The fidelity the reduced circuit must keep, in (0, 1].
    #[arg(long, default_value_t = 0.9)]
    pub fidelity: f64,
    /// What fidelity means: fve (fraction of variance explained) or peak (1 - peak error).
    #[arg(long, default_value = "fve")]
    pub metric: String,
    /// Also prune positions inside the kept channels.
    #[arg(long)]
    pub positions: bool,
    /// Target frames START:END (frames, or ms with an ms suffix). Default: the protocol's window.
    #[arg(long)]
    pub window: Option<String>,
    /// Path steps for the attribution that ranks the units: a number, or auto.
    #[arg(long, default_value = "auto")]
    pub steps: String,
    /// Reuse the attribution `attribute` wrote in this folder (same stimulus, cell, window,
    /// layers, gray baseline, midpoint rule, steps and seed) instead of computing it again.
    #[arg(long, value_name = "DIR")]
    pub attribution: Option<std::path::PathBuf>,
    /// Reuse the single-unit knock-outs `knockout` wrote in this folder (same stimulus, cell,
    /// clamp and window) instead of silencing the kept units again.
    #[arg(long, value_name = "DIR")]
    pub knockouts: Option<std::path::PathBuf>,
    /// What a dropped unit is clamped to: baseline (its activation under gray), mean or zero.
    #[arg(long, default_value = "baseline")]
    pub clamp: String,
}

/// Check `--layer` names that exist but are not hidden layers, with a message that says why.
fn layers(model: &Model, spec: &str) -> Result<Vec<usize>> {
    attribution::resolve_layers(model, spec).map_err(|e| {
        let name = spec.split(',').find(|n| {
            model.graph.find(n.trim()).is_some() && !attribution::hidden_layers(model).iter().any(|h| h == n.trim())
        });
        match name {
            Some(n) => Error::Usage(format!(
                "layer '{n}' cannot be ablated: units are the channels of hidden layers (the output of a nonlinearity \
                 after a conv or dense layer, not a model output). Ablatable layers: {}",
                attribution::hidden_layers(model).join(", ")
            )),
            None => e,
        }
    })
}

fn unit_json(model: &Model, u: &UnitReadout, knock: Option<&crate::reduction::knockout::Effect>) -> serde_json::Value {
    let name = &model.graph.values[u.layer].name;
    let sep = |s: &crate::reduction::filters::Separable| json!({"temporal": s.temporal, "rank_one_share": num(s.rank_one_share)});
    json!({
        "layer": name, "channel": u.channel, "conductance": num(u.conductance),
        "sign": if u.gradient >= 0.0 { "excitatory" } else { "inhibitory" },
        "path_gradient": num(u.gradient), "position": u.position,
        "kernel": u.kernel.as_ref().map(sep), "effective_filter": sep(&u.effective),
        "nonlinearity": u.nonlinearity.as_ref().map(|c| json!({"kind": c.kind, "threshold": num(c.threshold), "gain": num(c.gain),
            "fit": c.fit.map(|f| json!({"form": "a * softplus(b * (g - theta)) + d", "a": num(f.a), "b": num(f.b), "theta": num(f.theta), "d": num(f.d), "fve": num(f.fve), "rms_error": num(f.rms_error)}))})),
        "files": {"spatial": format!("units/{name}_{}_spatial.npy", u.channel), "temporal": format!("units/{name}_{}_temporal.npy", u.channel),
                  "filter": format!("units/{name}_{}_filter.npy", u.channel), "nonlinearity": format!("units/{name}_{}_nonlinearity.csv", u.channel),
                  "figure": format!("units/{name}_{}.svg", u.channel)},
        "knockout": knock.map(|k| json!({"rank": k.rank, "relative_rms_change": num(k.relative_rms_change), "fraction_variance_explained": num(k.fraction_variance_explained)})),
    })
}

/// Reduce, read out, knock out, export; write everything.
pub fn run(a: &ReduceArgs) -> Result<()> {
    let t0 = Instant::now();
    if !(a.fidelity > 0.0 && a.fidelity <= 1.0) {
        return Err(Error::Usage(format!(
            "--fidelity {} is outside (0, 1]: give the fraction to keep, e.g. 0.9",
            a.fidelity
        )));
    }
    let criterion =
        Criterion::parse(&a.metric).ok_or_else(|| Error::Usage(format!("--metric '{}': use fve or peak", a.metric)))?;
    let clamp = Clamp::parse(&a.clamp)?;
    let (model, stim) = a.job.load()?;
    let layer_ids = layers(&model, &a.layer)?;
    let frames = parse_frames(a.window.as_deref(), &stim.meta)?;
    if frames.is_empty() {
        return Err(Error::Usage(format!(
            "the stimulus in '{}' has no analysis window for protocol '{}'; give one with --window START:END",
            a.job.stimulus.display(),
            stim.meta.protocol
        )));
    }
    let steps = match a.steps.as_str() {
        "auto" => Steps::Auto(0.01),
        s => Steps::Fixed(
            s.parse()
                .ok()
                .filter(|&n: &usize| n > 0)
                .ok_or_else(|| Error::Usage(format!("--steps '{s}': a positive number or auto")))?,
        ),
    };
    let record = RunRecord::new(
        "reduce",
        Some(&a.job.model),
        json!({"stimulus": a.job.stimulus.display().to_string(), "cell": a.cell, "layer": a.layer, "fidelity": a.fidelity,
               "metric": a.metric, "positions": a.positions, "window": a.window, "steps": a.steps, "clamp": a.clamp,
               "attribution": a.attribution.as_ref().map(|p| p.display().to_string()),
               "knockouts": a.knockouts.as_ref().map(|p| p.display().to_string())}),
        a.job.common.seed,
    )?;
    let bar = super::progress_bar(a.job.common.quiet, 1, "attribution");
    let tick = |done: usize, total: usize| {
        bar.set_length(total as u64);
        bar.set_position(done as u64);
    };
    let request = Request {
        cells: vec![(a.cell, 1.0)],
        frames: frames.clone(),
        layers: layer_ids.clone(),
        baseline: Baseline::Gray,
        rule: Rule::Midpoint,
        steps,
        input_ig: false,
        seed: a.job.common.seed,
    };
    let t1 = Instant::now();
    let att = match &a.attribution {
        Some(dir) => attribution::stored::read_back(dir, &model, &a.job.stimulus, &request, &a.steps)?,
        None => attribution::attribute_with_progress(&model, &stim.movie, &request, &tick)?,
    };
    let t_attr = t1.elapsed().as_secs_f64();
    let plan = Plan { layers: layer_ids.clone(), criterion, target: a.fidelity, clamp, positions: a.positions };
    let t2 = Instant::now();
    let circuit =
        reduce(&model, &stim.movie, a.cell, &frames, &plan, &att.layers, &|m| bar.set_message(m.to_string()))?;
    let t_reduce = t2.elapsed().as_secs_f64();
    bar.set_message("circuit edges and filters");
    let t3 = Instant::now();
    // One gray-to-stimulus path over the analysis windows serves the edges and the filters.
    let b = &model.binding;
    let path = GrayPath::new(&model.graph, &b.to_model_input(windows_at(&stim.movie, b.lags, &frames)))?;
    let edge_list = edges(&model, &path, a.cell, &circuit, att.steps.min(16))?;
    let t_edges = t3.elapsed().as_secs_f64();
    let t3 = Instant::now();
    let units = read_out(&model, &stim.movie, &path, &circuit, &layer_ids, &att.layers, att.steps)?;
    let t_read = t3.elapsed().as_secs_f64();
    bar.set_message("knock-outs of the kept units");
    let t4 = Instant::now();
    let kept: Vec<Unit> = units.iter().map(|u| Unit { layer: u.layer, channel: u.channel }).collect();
    let effects = match &a.knockouts {
        Some(dir) => {
            let labels: Vec<String> =
                kept.iter().map(|u| format!("{}:{}", model.graph.values[u.layer].name, u.channel)).collect();
            crate::reduction::knockout::read_back(
                dir,
                &a.job.stimulus,
                (a.cell, &a.clamp, a.window.as_deref()),
                &labels,
            )?
        }
        None => {
            let sets: Vec<Vec<Unit>> = kept.iter().map(|u| vec![u.clone()]).collect();
            let centres = rf_centres(&model, a.job.common.seed)?;
            knockouts(&model, &stim, a.cell, &frames, &sets, clamp, &centres, &|| {})?
        }
    };
    let t_knock = t4.elapsed().as_secs_f64();
    bar.finish_and_clear();

    let out = OutputDir::create(&a.job.out)?;
    // The pruned model: written, then loaded back and run by the engine and by tract.
    let (onnx, notes) = export(&model, &circuit)?;
    out.write_bytes("reduced.onnx", &crate::model::builder::to_bytes(&onnx))?;
    let check = check_export(&out.path().join("reduced.onnx"), &model, &stim.movie, &frames, a.cell, &circuit.reduced)?;

    let label = |u: &UnitReadout| format!("{}:{}", model.graph.values[u.layer].name, u.channel);
    let unit_rows: Vec<_> =
        units.iter().map(|u| unit_json(&model, u, effects.iter().find(|e| e.units == [label(u)]))).collect();
    for u in &units {
        let stem = format!("units/{}_{}", model.graph.values[u.layer].name, u.channel);
        out.write_npy(&format!("{stem}_spatial.npy"), &u.kernel.as_ref().unwrap_or(&u.effective).spatial)?;
        out.write_npy(
            &format!("{stem}_temporal.npy"),
            &ndarray::Array1::from(u.kernel.as_ref().unwrap_or(&u.effective).temporal.clone()),
        )?;
        out.write_npy(&format!("{stem}_filter.npy"), &u.effective.full)?;
        let shown = u.kernel.as_ref().unwrap_or(&u.effective);
        let figure = plot::UnitFigure {
            title: format!(
                "{}:{} ({}; {})",
                model.graph.values[u.layer].name,
                u.channel,
                if u.gradient >= 0.0 { "excitatory" } else { "inhibitory" },
                if u.kernel.is_some() { "kernel" } else { "effective filter" }
            ),
            spatial: &shown.spatial,
            temporal: &shown.temporal,
            curve: u.nonlinearity.as_ref().map(|c| (c.generator.as_slice(), c.activation.as_slice())),
            pixel_um: stim.meta.pixel_size_um,
            frame_ms: 1000.0 / stim.meta.frame_rate_hz,
        };
        out.write_bytes(&format!("{stem}.svg"), svg(&figure)?.as_bytes())?;
        if let Some(c) = &u.nonlinearity {
            let csv: String = std::iter::once("generator,activation\n".to_string())
                .chain(c.generator.iter().zip(&c.activation).map(|(g, y)| format!("{g},{y}\n")))
                .collect();
            out.write_bytes(&format!("{stem}_nonlinearity.csv"), csv.as_bytes())?;
        }
    }
    let time = ndarray::Array2::from_shape_fn((units.len(), stim.meta.frames), |(i, t)| units[i].time_course[t]);
    out.write_npy("conductance_time.npy", &time)?;

    let mut curve_csv = String::from("layer,level,phase,size,unit,fve,peak_amplitude_error,peak_timing_error_frames\n");
    let mut series: Vec<(String, Vec<(usize, f64)>)> = Vec::new();
    for (layer, level, p) in circuit.curve() {
        let name = &model.graph.values[layer].name;
        curve_csv += &format!(
            "{name},{level},{},{},{},{},{},{}\n",
            p.phase,
            p.size,
            p.unit.map_or(String::new(), |u| u.to_string()),
            p.fidelity.fve,
            p.fidelity.peak_amplitude_error,
            p.fidelity.peak_timing_error_frames
        );
        plot::add_curve_point(&mut series, format!("{name} {level} ({})", p.phase), p.size, p.fidelity.fve);
    }
    out.write_bytes("fidelity_curve.csv", curve_csv.as_bytes())?;
    out.write_bytes(
        "fidelity_curve.svg",
        svg(&plot::FidelityCurve { series: &series, target: a.fidelity })?.as_bytes(),
    )?;
    let frame_ms = 1000.0 / stim.meta.frame_rate_hz;
    let times: Vec<f64> = frames.iter().map(|&f| f as f64 * frame_ms).collect();
    let mut resp = String::from("frame,time_ms,full,reduced\n");
    for ((f, t), (x, y)) in frames.iter().zip(&times).zip(circuit.full.iter().zip(&circuit.reduced)) {
        resp += &format!("{f},{t},{x},{y}\n");
    }
    out.write_bytes("reduced_response.csv", resp.as_bytes())?;
    out.write_bytes(
        "reduced_response.svg",
        svg(&plot::ReducedResponse { times_ms: &times, full: &circuit.full, reduced: &circuit.reduced, cell: a.cell })?
            .as_bytes(),
    )?;
    write_knockouts(&out, &effects, &stim.meta.protocol, a.cell, &a.clamp)?;

    let total_units: usize = layer_ids.iter().map(|&l| model.graph.values[l].shape[1]).sum();
    let layers_json: Vec<_> = circuit
        .layers
        .iter()
        .map(|l| {
            let s = &l.channel_search;
            json!({"layer": model.graph.values[l.layer].name, "channels": model.graph.values[l.layer].shape[1],
                   "kept": l.channels, "target_reached": s.reached, "fidelity": s.fidelity,
                   "score_without_each_kept_unit": s.without_each.iter().map(|&v| num(v)).collect::<Vec<_>>(),
                   "positions": l.positions.as_ref().map(|(p, ps)| json!({"kept": p.len(), "score_without_each_kept_position": ps.without_each.iter().map(|&v| num(v)).collect::<Vec<_>>()}))})
        })
        .collect();
    let summary = json!({
        "schema": "sufficit/1",
        "protocol": stim.meta.protocol,
        "target": {"cell": a.cell, "frames": [frames[0], frames[frames.len() - 1] + 1], "metric": a.metric, "fidelity": a.fidelity, "clamp": a.clamp},
        "fidelity": {"fve": num(circuit.fidelity.fve), "peak_amplitude_error": num(circuit.fidelity.peak_amplitude_error),
                     "peak_timing_error_ms": circuit.fidelity.peak_timing_error_frames as f64 * frame_ms},
        "size": {"kept": units.len(), "of": total_units},
        "attribution": {"steps": att.steps, "completeness_residual": att.layers.iter().map(|l| l.residual).fold(0.0, f64::max)},
        "layers": layers_json,
        "units": unit_rows,
        "edges": edge_list,
        "export": {"file": "reduced.onnx", "layers": notes, "max_relative_difference_engine": num(check.0), "max_relative_difference_tract": num(check.1)},
        "caution": "Model-derived mechanisms are hypotheses for experiments, not findings. Animal work follows local ethics approval.",
    });
    out.write_json("subcircuit.json", &summary)?;
    let mut record = record;
    record.timings = vec![
        ("load".into(), t1.duration_since(t0).as_secs_f64()),
        ("attribution".into(), t_attr),
        ("search".into(), t_reduce),
        ("edges".into(), t_edges),
        ("filters_and_nonlinearities".into(), t_read),
        ("knockouts".into(), t_knock),
        ("total".into(), t0.elapsed().as_secs_f64()),
    ];
    out.write_json("run.json", &record)?;
    if !a.job.common.quiet {
        println!(
            "{} of {} units keep fidelity {:.3} (target {}); results in {}",
            units.len(),
            total_units,
            criterion.score(&circuit.fidelity),
            a.fidelity,
            a.job.out.display()
        );
    }
    Ok(())
}

/// Run the exported model with the engine on every analysis window, and with tract on up to 16
/// of them (4 at a time: tract's convolution buffers grow with the batch); return each one's
/// largest difference from the clamped reduced response, relative to that response's largest
/// magnitude (NaN if any output is not a number).
fn check_export(
    path: &std::path::Path,
    model: &Model,
    movie: &ndarray::Array3<f32>,
    frames: &[usize],
    cell: usize,
    reduced: &[f64],
) -> Result<(f64, f64)> {
    let layout = Some(model.binding.layout);
    let exported = Model::load(path, &LoadOptions { layout, dims: vec![] })?;
    let b = &exported.binding;
    let scale = reduced.iter().fold(0.0f64, |m, v| m.max(v.abs())).max(1e-12);
    let worst = |a: f64, v: f64| if a.is_nan() || v.is_nan() { f64::NAN } else { a.max(v) };
    // Largest relative difference over windows `which` (indices into `frames`) of output `out`.
    let diff = |out: &crate::Tensor, which: &[usize]| -> f64 {
        let per = out.len() / which.len().max(1);
        let flat = out.as_standard_layout();
        let flat = flat.as_slice().unwrap_or(&[]);
        which
            .iter()
            .enumerate()
            .map(|(s, &i)| (flat[s * per + cell] as f64 - reduced[i]).abs() / scale)
            .fold(0.0, worst)
    };
    let all: Vec<usize> = (0..frames.len()).collect();
    let x = b.to_model_input(crate::response::windows_at(movie, b.lags, frames));
    let engine = diff(exported.graph.forward(x, &[])?.outputs()[0], &all);
    let some: Vec<usize> = (0..frames.len()).step_by(frames.len().div_ceil(16).max(1)).collect();
    let tract_path = crate::model::FastPath::with_batch(&exported, 4)?;
    let mut tract = 0.0;
    for group in some.chunks(4) {
        let mut ends: Vec<usize> = group.iter().map(|&i| frames[i]).collect();
        let real = ends.len();
        ends.resize(4, ends[0]);
        let out = tract_path.run(b.to_model_input(crate::response::windows_at(movie, b.lags, &ends)))?;
        let per = out[0].len() / 4;
        let kept = out[0]
            .as_standard_layout()
            .into_owned()
            .into_shape_with_order((4, per))
            .map_err(|e| Error::Usage(e.to_string()))?;
        let rows = kept.slice(ndarray::s![..real, ..]).to_owned().into_dyn();
        tract = worst(tract, diff(&rows, group));
    }
    Ok((engine, tract))
}
