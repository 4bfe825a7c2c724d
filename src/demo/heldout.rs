//! The fresh held-out movies on which a fitted demo model is judged (issue 6: held-out
//! correlation >= 0.8 per cell), and a fitted model's correlation with the planted one on them.
//! Their seeds are used by no fit (fits draw theirs from seed * 1000 + small offsets, and the
//! reversing movies from seed + 2^32), so no fit has seen these frames.

use super::fit::FLICKER_SD;
use super::movies::{binary_noise, full_field_flicker, naturalistic, reversing_bars, scene_with_object};
use super::planted::{CELLS, LAGS, SIZE};
use crate::model::Model;
use crate::response::measure::correlation;
use crate::response::rates;
use crate::Result;
use ndarray::Array3;

/// Frames of each fresh movie.
pub const FRESH_FRAMES: usize = 2000;

/// One fresh movie of each kind a fit trains on, by name.
pub fn fresh_movies() -> Vec<(&'static str, Array3<f32>)> {
    let frames = FRESH_FRAMES;
    vec![
        ("binary noise", binary_noise(frames, SIZE, SIZE, 2, 1.0, 90_001)),
        ("flicker", full_field_flicker(frames, SIZE, SIZE, FLICKER_SD, 5, 90_002)),
        ("naturalistic", naturalistic(frames, SIZE, SIZE, 90_003)),
        ("reversing bars", reversing_bars(frames, SIZE, SIZE, 90_004)),
        ("scene with object", scene_with_object(frames, SIZE, SIZE, 90_005)),
    ]
}

/// A cell's correlation between the fitted and the planted rates on the fresh movies: pooled
/// over all of them, and on each (NaN where the planted cell is constant on a movie).
#[derive(Debug, Clone)]
pub struct FreshCorrelation {
    /// Pearson r over every frame of every movie (after the first full window).
    pub pooled: f64,
    /// Pearson r on each movie, by name.
    pub by_movie: Vec<(&'static str, f64)>,
}

impl FreshCorrelation {
    /// The per-movie values as one line, e.g. `binary noise 0.92, flicker NaN, ...`.
    pub fn by_movie_line(&self) -> String {
        let each: Vec<String> = self.by_movie.iter().map(|(name, r)| format!("{name} {r:.2}")).collect();
        each.join(", ")
    }
}

/// Each demo cell's [`FreshCorrelation`] of `fitted` against `planted`.
pub fn fresh_correlations(planted: &Model, fitted: &Model) -> Result<Vec<FreshCorrelation>> {
    let movies = fresh_movies();
    let pairs = movies
        .iter()
        .map(|(_, m)| Ok((rates(planted, m, &|_| {})?, rates(fitted, m, &|_| {})?)))
        .collect::<Result<Vec<_>>>()?;
    Ok((0..CELLS.len())
        .map(|cell| {
            let (mut a, mut b, mut by_movie) = (Vec::new(), Vec::new(), Vec::new());
            for ((name, m), (p, f)) in movies.iter().zip(&pairs) {
                let t0 = a.len();
                for t in LAGS - 1..m.shape()[0] {
                    a.push(p[[t, cell]] as f64);
                    b.push(f[[t, cell]] as f64);
                }
                by_movie.push((*name, correlation(&a[t0..], &b[t0..])));
            }
            FreshCorrelation { pooled: correlation(&a, &b), by_movie }
        })
        .collect())
}
