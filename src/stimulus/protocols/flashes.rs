//! Full-field ON and OFF flashes at several contrasts. Metrics: ON/OFF polarity index
//! (R_on - R_off) / (R_on + R_off) from peak responses above baseline at the highest contrast
//! (common practice), and the latency to peak for every contrast and polarity.

use super::{Measured, Observed, Protocol};
use crate::response::measure::{index, json, mean, peak};
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;

/// The protocol.
pub struct Flashes;

impl Protocol for Flashes {
    fn name(&self) -> &'static str {
        "flashes"
    }

    fn summary(&self) -> &'static str {
        "full-field ON and OFF flashes at several contrasts (polarity, latency)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num("flash_ms", "ms", 100.0, 1.0, 60000.0, "common practice", "flash duration"),
            Spec::num(
                "interval_ms",
                "ms",
                1000.0,
                2.0,
                600000.0,
                "common practice",
                "onset-to-onset interval (response window)",
            ),
            Spec::list(
                "contrasts",
                "Michelson",
                &[0.25, 0.5, 1.0],
                0.001,
                1.0,
                "common practice",
                "flash contrasts, each shown ON and OFF",
            ),
            Spec::num(
                "rest_ms",
                "ms",
                1000.0,
                1.0,
                600000.0,
                "common practice",
                "gray before the first flash (baseline)",
            ),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let (flash, interval, rest) =
            (c.frames(p.num("flash_ms")), c.frames(p.num("interval_ms")), c.frames(p.num("rest_ms")));
        if flash == 0 || flash >= interval || rest == 0 {
            return Err(Error::Usage(format!(
                "flashes: the flash ({flash} frames) must last at least a frame and be shorter than the interval ({interval} frames); rest_ms must last a frame"
            )));
        }
        let contrasts = p.list("contrasts");
        let mut movie = c.blank(rest + 2 * contrasts.len() * interval)?;
        let mut events = Vec::new();
        let mut windows = vec![Window { name: "baseline".into(), start: rest / 2, end: rest, condition: None }];
        let mut onset = rest;
        for &k in &contrasts {
            for (name, sign) in [("on", 1.0f32), ("off", -1.0f32)] {
                let cond = Some(format!("{name} contrast={k}"));
                movie.slice_mut(ndarray::s![onset..onset + flash, .., ..]).fill(sign * k as f32);
                events.push(Event { name: format!("{name}_flash"), frame: onset, condition: cond.clone() });
                windows.push(Window {
                    name: format!("{name}_response"),
                    start: onset,
                    end: onset + interval,
                    condition: cond,
                });
                onset += interval;
            }
        }
        Ok(Drawn { movie, events, windows })
    }

    fn target_window(&self) -> &'static str {
        "on_response"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let m = obs.meta;
        let base_w = m.windows_named("baseline").next().cloned();
        let rate = m.frame_rate_hz;
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let base = base_w.as_ref().map_or(0.0, |b| mean(&obs.rates, c, b.start, b.end));
                let mut rows = Vec::new();
                let (mut best_on, mut best_off, mut top) = (0.0, 0.0, f64::NEG_INFINITY);
                for w in m.windows.iter().filter(|w| w.name.ends_with("_response")) {
                    let (v, at) = peak(&obs.rates, c, w.start, w.end);
                    let cond = w.condition.clone().unwrap_or_default();
                    let contrast: f64 = cond.rsplit('=').next().and_then(|s| s.parse().ok()).unwrap_or(f64::NAN);
                    let on = w.name.starts_with("on");
                    rows.push(json!({"polarity": if on {"on"} else {"off"}, "contrast": contrast,
                        "peak_above_baseline": json(v - base), "latency_ms": (at - w.start) as f64 * 1000.0 / rate}));
                    if contrast >= top {
                        if contrast > top {
                            (best_on, best_off) = (0.0, 0.0);
                        }
                        top = contrast;
                        let r = (v - base).max(0.0);
                        if on { best_on = r } else { best_off = r }
                    }
                }
                json!({"cell": c, "baseline": json(base), "polarity_index": json(index(best_on, best_off)), "flashes": rows})
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
    fn polarity_and_latency_on_a_synthetic_on_cell() {
        let c = Canvas { height: 3, width: 3, lags: 4, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p = Params::parse("flashes", Flashes.specs(), &[]).unwrap();
        let d = Flashes.draw(&p, &c, 0).unwrap();
        let s = Stimulus::assemble("flashes", &p, &c, 0, d);
        // Mean luminance and contrast are as set.
        let e = s.meta.events_named("on_flash").last().unwrap();
        assert!(s.movie.index_axis(ndarray::Axis(0), e.frame).iter().all(|&v| v == 1.0));
        assert!(s.movie.index_axis(ndarray::Axis(0), e.frame - 1).iter().all(|&v| v == 0.0));
        // An ON cell: +4 above a baseline of 1, 30 ms after ON onsets; +1 after OFF onsets.
        let mut rates = ndarray::Array2::<f32>::from_elem((s.meta.frames, 1), 1.0);
        for e in s.meta.events_named("on_flash") {
            rates[[e.frame + 3, 0]] = 5.0;
        }
        for e in s.meta.events_named("off_flash") {
            rates[[e.frame + 3, 0]] = 2.0;
        }
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 4, rf_centres: &[(1.0, 1.0)] };
        let m = Flashes.measure(&obs).unwrap().summary;
        assert!((m["cells"][0]["polarity_index"].as_f64().unwrap() - 0.6).abs() < 1e-9);
        assert_eq!(m["cells"][0]["flashes"][0]["latency_ms"], 30.0);
    }

    #[test]
    fn a_flash_longer_than_its_interval_is_refused() {
        let c = Canvas { height: 3, width: 3, lags: 4, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p = Params::parse("flashes", Flashes.specs(), &["flash_ms=900".into(), "interval_ms=500".into()]).unwrap();
        assert!(Flashes.draw(&p, &c, 0).is_err());
    }
}
