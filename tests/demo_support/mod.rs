//! Running a protocol on a demo model as the protocols' own tests do (100 Hz, 50 um pixels,
//! receptive fields at the frame centre), shared by the planted and fitted demo model tests.

#![allow(dead_code)]

use ndarray::Array2;
use serde_json::Value;
use std::path::{Path, PathBuf};
use sufficit::model::{LoadOptions, Model};
use sufficit::response::rates;
use sufficit::stimulus::protocols::{self, Observed};
use sufficit::stimulus::{Canvas, Params, Stimulus};

/// A shipped file of `models/`.
pub fn shipped(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("models").join(name)
}

/// Load a shipped model.
pub fn load(name: &str) -> Model {
    Model::load(&shipped(name), &LoadOptions::default()).unwrap()
}

/// Draw `protocol` with `params` at the model's size (100 Hz, 50 um pixels), run it, measure.
pub fn run(m: &Model, protocol: &str, params: &[&str]) -> (Stimulus, Array2<f32>, Value) {
    let b = &m.binding;
    let c = Canvas { height: b.height, width: b.width, lags: b.lags, frame_rate_hz: 100.0, pixel_um: 50.0 };
    let p = protocols::find(protocol).unwrap();
    let args: Vec<String> = params.iter().map(|s| s.to_string()).collect();
    let params = Params::parse(protocol, p.specs(), &args).unwrap();
    let stim = Stimulus::assemble(protocol, &params, &c, 1, p.draw(&params, &c, 1).unwrap());
    let r = rates(m, &stim.movie, &|_| {}).unwrap();
    let centres = vec![(25.0, 25.0); 3];
    let obs = Observed { meta: &stim.meta, movie: &stim.movie, rates: r.view(), lags: b.lags, rf_centres: &centres };
    let summary = p.measure(&obs).unwrap().summary;
    (stim, r, summary)
}
