//! A bar sweeping across the screen at constant speed. Retinal responses to moving bars peak
//! before the bar's centre reaches the receptive-field centre, compensating for transmission
//! delay (Berry, Brivanlou, Jordan & Meister 1999, Nature; from memory). Metric: the spatial
//! lead of the response peak, lead = (t_crossing - t_peak) * speed, positive when the response
//! leads the bar.

use super::reversing_bar::bar_centre;
use super::{Measured, Observed, Protocol};
use crate::response::measure::{json, peak};
use crate::stimulus::canvas::draw_vertical_bar;
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;

/// The protocol.
pub struct MovingBar;

impl Protocol for MovingBar {
    fn name(&self) -> &'static str {
        "moving-bar"
    }

    fn summary(&self) -> &'static str {
        "a bar crossing the screen at constant speed (anticipation: lead of the response over the bar)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num(
                "bar_width_um",
                "um",
                100.0,
                1.0,
                1e5,
                "from memory: bars of about 100-150 um (Berry et al. 1999)",
                "bar width",
            ),
            Spec::num(
                "speed_um_s",
                "um/s",
                500.0,
                1.0,
                1e6,
                "from memory: about 0.1-2 mm/s on the retina (Berry et al. 1999)",
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
            Spec::text("direction", "rightward", &["rightward", "leftward"], "common practice", "direction of motion"),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let width = c.px(p.num("bar_width_um"));
        let v = c.px(p.num("speed_um_s")) / c.frame_rate_hz;
        let leftward = p.text("direction") == "leftward";
        let travel = c.width as f64 + width;
        let total = (travel / v).ceil() as usize + 1;
        if total > 2_000_000 {
            return Err(Error::Usage(format!("moving-bar: the sweep would take {total} frames; raise speed_um_s")));
        }
        let contrast = p.num("contrast") as f32;
        let mut movie = c.blank(total)?;
        for t in 0..total {
            let x = bar_centre(-width / 2.0, v, f64::INFINITY, t as f64);
            let x = if leftward { c.width as f64 - x } else { x };
            draw_vertical_bar(movie.index_axis_mut(ndarray::Axis(0), t), x, width, contrast);
        }
        Ok(Drawn {
            movie,
            events: vec![Event { name: "bar_enters".into(), frame: 0, condition: None }],
            windows: vec![Window { name: "sweep".into(), start: 0, end: total, condition: None }],
        })
    }

    fn target_window(&self) -> &'static str {
        "sweep"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let m = obs.meta;
        let (Some(speed), Some(width_um)) = (m.number("speed_um_s"), m.number("bar_width_um")) else {
            return Err(Error::Usage("moving-bar: stimulus.json lacks speed_um_s or bar_width_um".into()));
        };
        let leftward = m.parameters.get("direction").and_then(|d| d["value"].as_str()) == Some("leftward");
        let start = m.events_named("bar_enters").next().map_or(m.history_frames, |e| e.frame);
        let sweep = m.windows_named("sweep").next().cloned();
        let v_px = speed / m.pixel_size_um / m.frame_rate_hz;
        let width = width_um / m.pixel_size_um;
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let (_, col) = obs.rf_centres[c];
                let along = if leftward { m.width as f64 - col } else { col };
                // Frame at which the bar centre (entering at -width/2) reaches the RF centre.
                let crossing = start as f64 + (along + width / 2.0) / v_px;
                let (s, e) = sweep.as_ref().map_or((start, m.frames), |w| (w.start, w.end));
                let (_, at) = peak(&obs.rates, c, s, e);
                let lead_ms = (crossing - at as f64) * 1000.0 / m.frame_rate_hz;
                json!({"cell": c, "rf_centre_column_px": col, "crossing_frame": crossing, "peak_frame": at,
                    "lead_ms": json(lead_ms), "lead_um": json(lead_ms / 1000.0 * speed)})
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
    fn lead_of_a_synthetic_anticipating_cell() {
        let c = Canvas { height: 2, width: 30, lags: 3, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p = Params::parse("moving-bar", MovingBar.specs(), &[]).unwrap();
        let s = Stimulus::assemble("moving-bar", &p, &c, 0, MovingBar.draw(&p, &c, 0).unwrap());
        // 500 um/s = 0.1 px/frame; the bar (2 px wide) enters at frame 3 (history) with its
        // centre at -1 px, so it reaches column 10 at frame 3 + 110 = 113. A cell peaking at
        // frame 103 leads by 10 frames = 100 ms = 50 um.
        let mut rates = ndarray::Array2::<f32>::zeros((s.meta.frames, 1));
        rates[[103, 0]] = 1.0;
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 3, rf_centres: &[(1.0, 10.0)] };
        let m = MovingBar.measure(&obs).unwrap().summary;
        assert!((m["cells"][0]["lead_um"].as_f64().unwrap() - 50.0).abs() < 1e-6, "{m}");
        // Geometry: at frame 113 the bar covers columns 9 and 10 fully.
        assert_eq!((s.movie[[113, 0, 9]], s.movie[[113, 0, 10]], s.movie[[113, 0, 11]]), (1.0, 1.0, 0.0));
    }
}
