//! The shipped example study (demo model, all 3 cells, all 8 protocols: 24 jobs) run once in
//! this process: wall time, CPU time / wall time (both cores busy?) and peak memory against the
//! default --max-memory. `cargo bench --bench study`; figures go to docs/performance.md.

#[path = "support/timing.rs"]
mod timing;

use clap::Parser;
use std::time::Instant;
use sufficit::cli::{run, Cli};
use timing::{cpu_seconds, peak_mib};

fn main() {
    let dir = tempfile::tempdir().expect("a temporary folder");
    let out = dir.path().join("study");
    let file = concat!(env!("CARGO_MANIFEST_DIR"), "/stimuli/example-study.toml");
    let (t0, c0) = (Instant::now(), cpu_seconds());
    run(Cli::parse_from(["sufficit", "study", file, "--quiet", "--out", out.to_str().expect("utf-8 path")]))
        .expect("the example study");
    let (wall, cpu) = (t0.elapsed().as_secs_f64(), cpu_seconds() - c0);
    println!(
        "example study (24 jobs + report): {wall:.1} s wall, {cpu:.1} s CPU, CPU/wall {:.2}, peak memory {:.0} MiB \
         (default --max-memory {:.0} MiB)",
        cpu / wall,
        peak_mib(),
        sufficit::memory::default_bytes() as f64 / (1 << 20) as f64
    );
}
