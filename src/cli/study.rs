//! `sufficit study FILE [--check] [--shard K/N]` and `sufficit merge DIR... --out DIR`.

use crate::study::{file, memory, merge, plan, run};
use crate::{Error, Result};
use clap::Args;
use std::path::PathBuf;
use std::time::Instant;

/// Arguments of `study`.
#[derive(Debug, Args)]
pub struct StudyArgs {
    /// The study file (TOML; see docs/cluster.md and stimuli/example-study.toml).
    pub file: PathBuf,
    /// Only validate the file, then print the job count and an estimate of time and memory.
    #[arg(long)]
    pub check: bool,
    /// Run only slice K of N of the jobs (1-based), e.g. one task of a cluster array job.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<String>,
    /// Output folder (overrides the study file's `out`), e.g. one per shard.
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Memory bound, e.g. 8G (default: half of this machine's memory); sets the batch sizes.
    #[arg(long, value_name = "SIZE")]
    pub max_memory: Option<String>,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress bars (for schedulers' logs).
    #[arg(long)]
    pub quiet: bool,
}

/// Arguments of `merge`.
#[derive(Debug, Args)]
pub struct MergeArgs {
    /// Output folders of `study --shard` runs.
    #[arg(required = true)]
    pub results: Vec<PathBuf>,
    /// Folder for the joined results and report.
    #[arg(long)]
    pub out: PathBuf,
}

/// Seconds of work per stimulus frame of a job, in units of one window's forward pass
/// (attribution, reduction and knock-outs together), measured on the demo model: see
/// docs/performance.md.
const JOB_FORWARDS_PER_FRAME: f64 = 34.0;

/// Seconds of one window's forward pass through each model (best of 5 batches of 8, after a
/// warm-up).
fn window_seconds(p: &plan::Plan) -> Result<Vec<f64>> {
    p.models
        .iter()
        .map(|m| {
            let model = crate::model::Model::load(&m.path, &crate::model::LoadOptions::default())?;
            let b = &model.binding;
            let x = b.to_model_input(ndarray::Array4::<f32>::zeros((8, b.lags, b.height, b.width)));
            model.graph.forward(x.clone(), &[])?;
            let mut best = f64::INFINITY;
            for _ in 0..5 {
                let t0 = Instant::now();
                model.graph.forward(x.clone(), &[])?;
                best = best.min(t0.elapsed().as_secs_f64() / 8.0);
            }
            Ok(best)
        })
        .collect()
}

/// Validate, then check or run the study, then write the report.
pub fn run_study(a: &StudyArgs) -> Result<()> {
    let threads = a.threads.unwrap_or_else(rayon::current_num_threads).max(1);
    super::set_threads(a.threads)?;
    let max = a
        .max_memory
        .as_deref()
        .map(crate::memory::parse_size)
        .transpose()?
        .unwrap_or_else(crate::memory::default_bytes);
    let shard = a.shard.as_deref().map(plan::parse_shard).transpose()?;
    let (mut study, problems) = file::read(&a.file)?;
    if let Some(out) = &a.out {
        study.out = out.clone();
    }
    let plan = plan::plan(study, problems)?;
    memory::check(&plan, max, threads)?;
    // Set after planning, whose model checks use the machine's default bound: a too-small
    // --max-memory is then refused with the study's own estimate.
    crate::memory::set_limit(max, threads);
    let mine = plan.shard(shard);
    if a.check {
        let per_window = window_seconds(&plan)?;
        let seconds: f64 = mine
            .iter()
            .map(|&j| {
                let sh = &plan.shared[plan.jobs[j].shared];
                per_window[sh.model] * sh.frames as f64 * JOB_FORWARDS_PER_FRAME / threads as f64
            })
            .sum();
        println!(
            "{}: valid. {} models, {} protocols, {} jobs{} (model x protocol x cell); estimated {:.0} s of work \
             with {threads} threads (rough: from one forward pass per model); memory: at least {} MiB, \
             bounded by --max-memory {} MiB (batches grow to use it).",
            a.file.display(),
            plan.models.len(),
            plan.file.protocols.len(),
            mine.len(),
            shard.map_or(String::new(), |(k, n)| format!(" in shard {k}/{n} of {}", plan.jobs.len())),
            seconds,
            (0..plan.models.len()).map(|i| memory::least_bytes(&plan, i, threads)).max().unwrap_or(0) >> 20,
            max >> 20
        );
        return Ok(());
    }
    let t0 = Instant::now();
    let reports = run::run(&plan, shard, a.quiet, &super::run_args)?;
    let failed: Vec<&run::JobReport> = reports.iter().filter(|r| matches!(r.status, run::Status::Failed(_))).collect();
    if !a.quiet {
        println!("{:<60} {:>9}  status", "job", "seconds");
        for r in &reports {
            println!("{:<60} {:>9.1}  {}", r.name, r.seconds, run::status_text(&r.status));
        }
    }
    let skipped = reports.iter().filter(|r| r.status == run::Status::Skipped).count();
    println!(
        "{} jobs: {} run, {} skipped (finished earlier), {} failed; {:.0} s; results in {}",
        reports.len(),
        reports.len() - skipped - failed.len(),
        skipped,
        failed.len(),
        t0.elapsed().as_secs_f64(),
        plan.file.out.display()
    );
    if shard.is_none() && failed.is_empty() {
        let report = plan.file.out.join("report");
        crate::report::write(std::slice::from_ref(&plan.file.out), &report)?;
        println!("report: {}", report.join("report.html").display());
    }
    if !failed.is_empty() {
        return Err(Error::Usage(format!(
            "{} of {} jobs failed (re-run the same command to retry them; finished jobs are kept): {}",
            failed.len(),
            reports.len(),
            failed
                .iter()
                .map(|r| format!("{}: {}", r.name, run::status_text(&r.status)))
                .collect::<Vec<_>>()
                .join("; ")
        )));
    }
    Ok(())
}

/// Join shard results and write the report.
pub fn run_merge(a: &MergeArgs) -> Result<()> {
    let m = merge::merge(&a.results, &a.out)?;
    let report = a.out.join("report");
    crate::report::write(std::slice::from_ref(&a.out), &report)?;
    println!(
        "merged {} finished folders ({} already present) into {}; report: {}",
        m.copied,
        m.already,
        a.out.display(),
        report.join("report.html").display()
    );
    Ok(())
}
