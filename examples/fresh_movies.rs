//! Write the fresh movies of `tests/demo_fitted.rs` (2,000 frames each, seeds no fit uses) as
//! `.npy` files `[frames, 50, 50]`, for analysis outside sufficit
//! (`scripts/reversal_cell_statistics.py`).
//!
//!     cargo run --release --example fresh_movies -- OUT_DIR

use sufficit::demo::movies::{naturalistic, reversing_bars};
use sufficit::demo::planted::SIZE;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let out = std::path::PathBuf::from(std::env::args().nth(1).ok_or("usage: fresh_movies OUT_DIR")?);
    std::fs::create_dir_all(&out)?;
    // The seeds of tests/demo_fitted.rs.
    for (name, movie) in [
        ("naturalistic", naturalistic(2000, SIZE, SIZE, 90_003)),
        ("reversing-bars", reversing_bars(2000, SIZE, SIZE, 90_004)),
    ] {
        let path = out.join(format!("{name}.npy"));
        ndarray_npy::write_npy(&path, &movie)?;
        println!("wrote {}", path.display());
    }
    Ok(())
}
