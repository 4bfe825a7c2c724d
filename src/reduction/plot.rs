//! Reduction plots: the fidelity-vs-size curve and the full vs reduced response.

use plotters::prelude::*;

/// Fidelity (fraction of variance explained) against the number of kept units, one series per
/// (layer, phase); a dashed line marks the target.
pub fn fidelity_curve_svg(series: &[(String, Vec<(usize, f64)>)], target: f64) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (720, 420)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let max_size = series.iter().flat_map(|(_, p)| p.iter().map(|(s, _)| *s)).max().unwrap_or(1).max(1);
        let lowest =
            series.iter().flat_map(|(_, p)| p.iter().map(|(_, f)| *f)).filter(|f| f.is_finite()).fold(0.0f64, f64::min);
        let mut chart = ChartBuilder::on(&root)
            .caption("fidelity of the reduced circuit against its size", ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(0f64..max_size as f64 + 0.5, lowest.max(-1.0)..1.05f64)
            .map_err(|e| e.to_string())?;
        chart
            .configure_mesh()
            .x_desc("kept units (count)")
            .y_desc("fraction of variance explained (1)")
            .draw()
            .map_err(|e| e.to_string())?;
        // Colour-blind-safe pair (blue, orange) with distinct markers as well as colours.
        let colours = [RGBColor(0, 114, 178), RGBColor(230, 159, 0), RGBColor(0, 158, 115), RGBColor(204, 121, 167)];
        for (i, (name, points)) in series.iter().enumerate() {
            let c = colours[i % colours.len()];
            let pts: Vec<(f64, f64)> = points.iter().map(|&(s, f)| (s as f64, f.max(-1.0))).collect();
            chart
                .draw_series(LineSeries::new(pts.clone(), c.stroke_width(2)))
                .map_err(|e| e.to_string())?
                .label(name.clone())
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], c.stroke_width(2)));
            if i % 2 == 0 {
                chart.draw_series(pts.iter().map(|&p| Circle::new(p, 4, c.filled()))).map_err(|e| e.to_string())?;
            } else {
                chart
                    .draw_series(pts.iter().map(|&p| TriangleMarker::new(p, 5, c.filled())))
                    .map_err(|e| e.to_string())?;
            }
        }
        let dashes: Vec<(f64, f64)> = (0..=(2 * max_size + 1)).map(|k| (k as f64 / 2.0, target)).collect();
        chart
            .draw_series(dashes.chunks(2).map(|p| PathElement::new(p.to_vec(), BLACK.stroke_width(1))))
            .map_err(|e| e.to_string())?;
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK)
            .draw()
            .map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}

/// The cell's full and reduced rate over the analysis frames (time in ms).
pub fn reduced_response_svg(times_ms: &[f64], full: &[f64], reduced: &[f64], cell: usize) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (720, 360)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let (lo, hi) =
            full.iter().chain(reduced).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
        let pad = ((hi - lo) * 0.08).max(1e-6);
        let (t0, t1) = (times_ms.first().copied().unwrap_or(0.0), times_ms.last().copied().unwrap_or(1.0).max(1e-6));
        let mut chart = ChartBuilder::on(&root)
            .caption(format!("cell {cell}: full model (solid) and reduced circuit (dashed)"), ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(t0..t1 + 1e-9, lo - pad..hi + pad)
            .map_err(|e| e.to_string())?;
        chart.configure_mesh().x_desc("time (ms)").y_desc("rate (model units)").draw().map_err(|e| e.to_string())?;
        let blue = RGBColor(0, 114, 178);
        let orange = RGBColor(230, 159, 0);
        chart
            .draw_series(LineSeries::new(times_ms.iter().copied().zip(full.iter().copied()), blue.stroke_width(2)))
            .map_err(|e| e.to_string())?;
        let pts: Vec<(f64, f64)> = times_ms.iter().copied().zip(reduced.iter().copied()).collect();
        chart
            .draw_series(pts.chunks(2).step_by(2).map(|p| PathElement::new(p.to_vec(), orange.stroke_width(3))))
            .map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}
