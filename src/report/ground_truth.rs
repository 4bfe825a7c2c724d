//! The "Recovered vs planted" section: for a model whose mechanisms are known (the demo's), each
//! cell's planted pathways next to the unit sufficit ranked first, read from the
//! `ground_truth.json` the demo writes (see `demo::recovered`).

use super::doc::Block;
use super::gather::Folder;
use super::sections::{figure, num};
use crate::figure::{msg, Figure};
use crate::palette::SERIES;
use crate::Result;
use plotters::coord::Shift;
use plotters::prelude::*;
use serde_json::Value;

/// Planted and recovered temporal filters of every cell, one panel each.
struct FilterPairs {
    /// (title, planted filter, recovered filter), filters oldest lag first.
    panels: Vec<(String, Vec<f64>, Vec<f64>)>,
    frame_ms: f64,
}

/// Scale `v` to unit peak magnitude (filters are compared by shape; their gains differ).
fn unit_peak(v: &[f64]) -> Vec<f64> {
    let peak = v.iter().fold(1e-30f64, |m, x| m.max(x.abs()));
    v.iter().map(|x| x / peak).collect()
}

impl Figure for FilterPairs {
    fn size(&self) -> (u32, u32) {
        (360 * self.panels.len().max(1) as u32, 300)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> std::result::Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let areas = root.split_evenly((1, self.panels.len().max(1)));
        for ((title, planted, recovered), area) in self.panels.iter().zip(&areas) {
            let lags = planted.len().max(2);
            let x0 = -((lags - 1) as f64) * self.frame_ms;
            let mut c = ChartBuilder::on(area)
                .caption(title, ("sans-serif", 13))
                .margin(8)
                .x_label_area_size(30)
                .y_label_area_size(40)
                .build_cartesian_2d(x0..0f64, -1.1f64..1.1)
                .map_err(msg)?;
            c.configure_mesh().x_desc("time before response (ms)").y_desc("filter / peak").draw().map_err(msg)?;
            // The planted filter drawn wider, so a perfect recovery still shows both.
            for (i, (v, label)) in [(planted, "planted"), (recovered, "recovered")].into_iter().enumerate() {
                let width = if i == 0 { 5 } else { 2 };
                let n = v.len();
                let pts: Vec<(f64, f64)> = unit_peak(v)
                    .into_iter()
                    .enumerate()
                    .map(|(l, y)| (-((n - 1 - l) as f64) * self.frame_ms, y))
                    .collect();
                let colour = SERIES[i];
                c.draw_series(LineSeries::new(pts, colour.stroke_width(width)))
                    .map_err(msg)?
                    .label(label)
                    .legend(move |(x, y)| PathElement::new([(x, y), (x + 16, y)], colour.stroke_width(width)));
            }
            c.configure_series_labels()
                .position(SeriesLabelPosition::LowerLeft)
                .border_style(BLACK)
                .background_style(WHITE)
                .draw()
                .map_err(msg)?;
        }
        Ok(())
    }
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().map(|a| a.iter().map(|x| x.as_f64().unwrap_or(f64::NAN)).collect()).unwrap_or_default()
}

/// The section's blocks for one `ground_truth.json` folder.
pub fn section(id: &str, folder: &Folder) -> Result<Vec<Block>> {
    let doc = &folder.doc;
    let cells = doc["cells"].as_array().cloned().unwrap_or_default();
    let mut out = vec![
        Block::Heading { level: 2, id: id.into(), text: "Recovered vs planted".into() },
        Block::Para(format!(
            "This model was built from a circuit whose mechanisms are known ({}). For each cell, the first-layer \
             unit ranked first by conductance in the cell's subcircuit is compared with the cell's planted \
             pathways: the correlation of their temporal filters (rank-one parts of the kernels, signed so the \
             spatial peak is positive) and whether the unit's sign on the cell is the planted one. A correlation \
             of at least {} with the right sign counts as recovered. A fitted model may spread one pathway \
             over several units: \"all kept units\" is the correlation of the planted filter with the best \
             least-squares combination of the temporal filters of all first-layer units in the subcircuit; a \
             filter unrelated to them would reach about sqrt(k / (lags - 1)) for k units ({}).",
            doc["planted"].as_str().unwrap_or("the planted model"),
            num(&doc["threshold"]),
            cells
                .iter()
                .map(|c| format!(
                    "cell {}: {} units, {}",
                    num(&c["cell"]),
                    num(&c["kept_first_layer_units"]),
                    num(&c["span_chance"])
                ))
                .collect::<Vec<_>>()
                .join("; ")
        )),
    ];
    let rows = cells
        .iter()
        .map(|c| {
            let planted = c["planted"]
                .as_array()
                .map(|p| {
                    p.iter()
                        .map(|q| {
                            format!(
                                "{} ({}, r = {}; all kept units {})",
                                q["name"].as_str().unwrap_or("?"),
                                q["sign"].as_str().unwrap_or("?"),
                                num(&q["filter_correlation"]),
                                num(&q["span_correlation"])
                            )
                        })
                        .collect::<Vec<_>>()
                        .join("; ")
                })
                .unwrap_or_default();
            let matched = c["planted"]
                .as_array()
                .and_then(|p| p.iter().find(|q| q["channel"] == c["matched_channel"]))
                .and_then(|q| q["name"].as_str())
                .unwrap_or("?")
                .to_string();
            vec![
                num(&c["cell"]),
                c["protocol"].as_str().unwrap_or("?").to_string(),
                planted,
                format!(
                    "{}:{} ({})",
                    c["unit_layer"].as_str().unwrap_or("?"),
                    num(&c["unit_channel"]),
                    c["unit_sign"].as_str().unwrap_or("?")
                ),
                matched,
                num(&c["filter_correlation"]),
                if c["sign_matches"].as_bool() == Some(true) { "yes" } else { "no" }.to_string(),
                if c["recovered"].as_bool() == Some(true) { "yes" } else { "no" }.to_string(),
            ]
        })
        .collect();
    out.push(Block::Table {
        head: [
            "cell",
            "protocol",
            "planted pathways (sign, filter r with the unit; with all kept units)",
            "unit ranked first",
            "best match",
            "filter r",
            "sign right",
            "recovered",
        ]
        .map(String::from)
        .to_vec(),
        rows,
    });
    let panels = cells
        .iter()
        .map(|c| {
            (
                format!("cell {}: unit {} vs planted", num(&c["cell"]), num(&c["unit_channel"])),
                floats(&c["matched_temporal"]),
                floats(&c["unit_temporal"]),
            )
        })
        .collect::<Vec<_>>();
    if !panels.is_empty() {
        let f = FilterPairs { panels, frame_ms: doc["frame_ms"].as_f64().unwrap_or(f64::NAN) };
        out.push(figure(
            &format!("{id}-filters"),
            "Temporal filter of each cell's top-ranked first-layer unit (orange, thin) over the best-matching \
             planted pathway's (blue, wide), each scaled to unit peak.",
            true,
            &f,
        )?);
    }
    Ok(out)
}
