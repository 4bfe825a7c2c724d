//! Attribution benchmark, the reference job: the reference-size model, a 139-frame binary
//! white-noise movie (100 windows of 40 lags), gray baseline, cell 0, target summed over all
//! 100 windows, conductance at the first hidden layer with 64 midpoint steps; then the same with
//! input integrated gradients.
//!
//!     cargo bench --bench attribution     # figures go to docs/performance.md by hand

#[path = "../tests/common/mod.rs"]
mod common;
#[path = "support/reference_model.rs"]
mod reference_model;
#[path = "support/timing.rs"]
mod timing;

use sufficit::attribution::{attribute, resolve_layers, Baseline, Request, Rule, Steps};
use sufficit::model::{LoadOptions, Model};
use timing::{median, peak_mib, samples};

const REPEATS: usize = 5;

fn main() {
    let dir = std::env::temp_dir().join(format!("sufficit-bench-attr-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("reference.onnx");
    reference_model::write_reference_model(&path);
    let model = Model::load(&path, &LoadOptions::default()).expect("load");
    // 40 gray history frames + 99 noise frames = 139; the 100 windows end at frames 39..139.
    let stim = reference_model::reference_noise();
    let frames: Vec<usize> = (39..139).collect();
    // Work of the direct method, in multiply-adds per window: forward through both convolutions
    // and the readout, backward to layer1 (conductance) or to the input (IG).
    let conv1 = (8 * 36 * 36 * 40 * 15 * 15) as f64;
    let conv2 = (8 * 26 * 26 * 8 * 11 * 11) as f64;
    let dense = (4 * 8 * 26 * 26) as f64;
    let forward = conv1 + conv2 + dense;
    for (label, input_ig, backward) in
        [("conductance", false, conv2 + dense), ("conductance + input IG", true, conv2 + dense + conv1)]
    {
        let req = Request {
            cells: vec![(0, 1.0)],
            frames: frames.clone(),
            layers: resolve_layers(&model, "layer1").expect("layer1"),
            baseline: Baseline::Gray,
            rule: Rule::Midpoint,
            steps: Steps::Fixed(64),
            input_ig,
            seed: 1,
        };
        let mut residual = 0.0;
        let times = samples(REPEATS, || {
            residual = attribute(&model, &stim.movie, &req).expect("attribute").layers[0].residual;
        });
        let median = median(&times).as_secs_f64();
        let nominal = 2.0 * 64.0 * 100.0 * (forward + backward);
        println!(
            "{label:<24} median {median:.3} s (best {:.3} s)  direct-method work {:.0} GFLOP = {:.0} GFLOP/s  residual {residual:.1e}  peak memory {:.0} MiB",
            times[0].as_secs_f64(),
            nominal / 1e9,
            nominal / median / 1e9,
            peak_mib()
        );
    }
    let _ = std::fs::remove_dir_all(&dir);
}
