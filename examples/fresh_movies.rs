//! The fresh held-out movies of issue 6 (`sufficit::demo::heldout`): write them as `.npy` files
//! `[frames, 50, 50]` for analysis outside sufficit (`scripts/reversal_cell_statistics.py`),
//! and, given a fitted model, print its correlation with the planted sensor on them per cell
//! (what `tests/demo_fitted.rs` checks).
//!
//!     cargo run --release --example fresh_movies -- OUT_DIR [FITTED_MODEL]

use std::path::Path;
use sufficit::demo::heldout::{fresh_correlations, fresh_movies};
use sufficit::model::{LoadOptions, Model};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let out = std::path::PathBuf::from(args.next().ok_or("usage: fresh_movies OUT_DIR [FITTED_MODEL]")?);
    std::fs::create_dir_all(&out)?;
    for (name, movie) in fresh_movies() {
        let path = out.join(format!("{}.npy", name.replace(' ', "-")));
        ndarray_npy::write_npy(&path, &movie)?;
        println!("wrote {}", path.display());
    }
    if let Some(fitted) = args.next() {
        let planted = Model::from_proto(
            sufficit::demo::planted::synthetic_sensor(),
            Path::new("planted.onnx"),
            &LoadOptions::default(),
        )?;
        let fitted = Model::load(Path::new(&fitted), &LoadOptions::default())?;
        for (cell, c) in fresh_correlations(&planted, &fitted)?.iter().enumerate() {
            println!("cell {cell}: pooled r {:.3} ({})", c.pooled, c.by_movie_line());
        }
    }
    Ok(())
}
