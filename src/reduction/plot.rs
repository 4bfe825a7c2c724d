//! Reduction plots: the fidelity-vs-size curve and the full vs reduced response.

use crate::figure::{msg, Figure};
use crate::palette::{diverging, SERIES};
use crate::response::measure::min_max;
use plotters::coord::Shift;
use plotters::prelude::*;

/// Add the point (size, fidelity) to the series called `key` (created when new).
pub fn add_curve_point(series: &mut Vec<(String, Vec<(usize, f64)>)>, key: String, size: usize, fidelity: f64) {
    match series.iter_mut().find(|(k, _)| *k == key) {
        Some((_, v)) => v.push((size, fidelity)),
        None => series.push((key, vec![(size, fidelity)])),
    }
}

/// Fidelity (fraction of variance explained) against the number of kept units, one series per
/// (layer, phase); a dashed line marks the target.
pub struct FidelityCurve<'a> {
    /// (series name, (size, fidelity) points).
    pub series: &'a [(String, Vec<(usize, f64)>)],
    /// The target fidelity.
    pub target: f64,
}

impl Figure for FidelityCurve<'_> {
    fn size(&self) -> (u32, u32) {
        (720, 420)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let FidelityCurve { series, target } = *self;
        let max_size = series.iter().flat_map(|(_, p)| p.iter().map(|(s, _)| *s)).max().unwrap_or(1).max(1);
        let lowest =
            series.iter().flat_map(|(_, p)| p.iter().map(|(_, f)| *f)).filter(|f| f.is_finite()).fold(0.0f64, f64::min);
        let mut chart = ChartBuilder::on(root)
            .caption("fidelity of the reduced circuit against its size", ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(0f64..max_size as f64 + 0.5, lowest.max(-1.0)..1.05f64)
            .map_err(msg)?;
        chart
            .configure_mesh()
            .x_desc("kept units (count)")
            .y_desc("fraction of variance explained (1)")
            .draw()
            .map_err(msg)?;
        // Colour-blind-safe pair (blue, orange) with distinct markers as well as colours.
        for (i, (name, points)) in series.iter().enumerate() {
            let c = SERIES[i % SERIES.len()];
            let pts: Vec<(f64, f64)> = points.iter().map(|&(s, f)| (s as f64, f.max(-1.0))).collect();
            chart
                .draw_series(LineSeries::new(pts.clone(), c.stroke_width(2)))
                .map_err(msg)?
                .label(name.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], c.stroke_width(2)));
            if i % 2 == 0 {
                chart.draw_series(pts.iter().map(|&p| Circle::new(p, 4, c.filled()))).map_err(msg)?;
            } else {
                chart.draw_series(pts.iter().map(|&p| TriangleMarker::new(p, 5, c.filled()))).map_err(msg)?;
            }
        }
        let dashes: Vec<(f64, f64)> = (0..=(2 * max_size + 1)).map(|k| (k as f64 / 2.0, target)).collect();
        chart
            .draw_series(dashes.chunks(2).map(|p| PathElement::new(p.to_vec(), BLACK.stroke_width(1))))
            .map_err(msg)?;
        chart.configure_series_labels().background_style(WHITE.mix(0.9)).border_style(BLACK).draw().map_err(msg)?;
        Ok(())
    }
}

/// The cell's full and reduced rate over the analysis frames (time in ms).
pub struct ReducedResponse<'a> {
    /// Time of each analysis frame (ms).
    pub times_ms: &'a [f64],
    /// Full model's rate.
    pub full: &'a [f64],
    /// Reduced circuit's rate.
    pub reduced: &'a [f64],
    /// The cell.
    pub cell: usize,
}

impl Figure for ReducedResponse<'_> {
    fn size(&self) -> (u32, u32) {
        (720, 360)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let ReducedResponse { times_ms, full, reduced, cell } = *self;
        let (lo, hi) = min_max(full.iter().chain(reduced));
        let pad = ((hi - lo) * 0.08).max(1e-6);
        let (t0, t1) = (times_ms.first().copied().unwrap_or(0.0), times_ms.last().copied().unwrap_or(1.0).max(1e-6));
        let mut chart = ChartBuilder::on(root)
            .caption(format!("cell {cell}: full model (solid) and reduced circuit (dashed)"), ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(t0..t1 + 1e-9, lo - pad..hi + pad)
            .map_err(msg)?;
        chart.configure_mesh().x_desc("time (ms)").y_desc("rate (model units)").draw().map_err(msg)?;
        let blue = SERIES[0];
        let orange = SERIES[1];
        chart
            .draw_series(LineSeries::new(times_ms.iter().copied().zip(full.iter().copied()), blue.stroke_width(2)))
            .map_err(msg)?;
        let pts: Vec<(f64, f64)> = times_ms.iter().copied().zip(reduced.iter().copied()).collect();
        chart
            .draw_series(pts.chunks(2).step_by(2).map(|p| PathElement::new(p.to_vec(), orange.stroke_width(3))))
            .map_err(msg)?;
        Ok(())
    }
}

