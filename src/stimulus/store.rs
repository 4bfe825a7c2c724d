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
    parse_meta(&text, &meta_path)
}

/// A stimulus description from its JSON text (`path` names it in messages).
pub fn parse_meta(text: &str, path: &Path) -> Result<Meta> {
    serde_json::from_str(text).map_err(|e| Error::input(path, format!("is not a sufficit stimulus description: {e}")))
}

/// Read a stimulus folder: the movie must be f32 `[frames, H, W]` and agree with stimulus.json.
pub fn read_stimulus(dir: &Path) -> Result<Stimulus> {
    let meta = read_meta(dir)?;
    let movie = read_movie(&dir.join("movie.npy"))?;
    check_stimulus(&meta, movie.shape(), dir)?;
    Ok(Stimulus { movie, meta })
}

/// Check a description against its movie's shape: sizes agree, windows and events lie inside
/// the movie. `dir` names the folder in messages.
pub fn check_stimulus(meta: &Meta, movie_shape: &[usize], dir: &Path) -> Result<()> {
    let meta_path = dir.join("stimulus.json");
    if movie_shape != [meta.frames, meta.height, meta.width] {
        return Err(Error::input(
            dir.join("movie.npy"),
            format!(
                "has shape {:?} but stimulus.json describes [{}, {}, {}]",
                movie_shape, meta.frames, meta.height, meta.width
            ),
        ));
    }
    if !(meta.frame_rate_hz > 0.0 && meta.pixel_size_um > 0.0) || meta.history_frames > meta.frames {
        return Err(Error::input(
            &meta_path,
            format!(
                "frame_rate_hz {} and pixel_size_um {} must be positive and history_frames {} at most frames {}",
                meta.frame_rate_hz, meta.pixel_size_um, meta.history_frames, meta.frames
            ),
        ));
    }
    let outside = |f: usize| f > meta.frames;
    if let Some(w) = meta.windows.iter().find(|w| w.start >= w.end || outside(w.end)) {
        return Err(Error::input(
            &meta_path,
            format!(
                "window '{}' spans frames {}..{}, not inside the movie's {} frames",
                w.name, w.start, w.end, meta.frames
            ),
        ));
    }
    if let Some(e) = meta.events.iter().find(|e| e.frame >= meta.frames) {
        return Err(Error::input(
            &meta_path,
            format!("event '{}' at frame {} lies beyond the movie's {} frames", e.name, e.frame, meta.frames),
        ));
    }
    Ok(())
}

/// Read a `.npy` movie, explaining dtype or rank problems.
pub fn read_movie(path: &Path) -> Result<Array3<f32>> {
    let any = crate::output::read_npy(path)?;
    let shape = any.shape().to_vec();
    let movie = any.into_dimensionality::<ndarray::Ix3>().map_err(|_| {
        Error::input(path, format!("has rank {} (shape {shape:?}); a movie is [frames, height, width]", shape.len()))
    })?;
    if let Some(bad) = movie.iter().position(|v| !v.is_finite()) {
        return Err(Error::input(path, format!("holds NaN or infinite values (first at flat index {bad})")));
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
