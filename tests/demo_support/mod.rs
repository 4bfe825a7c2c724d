//! Running a protocol on a demo model as the protocols' own tests do (100 Hz, 50 um pixels,
//! receptive fields at the frame centre), shared by the planted and fitted demo model tests.

#![allow(dead_code)]

use ndarray::Array2;
use serde_json::Value;
use std::path::{Path, PathBuf};
use sufficit::model::{LoadOptions, Model};
use sufficit::stimulus::Stimulus;

/// A shipped file of `models/`.
pub fn shipped(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("models").join(name)
}

/// Load a shipped model.
pub fn load(name: &str) -> Model {
    Model::load(&shipped(name), &LoadOptions::default()).unwrap()
}

/// Draw `protocol` with `params` at the model's size (100 Hz, 50 um pixels), run it, measure
/// (sufficit::demo::checks::run_protocol, which `demo-models --check` uses too).
pub fn run(m: &Model, protocol: &str, params: &[&str]) -> (Stimulus, Array2<f32>, Value) {
    sufficit::demo::checks::run_protocol(m, protocol, params).unwrap()
}
