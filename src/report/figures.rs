//! Figures only the report draws: the circuit diagram (stimulus -> kept units -> cell) and the
//! stimulus snapshot strip.

use crate::figure::{msg, Figure};
use crate::palette::{NEGATIVE, POSITIVE};
use ndarray::Array3;
use plotters::coord::Shift;
use plotters::prelude::*;

/// One edge of the circuit: from, to, signed layer-to-layer conductance.
pub type Edge = (String, String, f64);

/// Stimulus -> kept units (one column per layer) -> cell. Line width follows |conductance|;
/// the sign shows twice: excitatory edges are solid vermilion, inhibitory ones dashed blue.
pub struct CircuitDiagram<'a> {
    /// The edges, as in subcircuit.json.
    pub edges: &'a [Edge],
}

impl CircuitDiagram<'_> {
    /// Node columns by depth along the edges (stimulus 0, each layer one further, the cell
    /// last); a layer's units share a column, in order of first appearance.
    fn columns(&self) -> Vec<Vec<String>> {
        let layer = |n: &str| n.split(':').next().unwrap_or(n).to_string();
        let mut names: Vec<String> = Vec::new();
        for n in self.edges.iter().flat_map(|(a, b, _)| [a, b]) {
            if !names.contains(n) {
                names.push(n.clone());
            }
        }
        let mut depth: std::collections::BTreeMap<String, usize> = names.iter().map(|n| (layer(n), 0)).collect();
        for _ in 0..names.len() {
            for (a, b, _) in self.edges {
                let d = depth[&layer(a)] + 1;
                let e = depth.entry(layer(b)).or_default();
                *e = (*e).max(d);
            }
        }
        let deepest = depth.values().copied().max().unwrap_or(0);
        (0..=deepest)
            .map(|d| names.iter().filter(|n| depth[&layer(n)] == d).cloned().collect::<Vec<_>>())
            .filter(|c| !c.is_empty())
            .collect()
    }
}

impl Figure for CircuitDiagram<'_> {
    fn size(&self) -> (u32, u32) {
        let tallest = self.columns().iter().map(Vec::len).max().unwrap_or(1) as u32;
        (820, 150 + 70 * tallest)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        root.fill(&WHITE).map_err(msg)?;
        let (w, h) = self.size();
        let cols = self.columns();
        let top = 40i32;
        let usable = h as i32 - top - 50;
        let place = |name: &str| -> (i32, i32) {
            for (i, col) in cols.iter().enumerate() {
                if let Some(j) = col.iter().position(|n| n == name) {
                    let x = 80 + (i as i32) * ((w as i32 - 160) / (cols.len().max(2) as i32 - 1));
                    let y = top + (j as i32 + 1) * usable / (col.len() as i32 + 1);
                    return (x, y);
                }
            }
            (0, 0)
        };
        let biggest = self.edges.iter().fold(1e-30f64, |m, e| m.max(e.2.abs()));
        for (a, b, v) in self.edges {
            let (p, q) = (place(a), place(b));
            let width = 1 + (5.0 * v.abs() / biggest).round() as u32;
            if *v >= 0.0 {
                root.draw(&PathElement::new(vec![p, q], POSITIVE.stroke_width(width))).map_err(msg)?;
            } else {
                for seg in dashes(p, q, 10.0) {
                    root.draw(&PathElement::new(seg.to_vec(), NEGATIVE.stroke_width(width))).map_err(msg)?;
                }
            }
            let mid = ((p.0 + q.0) / 2, (p.1 + q.1) / 2 - 8);
            root.draw(&Text::new(format!("{v:+.3}"), mid, ("sans-serif", 12).into_font().color(&BLACK)))
                .map_err(msg)?;
        }
        for col in &cols {
            for name in col {
                let (x, y) = place(name);
                root.draw(&Circle::new((x, y), 9, WHITE.filled())).map_err(msg)?;
                root.draw(&Circle::new((x, y), 9, BLACK.stroke_width(2))).map_err(msg)?;
                root.draw(&Text::new(name.clone(), (x - 30, y + 14), ("sans-serif", 14).into_font().color(&BLACK)))
                    .map_err(msg)?;
            }
        }
        let legend = "edge width: |conductance|; solid vermilion: excitatory (+); dashed blue: inhibitory (-)";
        root.draw(&Text::new(legend, (20, h as i32 - 28), ("sans-serif", 13).into_font().color(&BLACK)))
            .map_err(msg)?;
        root.draw(&Text::new(
            "circuit: stimulus -> kept units -> cell (numbers: conductance, target units)",
            (20, 12),
            ("sans-serif", 15).into_font().color(&BLACK),
        ))
        .map_err(msg)?;
        Ok(())
    }
}

