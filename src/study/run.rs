//! Running a study: each protocol's stimulus and responses once per model (shared by every
//! cell), then each job (attribute, reduce, knockout of one cell), each finished unit sealed with
//! a completion record holding its settings hash. A re-run skips sealed units whose settings are
//! unchanged and redoes the rest from scratch, so a run killed at any moment loses no finished
//! job and leaves nothing a re-run would trust half-written.

use super::plan::Plan;
use crate::output::OutputDir;
use crate::{Error, Result};
use indicatif::{MultiProgress, ProgressBar, ProgressStyle};
use rayon::prelude::*;
use serde_json::{json, Value};
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use std::time::Instant;

/// Name of the completion record in every finished folder.
pub const DONE: &str = "done.json";

/// How a job ended.
#[derive(Debug, Clone, PartialEq)]
pub enum Status {
    /// Computed in this run.
    Done,
    /// Finished by an earlier run with the same settings.
    Skipped,
    /// Failed, with the reason.
    Failed(String),
}

/// One job's line of the final table.
#[derive(Debug, Clone)]
pub struct JobReport {
    /// Model / protocol / cell.
    pub name: String,
    /// How it ended.
    pub status: Status,
    /// Wall seconds in this run.
    pub seconds: f64,
}

/// Runs one sufficit command (the CLI's own entry point), given its arguments without the
/// program name.
pub type Exec<'a> = &'a (dyn Fn(Vec<String>) -> Result<()> + Sync);

/// The settings hash of the completion record in `dir`, if it holds a readable one.
pub fn settings_hash(dir: &Path) -> Option<String> {
    let text = std::fs::read_to_string(dir.join(DONE)).ok()?;
    serde_json::from_str::<Value>(&text).ok()?["settings_hash"].as_str().map(String::from)
}

/// True when `dir` holds a completion record with this settings hash.
pub fn finished(dir: &Path, hash: &str) -> bool {
    settings_hash(dir).is_some_and(|h| h == hash)
}

/// Seal a finished folder.
fn seal(dir: &Path, hash: &str, what: &str, seconds: f64) -> Result<()> {
    OutputDir::create(dir)?
        .write_json(DONE, &json!({"schema": "sufficit/1", "finished": what, "settings_hash": hash, "seconds": seconds}))
}

/// Remove what an unfinished earlier run left in `dir` (never a sealed folder's sibling).
fn clear(path: &Path) -> Result<()> {
    if path.exists() {
        std::fs::remove_dir_all(path).map_err(|e| Error::io("remove the unfinished folder", path, e))?;
    }
    Ok(())
}

fn s(p: &Path) -> String {
    p.display().to_string()
}

/// Stimulus and responses of one (model, protocol), unless already sealed.
fn ensure_shared(plan: &Plan, i: usize, exec: Exec) -> Result<()> {
    let sh = &plan.shared[i];
    if finished(&sh.dir, &sh.hash) {
        return Ok(());
    }
    let t0 = Instant::now();
    let (stim, resp) = (sh.dir.join("stimulus"), sh.dir.join("responses"));
    clear(&stim)?;
    clear(&resp)?;
    let f = &plan.file;
    let p = &f.protocols[sh.protocol];
    let model = s(&plan.models[sh.model].path);
    let mut args = vec!["stimulus".to_string(), p.name.clone()];
    args.extend(p.params.iter().cloned());
    args.extend(["--model".into(), model.clone(), "--out".into(), s(&stim)]);
    args.extend(common(f.seed));
    args.extend(["--frame-rate".into(), f.frame_rate_hz.to_string(), "--pixel-um".into(), f.pixel_um.to_string()]);
    exec(args)?;
    let mut args = vec!["respond".to_string(), model, s(&stim), "--out".into(), s(&resp)];
    args.extend(common(f.seed));
    exec(args)?;
    seal(&sh.dir, &sh.hash, "stimulus and responses", t0.elapsed().as_secs_f64())
}

fn common(seed: u64) -> [String; 3] {
    ["--quiet".into(), "--seed".into(), seed.to_string()]
}

