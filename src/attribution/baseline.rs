//! Baselines (counterfactual stimuli) for path attribution: gray, a time-shuffled copy of the
//! movie, a spatially blurred copy, random noise, or a movie from a file.

use crate::stimulus::read_movie;
use crate::{Error, Result};
use ndarray::{Array3, Axis};
use rand::rngs::ChaCha8Rng;
use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng};
use std::path::PathBuf;

/// A baseline choice.
#[derive(Debug, Clone, PartialEq)]
pub enum Baseline {
    /// Mean luminance everywhere (contrast 0): the default.
    Gray,
    /// The movie's frames in a random order (keeps pixel statistics, destroys timing).
    Shuffled,
    /// The movie blurred by a Gaussian of this many pixels (keeps timing, removes fine space).
    Blurred(f64),
    /// The average over this many binary noise movies of the movie's contrast.
    Noise(usize),
    /// A movie from a `.npy` file of the same shape.
    File(PathBuf),
}

impl Baseline {
    /// Parse `gray`, `shuffled`, `blurred[:SIGMA_PX]`, `noise:K` or `file:PATH.npy`.
    pub fn parse(s: &str) -> Result<Baseline> {
        let (kind, arg) = s.split_once(':').map_or((s, None), |(k, a)| (k, Some(a)));
        let bad = || {
            Error::Usage(format!("baseline '{s}': use gray, shuffled, blurred[:SIGMA_PX], noise:K or file:PATH.npy"))
        };
        Ok(match (kind, arg) {
            ("gray", None) => Baseline::Gray,
            ("shuffled", None) => Baseline::Shuffled,
            ("blurred", None) => Baseline::Blurred(2.0),
            ("blurred", Some(a)) => Baseline::Blurred(a.parse().ok().filter(|v: &f64| *v > 0.0).ok_or_else(bad)?),
            ("noise", Some(a)) => Baseline::Noise(a.parse().ok().filter(|&k: &usize| k > 0).ok_or_else(bad)?),
            ("file", Some(a)) => Baseline::File(PathBuf::from(a)),
            _ => return Err(bad()),
        })
    }

    /// A short label for reports.
    pub fn label(&self) -> String {
        match self {
            Baseline::Gray => "gray".into(),
            Baseline::Shuffled => "shuffled".into(),
            Baseline::Blurred(s) => format!("blurred:{s}"),
            Baseline::Noise(k) => format!("noise:{k}"),
            Baseline::File(p) => format!("file:{}", p.display()),
        }
    }

    /// The baseline movies for `movie` (one, or K for noise).
    pub fn movies(&self, movie: &Array3<f32>, seed: u64) -> Result<Vec<Array3<f32>>> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        Ok(match self {
            Baseline::Gray => vec![Array3::zeros(movie.dim())],
            Baseline::Shuffled => {
                let mut order: Vec<usize> = (0..movie.shape()[0]).collect();
                order.shuffle(&mut rng);
                vec![movie.select(Axis(0), &order)]
            }
            Baseline::Blurred(sigma) => vec![blur(movie, *sigma)],
            Baseline::Noise(k) => {
                let c = movie.iter().map(|v| v.abs()).fold(0f32, f32::max).max(1e-3);
                (0..*k).map(|_| movie.mapv(|_| if rng.random_bool(0.5) { c } else { -c })).collect()
            }
            Baseline::File(p) => {
                let m = read_movie(p)?;
                if m.dim() != movie.dim() {
                    return Err(Error::Usage(format!(
                        "baseline movie '{}' has shape {:?}; the stimulus movie is {:?}",
                        p.display(),
                        m.shape(),
                        movie.shape()
                    )));
                }
                vec![m]
            }
        })
    }
}

/// Separable Gaussian blur of every frame, edges clamped.
fn blur(movie: &Array3<f32>, sigma: f64) -> Array3<f32> {
    let r = (3.0 * sigma).ceil() as isize;
    let k: Vec<f32> = (-r..=r).map(|i| (-(i * i) as f64 / (2.0 * sigma * sigma)).exp() as f32).collect();
    let norm: f32 = k.iter().sum();
    let (f, h, w) = movie.dim();
    let pass = |src: &Array3<f32>, along_x: bool| {
        Array3::from_shape_fn((f, h, w), |(t, y, x)| {
            k.iter()
                .enumerate()
                .map(|(j, kv)| {
                    let o = j as isize - r;
                    let (yy, xx) = if along_x {
                        (y as isize, (x as isize + o).clamp(0, w as isize - 1))
                    } else {
                        ((y as isize + o).clamp(0, h as isize - 1), x as isize)
                    };
                    kv * src[[t, yy as usize, xx as usize]]
                })
                .sum::<f32>()
                / norm
        })
    };
    pass(&pass(movie, true), false)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn baselines_keep_the_movie_shape_and_their_promises() {
        let movie = Array3::from_shape_fn((6, 5, 5), |(t, y, x)| if (t + y + x) % 2 == 0 { 0.5 } else { -0.5 });
        let shuffled = &Baseline::Shuffled.movies(&movie, 1).unwrap()[0];
        let mut a: Vec<f32> = movie.iter().copied().collect();
        let mut b: Vec<f32> = shuffled.iter().copied().collect();
        a.sort_by(f32::total_cmp);
        b.sort_by(f32::total_cmp);
        assert_eq!(a, b, "shuffling keeps the values");
        let blurred = &Baseline::Blurred(1.0).movies(&movie, 1).unwrap()[0];
        assert!(blurred.iter().all(|v| v.abs() < 0.5), "blur lowers checkerboard contrast");
        assert_eq!(Baseline::Noise(3).movies(&movie, 1).unwrap().len(), 3);
        assert!(Baseline::parse("noise:0").is_err() && Baseline::parse("purple").is_err());
    }
}
