//! Object motion versus background motion: a grating in a central disc and a grating in the
//! surround jitter either together ("global") or independently ("differential"). Object-motion
//! sensitive cells fire for differential but not global jitter (Olveczky, Baccus & Meister
//! 2003, Nature; from memory). At each step time a path holds still or steps left or right,
//! so in differential trials one region often moves while the other rests. Metric:
//! object-motion index (differential - global) / (differential + global).

use super::{Measured, Observed, Protocol};
use crate::response::measure::{index, json, mean};
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use serde_json::json;

/// The protocol.
pub struct DifferentialMotion;

/// A jitter path: every `interval` frames the offset holds with probability `hold`, else steps
/// by +-`step` (fair coin), in pixels. With `hold` 0 no hold is drawn, so the random stream (and
/// the path) is the one drawn before holds existed.
pub fn random_walk(rng: &mut ChaCha8Rng, frames: usize, interval: usize, step: f64, hold: f64) -> Vec<f64> {
    let mut x = 0.0;
    (0..frames)
        .map(|t| {
            if t > 0 && t % interval == 0 && !(hold > 0.0 && rng.random_bool(hold)) {
                x += if rng.random_bool(0.5) { step } else { -step };
            }
            x
        })
        .collect()
}

/// Square-wave grating value at column `x` for a horizontal offset `shift` (pixels).
fn grating(x: usize, period: f64, shift: f64, contrast: f32) -> f32 {
    let phase = 2.0 * std::f64::consts::PI * (x as f64 + 0.5 - shift) / period;
    if phase.cos() >= 0.0 {
        contrast
    } else {
        -contrast
    }
}