/// The segment p -> q cut into dashes of `len` pixels with equal gaps.
fn dashes(p: (i32, i32), q: (i32, i32), len: f64) -> Vec<[(i32, i32); 2]> {
    let (dx, dy) = ((q.0 - p.0) as f64, (q.1 - p.1) as f64);
    let total = (dx * dx + dy * dy).sqrt().max(1e-9);
    let at = |s: f64| ((p.0 as f64 + dx * s / total) as i32, (p.1 as f64 + dy * s / total) as i32);
    let mut out = Vec::new();
    let mut s = 0.0;
    while s < total {
        out.push([at(s), at((s + len).min(total))]);
        s += 2.0 * len;
    }
    out
}

/// Colour of the gaps between frames: not a gray level, so white and black frames stay visible.
const SEPARATOR: [u8; 3] = [0, 114, 178];

/// Frames `[n, height, width]` side by side as one gray image (contrast -1 black, 0 mean gray,
/// +1 white), each pixel drawn as a `zoom` x `zoom` block with an 8 pixel gap between frames.
pub fn strip_png(frames: &Array3<f32>, zoom: u32) -> image::RgbImage {
    let (n, h, w) = frames.dim();
    let gap = 8;
    let (fw, fh) = (w as u32 * zoom, h as u32 * zoom);
    let mut img = image::RgbImage::from_pixel((fw + gap) * n.max(1) as u32 - gap, fh.max(1), image::Rgb(SEPARATOR));
    for k in 0..n {
        for y in 0..fh {
            for x in 0..fw {
                let v = frames[[k, (y / zoom) as usize, (x / zoom) as usize]];
                let g = (127.5 * (1.0 + v.clamp(-1.0, 1.0))).round() as u8;
                img.put_pixel(k as u32 * (fw + gap) + x, y, image::Rgb([g, g, g]));
            }
        }
    }
    img
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_run_from_stimulus_through_layers_to_the_cell() {
        let edges = vec![
            ("units:2".to_string(), "cell 1".to_string(), 1.0),
            ("stimulus".to_string(), "pathways:6".to_string(), 2.0),
            ("pathways:6".to_string(), "units:2".to_string(), -1.0),
            ("stimulus".to_string(), "pathways:7".to_string(), -0.5),
        ];
        let d = CircuitDiagram { edges: &edges };
        assert_eq!(
            d.columns(),
            vec![vec!["stimulus"], vec!["pathways:6", "pathways:7"], vec!["units:2"], vec!["cell 1"]]
                .into_iter()
                .map(|c| c.into_iter().map(String::from).collect::<Vec<_>>())
                .collect::<Vec<_>>()
        );
    }

    #[test]
    fn strip_maps_contrast_to_gray_levels() {
        let frames = Array3::from_shape_vec((2, 1, 1), vec![-1.0, 1.0]).unwrap();
        let img = strip_png(&frames, 2);
        assert_eq!(img.dimensions(), (2 + 8 + 2, 2));
        assert_eq!(img.get_pixel(0, 0)[0], 0);
        assert_eq!(img.get_pixel(11, 1)[0], 255);
        assert_eq!(img.get_pixel(5, 0).0, SEPARATOR);
    }
}
