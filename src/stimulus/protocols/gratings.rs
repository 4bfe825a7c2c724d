//! Drifting sinusoidal gratings over spatial and temporal frequencies. Metric: the tuning table,
//! mean rate and first-harmonic (F1) amplitude at the drift frequency for every condition
//! (common practice in visual physiology).

use super::{Measured, Observed, Protocol};
use crate::response::measure::{json, mean};
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;
use std::f64::consts::PI;

/// The protocol.
pub struct Gratings;

impl Protocol for Gratings {
    fn name(&self) -> &'static str {
        "gratings"
    }

    fn summary(&self) -> &'static str {
        "drifting sinusoidal gratings over spatial and temporal frequencies (tuning)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::list(
                "spatial_cpmm",
                "cycles/mm",
                &[1.0, 2.0, 4.0],
                0.001,
                1000.0,
                "common practice",
                "spatial frequencies on the sensor surface",
            ),
            Spec::list(
                "temporal_hz",
                "Hz",
                &[1.0, 2.0, 4.0, 8.0],
                0.001,
                1000.0,
                "common practice",
                "drift (temporal) frequencies",
            ),
            Spec::num("duration_ms", "ms", 2000.0, 10.0, 600000.0, "common practice", "duration of each condition"),
            Spec::num("gap_ms", "ms", 500.0, 0.0, 600000.0, "common practice", "gray between conditions"),
            Spec::num("contrast", "Michelson", 1.0, 0.0, 1.0, "common practice", "grating contrast"),
            Spec::num(
                "direction_deg",
                "deg",
                0.0,
                0.0,
                360.0,
                "common practice",
                "drift direction (0 = rightward, 90 = upward)",
            ),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let (dur, gap) = (c.frames(p.num("duration_ms")), c.frames(p.num("gap_ms")));
        if dur == 0 {
            return Err(Error::Usage("gratings: duration_ms must last at least one frame".into()));
        }
        let (sfs, tfs) = (p.list("spatial_cpmm"), p.list("temporal_hz"));
        let nyquist = c.frame_rate_hz / 2.0;
        if let Some(tf) = tfs.iter().find(|&&f| f >= nyquist) {
            return Err(Error::Usage(format!(
                "gratings: {tf} Hz is at or above the Nyquist frequency of a {} Hz display",
                c.frame_rate_hz
            )));
        }
        let theta = p.num("direction_deg").to_radians();
        let contrast = p.num("contrast");
        let mut movie = c.blank(gap + sfs.len() * tfs.len() * (dur + gap))?;
        let (mut events, mut windows) = (Vec::new(), Vec::new());
        let mut t0 = gap;
        for &sf in &sfs {
            let k = 2.0 * PI * sf * c.pixel_um / 1000.0; // radians per pixel
            for &tf in &tfs {
                let cond = Some(format!("spatial_cpmm={sf} temporal_hz={tf}"));
                events.push(Event { name: "grating_start".into(), frame: t0, condition: cond.clone() });
                windows.push(Window { name: "grating".into(), start: t0, end: t0 + dur, condition: cond });
                for t in 0..dur {
                    let phase = 2.0 * PI * tf * t as f64 / c.frame_rate_hz;
                    for ((y, x), v) in movie.index_axis_mut(ndarray::Axis(0), t0 + t).indexed_iter_mut() {
                        let along = (x as f64 + 0.5) * theta.cos() - (y as f64 + 0.5) * theta.sin();
                        *v = (contrast * (k * along - phase).cos()) as f32;
                    }
                }
                t0 += dur + gap;
            }
        }
        Ok(Drawn { movie, events, windows })
    }

    fn target_window(&self) -> &'static str {
        "grating"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let m = obs.meta;
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let rows: Vec<_> = m
                    .windows_named("grating")
                    .map(|w| {
                        let cond = w.condition.clone().unwrap_or_default();
                        let tf: f64 = cond.rsplit('=').next().and_then(|s| s.parse().ok()).unwrap_or(0.0);
                        let n = (w.end - w.start) as f64;
                        let (mut re, mut im) = (0.0, 0.0);
                        for t in w.start..w.end {
                            let ph = 2.0 * PI * tf * (t - w.start) as f64 / m.frame_rate_hz;
                            re += obs.rates[[t, c]] as f64 * ph.cos();
                            im += obs.rates[[t, c]] as f64 * ph.sin();
                        }
                        json!({"condition": cond, "mean": json(mean(&obs.rates, c, w.start, w.end)), "f1_amplitude": json(2.0 * (re * re + im * im).sqrt() / n)})
                    })
                    .collect();
                json!({"cell": c, "conditions": rows})
            })
            .collect();
        Ok(Measured { summary: json!({ "cells": cells }), arrays: vec![] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stimulus::Stimulus;

    #[test]
    fn f1_amplitude_and_mean_of_a_synthetic_modulated_cell() {
        let c = Canvas { height: 4, width: 4, lags: 2, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p =
            Params::parse("gratings", Gratings.specs(), &["spatial_cpmm=2".into(), "temporal_hz=2,5".into()]).unwrap();
        let s = Stimulus::assemble("gratings", &p, &c, 0, Gratings.draw(&p, &c, 0).unwrap());
        // The movie is a drifting cosine: mean 0 and contrast 1 over a whole cycle.
        let w = s.meta.windows_named("grating").next().unwrap();
        let px: Vec<f32> = (w.start..w.start + 50).map(|t| s.movie[[t, 0, 0]]).collect();
        assert!(px.iter().sum::<f32>().abs() < 1e-3 && px.iter().cloned().fold(0.0, f32::max) > 0.99);
        // Rate = 2 + 1.5 cos(2 pi 2 t): F1 1.5 at 2 Hz, mean 2.
        let mut rates = ndarray::Array2::<f32>::zeros((s.meta.frames, 1));
        for t in 0..s.meta.frames {
            rates[[t, 0]] = 2.0 + 1.5 * (2.0 * PI * 2.0 * (t as f64 - w.start as f64) / 100.0).cos() as f32;
        }
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 2, rf_centres: &[(0.0, 0.0)] };
        let m = Gratings.measure(&obs).unwrap().summary;
        let row = &m["cells"][0]["conditions"][0];
        assert!((row["f1_amplitude"].as_f64().unwrap() - 1.5).abs() < 1e-3, "{row}");
        assert!((row["mean"].as_f64().unwrap() - 2.0).abs() < 1e-3);
    }

    #[test]
    fn drift_above_nyquist_is_refused() {
        let c = Canvas { height: 4, width: 4, lags: 2, frame_rate_hz: 60.0, pixel_um: 50.0 };
        let p = Params::parse("gratings", Gratings.specs(), &["temporal_hz=30".into()]).unwrap();
        assert!(Gratings.draw(&p, &c, 0).is_err());
    }
}
