//! Protocol benchmark: drawing every protocol with its defaults at 50x50 pixels and 40 lags, and
//! `respond`'s work (windows + forward + receptive-field centres) on a 2,000-frame stimulus
//! with the reference-size model.
//!
//!     cargo bench --bench protocols       # figures go to docs/performance.md by hand

#[path = "../tests/common/mod.rs"]
mod common;
#[path = "support/reference_model.rs"]
mod reference_model;

use std::time::Instant;
use sufficit::model::{LoadOptions, Model};
use sufficit::response::{rates, rf_centres};
use sufficit::stimulus::{protocols, Canvas, Params, Stimulus};

fn main() {
    let canvas = Canvas { height: 50, width: 50, lags: 40, frame_rate_hz: 100.0, pixel_um: 50.0 };
    println!("drawing each protocol with default parameters at 50x50 pixels, 40 lags, 100 Hz:");
    for p in protocols::all().into_iter().filter(|p| p.name() != "movie") {
        let params = Params::parse(p.name(), p.specs(), &[]).expect("defaults are valid");
        let t = Instant::now();
        let drawn = p.draw(&params, &canvas, 1).expect("draw");
        let stim = Stimulus::assemble(p.name(), &params, &canvas, 1, drawn);
        println!("  {:<22} {:>7} frames  {:>8.3} s", p.name(), stim.meta.frames, t.elapsed().as_secs_f64());
    }

    let dir = std::env::temp_dir().join(format!("sufficit-bench-protocols-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("reference.onnx");
    reference_model::write_reference_model(&path);
    let model = Model::load(&path, &LoadOptions::default()).expect("load");
    let p = protocols::find("white-noise").expect("white-noise");
    let params = Params::parse(p.name(), p.specs(), &["duration_ms=19600".into()]).expect("params");
    let stim = Stimulus::assemble(p.name(), &params, &canvas, 1, p.draw(&params, &canvas, 1).expect("draw"));
    let t = Instant::now();
    let r = rates(&model, &stim.movie, &|_| {}).expect("rates");
    let forward = t.elapsed().as_secs_f64();
    let t = Instant::now();
    rf_centres(&model, 1).expect("centres");
    let centres = t.elapsed().as_secs_f64();
    println!("respond on {} frames x {} cells, reference model [N, 40, 50, 50]:", r.nrows(), r.ncols());
    println!("  responses (windows + forward)  {forward:.2} s  ({:.0} frames/s)", r.nrows() as f64 / forward);
    println!("  receptive-field centres        {centres:.2} s");
    let _ = std::fs::remove_dir_all(&dir);
}
