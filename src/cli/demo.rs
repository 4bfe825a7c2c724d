//! `sufficit demo [--out DIR]`: the whole pipeline on the shipped demo model, through the same
//! commands a user runs: every protocol drawn and answered, and for each demo cell its own
//! protocol attributed, reduced and knocked out.

use super::{run_args, Common};
use crate::demo::recovered::{self, Recovery};
use crate::output::{read_json, OutputDir, RunRecord};
use crate::Result;
use clap::Args;
use serde_json::json;
use std::borrow::Cow;
use std::path::Path;
use std::time::Instant;

/// The demo model, embedded in the binary: the CNN fitted to the synthetic sensor
/// (docs/models.md), whose mechanisms the demo finds and compares with the planted ones.
const MODEL: &[u8] = include_bytes!("../../models/synthetic-sensor-fitted.onnx");

/// Each demo cell with its protocol and the protocol's parameters. The omitted flash keeps the
/// periods the model card discusses (80 ms cancelled, 100 ms resonant, 120 ms off resonance) and
/// rests 500 ms between trains: the demo model sees 40 frames (400 ms), so half a second of gray
/// resets it as fully as the default second (a third of the default's frames go).
const CELLS: [(usize, &str, &[&str]); 3] = [
    (0, "omitted-flash", &["period_ms=80,100,120", "rest_ms=500"]),
    (1, "reversing-bar", &crate::demo::REVERSAL_BAR),
    (2, "differential-motion", &["trial_ms=1500", "trials=1"]),
];

/// Protocols only drawn and answered (responses and metrics for every cell), shortened where
/// the defaults are long.
const OTHERS: [(&str, &[&str]); 5] = [
    ("flashes", &[]),
    ("steps", &[]),
    ("moving-bar", &[]),
    ("gratings", &["duration_ms=1000", "gap_ms=300"]),
    ("white-noise", &["duration_ms=10000"]),
];

/// Arguments of `demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder.
    #[arg(long, default_value = "sufficit-demo")]
    pub out: std::path::PathBuf,
    /// Maintainers: run on this ONNX file (another fit of the synthetic sensor, e.g. a candidate
    /// from `demo-models --fit`) instead of the embedded model, to see its recovery before
    /// shipping it.
    #[arg(long, hide = true)]
    pub model: Option<std::path::PathBuf>,
    #[command(flatten)]
    pub common: Common,
}

fn s(p: &Path) -> String {
    p.display().to_string()
}

/// Compare each cell's reduction with the planted pathways; written to `DIR/ground-truth/`
/// (`ground_truth.json` and `run.json`) for the report. Returns the comparisons.
fn ground_truth(dir: &Path, model: &Path, seed: u64) -> Result<Vec<Recovery>> {
    let recoveries: Vec<Recovery> = CELLS
        .iter()
        .map(|(cell, _, _)| {
            let path = dir.join(format!("cell-{cell}")).join("reduce").join("subcircuit.json");
            recovered::compare(*cell, &read_json(&path)?, &path)
        })
        .collect::<Result<_>>()?;
    let cells: Vec<serde_json::Value> = recoveries
        .iter()
        .zip(CELLS)
        .map(|(r, (_, protocol, _))| {
            let mut v = serde_json::to_value(r).unwrap_or_default();
            v["protocol"] = json!(protocol);
            v
        })
        .collect();
    let out = OutputDir::create(&dir.join("ground-truth"))?;
    out.write_json(
        "ground_truth.json",
        &json!({"schema": "sufficit/1", "planted": crate::demo::PLANTED_FILE, "threshold": recovered::RECOVERED_R,
                "frame_ms": crate::demo::planted::FRAME_MS, "cells": cells}),
    )?;
    out.write_json(
        "run.json",
        &RunRecord::new("demo", Some(model), json!({"compared_with": crate::demo::PLANTED_FILE}), seed)?,
    )?;
    Ok(recoveries)
}

