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

/// Read only a stimulus folder's description (stimulus.json), not its movie.
pub fn read_meta(dir: &Path) -> Result<Meta> {
    let meta_path = dir.join("stimulus.json");
    let text =
        std::fs::read_to_string(&meta_path).map_err(|e| Error::io("read the stimulus description", &meta_path, e))?;
    serde_json::from_str(&text)
        .map_err(|e| Error::Usage(format!("'{}' is not a sufficit stimulus description: {e}", meta_path.display())))
}

/// Read a stimulus folder: the movie must be f32 `[frames, H, W]` and agree with stimulus.json.
pub fn read_stimulus(dir: &Path) -> Result<Stimulus> {
    let meta_path = dir.join("stimulus.json");
    let meta = read_meta(dir)?;
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
    let outside = |f: usize| f > meta.frames;
    if let Some(w) = meta.windows.iter().find(|w| w.start >= w.end || outside(w.end)) {
        return Err(Error::Usage(format!(
            "'{}': window '{}' spans frames {}..{}, not inside the movie's {} frames",
            meta_path.display(),
            w.name,
            w.start,
            w.end,
            meta.frames
        )));
    }
    if let Some(e) = meta.events.iter().find(|e| e.frame >= meta.frames) {
        return Err(Error::Usage(format!(
            "'{}': event '{}' at frame {} lies beyond the movie's {} frames",
            meta_path.display(),
            e.name,
            e.frame,
            meta.frames
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stimulus::{protocols, Canvas, Params};

    #[test]
    fn windows_and_events_outside_the_movie_are_refused() {
        let c = Canvas { height: 3, width: 3, lags: 2, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p = protocols::find("flashes").unwrap();
        let params = Params::parse("flashes", p.specs(), &[]).unwrap();
        let mut stim = Stimulus::assemble("flashes", &params, &c, 0, p.draw(&params, &c, 0).unwrap());
        let d = tempfile::tempdir().unwrap();
        write_stimulus(&stim, d.path()).unwrap();
        assert!(read_stimulus(d.path()).is_ok());
        let rewrite =
            |m: &Meta| std::fs::write(d.path().join("stimulus.json"), serde_json::to_string(m).unwrap()).unwrap();
        stim.meta.windows[1].end = stim.meta.frames + 5;
        rewrite(&stim.meta);
        let e = read_stimulus(d.path()).err().unwrap().to_string();
        assert!(e.contains("not inside the movie"), "{e}");
        stim.meta.windows[1].end = stim.meta.frames;
        stim.meta.events[0].frame = stim.meta.frames;
        rewrite(&stim.meta);
        let e = read_stimulus(d.path()).err().unwrap().to_string();
        assert!(e.contains("beyond the movie"), "{e}");
    }
}