/// Attribute, knock out and reduce one cell (reduce reuses the other two's results).
fn run_job(plan: &Plan, j: usize, exec: Exec) -> Result<()> {
    let job = &plan.jobs[j];
    let sh = &plan.shared[job.shared];
    let f = &plan.file;
    let t0 = Instant::now();
    clear(&job.dir)?;
    let (model, stim, cell) = (s(&plan.models[sh.model].path), s(&sh.dir.join("stimulus")), job.cell.to_string());
    let base = |command: &str| {
        let mut v = vec![command.to_string(), model.clone(), stim.clone(), "--cell".into(), cell.clone()];
        v.extend(common(f.seed));
        v.extend(["--out".into(), s(&job.dir.join(command))]);
        v
    };
    // attribute and reduce attribute the same layers with the same steps.
    let layers_steps = ["--layer".to_string(), f.layers.clone(), "--steps".into(), f.steps.clone()];
    let mut att = base("attribute");
    att.extend(layers_steps.clone());
    att.extend(["--baseline".into(), f.baseline.clone()]);
    if !f.compare_baselines.is_empty() {
        att.extend(["--compare-baselines".into(), f.compare_baselines.join(",")]);
    }
    exec(att)?;
    exec(base("knockout"))?;
    let mut red = base("reduce");
    red.extend(layers_steps);
    red.extend(["--fidelity".into(), f.fidelity.to_string(), "--metric".into(), f.metric.clone()]);
    // reduce ranks units by the gray-baseline attribution: reuse the one just computed.
    if f.baseline == "gray" {
        red.extend(["--attribution".into(), s(&job.dir.join("attribute"))]);
    }
    // ... and the single-unit knock-outs of every unit for the kept ones.
    red.extend(["--knockouts".into(), s(&job.dir.join("knockout"))]);
    exec(red)?;
    seal(&job.dir, &job.hash, "attribute, reduce, knockout", t0.elapsed().as_secs_f64())
}

/// Run the jobs of `shard` (all when None); `quiet` hides the progress bars. Returns one line
/// per job; failed jobs do not stop the others.
pub fn run(plan: &Plan, shard: Option<(usize, usize)>, quiet: bool, exec: Exec) -> Result<Vec<JobReport>> {
    let out = OutputDir::create(&plan.file.out)?;
    out.write_json(
        "study.json",
        &json!({"schema": "sufficit/1", "study": plan.file, "models": plan.models.iter().map(|m| json!({"path": m.path, "sha256": m.sha256, "folder": m.id, "cells": m.cells})).collect::<Vec<_>>(),
                "jobs": plan.jobs.len(), "tool": env!("CARGO_PKG_VERSION")}),
    )?;
    let mine = plan.shard(shard);
    let bars = MultiProgress::new();
    if quiet {
        bars.set_draw_target(indicatif::ProgressDrawTarget::hidden());
    }
    let overall = bars.add(ProgressBar::new(mine.len() as u64));
    overall.set_style(
        ProgressStyle::with_template("study {bar:40} {pos}/{len} jobs, {elapsed} elapsed, about {eta} left")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let line = bars.add(ProgressBar::new_spinner());
    // Stimulus and responses of every (model, protocol) these jobs need, once each.
    line.set_message("stimuli and responses");
    let needed: BTreeSet<usize> = mine.iter().map(|&j| plan.jobs[j].shared).collect();
    let shared: BTreeMap<usize, std::result::Result<(), String>> =
        needed.into_par_iter().map(|i| (i, ensure_shared(plan, i, exec).map_err(|e| e.to_string()))).collect();
    // Jobs run side by side (each command is parallel inside too; two at once keep both cores
    // busy through the sequential parts of reduction). Results keep the job order.
    let reports: Vec<JobReport> = mine
        .par_iter()
        .map(|&j| {
            let name = plan.job_name(j);
            let job = &plan.jobs[j];
            let t0 = Instant::now();
            let status = if finished(&job.dir, &job.hash)
                && finished(&plan.shared[job.shared].dir, &plan.shared[job.shared].hash)
            {
                Status::Skipped
            } else {
                line.set_message(format!("{name}: attribute, reduce, knockout"));
                let result = match &shared[&job.shared] {
                    Ok(()) => run_job(plan, j, exec).map_err(|e| e.to_string()),
                    Err(e) => Err(format!("stimulus or responses failed: {e}")),
                };
                match result {
                    Ok(()) => Status::Done,
                    Err(e) => Status::Failed(e),
                }
            };
            let seconds = t0.elapsed().as_secs_f64();
            if !quiet {
                let _ = bars.println(format!("{name}: {} ({seconds:.1} s)", status_text(&status)));
            }
            overall.inc(1);
            JobReport { name, status, seconds }
        })
        .collect();
    line.finish_and_clear();
    overall.finish_and_clear();
    // Jobs cut short by Ctrl-C were not sealed; a re-run redoes them.
    crate::interrupt::check()?;
    Ok(reports)
}

/// A status as the final table shows it.
pub fn status_text(s: &Status) -> String {
    match s {
        Status::Done => "done".into(),
        Status::Skipped => "skipped (finished earlier, same settings)".into(),
        Status::Failed(e) => format!("FAILED: {e}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_a_record_with_the_same_hash_counts_as_finished() {
        let d = tempfile::tempdir().unwrap();
        assert!(!finished(d.path(), "abc"));
        seal(d.path(), "abc", "x", 1.0).unwrap();
        assert!(finished(d.path(), "abc"));
        assert!(!finished(d.path(), "abd"));
    }
}
