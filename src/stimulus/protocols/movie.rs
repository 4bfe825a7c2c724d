//! A user's own movie: a float32 `.npy` `[frames, H, W]` in contrast units, or a folder of PNG
//! frames (gray levels 0..255 mapped to contrast -1..1, sorted by file name). It must already
//! have the model's frame size. Metric: each cell's mean and peak rate.

use super::{Measured, Observed, Protocol};
use crate::response::measure::{json, mean, peak};
use crate::stimulus::store::read_movie;
use crate::stimulus::{Canvas, Drawn, Params, Spec, Window};
use crate::{Error, Result};
use ndarray::Array3;
use serde_json::json;
use std::path::Path;

/// The protocol.
pub struct UserMovie;

fn read_png_folder(dir: &Path) -> Result<Array3<f32>> {
    let mut files: Vec<_> = std::fs::read_dir(dir)
        .map_err(|e| Error::io("read the frame folder", dir, e))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x.eq_ignore_ascii_case("png")))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(Error::input(dir, "holds no .png frames"));
    }
    let mut frames = Vec::new();
    for f in &files {
        let img =
            image::open(f).map_err(|e| Error::input(f, format!("is not a readable image frame: {e}")))?.to_luma8();
        frames.push(img);
    }
    let (w, h) = frames[0].dimensions();
    if let Some((f, _)) = files.iter().zip(&frames).find(|(_, i)| i.dimensions() != (w, h)) {
        return Err(Error::input(f, format!("is not {w}x{h} pixels like the first frame")));
    }
    Ok(Array3::from_shape_fn((frames.len(), h as usize, w as usize), |(t, y, x)| {
        frames[t].get_pixel(x as u32, y as u32)[0] as f32 / 127.5 - 1.0
    }))
}

impl Protocol for UserMovie {
    fn name(&self) -> &'static str {
        "movie"
    }

    fn summary(&self) -> &'static str {
        "your own movie (.npy [frames, H, W] in contrast units, or a folder of PNG frames)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![Spec::text("path", "", &[], "required", "a .npy file or a folder of PNG frames")]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let path = p.text("path");
        if path.is_empty() {
            return Err(Error::Usage("movie: give the movie with path=FILE.npy or path=FOLDER_OF_PNGS".into()));
        }
        let path = Path::new(&path);
        let movie = if path.is_dir() { read_png_folder(path)? } else { read_movie(path)? };
        let (f, h, w) = movie.dim();
        if (h, w) != (c.height, c.width) {
            return Err(Error::input(
                path,
                format!(
                    "has frames of {h}x{w} pixels but the model takes {}x{}; resample the movie first",
                    c.height, c.width
                ),
            ));
        }
        if movie.iter().any(|v| v.abs() > 1.0) {
            return Err(Error::input(path, "has values outside the contrast range -1..1"));
        }
        Ok(Drawn {
            movie,
            events: vec![],
            windows: vec![Window { name: "movie".into(), start: 0, end: f, condition: None }],
        })
    }

    fn target_window(&self) -> &'static str {
        "movie"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let w = obs
            .meta
            .windows_named("movie")
            .next()
            .cloned()
            .ok_or_else(|| Error::Usage("movie: stimulus.json lacks its window".into()))?;
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let (pk, at) = peak(&obs.rates, c, w.start, w.end);
                json!({"cell": c, "mean": json(mean(&obs.rates, c, w.start, w.end)), "peak": json(pk), "peak_frame": at})
            })
            .collect();
        Ok(Measured { summary: json!({ "cells": cells }), arrays: vec![] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray_npy::WriteNpyExt;

    fn canvas() -> Canvas {
        Canvas { height: 4, width: 5, lags: 2, frame_rate_hz: 100.0, pixel_um: 50.0 }
    }

    fn draw_from(path: &Path) -> Result<Drawn> {
        let p = Params::parse("movie", UserMovie.specs(), &[format!("path={}", path.display())])?;
        UserMovie.draw(&p, &canvas(), 0)
    }

    #[test]
    fn npy_movies_are_read_and_checked() {
        let d = tempfile::tempdir().unwrap();
        let ok = d.path().join("ok.npy");
        Array3::<f32>::from_elem((7, 4, 5), 0.5).write_npy(std::fs::File::create(&ok).unwrap()).unwrap();
        assert_eq!(draw_from(&ok).unwrap().movie.dim(), (7, 4, 5));
        let wrong_size = d.path().join("size.npy");
        Array3::<f32>::zeros((7, 4, 6)).write_npy(std::fs::File::create(&wrong_size).unwrap()).unwrap();
        assert!(draw_from(&wrong_size).err().unwrap().to_string().contains("takes 4x5"));
        let f64_movie = d.path().join("f64.npy");
        Array3::<f64>::zeros((7, 4, 5)).write_npy(std::fs::File::create(&f64_movie).unwrap()).unwrap();
        assert!(draw_from(&f64_movie).err().unwrap().to_string().contains("float32"));
        let rank2 = d.path().join("rank2.npy");
        ndarray::Array2::<f32>::zeros((4, 5)).write_npy(std::fs::File::create(&rank2).unwrap()).unwrap();
        assert!(draw_from(&rank2).err().unwrap().to_string().contains("rank 2"));
    }

    #[test]
    fn png_folders_become_contrast_movies() {
        let d = tempfile::tempdir().unwrap();
        for (i, g) in [0u8, 255].iter().enumerate() {
            image::GrayImage::from_pixel(5, 4, image::Luma([*g])).save(d.path().join(format!("f{i}.png"))).unwrap();
        }
        let m = draw_from(d.path()).unwrap().movie;
        assert_eq!(m.dim(), (2, 4, 5));
        assert_eq!((m[[0, 0, 0]], m[[1, 3, 4]]), (-1.0, 1.0));
    }
}
