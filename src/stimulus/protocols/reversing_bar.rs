//! A bar that moves at constant speed and reverses direction: retinal ganglion cells fire a
//! synchronous burst after a motion reversal (Schwartz, Taylor, Fisher, Harris & Berry 2007,
//! Neuron; from memory). Metric: response after the reversal against smooth motion.

use super::{Measured, Observed, Protocol};
use crate::response::measure::{json, mean};
use crate::stimulus::canvas::draw_vertical_bar;
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;

/// The protocol.
pub struct ReversingBar;

/// Bar centre in pixels at protocol frame `t`: out from `x0`, back after the reversal frame.
pub fn bar_centre(x0: f64, v_px_per_frame: f64, reversal_frame: f64, t: f64) -> f64 {
    if t <= reversal_frame {
        x0 + v_px_per_frame * t
    } else {
        x0 + v_px_per_frame * (2.0 * reversal_frame - t)
    }
}

impl Protocol for ReversingBar {
    fn name(&self) -> &'static str {
        "reversing-bar"
    }

    fn summary(&self) -> &'static str {
        "a bar moving at constant speed that reverses direction (motion reversal response)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num("bar_width_um", "um", 100.0, 1.0, 1e5, "common practice", "bar width on the sensor surface"),
            Spec::num(
                "speed_um_s",
                "um/s",
                1000.0,
                1.0,
                1e6,
                "from memory: about 0.5-2 mm/s on the retina (Schwartz et al. 2007)",
                "bar speed",
            ),
            Spec::num(
                "contrast",
                "Michelson",
                1.0,
                -1.0,
                1.0,
                "common practice",
                "bar contrast; negative for a dark bar",
            ),
            Spec::num(
                "approach_ms",
                "ms",
                800.0,
                20.0,
                600000.0,
                "common practice",
                "motion before the reversal (the bar may start off screen)",
            ),
            Spec::num(
                "reversal_um",
                "um",
                -1.0,
                -1.0,
                1e6,
                "common practice: the frame centre (-1)",
                "bar centre at the reversal, from the left edge; -1 = frame centre",
            ),
            Spec::num("after_ms", "ms", 800.0, 10.0, 60000.0, "common practice", "motion after the reversal"),
            Spec::num(
                "window_ms",
                "ms",
                200.0,
                10.0,
                10000.0,
                "common practice",
                "length of the reversal and smooth-motion analysis windows",
            ),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let width = c.px(p.num("bar_width_um"));
        let v = c.px(p.num("speed_um_s")) / c.frame_rate_hz;
        let xr = if p.num("reversal_um") < 0.0 { c.width as f64 / 2.0 } else { c.px(p.num("reversal_um")) };
        let reversal = c.frames(p.num("approach_ms")) as f64;
        let x0 = xr - v * reversal;
        let win = c.frames(p.num("window_ms")).max(1);
        if (reversal as usize) < 2 * win {
            return Err(Error::Usage(format!(
                "reversing-bar: approach_ms ({reversal} frames) must be at least twice window_ms ({win} frames) so smooth motion can be measured before the reversal"
            )));
        }
        let total = reversal as usize + c.frames(p.num("after_ms")).max(win);
        let contrast = p.num("contrast") as f32;
        let mut movie = c.blank(total)?;
        for t in 0..total {
            let centre = bar_centre(x0, v, reversal, t as f64);
            draw_vertical_bar(movie.index_axis_mut(ndarray::Axis(0), t), centre, width, contrast);
        }
        let r = reversal as usize;
        Ok(Drawn {
            movie,
            events: vec![Event { name: "reversal".into(), frame: r, condition: None }],
            windows: vec![
                Window { name: "reversal".into(), start: r, end: r + win, condition: None },
                Window { name: "smooth".into(), start: r - 2 * win, end: r - win, condition: None },
            ],
        })
    }

    fn target_window(&self) -> &'static str {
        "reversal"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let w = |name: &str| obs.meta.windows_named(name).next().cloned();
        let (Some(rev), Some(smooth)) = (w("reversal"), w("smooth")) else {
            return Err(Error::Usage("reversing-bar: stimulus.json lacks its reversal/smooth windows".into()));
        };
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let (a, b) = (mean(&obs.rates, c, rev.start, rev.end), mean(&obs.rates, c, smooth.start, smooth.end));
                json!({"cell": c, "reversal_mean": json(a), "smooth_mean": json(b), "reversal_to_smooth_ratio": json(a / b)})
            })
            .collect();
        Ok(Measured { summary: json!({ "cells": cells }), arrays: vec![] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn draw(args: &[&str]) -> Result<Drawn> {
        let c = Canvas { height: 4, width: 40, lags: 3, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let args: Vec<String> = args.iter().map(|s| s.to_string()).collect();
        ReversingBar.draw(&Params::parse("reversing-bar", ReversingBar.specs(), &args)?, &c, 0)
    }

    #[test]
    fn the_bar_centre_follows_x0_plus_v_t_and_comes_back_after_the_reversal() {
        // 500 um/s at 50 um/px and 100 Hz = 0.1 px/frame; 1.8 s of approach to a reversal at
        // 20 px, so the bar starts at 2 px.
        let d = draw(&["speed_um_s=500", "approach_ms=1800", "reversal_um=1000", "bar_width_um=150"]).unwrap();
        let r = d.events[0].frame;
        assert_eq!(r, 180);
        for t in (0..d.movie.shape()[0]).step_by(7) {
            let row = d.movie.slice(ndarray::s![t, 0, ..]);
            let mass: f32 = row.sum();
            let centre = row.iter().enumerate().map(|(x, v)| (x as f32 + 0.5) * v).sum::<f32>() / mass;
            let expected = bar_centre(2.0, 0.1, r as f64, t as f64) as f32;
            assert!((centre - expected).abs() < 1.0, "frame {t}: centre {centre} vs {expected}");
            assert!((mass - 3.0).abs() < 1e-4, "width 3 px");
        }
    }

    #[test]
    fn an_approach_too_short_for_the_smooth_window_is_refused() {
        let e = draw(&["approach_ms=300", "window_ms=200"]).err().unwrap().to_string();
        assert!(e.contains("at least twice"), "{e}");
    }
}
