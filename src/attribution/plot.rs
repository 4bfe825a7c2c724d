//! Attribution plots: the unit x time conductance heatmap and the ranked bar chart.

use crate::figure::{msg, Figure};
use crate::palette::diverging;
use ndarray::Array2;
use plotters::coord::Shift;
use plotters::prelude::*;

/// Units (rows, labelled) x frames `[first, last)` heatmap; vermilion drives the target up, blue down.
pub struct Heatmap<'a> {
    /// (unit label, conductance per frame).
    pub rows: &'a [(String, Vec<f32>)],
    /// First frame shown.
    pub first: usize,
    /// One past the last frame shown.
    pub last: usize,
    /// Frame duration (ms).
    pub frame_ms: f64,
}

impl Figure for Heatmap<'_> {
    fn size(&self) -> (u32, u32) {
        (900, 80 + 22 * self.rows.len() as u32)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let Heatmap { rows, first, last, frame_ms } = *self;
        let scale = rows.iter().flat_map(|(_, v)| v[first..last].iter()).fold(0f64, |m, v| m.max(v.abs() as f64));
        let mut chart = ChartBuilder::on(root)
            .caption("conductance per unit and time (vermilion: drives the target up, blue: down)", ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(30)
            .y_label_area_size(120)
            .build_cartesian_2d(first as f64 * frame_ms..last as f64 * frame_ms, 0f64..rows.len() as f64)
            .map_err(msg)?;
        let labels: Vec<String> = rows.iter().map(|(n, _)| n.clone()).collect();
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc("time (ms)")
            .y_desc("unit (layer:channel)")
            .y_labels(rows.len())
            .y_label_formatter(&|y| labels.get(rows.len().saturating_sub(1 + *y as usize)).cloned().unwrap_or_default())
            .draw()
            .map_err(msg)?;
        for (r, (_, v)) in rows.iter().enumerate() {
            let y = (rows.len() - 1 - r) as f64;
            chart
                .draw_series((first..last).map(|t| {
                    let x0 = t as f64 * frame_ms;
                    Rectangle::new([(x0, y), (x0 + frame_ms, y + 1.0)], diverging(v[t] as f64, scale).filled())
                }))
                .map_err(msg)?;
        }
        Ok(())
    }
}

/// Units ranked by |conductance|, signed bars.
pub struct Ranking<'a> {
    /// (unit label, conductance), ranked.
    pub units: &'a [(String, f64)],
}

impl Figure for Ranking<'_> {
    fn size(&self) -> (u32, u32) {
        (700, 80 + 20 * self.units.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let units = self.units;
        let n = units.len().max(1);
        let m = units.iter().fold(1e-12f64, |a, (_, v)| a.max(v.abs())) * 1.1;
        let labels: Vec<String> = units.iter().map(|(l, _)| l.clone()).collect();
        let mut chart = ChartBuilder::on(root)
            .caption("units ranked by |conductance|", ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(30)
            .y_label_area_size(120)
            .build_cartesian_2d(-m..m, 0f64..n as f64)
            .map_err(msg)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc("conductance (target units)")
            .y_desc("unit (layer:channel)")
            .y_labels(n)
            .y_label_formatter(&|y| labels.get(n.saturating_sub(1 + *y as usize)).cloned().unwrap_or_default())
            .draw()
            .map_err(msg)?;
        chart
            .draw_series(units.iter().enumerate().map(|(i, (_, v))| {
                let y = (n - 1 - i) as f64;
                Rectangle::new([(0.0, y + 0.15), (*v, y + 0.85)], diverging(*v, m).filled())
            }))
            .map_err(msg)?;
        Ok(())
    }
}

/// Rows for the heatmap from per-layer `[channels, frames]` arrays.
pub fn rows_of(layers: &[(String, &Array2<f32>)]) -> Vec<(String, Vec<f32>)> {
    layers
        .iter()
        .flat_map(|(name, a)| a.outer_iter().enumerate().map(move |(c, r)| (format!("{name}:{c}"), r.to_vec())))
        .collect()
}
