//! Spatiotemporal white noise and reverse correlation: the spike-triggered average (STA) of each
//! cell, split into a spatial map and a temporal filter by its rank-one SVD, and the static
//! nonlinearity (binned generator signal against rate). Together these are the model cell's
//! linear-nonlinear (LN) approximation; with spherically symmetric noise the STA recovers the
//! linear filter of an LN cell (Chichilnisky 2001, Network: Comput. Neural Syst.).

use super::{Measured, Observed, Protocol};
use crate::response::measure::json;
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result, Tensor};
use ndarray::{s, Array1, Array2, Array3, ArrayView1, ArrayView3, Axis};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use serde_json::json;

/// The protocol.
pub struct WhiteNoise;

const BINS: usize = 10;

/// STA `[lags, H, W]` of one rate trace: sum_t r_t s_(t-lags+1..=t) / sum_t r_t over frames
/// `[start + lags - 1, end)` (each with a full window inside the noise).
pub fn spike_triggered_average(
    movie: ArrayView3<f32>,
    rates: ArrayView1<f32>,
    lags: usize,
    start: usize,
    end: usize,
) -> Array3<f32> {
    let (h, w) = (movie.shape()[1], movie.shape()[2]);
    let mut sta = Array3::<f64>::zeros((lags, h, w));
    let mut total = 0.0f64;
    for t in start + lags - 1..end {
        let r = rates[t] as f64;
        total += r;
        for l in 0..lags {
            let frame = movie.index_axis(Axis(0), t + 1 + l - lags);
            sta.index_axis_mut(Axis(0), l).zip_mut_with(&frame, |a, &b| *a += r * b as f64);
        }
    }
    sta.mapv(|v| if total != 0.0 { (v / total) as f32 } else { 0.0 })
}

/// Rank-one SVD of `m` by power iteration: (sigma, left vector, right vector, share of the
/// squared Frobenius norm the rank-one part holds).
pub fn rank_one(m: &Array2<f64>) -> (f64, Array1<f64>, Array1<f64>, f64) {
    let total: f64 = m.iter().map(|v| v * v).sum();
    let mut v = Array1::from_elem(m.ncols(), 1.0 / (m.ncols() as f64).sqrt());
    let mut u = m.dot(&v);
    for _ in 0..500 {
        u = m.dot(&v);
        let nu = u.dot(&u).sqrt().max(1e-300);
        u /= nu;
        let next = m.t().dot(&u);
        let nv = next.dot(&next).sqrt().max(1e-300);
        let change = (&next / nv - &v).mapv(f64::abs).sum();
        v = next / nv;
        if change < 1e-12 {
            break;
        }
    }
    let sigma = u.dot(&m.dot(&v));
    let share = if total > 0.0 { sigma * sigma / total } else { 0.0 };
    (sigma, u, v, share)
}

