//! Full-field contrast steps held for seconds: how much of the initial response survives.
//! Metrics per step: peak and sustained rate above baseline, the adaptation ratio
//! sustained / peak (common practice), and the ON/OFF polarity index at the largest step.

use super::{Measured, Observed, Protocol};
use crate::response::measure::{index, json, mean, peak};
use crate::stimulus::{Canvas, Drawn, Event, Params, Spec, Window};
use crate::{Error, Result};
use serde_json::json;

/// The protocol.
pub struct Steps;

impl Protocol for Steps {
    fn name(&self) -> &'static str {
        "steps"
    }

    fn summary(&self) -> &'static str {
        "full-field contrast steps up and down, held (adaptation, polarity)"
    }

    fn specs(&self) -> Vec<Spec> {
        vec![
            Spec::num("step_ms", "ms", 2000.0, 10.0, 600000.0, "common practice", "how long each step is held"),
            Spec::num("gap_ms", "ms", 2000.0, 10.0, 600000.0, "common practice", "gray between steps"),
            Spec::list(
                "contrasts",
                "Michelson",
                &[0.5, 1.0],
                0.001,
                1.0,
                "common practice",
                "step sizes, each stepped up (ON) and down (OFF)",
            ),
        ]
    }

    fn draw(&self, p: &Params, c: &Canvas, _seed: u64) -> Result<Drawn> {
        let (step, gap) = (c.frames(p.num("step_ms")), c.frames(p.num("gap_ms")));
        if step < 4 || gap == 0 {
            return Err(Error::Usage("steps: step_ms must last at least 4 frames and gap_ms one frame".into()));
        }
        let contrasts = p.list("contrasts");
        let mut movie = c.blank(gap + 2 * contrasts.len() * (step + gap))?;
        let (mut events, mut windows) =
            (Vec::new(), vec![Window { name: "baseline".into(), start: gap / 2, end: gap, condition: None }]);
        let mut t = gap;
        for &k in &contrasts {
            for (name, sign) in [("on", 1.0f32), ("off", -1.0f32)] {
                let cond = Some(format!("{name} contrast={k}"));
                movie.slice_mut(ndarray::s![t..t + step, .., ..]).fill(sign * k as f32);
                events.push(Event { name: format!("{name}_step"), frame: t, condition: cond.clone() });
                windows.push(Window { name: "transient".into(), start: t, end: t + step / 4, condition: cond.clone() });
                windows.push(Window {
                    name: "sustained".into(),
                    start: t + 3 * step / 4,
                    end: t + step,
                    condition: cond,
                });
                t += step + gap;
            }
        }
        Ok(Drawn { movie, events, windows })
    }

    fn target_window(&self) -> &'static str {
        "transient"
    }

    fn measure(&self, obs: &Observed) -> Result<Measured> {
        let m = obs.meta;
        let base_w = m.windows_named("baseline").next().cloned();
        let cells: Vec<_> = (0..obs.rates.ncols())
            .map(|c| {
                let base = base_w.as_ref().map_or(0.0, |b| mean(&obs.rates, c, b.start, b.end));
                let mut rows = Vec::new();
                let (mut on_top, mut off_top) = (0.0, 0.0);
                for tr in m.windows_named("transient") {
                    let Some(su) = m.windows.iter().find(|w| w.name == "sustained" && w.condition == tr.condition) else { continue };
                    let (pk, _) = peak(&obs.rates, c, tr.start, tr.end);
                    let sus = mean(&obs.rates, c, su.start, su.end);
                    let cond = tr.condition.clone().unwrap_or_default();
                    let r = (pk - base).max(0.0);
                    if cond.starts_with("on") { on_top = r } else { off_top = r }
                    rows.push(json!({"condition": cond, "peak_above_baseline": json(pk - base),
                        "sustained_above_baseline": json(sus - base), "adaptation_ratio": json((sus - base) / (pk - base))}));
                }
                json!({"cell": c, "baseline": json(base), "polarity_index_largest_step": json(index(on_top, off_top)), "steps": rows})
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
    fn adaptation_ratio_on_a_synthetic_adapting_cell() {
        let c = Canvas { height: 2, width: 2, lags: 3, frame_rate_hz: 100.0, pixel_um: 50.0 };
        let p = Params::parse("steps", Steps.specs(), &["contrasts=1".into()]).unwrap();
        let s = Stimulus::assemble("steps", &p, &c, 0, Steps.draw(&p, &c, 0).unwrap());
        // Baseline 1; after the ON step: peak 9, decaying to a plateau of 3 (ratio 2/8).
        let mut rates = ndarray::Array2::<f32>::from_elem((s.meta.frames, 1), 1.0);
        let on = s.meta.events_named("on_step").next().unwrap().frame;
        for t in on..on + 200 {
            rates[[t, 0]] = 3.0 + 6.0 * (-((t - on) as f32) / 10.0).exp();
        }
        let obs = Observed { meta: &s.meta, movie: &s.movie, rates: rates.view(), lags: 3, rf_centres: &[(0.0, 0.0)] };
        let m = Steps.measure(&obs).unwrap().summary;
        let row = &m["cells"][0]["steps"][0];
        assert!((row["adaptation_ratio"].as_f64().unwrap() - 0.25).abs() < 1e-4, "{row}");
        assert_eq!(m["cells"][0]["polarity_index_largest_step"], 1.0);
    }
}
