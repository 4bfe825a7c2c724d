//! Write training-like moving-bar movies (250 frames each, as one reversing movie of a fit) as
//! `.npy` files `[frames, 50, 50]`: eight each of steady parallel bars, steady lone bars,
//! short-segment parallel bars and sweeps over the centre, for `scripts/reversal_events.py`.
//!
//!     cargo run --release --example bar_movies -- OUT_DIR

use sufficit::demo::movies::{reversing_bars, steady_bars, steady_lone_bars, sweeping_bars};
use sufficit::demo::planted::SIZE;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let out = std::path::PathBuf::from(std::env::args().nth(1).ok_or("usage: bar_movies OUT_DIR")?);
    std::fs::create_dir_all(&out)?;
    // Seeds no fit uses (fits draw theirs from the run's seed shifted by 2^32 and more).
    for k in 0..32u64 {
        let seed = 777_000 + k;
        let (kind, movie) = match k % 4 {
            0 => ("steady", steady_bars(250, SIZE, SIZE, seed)),
            1 => ("steady-lone", steady_lone_bars(250, SIZE, SIZE, seed)),
            2 => ("short", reversing_bars(250, SIZE, SIZE, seed)),
            _ => ("sweeps", sweeping_bars(250, SIZE, SIZE, seed, 0.0)),
        };
        let path = out.join(format!("{kind}-{k}.npy"));
        ndarray_npy::write_npy(&path, &movie)?;
        println!("wrote {}", path.display());
    }
    Ok(())
}
