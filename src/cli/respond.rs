//! `sufficit respond MODEL STIMULUS_DIR --out DIR`.

use crate::output::{OutputDir, RunRecord};
use crate::response::{rates, rf_centres, write_responses};
use crate::stimulus::protocols::{self, Observed};
use crate::Result;
use clap::Args;
use serde_json::json;
use std::time::Instant;

/// Arguments of `respond`.
#[derive(Debug, Args)]
pub struct RespondArgs {
    #[command(flatten)]
    pub job: super::Job,
}

/// Run the model on the stimulus, measure the protocol, write the results.
pub fn run(a: &RespondArgs) -> Result<()> {
    let t0 = Instant::now();
    let (model, stim) = a.job.load()?;
    let protocol = protocols::find(&stim.meta.protocol)?;
    let record = RunRecord::new(
        "respond",
        Some(&a.job.model),
        json!({"stimulus": a.job.stimulus.display().to_string(), "protocol": stim.meta.protocol, "layout": model.binding}),
        a.job.common.seed,
    )?;
    let load = t0.elapsed().as_secs_f64();

    let bar = super::progress_bar(a.job.common.quiet, stim.meta.frames as u64, "responses");
    let t1 = Instant::now();
    let r = rates(&model, &stim.movie, &|n| bar.inc(n as u64))?;
    bar.finish_and_clear();
    let forward = t1.elapsed().as_secs_f64();
    let centres = rf_centres(&model, a.job.common.seed)?;
    let t2 = Instant::now();
    let obs = Observed {
        meta: &stim.meta,
        movie: &stim.movie,
        rates: r.view(),
        lags: model.binding.lags,
        rf_centres: &centres,
    };
    let measured = protocol.measure(&obs)?;
    let metrics = t2.elapsed().as_secs_f64();

    let out = OutputDir::create(&a.job.out)?;
    let sha = record.model.as_ref().map(|m| m.sha256.clone()).unwrap_or_default();
    write_responses(&out, &r, &stim.meta, &centres, &measured, &sha)?;
    let mut record = record;
    record.timings = vec![("load".into(), load), ("responses".into(), forward), ("metrics".into(), metrics)];
    out.write_json("run.json", &record)?;
    if !a.job.common.quiet {
        println!("{} frames x {} cells; results in {}", r.nrows(), r.ncols(), a.job.out.display());
    }
    Ok(())
}
