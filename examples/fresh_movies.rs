//! The fresh held-out movies of issue 6 (`sufficit::demo::heldout`): write them as `.npy` files
//! `[frames, 50, 50]` for analysis outside sufficit (`scripts/reversal_cell_statistics.py`).
//! A fitted model's correlation with the planted sensor on them, per cell, is printed by
//! `sufficit demo-models --check MODEL`.
//!
//!     cargo run --release --example fresh_movies -- OUT_DIR

use sufficit::demo::heldout::fresh_movies;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let out = std::path::PathBuf::from(args.next().ok_or("usage: fresh_movies OUT_DIR")?);
    std::fs::create_dir_all(&out)?;
    for (name, movie) in fresh_movies() {
        let path = out.join(format!("{}.npy", name.replace(' ', "-")));
        ndarray_npy::write_npy(&path, &movie)?;
        println!("wrote {}", path.display());
    }
    Ok(())
}
