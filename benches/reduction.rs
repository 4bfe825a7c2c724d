//! Reduction benchmark: `reduce --layer all` against `attribute --layer all` on the same input,
//! both through the command-line entry point (files written included). The reference job of
//! the attribution benchmark: the reference-size model, a 139-frame binary white-noise movie,
//! cell 0, target summed over the 100 windows ending at frames 39..139, 64 midpoint steps.
//!
//!     cargo bench --bench reduction     # figures go to docs/performance.md by hand

#[path = "../tests/common/mod.rs"]
mod common;
#[path = "support/reference_model.rs"]
mod reference_model;
#[path = "support/timing.rs"]
mod timing;

use clap::Parser;
use sufficit::cli::{run, Cli};
use sufficit::stimulus::write_stimulus;
use timing::{median, peak_mib, samples};

const REPEATS: usize = 3;

fn main() {
    let dir = std::env::temp_dir().join(format!("sufficit-bench-reduce-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let model = dir.join("reference.onnx");
    reference_model::write_reference_model(&model);
    // 40 gray history frames + 99 noise frames = 139; the 100 windows end at frames 39..139.
    let stim = reference_model::reference_noise();
    let stim_dir = dir.join("noise");
    write_stimulus(&stim, &stim_dir).expect("write stimulus");
    let (m, s) = (model.to_str().expect("utf-8"), stim_dir.to_str().expect("utf-8"));
    let job = |command: &str, out: &str| {
        let out = dir.join(out).to_str().expect("utf-8").to_string();
        let args: Vec<String> = [
            "sufficit", command, m, s, "--cell", "0", "--layer", "all", "--window", "39:139", "--steps", "64", "--out",
            &out, "--quiet",
        ]
        .iter()
        .map(|a| a.to_string())
        .collect();
        move || run(Cli::parse_from(&args)).expect("command")
    };
    let attribute = median(&samples(REPEATS, job("attribute", "attr"))).as_secs_f64();
    let reduce = median(&samples(REPEATS, job("reduce", "reduced"))).as_secs_f64();
    let record: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("reduced/run.json")).expect("run.json")).expect("json");
    let sub: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("reduced/subcircuit.json")).expect("subcircuit.json"))
            .expect("json");
    println!("attribute --layer all   median {attribute:.2} s");
    println!(
        "reduce --layer all      median {reduce:.2} s = {:.2} x attribute; kept {} of {} units, fve {:.3}; peak memory {:.0} MiB",
        reduce / attribute,
        sub["size"]["kept"],
        sub["size"]["of"],
        sub["fidelity"]["fve"].as_f64().unwrap_or(f64::NAN),
        peak_mib()
    );
    println!("reduce stages (last run): {}", record["timings"]);
    if std::env::var_os("SUFFICIT_BENCH_KEEP").is_some() {
        println!("inputs and results kept in {}", dir.display());
    } else {
        let _ = std::fs::remove_dir_all(&dir);
    }
}