/// Run the demo.
pub fn run(a: &DemoArgs) -> Result<()> {
    let t0 = Instant::now();
    let bytes: Cow<[u8]> = match &a.model {
        Some(path) => Cow::Owned(std::fs::read(path).map_err(|e| crate::Error::io("read the model", path, e))?),
        None => Cow::Borrowed(MODEL),
    };
    let out = OutputDir::create(&a.out)?;
    out.write_bytes("model.onnx", &bytes)?;
    let model = a.out.join("model.onnx");
    let quiet = |mut v: Vec<String>| {
        v.extend(["--quiet".to_string(), "--seed".to_string(), a.common.seed.to_string()]);
        v
    };
    let say = |what: &str| {
        if !a.common.quiet {
            eprintln!("sufficit demo: {what}");
        }
    };
    let mut protocols: Vec<(&str, Vec<&str>)> = CELLS.iter().map(|(_, p, params)| (*p, params.to_vec())).collect();
    protocols.extend(OTHERS.iter().map(|(p, params)| (*p, params.to_vec())));
    for (protocol, params) in &protocols {
        say(&format!("{protocol}: stimulus and responses"));
        let stim = a.out.join("stimuli").join(protocol);
        let mut args = vec!["stimulus".to_string(), protocol.to_string()];
        args.extend(params.iter().map(|p| p.to_string()));
        args.extend(["--model".into(), s(&model), "--out".into(), s(&stim)]);
        run_args(quiet(args))?;
        let resp = a.out.join("responses").join(protocol);
        run_args(quiet(vec!["respond".into(), s(&model), s(&stim), "--out".into(), s(&resp)]))?;
    }
    for (cell, protocol, _) in CELLS {
        let stim = s(&a.out.join("stimuli").join(protocol));
        let base = a.out.join(format!("cell-{cell}"));
        for (command, extra) in [
            ("attribute", vec!["--layer", "all", "--compare-baselines", "blurred"]),
            ("reduce", vec!["--layer", "all"]),
            ("knockout", vec![]),
        ] {
            say(&format!("cell {cell}, {protocol}: {command}"));
            let mut args = vec![command.to_string(), s(&model), stim.clone(), "--cell".into(), cell.to_string()];
            args.extend(extra.iter().map(|e| e.to_string()));
            args.extend(["--out".into(), s(&base.join(command))]);
            run_args(quiet(args))?;
        }
    }
    say("recovered vs planted");
    let truth = ground_truth(&a.out, &model, a.common.seed)?;
    say("report");
    let report = a.out.join("report");
    run_args(quiet(vec!["report".into(), s(&a.out), "--out".into(), s(&report)]))?;
    let mut record = RunRecord::new(
        "demo",
        Some(&model),
        json!({"cells": CELLS.iter().map(|(c, p, params)| json!({"cell": c, "protocol": p, "parameters": params})).collect::<Vec<_>>(),
               "other_protocols": OTHERS.iter().map(|(p, params)| json!({"protocol": p, "parameters": params})).collect::<Vec<_>>()}),
        a.common.seed,
    )?;
    record.timings = vec![("total".into(), t0.elapsed().as_secs_f64())];
    out.write_json("run.json", &record)?;
    for r in &truth {
        println!(
            "cell {}: top first-layer unit {}:{} is closest to the planted {} pathway (filter r = {:.2}, sign {}){}; \
             all {} kept first-layer unit(s) together: r = {:.2} (chance {:.2})",
            r.cell,
            r.unit_layer,
            r.unit_channel,
            crate::demo::planted::PATHWAYS[r.matched_channel],
            r.filter_correlation,
            if r.sign_matches { "right" } else { "wrong" },
            if r.recovered { "" } else { ": not recovered" },
            r.kept_first_layer_units,
            r.planted.iter().find(|p| p.channel == r.matched_channel).map_or(f64::NAN, |p| p.span_correlation),
            r.span_chance
        );
    }
    println!(
        "demo results in {}; report: {} ({:.0} s)",
        a.out.display(),
        report.join("report.html").display(),
        t0.elapsed().as_secs_f64()
    );
    Ok(())
}
