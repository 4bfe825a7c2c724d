//! `responses.svg`: each cell's rate over time with the stimulus events marked.

use crate::figure::{msg, Figure};
use crate::palette::SERIES;
use crate::stimulus::Meta;
use ndarray::Array2;
use plotters::coord::Shift;
use plotters::prelude::*;

const MAX_CELLS: usize = 8;

/// The rates `[frames, cells]` (first 8 cells) with the stimulus events marked.
pub struct Responses<'a> {
    /// Rates `[frames, cells]`.
    pub rates: &'a Array2<f32>,
    /// The stimulus's metadata (events, frame rate).
    pub meta: &'a Meta,
}

impl Figure for Responses<'_> {
    fn size(&self) -> (u32, u32) {
        (900, 420)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let Responses { rates, meta } = *self;
        let frames = rates.nrows();
        let ms = |t: usize| t as f64 * 1000.0 / meta.frame_rate_hz;
        let top = rates.iter().cloned().fold(0f32, f32::max).max(1e-6) as f64 * 1.05;
        let low = rates.iter().cloned().fold(0f32, f32::min).min(0.0) as f64;
        let mut chart = ChartBuilder::on(root)
            .caption(format!("{}: model rates", meta.protocol), ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(0f64..ms(frames.max(1)), low..top)
            .map_err(msg)?;
        chart.configure_mesh().x_desc("time (ms)").y_desc("rate (model units)").disable_mesh().draw().map_err(msg)?;
        for e in &meta.events {
            let colour = if e.name.contains("omitted") || e.name == "reversal" { RED } else { RGBColor(200, 200, 200) };
            let x = ms(e.frame);
            chart.draw_series(LineSeries::new([(x, low), (x, top)], colour.stroke_width(1))).map_err(msg)?;
        }
        for c in 0..rates.ncols().min(MAX_CELLS) {
            let colour = SERIES[c % SERIES.len()];
            chart
                .draw_series(LineSeries::new(
                    (0..frames).map(|t| (ms(t), rates[[t, c]] as f64)),
                    colour.stroke_width(2),
                ))
                .map_err(msg)?
                .label(format!("cell {c}"))
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 16, y)], colour.stroke_width(2)));
        }
        chart.configure_series_labels().border_style(BLACK).background_style(WHITE).draw().map_err(msg)?;
        Ok(())
    }
}
