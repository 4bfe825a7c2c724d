//! The one-command demo and its report, timed: `cargo bench --bench demo`. The demo runs once
//! (every protocol, attribution, reduction and knock-outs for each demo cell, then the report);
//! the report alone is then rebuilt from the demo's results five times. Figures go to
//! docs/performance.md.

#[path = "support/timing.rs"]
mod timing;

use clap::Parser;
use std::time::Instant;
use sufficit::cli::{run, Cli};
use timing::{median, peak_mib, samples};

fn main() {
    let dir = tempfile::tempdir().expect("a temporary folder");
    let out = dir.path().join("demo");
    let t0 = Instant::now();
    run(Cli::parse_from(["sufficit", "demo", "--quiet", "--out", out.to_str().expect("utf-8 path")])).expect("demo");
    let demo = t0.elapsed();
    let report = dir.path().join("report");
    let times = samples(5, || {
        sufficit::report::write(std::slice::from_ref(&out), &report).expect("report");
    });
    let html = std::fs::metadata(report.join("report.html")).map(|m| m.len()).unwrap_or(0);
    let figures = std::fs::read_dir(report.join("figures")).map(|d| d.count()).unwrap_or(0);
    println!("demo (whole pipeline + report): {:.1} s, peak memory {:.0} MiB", demo.as_secs_f64(), peak_mib());
    println!(
        "report of the demo: median {:.2} s, best {:.2} s over {} runs ({} figures, report.html {:.1} MB)",
        median(&times).as_secs_f64(),
        times[0].as_secs_f64(),
        times.len(),
        figures,
        html as f64 / 1e6
    );
}
