//! The demo: models whose mechanisms are planted by construction (`planted`), and the files
//! shipped in `models/`.

pub mod fit;
pub mod movies;
pub mod planted;
pub mod recovered;
pub mod train;

use crate::output::OutputDir;
use crate::Result;
use std::path::Path;

/// File name of the planted model in `models/`.
pub const PLANTED_FILE: &str = "synthetic-sensor-planted.onnx";

/// Write the planted model into `dir`.
pub fn write_planted(dir: &Path) -> Result<()> {
    let out = OutputDir::create(dir)?;
    out.write_bytes(PLANTED_FILE, &crate::model::builder::to_bytes(&planted::synthetic_sensor()))
}
