//! `sufficit report RESULTS... --out DIR`: one self-contained HTML page, a Markdown summary with
//! PNG figures, and the plain-sentence findings with their sources, from result folders.

use super::Common;
use crate::output::{OutputDir, RunRecord};
use crate::Result;
use clap::Args;
use serde_json::json;
use std::time::Instant;

/// Arguments of `report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// Folders holding results of stimulus, respond, attribute, reduce or knockout (searched
    /// recursively).
    #[arg(required = true)]
    pub results: Vec<std::path::PathBuf>,
    /// Output folder (report.html, summary.md, figures/, findings.json).
    #[arg(long)]
    pub out: std::path::PathBuf,
    #[command(flatten)]
    pub common: Common,
}

/// Write the report.
pub fn run(a: &ReportArgs) -> Result<()> {
    let t0 = Instant::now();
    let written = crate::report::write(&a.results, &a.out)?;
    for w in &written.warnings {
        eprintln!("sufficit report: warning: {w}");
    }
    let mut record = RunRecord::new(
        "report",
        None,
        json!({"results": a.results.iter().map(|p| p.display().to_string()).collect::<Vec<_>>(),
               "sections": written.sections.len(), "findings": written.findings.len()}),
        a.common.seed,
    )?;
    record.timings = vec![("total".into(), t0.elapsed().as_secs_f64())];
    OutputDir::create(&a.out)?.write_json("run.json", &record)?;
    if !a.common.quiet {
        for f in &written.findings {
            println!("{}", f.text);
        }
    }
    println!("report: {}", a.out.join("report.html").display());
    Ok(())
}