/// One kept unit on one page: spatial map (pixels, micrometres on the axes), temporal filter
/// (ms before the response) and nonlinearity (generator signal vs activation).
pub struct UnitFigure<'a> {
    /// `layer:channel` and its sign, for the title.
    pub title: String,
    /// Spatial map `[height, width]`.
    pub spatial: &'a ndarray::Array2<f32>,
    /// Temporal filter, oldest lag first.
    pub temporal: &'a [f32],
    /// Nonlinearity samples (generator, activation), if any.
    pub curve: Option<(&'a [f64], &'a [f64])>,
    /// Pixel size (um) and frame duration (ms).
    pub pixel_um: f64,
    /// Frame duration in ms.
    pub frame_ms: f64,
}

impl Figure for UnitFigure<'_> {
    fn size(&self) -> (u32, u32) {
        (1080, 340)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let f = self;
        let root = root.titled(&f.title, ("sans-serif", 16)).map_err(msg)?;
        let panels = root.split_evenly((1, 3));
        let (h, w) = f.spatial.dim();
        let scale = f.spatial.iter().fold(0f64, |m, v| m.max(v.abs() as f64));
        let (wu, hu) = (w as f64 * f.pixel_um, h as f64 * f.pixel_um);
        let mut c = ChartBuilder::on(&panels[0])
            .caption("spatial map (vermilion +, blue -)", ("sans-serif", 13))
            .margin(8)
            .x_label_area_size(30)
            .y_label_area_size(44)
            .build_cartesian_2d(0f64..wu, 0f64..hu)
            .map_err(msg)?;
        c.configure_mesh().disable_mesh().x_desc("x (um)").y_desc("y (um)").draw().map_err(msg)?;
        c.draw_series(f.spatial.indexed_iter().map(|((y, x), &v)| {
            let (x0, y0) = (x as f64 * f.pixel_um, hu - (y + 1) as f64 * f.pixel_um);
            Rectangle::new([(x0, y0), (x0 + f.pixel_um, y0 + f.pixel_um)], diverging(v as f64, scale).filled())
        }))
        .map_err(msg)?;
        let lags = f.temporal.len();
        let pts: Vec<(f64, f64)> =
            f.temporal.iter().enumerate().map(|(l, &v)| (-((lags - 1 - l) as f64) * f.frame_ms, v as f64)).collect();
        let top = pts.iter().fold(1e-12f64, |m, p| m.max(p.1.abs())) * 1.1;
        let mut c = ChartBuilder::on(&panels[1])
            .caption("temporal filter", ("sans-serif", 13))
            .margin(8)
            .x_label_area_size(30)
            .y_label_area_size(50)
            .build_cartesian_2d(-((lags.max(2) - 1) as f64) * f.frame_ms..0f64, -top..top)
            .map_err(msg)?;
        c.configure_mesh().x_desc("time before response (ms)").y_desc("weight (1/contrast)").draw().map_err(msg)?;
        c.draw_series(LineSeries::new(pts, SERIES[0].stroke_width(2))).map_err(msg)?;
        if let Some((g, y)) = f.curve {
            let (gl, gh) = min_max(g);
            let (yl, yh) = min_max(y);
            let pad = ((yh - yl) * 0.05).max(1e-9);
            let mut c = ChartBuilder::on(&panels[2])
                .caption("nonlinearity", ("sans-serif", 13))
                .margin(8)
                .x_label_area_size(30)
                .y_label_area_size(50)
                .build_cartesian_2d(gl..gh.max(gl + 1e-9), yl - pad..yh + pad)
                .map_err(msg)?;
            c.configure_mesh()
                .x_desc("generator signal (filter x contrast)")
                .y_desc("activation (model units)")
                .draw()
                .map_err(msg)?;
            c.draw_series(LineSeries::new(
                g.iter().copied().zip(y.iter().copied()),
                crate::palette::POSITIVE.stroke_width(2),
            ))
            .map_err(msg)?;
        }
        Ok(())
    }
}