impl Protocol for WhiteNoise {
    fn name(&self) -> &'static str {
        "white-noise"
    }

    fn summary(&self) -> &'static str {
        "binary or Gaussian checkerboard noise: spike-triggered average and static nonlinearity (LN model)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::text(
                "kind",
                "binary",
                &["binary", "gaussian"],
                "common practice",
                "binary: each checker is +-contrast; gaussian: standard deviation contrast/3, clipped to +-1",
            ),
            Spec::num(
                "checker_um",
                "um",
                100.0,
                0.01,
                1e5,
                "common practice: checkers near the size of a receptive-field centre or smaller",
                "checker size",
            ),
            Spec::num("duration_ms", "ms", 30000.0, 10.0, 3.6e6, "common practice", "length of the noise"),
            Spec::num("hold_frames", "frames", 1.0, 1.0, 1000.0, "common practice", "frames each pattern is held"),
            Spec::num("contrast", "Michelson", 1.0, 0.0, 1.0, "common practice", "noise contrast"),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, seed: u64) -> Result<Drawn> {
        let frames = c.frames(p.num("duration_ms"));
        if frames <= c.lags {
            return Err(Error::Usage(format!("white-noise: {frames} frames are too few for a {}-lag model", c.lags)));
        }
        if frames * c.height * c.width > 500_000_000 {
            return Err(Error::Usage("white-noise: the movie would exceed 2 GB; shorten duration_ms".into()));
        }
        let cs = c.px(p.num("checker_um"));
        let (ny, nx) = ((c.height as f64 / cs).ceil() as usize, (c.width as f64 / cs).ceil() as usize);
        let (gaussian, contrast, hold) =
            (p.text("kind") == "gaussian", p.num("contrast") as f32, p.num("hold_frames") as usize);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let normal = rand_distr::Normal::new(0.0f32, contrast / 3.0).map_err(|e| Error::Usage(e.to_string()))?;
        let mut movie = c.blank(frames)?;
        let mut pattern = Array2::<f32>::zeros((ny, nx));
        for t in 0..frames {
            if t % hold == 0 {
                pattern.mapv_inplace(|_| {
                    if gaussian {
                        rng.sample(normal).clamp(-1.0, 1.0)
                    } else if rng.random_bool(0.5) {
                        contrast
                    } else {
                        -contrast
                    }
                });
            }
            for ((y, x), v) in movie.index_axis_mut(Axis(0), t).indexed_iter_mut() {
                *v = pattern[[((y as f64) / cs) as usize, ((x as f64) / cs) as usize]];
            }
        }
        Ok(Drawn {
            movie,
            events: vec![Event { name: "noise_start".into(), frame: 0, condition: None }],
            windows: vec![Window { name: "noise".into(), start: 0, end: frames, condition: None }],
        })
    }

    fn target_window(&self) -> &'static str {
        "noise"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let w = obs
            .meta
            .windows_named("noise")
            .next()
            .cloned()
            .ok_or_else(|| Error::Usage("white-noise: stimulus.json lacks its noise window".into()))?;
        let (lags, h, wd) = (obs.lags, obs.meta.height, obs.meta.width);
        let cells = obs.rates.ncols();
        let mut stas = Tensor::zeros(ndarray::IxDyn(&[cells, lags, h, wd]));
        let mut rows = Vec::new();
        for c in 0..cells {
            let sta = spike_triggered_average(obs.movie.view(), obs.rates.column(c), lags, w.start, w.end);
            stas.index_axis_mut(Axis(0), c).assign(&sta.view().into_dyn());
            let m =
                sta.mapv(f64::from).into_shape_with_order((lags, h * wd)).map_err(|e| Error::Usage(e.to_string()))?;
            let (sigma, temporal, spatial, share) = rank_one(&m);
            // Static nonlinearity: project each window on the unit-norm STA, bin by quantile.
            let norm = m.iter().map(|v| v * v).sum::<f64>().sqrt().max(1e-300);
            let mut pairs: Vec<(f64, f64)> = (w.start + lags - 1..w.end)
                .map(|t| {
                    let win = obs.movie.slice(s![t + 1 - lags..=t, .., ..]);
                    let g = win.iter().zip(sta.iter()).map(|(a, b)| *a as f64 * *b as f64).sum::<f64>() / norm;
                    (g, obs.rates[[t, c]] as f64)
                })
                .collect();
            pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
            let per = pairs.len().div_ceil(BINS).max(1);
            let curve: Vec<_> = pairs
                .chunks(per)
                .map(|b| {
                    let n = b.len() as f64;
                    json!({"generator": json(b.iter().map(|p| p.0).sum::<f64>() / n), "rate": json(b.iter().map(|p| p.1).sum::<f64>() / n)})
                })
                .collect();
            let peak_lag =
                temporal.iter().enumerate().max_by(|a, b| a.1.abs().total_cmp(&b.1.abs())).map_or(0, |(i, _)| i);
            rows.push(json!({
                "cell": c,
                "temporal_filter": temporal.iter().map(|v| json(v * sigma.signum())).collect::<Vec<_>>(),
                "temporal_peak_lag_frames": lags - 1 - peak_lag,
                "rank_one_energy_share": json(share),
                "spatial_peak_px": spatial.iter().enumerate().max_by(|a, b| a.1.abs().total_cmp(&b.1.abs())).map(|(i, _)| [i / wd, i % wd]),
                "nonlinearity": curve,
            }));
        }
        Ok(Measured {
            summary: json!({ "lags_order": "oldest first", "cells": rows }),
            arrays: vec![("sta".into(), stas)],
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::response::measure::correlation;
    use crate::stimulus::Stimulus;

    #[test]
    fn the_sta_of_an_ln_cell_recovers_its_separable_filter() {
        // Chichilnisky (2001): for spherically symmetric (here binary white) noise, the STA of an
        // LN neuron is proportional to its linear filter. The filter is separable: a Gaussian
        // spatial centre times a biphasic temporal kernel (oldest lag first).
        let (lags, h, w) = (8, 10, 10);
        let temporal: Vec<f64> = (0..lags)
            .map(|l| {
                let age = (lags - 1 - l) as f64;
                (-age / 1.5).exp() - 0.6 * (-age / 3.0).exp()
            })
            .collect();
        let spatial = Array2::from_shape_fn((h, w), |(y, x)| {
            (-(((y as f64 - 4.5).powi(2) + (x as f64 - 5.0).powi(2)) / 4.0)).exp()
        });
        let filter = Array3::from_shape_fn((lags, h, w), |(l, y, x)| temporal[l] * spatial[[y, x]]);
        let c = Canvas { height: h, width: w, lags, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p =
            Params::parse("white-noise", WhiteNoise.specs(), &["checker_um=50".into(), "duration_ms=400000".into()])
                .unwrap();
        let s = Stimulus::assemble("white-noise", &p, &c, 0, WhiteNoise.draw(&p, &c, 9).unwrap());
        // Mean luminance and contrast are as set: mean ~0, every value +-1.
        let noise = s.movie.slice(s![lags.., .., ..]);
        assert!(noise.iter().all(|&v| v.abs() == 1.0));
        assert!((noise.iter().map(|&v| v as f64).sum::<f64>() / noise.len() as f64).abs() < 0.01);
        // LN cell: rate = exp(0.5 * filter . window).
        let mut rates = Array1::<f32>::zeros(s.meta.frames);
        for t in lags - 1..s.meta.frames {
            let win = s.movie.slice(s![t + 1 - lags..=t, .., ..]);
            let g: f64 = win.iter().zip(filter.iter()).map(|(a, b)| *a as f64 * b).sum();
            rates[t] = (0.5 * g).exp() as f32;
        }
        let win = s.meta.windows_named("noise").next().unwrap();
        let sta = spike_triggered_average(s.movie.view(), rates.view(), lags, win.start, win.end);
        let a: Vec<f64> = sta.iter().map(|&v| v as f64).collect();
        let b: Vec<f64> = filter.iter().copied().collect();
        let r = correlation(&a, &b);
        assert!(r >= 0.95, "STA vs true filter correlation {r}");
        let (_, u, v, share) = rank_one(&sta.mapv(f64::from).into_shape_with_order((lags, h * w)).unwrap());
        assert!(correlation(u.as_slice().unwrap(), &temporal).abs() >= 0.95);
        assert!(correlation(v.as_slice().unwrap(), spatial.as_slice().unwrap()).abs() >= 0.95);
        assert!(share > 0.9, "a separable filter is nearly rank one: {share}");
    }

    #[test]
    fn rank_one_of_an_outer_product_is_exact() {
        let u = Array1::from(vec![1.0, -2.0, 0.5]);
        let v = Array1::from(vec![3.0, 1.0]);
        let m = Array2::from_shape_fn((3, 2), |(i, j)| u[i] * v[j]);
        let (sigma, _, _, share) = rank_one(&m);
        assert!((sigma.abs() - (u.dot(&u) * v.dot(&v)).sqrt()).abs() < 1e-9);
        assert!((share - 1.0).abs() < 1e-12);
    }
}
