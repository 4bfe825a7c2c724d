//! Flash train with one flash omitted, swept over several periods. The omitted stimulus
//! response (a response timed to the missing flash, whose latency after the last flash grows
//! with the period) was described in vertebrate retina (Schwartz, Harris, Shrom & Berry 2007,
//! Nat. Neurosci.; from memory).

use super::{Measured, Observed, Protocol};
use crate::response::measure::{json, mean, peak, slope};
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;

/// The protocol.
pub struct OmittedFlash;

impl Protocol for OmittedFlash {
    fn name(&self) -> &'static str {
        "omitted-flash"
    }

    fn summary(&self) -> &'static str {
        "full-field flash trains with one flash left out, over several periods (omitted stimulus response)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num(
                "flash_ms",
                "ms",
                20.0,
                1.0,
                1000.0,
                "from memory: brief flashes of tens of ms (Schwartz et al. 2007)",
                "duration of each flash",
            ),
            Spec::list(
                "period_ms",
                "ms",
                &[60.0, 80.0, 100.0, 120.0],
                2.0,
                2000.0,
                "from memory: flash rates of about 6-20 Hz (Schwartz et al. 2007)",
                "flash periods, one train per period",
            ),
            Spec::num(
                "flashes",
                "",
                12.0,
                2.0,
                500.0,
                "common practice",
                "slots in each train, the omitted one included",
            ),
            Spec::num(
                "omitted",
                "",
                12.0,
                2.0,
                500.0,
                "common practice: the train ends with the omission",
                "1-based slot of the omitted flash",
            ),
            Spec::num(
                "contrast",
                "Michelson",
                1.0,
                -1.0,
                1.0,
                "common practice",
                "flash contrast; negative for dark flashes",
            ),
            Spec::num("rest_ms", "ms", 1000.0, 0.0, 60000.0, "common practice", "gray before each train (baseline)"),
            Spec::num(
                "after_ms",
                "ms",
                600.0,
                10.0,
                60000.0,
                "common practice",
                "gray after the omitted flash (response window)",
            ),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let (flash, rest, after) =
            (c.frames(p.num("flash_ms")), c.frames(p.num("rest_ms")), c.frames(p.num("after_ms")));
        let (slots, omitted) = (p.num("flashes") as usize, p.num("omitted") as usize);
        let contrast = p.num("contrast") as f32;
        if omitted > slots {
            return Err(Error::Usage(format!(
                "omitted-flash: omitted={omitted} lies beyond the train of {slots} flashes; choose 2..={slots}"
            )));
        }
        if flash == 0 || contrast == 0.0 || after == 0 {
            return Err(Error::Usage(
                "omitted-flash: flash_ms and after_ms must last at least one frame and contrast must not be 0".into(),
            ));
        }
        let mut events = Vec::new();
        let mut windows = Vec::new();
        let mut frames: Vec<(usize, usize)> = Vec::new(); // (start, len) of each flash
        let mut t = 0;
        for &period_ms in &p.list("period_ms") {
            let period = c.frames(period_ms);
            if flash >= period {
                return Err(Error::Usage(format!(
                    "omitted-flash: a {} ms flash does not fit a {period_ms} ms period at {} Hz ({flash} vs {period} frames)",
                    p.num("flash_ms"),
                    c.frame_rate_hz
                )));
            }
            let cond = Some(format!("period_ms={period_ms}"));
            windows.push(Window {
                name: "baseline".into(),
                start: t + rest / 2,
                end: t + rest,
                condition: cond.clone(),
            });
            t += rest;
            for k in 0..slots {
                let onset = t + k * period;
                if k + 1 == omitted {
                    events.push(Event { name: "omitted_flash".into(), frame: onset, condition: cond.clone() });
                    events.push(Event { name: "last_flash".into(), frame: onset - period, condition: cond.clone() });
                    let end = if omitted < slots { onset + period } else { onset + after };
                    windows.push(Window { name: "after_omission".into(), start: onset, end, condition: cond.clone() });
                } else {
                    events.push(Event { name: "flash".into(), frame: onset, condition: cond.clone() });
                    frames.push((onset, flash));
                }
            }
            t += (slots - 1) * period + after.max(period);
        }
        let mut movie = c.blank(t)?;
        for (start, len) in frames {
            movie.slice_mut(ndarray::s![start..start + len, .., ..]).fill(contrast);
        }
        Ok(Drawn { movie, events, windows })
    }

    fn target_window(&self) -> &'static str {
        "after_omission"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let m = obs.meta;
        let rate = m.frame_rate_hz;
        let mut cells = Vec::new();
        for cell in 0..obs.rates.ncols() {
            let mut rows = Vec::new();
            let (mut periods, mut lat_last, mut lat_expected) = (Vec::new(), Vec::new(), Vec::new());
            for w in m.windows_named("after_omission") {
                let cond = w.condition.clone();
                let find =
                    |name: &str| m.events.iter().find(|e| e.name == name && e.condition == cond).map(|e| e.frame);
                let (Some(expected), Some(last)) = (find("omitted_flash"), find("last_flash")) else {
                    continue;
                };
                let base = m
                    .windows
                    .iter()
                    .find(|b| b.name == "baseline" && b.condition == cond)
                    .map_or(f64::NAN, |b| mean(&obs.rates, cell, b.start, b.end));
                let (value, at) = peak(&obs.rates, cell, w.start, w.end);
                let period_ms = (expected - last) as f64 * 1000.0 / rate;
                let from_expected = (at as f64 - expected as f64) * 1000.0 / rate;
                let from_last = (at as f64 - last as f64) * 1000.0 / rate;
                periods.push(period_ms);
                lat_last.push(from_last);
                lat_expected.push(from_expected);
                rows.push(json!({
                    "condition": cond, "period_ms": period_ms, "baseline": json(base), "peak": json(value),
                    "peak_above_baseline": json(value - base), "latency_from_expected_ms": from_expected,
                    "latency_from_last_flash_ms": from_last,
                }));
            }
            cells.push(json!({
                "cell": cell,
                "periods": rows,
                // An omitted stimulus response keeps its latency from the expected flash and so
                // moves with the period: slope ~1 from the last flash, ~0 from the expected one.
                "latency_from_last_flash_vs_period_slope": json(slope(&periods, &lat_last)),
                "latency_from_expected_vs_period_slope": json(slope(&periods, &lat_expected)),
            }));
        }
        Ok(Measured { summary: json!({ "cells": cells }), arrays: vec![] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stimulus::{Params, Stimulus};

    fn canvas() -> Canvas {
        Canvas { height: 6, width: 8, lags: 5, frame_rate_hz: 100.0, pixel_um: 50.0 }
    }

    fn draw(args: &[&str]) -> Result<Stimulus> {
        let args: Vec<String> = args.iter().map(|s| s.to_string()).collect();
        let p = Params::parse("omitted-flash", OmittedFlash.specs(), &args)?;
        let d = OmittedFlash.draw(&p, &canvas(), 0)?;
        Ok(Stimulus::assemble("omitted-flash", &p, &canvas(), 0, d))
    }

    #[test]
    fn the_omitted_flash_is_absent_at_exactly_its_frame_and_all_others_present() {
        let s = draw(&["period_ms=80,100", "flashes=6", "omitted=4", "flash_ms=20"]).unwrap();
        let flashes: Vec<_> = s.meta.events_named("flash").collect();
        assert_eq!(flashes.len(), 2 * 5);
        for e in &flashes {
            for f in e.frame..e.frame + 2 {
                assert!(s.movie.index_axis(ndarray::Axis(0), f).iter().all(|&v| v == 1.0), "frame {f} lit");
            }
            assert!(s.movie.index_axis(ndarray::Axis(0), e.frame + 2).iter().all(|&v| v == 0.0));
        }
        let omitted: Vec<_> = s.meta.events_named("omitted_flash").collect();
        assert_eq!(omitted.len(), 2);
        for e in omitted {
            let period = if e.condition.as_deref() == Some("period_ms=80") { 8 } else { 10 };
            for f in e.frame - period + 2..e.frame + period {
                assert!(s.movie.index_axis(ndarray::Axis(0), f).iter().all(|&v| v == 0.0), "frame {f} dark");
            }
        }
        // Frames before the first rest are the gray history.
        assert!(s.movie.slice(ndarray::s![..5, .., ..]).iter().all(|&v| v == 0.0));
    }

    #[test]
    fn contradictory_parameters_are_refused() {
        let e = draw(&["flashes=6", "omitted=9"]).err().unwrap().to_string();
        assert!(e.contains("beyond the train"), "{e}");
        let e = draw(&["flash_ms=100", "period_ms=80"]).err().unwrap().to_string();
        assert!(e.contains("does not fit"), "{e}");
        let e = draw(&["contrast=3"]).err().unwrap().to_string();
        assert!(e.contains("between -1 and 1"), "{e}");
        assert!(draw(&["speed=3"]).is_err());
    }

    #[test]
    fn latencies_and_slopes_on_a_synthetic_omitted_stimulus_response() {
        // A cell that fires 50 ms after each expected (missing) flash: latency from the expected
        // flash is constant, latency from the last flash grows one-for-one with the period.
        let s = draw(&["period_ms=60,80,100,120"]).unwrap();
        let mut rates = ndarray::Array2::<f32>::from_elem((s.meta.frames, 1), 1.0);
        for e in s.meta.events_named("omitted_flash") {
            rates[[e.frame + 5, 0]] = 9.0;
        }
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 5, rf_centres: &[(0.0, 0.0)] };
        let m = OmittedFlash.measure(&obs).unwrap().summary;
        let cell = &m["cells"][0];
        for row in cell["periods"].as_array().unwrap() {
            assert_eq!(row["latency_from_expected_ms"], 50.0);
            assert_eq!(row["peak_above_baseline"], 8.0);
        }
        assert!((cell["latency_from_last_flash_vs_period_slope"].as_f64().unwrap() - 1.0).abs() < 1e-9);
        assert!(cell["latency_from_expected_vs_period_slope"].as_f64().unwrap().abs() < 1e-9);
    }
}
