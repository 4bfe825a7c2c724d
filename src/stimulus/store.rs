//! Writing a stimulus folder atomically and reading it back with checks.

use super::{preview, Meta, Stimulus};
use crate::output::OutputDir;
use crate::{Error, Result};
use ndarray::Array3;
use std::path::Path;

/// Write `movie.npy`, `stimulus.json` and `preview.png` into `dir`.
pub fn write_stimulus(stim: &Stimulus, dir: &Path) -> Result<()> {
    let out = OutputDir::create(dir)?;
    out.write_npy("movie.npy", &stim.movie)?;
    out.write_json("stimulus.json", &stim.meta)?;
    out.write_png("preview.png", &preview::strip(stim))?;
    Ok(())
}

/// Read a stimulus folder: the movie must be f32 `[frames, H, W]` and agree with stimulus.json.
pub fn read_stimulus(dir: &Path) -> Result<Stimulus> {
    let meta_path = dir.join("stimulus.json");
    let text =
        std::fs::read_to_string(&meta_path).map_err(|e| Error::io("read the stimulus description", &meta_path, e))?;
    let meta: Meta = serde_json::from_str(&text)
        .map_err(|e| Error::Usage(format!("'{}' is not a sufficit stimulus description: {e}", meta_path.display())))?;
    let movie = read_movie(&dir.join("movie.npy"))?;
    if movie.shape() != [meta.frames, meta.height, meta.width] {
        return Err(Error::Usage(format!(
            "'{}' has shape {:?} but stimulus.json describes [{}, {}, {}]",
            dir.join("movie.npy").display(),
            movie.shape(),
            meta.frames,
            meta.height,
            meta.width
        )));
    }
    Ok(Stimulus { movie, meta })
}

/// Read a `.npy` movie, explaining dtype or rank problems.
pub fn read_movie(path: &Path) -> Result<Array3<f32>> {
    let file = std::fs::File::open(path).map_err(|e| Error::io("read the movie", path, e))?;
    let any: ndarray::ArrayD<f32> = ndarray_npy::ReadNpyExt::read_npy(file).map_err(|e| {
        Error::Usage(format!(
            "'{}' must be a float32 .npy array [frames, height, width] (numpy: np.save(path, movie.astype(np.float32))): {e}",
            path.display()
        ))
    })?;
    let shape = any.shape().to_vec();
    let movie = any.into_dimensionality::<ndarray::Ix3>().map_err(|_| {
        Error::Usage(format!(
            "'{}' has rank {} (shape {shape:?}); a movie is [frames, height, width]",
            path.display(),
            shape.len()
        ))
    })?;
    if let Some(bad) = movie.iter().position(|v| !v.is_finite()) {
        return Err(Error::Usage(format!(
            "'{}' holds NaN or infinite values (first at flat index {bad})",
            path.display()
        )));
    }
    Ok(movie)
}