impl Protocol for DifferentialMotion {
    fn name(&self) -> &'static str {
        "differential-motion"
    }

    fn summary(&self) -> &'static str {
        "centre and surround gratings jittering together (global) or independently (differential): object motion sensitivity"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num("centre_um", "um", 350.0, 1.0, 1e5, "from memory: a centre patch a few hundred um across (Olveczky et al. 2003)", "diameter of the central disc"),
            Spec::num("period_um", "um", 200.0, 2.0, 1e5, "from memory: bars of about 100 um (Olveczky et al. 2003)", "grating period (one dark + one bright bar)"),
            Spec::num("step_um", "um", 50.0, 0.1, 1e5, "from memory: jitter steps of the order of a photoreceptor spacing to tens of um (Olveczky et al. 2003)", "jitter step"),
            Spec::num("hold", "", 0.5, 0.0, 0.99, "chosen on the planted sensor (docs/performance.md, session 17): without holds both regions always step at the same times and differential jitter differs from global only in the steps' directions", "probability that a jitter path holds still at a step time (each region's path on its own in differential trials)"),
            Spec::num("interval_ms", "ms", 30.0, 1.0, 10000.0, "from memory: a new step every ~15-30 ms (Olveczky et al. 2003)", "time between jitter steps"),
            Spec::num("trial_ms", "ms", 3000.0, 10.0, 600000.0, "common practice", "duration of one global or differential trial"),
            Spec::num("trials", "", 2.0, 1.0, 1000.0, "common practice", "pairs of (global, differential) trials"),
            Spec::num("contrast", "Michelson", 1.0, 0.0, 1.0, "common practice", "grating contrast"),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, seed: u64) -> Result<Drawn> {
        let (interval, trial) = (c.frames(p.num("interval_ms")), c.frames(p.num("trial_ms")));
        if interval == 0 || trial < 2 * interval {
            return Err(Error::Usage(
                "differential-motion: interval_ms must last a frame and trial_ms at least two intervals".into(),
            ));
        }
        let (period, step, contrast) = (c.px(p.num("period_um")), c.px(p.num("step_um")), p.num("contrast") as f32);
        let radius = c.px(p.num("centre_um")) / 2.0;
        let (cy, cx) = (c.height as f64 / 2.0, c.width as f64 / 2.0);
        let inside: Vec<Vec<bool>> = (0..c.height)
            .map(|y| {
                (0..c.width)
                    .map(|x| ((y as f64 + 0.5 - cy).powi(2) + (x as f64 + 0.5 - cx).powi(2)).sqrt() < radius)
                    .collect()
            })
            .collect();
        let hold = p.num("hold");
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let trials = p.num("trials") as usize;
        let mut movie = c.blank(2 * trials * trial)?;
        let (mut events, mut windows) = (Vec::new(), Vec::new());
        for k in 0..2 * trials {
            let differential = k % 2 == 1;
            let centre = random_walk(&mut rng, trial, interval, step, hold);
            let surround =
                if differential { random_walk(&mut rng, trial, interval, step, hold) } else { centre.clone() };
            let start = k * trial;
            let cond = if differential { "differential" } else { "global" };
            events.push(Event { name: format!("{cond}_start"), frame: start, condition: Some(cond.into()) });
            windows.push(Window { name: cond.into(), start, end: start + trial, condition: Some(cond.into()) });
            for t in 0..trial {
                let mut f = movie.index_axis_mut(ndarray::Axis(0), start + t);
                for ((y, x), v) in f.indexed_iter_mut() {
                    let shift = if inside[y][x] { centre[t] } else { surround[t] };
                    *v = grating(x, period, shift, contrast);
                }
            }
        }
        Ok(Drawn { movie, events, windows })
    }

    fn target_window(&self) -> &'static str {
        "differential"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let avg = |name: &str, cell: usize| {
            let ws: Vec<_> = obs.meta.windows_named(name).collect();
            ws.iter().map(|w| mean(&obs.rates, cell, w.start, w.end)).sum::<f64>() / ws.len() as f64
        };
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let (d, g) = (avg("differential", c), avg("global", c));
                json!({"cell": c, "differential_mean": json(d), "global_mean": json(g), "object_motion_index": json(index(d, g))})
            })
            .collect();
        Ok(Measured { summary: json!({ "cells": cells }), arrays: vec![] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn canvas() -> Canvas {
        Canvas { height: 20, width: 20, lags: 2, frame_rate_hz: 100.0, pixel_um: 25.0 }
    }

    /// True when one grating offset explains every pixel of the frame (centre and surround
    /// shifted alike), searching offsets on a quarter-pixel grid over one period.
    fn one_offset_fits(frame: ndarray::ArrayView2<f32>, period: f64) -> bool {
        (0..(period * 4.0) as usize)
            .map(|k| k as f64 * 0.25)
            .any(|s| frame.indexed_iter().all(|((_, x), &v)| grating(x, period, s, 1.0) == v))
    }

    #[test]
    fn global_jitter_moves_centre_and_surround_identically() {
        let args = ["trials=2".into(), "trial_ms=600".into(), "step_um=25".into()];
        let p = Params::parse("differential-motion", DifferentialMotion.specs(), &args).unwrap();
        let d = DifferentialMotion.draw(&p, &canvas(), 3).unwrap();
        let mut differential_seams = 0;
        for w in &d.windows {
            for t in w.start..w.end {
                let fits = one_offset_fits(d.movie.index_axis(ndarray::Axis(0), t), 8.0);
                if w.name == "global" {
                    assert!(fits, "global frame {t}: centre and surround are offset");
                } else if !fits {
                    differential_seams += 1;
                }
            }
        }
        assert!(differential_seams > 0, "differential trials must shift the centre against the surround");
    }

    #[test]
    fn differential_trajectories_are_uncorrelated_over_a_long_run() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let a = random_walk(&mut rng, 200_000, 1, 1.0, 0.0);
        let b = random_walk(&mut rng, 200_000, 1, 1.0, 0.0);
        let steps = |w: &[f64]| w.windows(2).map(|p| p[1] - p[0]).collect::<Vec<_>>();
        let (sa, sb) = (steps(&a), steps(&b));
        let r: f64 = sa.iter().zip(&sb).map(|(x, y)| x * y).sum::<f64>() / sa.len() as f64;
        // Independent fair +-1 steps: correlation ~ N(0, 1/sqrt(n)); 5 sigma is 0.011.
        assert!(r.abs() < 0.011, "step correlation {r}");
        assert!(sa.iter().all(|s| s.abs() == 1.0));
    }

    #[test]
    fn a_path_holds_still_at_the_hold_fraction_of_step_times() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let (n, interval) = (100_000, 3);
        let path = random_walk(&mut rng, n * interval, interval, 2.0, 0.5);
        let steps: Vec<f64> = (1..n).map(|k| path[k * interval] - path[k * interval - 1]).collect();
        let held = steps.iter().filter(|s| **s == 0.0).count() as f64 / steps.len() as f64;
        // Binomial(n, 0.5): s.d. of the fraction 0.0016; 5 s.d. is 0.008.
        assert!((held - 0.5).abs() < 0.008, "held at {held} of step times");
        assert!(steps.iter().all(|s| [0.0, 2.0, -2.0].contains(s)));
        // Between step times the path does not move.
        assert!((0..n * interval).filter(|t| t % interval != 0).all(|t| t == 0 || path[t] == path[t - 1]));
    }

    #[test]
    fn the_object_motion_index_on_synthetic_rates() {
        let p = Params::parse(
            "differential-motion",
            DifferentialMotion.specs(),
            &["trials=1".into(), "trial_ms=600".into()],
        )
        .unwrap();
        let d = DifferentialMotion.draw(&p, &canvas(), 3).unwrap();
        let s = crate::stimulus::Stimulus::assemble("differential-motion", &p, &canvas(), 3, d);
        let mut rates = ndarray::Array2::<f32>::from_elem((s.meta.frames, 1), 1.0);
        let w = s.meta.windows_named("differential").next().unwrap();
        rates.slice_mut(ndarray::s![w.start..w.end, ..]).fill(3.0);
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 2, rf_centres: &[(0.0, 0.0)] };
        let m = DifferentialMotion.measure(&obs).unwrap().summary;
        assert_eq!(m["cells"][0]["object_motion_index"], 0.5);
    }
}
