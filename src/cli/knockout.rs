//! `sufficit knockout MODEL STIMULUS_DIR --cell C [--units L:c,...] --out DIR`.

use crate::output::{OutputDir, RunRecord};
use crate::reduction::knockout::{knockouts, Effect};
use crate::reduction::{all_units, parse_units, Clamp};
use crate::response::{measure::json as num, rf_centres};
use crate::Result;
use clap::Args;
use serde_json::json;
use std::time::Instant;

/// Arguments of `knockout`.
#[derive(Debug, Args)]
pub struct KnockoutArgs {
    #[command(flatten)]
    pub job: super::Job,
    /// The cell whose response is judged.
    #[arg(long, default_value_t = 0)]
    pub cell: usize,
    /// Units to silence as LAYER:CHANNEL,...: each alone and all together. Default: every unit
    /// of every hidden layer, one at a time.
    #[arg(long)]
    pub units: Option<String>,
    /// What a silenced unit is clamped to: baseline (its activation under gray), mean or zero.
    #[arg(long, default_value = "baseline")]
    pub clamp: String,
    /// Frames judged, START:END (frames, or ms with an ms suffix). Default: the protocol's window.
    #[arg(long)]
    pub window: Option<String>,
}

/// Silence units, measure, rank, write knockouts.json and knockouts.csv.
pub fn run(a: &KnockoutArgs) -> Result<()> {
    let t0 = Instant::now();
    let (model, stim) = a.job.load()?;
    let clamp = Clamp::parse(&a.clamp)?;
    let sets = match &a.units {
        Some(spec) => {
            let units = parse_units(&model, spec)?;
            let mut sets: Vec<_> = units.iter().map(|u| vec![u.clone()]).collect();
            if units.len() > 1 {
                sets.push(units);
            }
            sets
        }
        None => all_units(&model).into_iter().map(|u| vec![u]).collect(),
    };
    let record = RunRecord::new(
        "knockout",
        Some(&a.job.model),
        json!({"stimulus": a.job.stimulus.display().to_string(), "cell": a.cell, "units": a.units, "clamp": a.clamp, "window": a.window}),
        a.job.common.seed,
    )?;
    let bar = super::progress_bar(a.job.common.quiet, sets.len() as u64, "knock-outs");
    let centres = rf_centres(&model, a.job.common.seed)?;
    let frames = super::attribute::parse_frames(a.window.as_deref(), &stim.meta)?;
    let effects = knockouts(&model, &stim, a.cell, &frames, &sets, clamp, &centres, &|| bar.inc(1))?;
    bar.finish_and_clear();

    let out = OutputDir::create(&a.job.out)?;
    write_knockouts(&out, &effects, &stim.meta.protocol, a.cell, &a.clamp)?;
    let mut record = record;
    record.timings = vec![("total".into(), t0.elapsed().as_secs_f64())];
    out.write_json("run.json", &record)?;
    if !a.job.common.quiet {
        if let Some(top) = effects.first() {
            println!(
                "strongest knock-out: {} (relative change {:.3}); results in {}",
                top.units.join(" + "),
                top.relative_rms_change,
                a.job.out.display()
            );
        }
    }
    Ok(())
}

/// Write `knockouts.csv` and `knockouts.json` (ranked effects) into `out`.
pub(super) fn write_knockouts(
    out: &OutputDir,
    effects: &[Effect],
    protocol: &str,
    cell: usize,
    clamp: &str,
) -> Result<()> {
    let mut csv = String::from("rank,units,relative_rms_change,fraction_variance_explained,mean_full,mean_silenced\n");
    for e in effects {
        csv += &format!(
            "{},{},{},{},{},{}\n",
            e.rank,
            e.units.join(" "),
            e.relative_rms_change,
            e.fraction_variance_explained,
            e.mean_full,
            e.mean_silenced
        );
    }
    out.write_bytes("knockouts.csv", csv.as_bytes())?;
    let rows: Vec<_> = effects
        .iter()
        .map(|e| {
            json!({"rank": e.rank, "units": e.units, "relative_rms_change": num(e.relative_rms_change),
                "fraction_variance_explained": num(e.fraction_variance_explained), "mean_full": num(e.mean_full),
                "mean_silenced": num(e.mean_silenced),
                "metrics": e.metrics.iter().map(|(n, f, s, d)| json!({"metric": n, "full": num(*f), "silenced": num(*s), "change": num(*d)})).collect::<Vec<_>>()})
        })
        .collect();
    out.write_json(
        "knockouts.json",
        &json!({"schema": "sufficit/1", "protocol": protocol, "cell": cell, "clamp": clamp,
            "caution": "Model-derived candidates: hypotheses for experiments, not findings. Animal work follows local ethics approval.",
            "knockouts": rows}),
    )?;
    Ok(())
}
