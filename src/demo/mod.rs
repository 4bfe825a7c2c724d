//! The demo: models whose mechanisms are planted by construction (`planted`), and the files
//! shipped in `models/`.

pub mod checks;
pub mod fit;
pub mod heldout;
pub mod movies;
pub mod planted;
pub mod recipe;
pub mod recovered;
pub mod roughness;
pub mod temporal_basis;
pub mod train;

use crate::output::OutputDir;
use crate::Result;
use std::path::Path;

/// File name of the planted model in `models/`.
pub const PLANTED_FILE: &str = "synthetic-sensor-planted.onnx";

/// The reversing-bar parameters of the demo's reversal cell: a bar 150 um wide at 750 um/s,
/// reversing 250 um right of the frame centre. Chosen on the planted sensor alone, as the
/// middle of its plateau (docs/performance.md, session 15): the smooth-motion window (400 to
/// 200 ms before the reversal) sits at rest, after the burst of the bar entering the pool, and
/// the reversal / smooth ratio (12.0) moves by at most 14 % when the bar's contrast drops to
/// 0.9, its width changes by 25 um, its reversal point by 50 um or its speed by 15 %. With the
/// earlier 100 um bar at 1 mm/s reversing 300 um right of the centre, the same changes moved
/// the planted ratio from 10.0 to anywhere between 1.8 and 10.9.
pub const REVERSAL_BAR: [&str; 3] = ["reversal_um=1500", "speed_um_s=750", "bar_width_um=150"];

/// The planted sensor as a loaded model (built in memory, named after its shipped file): the
/// teacher of every fit and the reference of every check.
pub fn planted_model() -> Result<crate::model::Model> {
    crate::model::Model::from_proto(planted::synthetic_sensor(), Path::new(PLANTED_FILE), &Default::default())
}

/// Write the planted model into `dir`.
pub fn write_planted(dir: &Path) -> Result<()> {
    let out = OutputDir::create(dir)?;
    out.write_bytes(PLANTED_FILE, &crate::model::builder::to_bytes(&planted::synthetic_sensor()))
}
