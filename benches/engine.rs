//! Engine benchmark: forward + backward (gradients w.r.t. the input and the first hidden layer)
//! on the reference-size model, achieved GFLOP/s against this machine's measured f32 GEMM peak,
//! peak memory, and the engine's forward against tract's on the same batch. Then the same batch
//! through the fitted demo draft, whose first layer has rank-2 kernels and whose second layer is
//! block diagonal (one block per cell): the engine runs those structures as such
//! (`conv_low_rank`, `conv_packed`), tract runs the full kernels.
//!
//!     cargo bench --bench engine          # figures go to docs/performance.md by hand

#[path = "../tests/common/mod.rs"]
mod common;
#[path = "support/reference_model.rs"]
mod reference_model;
#[path = "support/timing.rs"]
mod timing;

use ndarray::{ArrayD, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::time::Duration;
use sufficit::model::{FastPath, LoadOptions, Model};
use timing::{median, peak_mib, samples};

const BATCH: usize = 64;
const REPEATS: usize = 9;

/// GFLOP/s of the `gemm` crate on a square f32 product, with the given threads.
fn gemm_peak(n: usize, threads: usize) -> f64 {
    let a = vec![1.0f32; n * n];
    let b = vec![0.5f32; n * n];
    let mut c = vec![0f32; n * n];
    let par = if threads > 1 { gemm::Parallelism::Rayon(threads) } else { gemm::Parallelism::None };
    let t = samples(REPEATS, || unsafe {
        gemm::gemm(
            n,
            n,
            n,
            c.as_mut_ptr(),
            1,
            n as isize,
            false,
            a.as_ptr(),
            1,
            n as isize,
            b.as_ptr(),
            1,
            n as isize,
            0.0f32,
            1.0f32,
            false,
            false,
            false,
            par,
        )
    })[0];
    2.0 * (n as f64).powi(3) / t.as_secs_f64() / 1e9
}

fn main() {
    let dir = std::env::temp_dir().join(format!("sufficit-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("reference.onnx");
    reference_model::write_reference_model(&path);
    let model = Model::load(&path, &LoadOptions::default()).expect("load");
    let g = &model.graph;
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let x = ArrayD::from_shape_fn(IxDyn(&[BATCH, 40, 50, 50]), |_| rng.random_range(-1.0f32..1.0));
    let hidden = g.find("layer1").expect("layer1");
    let out = g.outputs[0];

    // FLOPs of the convolutions and the readout (multiply-adds x 2); backward to the input
    // repeats each layer's data product once (no weight gradients are requested).
    let conv1 = 2.0 * (BATCH * 8 * 36 * 36 * 40 * 15 * 15) as f64;
    let conv2 = 2.0 * (BATCH * 8 * 26 * 26 * 8 * 11 * 11) as f64;
    let dense = 2.0 * (BATCH * 4 * 8 * 26 * 26) as f64;
    let forward_flop = conv1 + conv2 + dense;
    let backward_flop = conv1 + conv2 + dense;

    let fwd = samples(REPEATS, || {
        g.forward(x.clone(), &[]).expect("forward");
    });
    let fb = samples(REPEATS, || {
        let tape = g.forward(x.clone(), &[]).expect("forward");
        let seed = ArrayD::from_elem(IxDyn(&[BATCH, 4]), 1.0f32);
        tape.gradients(&[(out, seed)], &[g.input, hidden]).expect("backward");
    });
    let (t_fwd, t_fwd_best, t_fb, t_fb_best) = (median(&fwd), fwd[0], median(&fb), fb[0]);
    let engine_peak = peak_mib();
    let fast = FastPath::new(&model).expect("tract plan");
    let t_tract = median(&samples(REPEATS, || {
        fast.run(x.clone()).expect("tract forward");
    }));
    let fixed = FastPath::with_batch(&model, BATCH).expect("tract plan");
    let t_tract_fixed = median(&samples(REPEATS, || {
        fixed.run(x.clone()).expect("tract forward");
    }));
    let tract_peak = peak_mib();
    let peak1 = gemm_peak(1024, 1);
    let peak2 = gemm_peak(1024, 2);

    let rate = |flop: f64, t: Duration| flop / t.as_secs_f64() / 1e9;
    println!(
        "reference model: input [{BATCH}, 40, 50, 50], Conv 8@15x15 + softplus, Conv 8@11x11 + softplus, Gemm -> 4"
    );
    println!("threads (rayon)                     {}", rayon::current_num_threads());
    println!("f32 GEMM peak, 1024^3, 1 thread     {peak1:.1} GFLOP/s");
    println!("f32 GEMM peak, 1024^3, 2 threads    {peak2:.1} GFLOP/s");
    println!(
        "engine forward                      {:.3} s  {:.1} GFLOP/s",
        t_fwd.as_secs_f64(),
        rate(forward_flop, t_fwd)
    );
    println!(
        "engine forward+backward (input, layer1)  {:.3} s  {:.1} GFLOP/s  = {:.0} % of the 2-thread GEMM peak",
        t_fb.as_secs_f64(),
        rate(forward_flop + backward_flop, t_fb),
        100.0 * rate(forward_flop + backward_flop, t_fb) / peak2
    );
    println!(
        "best of {REPEATS}: forward {:.3} s ({:.1} GFLOP/s), forward+backward {:.3} s ({:.1} GFLOP/s = {:.0} % of the 2-thread GEMM peak)",
        t_fwd_best.as_secs_f64(),
        rate(forward_flop, t_fwd_best),
        t_fb_best.as_secs_f64(),
        rate(forward_flop + backward_flop, t_fb_best),
        100.0 * rate(forward_flop + backward_flop, t_fb_best) / peak2
    );
    println!(
        "tract forward                       {:.3} s  {:.1} GFLOP/s",
        t_tract.as_secs_f64(),
        rate(forward_flop, t_tract)
    );
    println!(
        "tract forward, batch fixed at load  {:.3} s  {:.1} GFLOP/s",
        t_tract_fixed.as_secs_f64(),
        rate(forward_flop, t_tract_fixed)
    );
    println!(
        "engine forward / tract forward      {:.2}x (symbolic batch)  {:.2}x (fixed batch)",
        t_fwd.as_secs_f64() / t_tract.as_secs_f64(),
        t_fwd.as_secs_f64() / t_tract_fixed.as_secs_f64()
    );
    println!("peak memory after engine runs       {engine_peak:.0} MiB");
    println!("peak memory after tract runs        {tract_peak:.0} MiB");
    structured(&x);
    let _ = std::fs::remove_dir_all(&dir);
}

/// Forward of the fitted demo model (18 rank-2 kernels of 40 lags x 15 x 15, then 3 diagonal
/// blocks of 4 x 6 channels) in the engine and in tract.
fn structured(x: &ArrayD<f32>) {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("models/synthetic-sensor-fitted.onnx");
    let model = Model::load(&path, &LoadOptions::default()).expect("load the fitted demo model");
    let engine = median(&samples(REPEATS, || {
        model.graph.forward(x.clone(), &[]).expect("forward");
    }));
    let fast = FastPath::new(&model).expect("tract plan");
    let tract = median(&samples(REPEATS, || {
        fast.run(x.clone()).expect("tract forward");
    }));
    println!(
        "fitted demo model forward: engine {:.3} s, tract {:.3} s ({:.2}x)",
        engine.as_secs_f64(),
        tract.as_secs_f64(),
        engine.as_secs_f64() / tract.as_secs_f64()
    );
}
