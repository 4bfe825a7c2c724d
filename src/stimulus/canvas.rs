//! The screen a protocol draws on: frame size, pixel size on the sensor surface, frame rate,
//! and the model's lag count; conversions from physical units to frames and pixels.

use crate::{Error, Result};
use ndarray::Array3;
use serde::Serialize;

/// Where and how fast stimuli are drawn.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Canvas {
    /// Frame height in pixels.
    pub height: usize,
    /// Frame width in pixels.
    pub width: usize,
    /// Frames per model window (lags); this many gray frames are prepended to every movie.
    pub lags: usize,
    /// Frames per second.
    pub frame_rate_hz: f64,
    /// Size of one pixel on the sensor surface (e.g. the retina), in micrometres.
    pub pixel_um: f64,
}

impl Canvas {
    /// Check the canvas makes sense.
    pub fn validate(&self) -> Result<()> {
        if self.height == 0 || self.width == 0 || self.lags == 0 {
            return Err(Error::Usage(format!(
                "frame size {}x{} with {} lags is empty",
                self.height, self.width, self.lags
            )));
        }
        if !(self.frame_rate_hz > 0.0 && self.frame_rate_hz <= 10_000.0) {
            return Err(Error::Usage(format!("frame rate must be in (0, 10000] Hz, not {}", self.frame_rate_hz)));
        }
        if !(self.pixel_um > 0.0 && self.pixel_um.is_finite()) {
            return Err(Error::Usage(format!(
                "pixel size must be a positive number of micrometres, not {}",
                self.pixel_um
            )));
        }
        Ok(())
    }

    /// Duration in ms as a whole number of frames (rounded, at least `min`).
    pub fn frames(&self, ms: f64) -> usize {
        (ms * self.frame_rate_hz / 1000.0).round().max(0.0) as usize
    }

    /// Frame index to milliseconds.
    pub fn ms(&self, frames: f64) -> f64 {
        frames * 1000.0 / self.frame_rate_hz
    }

    /// Micrometres to pixels.
    pub fn px(&self, um: f64) -> f64 {
        um / self.pixel_um
    }

    /// A gray (contrast 0) movie of `frames` frames; refused when it (twice: the movie and the
    /// windows cut from it) would exceed half the memory bound.
    pub fn blank(&self, frames: usize) -> crate::Result<Array3<f32>> {
        crate::memory::check(
            &format!("a stimulus of {frames} frames of {}x{} pixels", self.height, self.width),
            crate::memory::f32_bytes(&[frames, self.height, self.width, 2]),
            0.5,
        )?;
        Ok(Array3::zeros((frames, self.height, self.width)))
    }

    /// Horizontal position of pixel column `x`'s centre, in pixels from the left edge.
    pub fn column_centre(x: usize) -> f64 {
        x as f64 + 0.5
    }
}

/// Fraction of each pixel column covered by the interval `[left, right)` (in pixels), so a
/// moving edge is drawn with sub-pixel position (area sampling).
pub fn column_coverage(width: usize, left: f64, right: f64) -> Vec<f32> {
    (0..width)
        .map(|x| {
            let (a, b) = (x as f64, x as f64 + 1.0);
            (right.min(b) - left.max(a)).clamp(0.0, 1.0) as f32
        })
        .collect()
}

/// Draw a full-height vertical bar centred at `centre` (pixels from the left edge) into one
/// frame, with area-sampled edges.
pub fn draw_vertical_bar(mut frame: ndarray::ArrayViewMut2<f32>, centre: f64, width: f64, contrast: f32) {
    let cover = column_coverage(frame.ncols(), centre - width / 2.0, centre + width / 2.0);
    for mut row in frame.rows_mut() {
        row.iter_mut().zip(&cover).for_each(|(px, k)| *px = contrast * k);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coverage_integrates_to_the_covered_width() {
        let c = column_coverage(10, 2.25, 5.75);
        assert!((c.iter().sum::<f32>() - 3.5).abs() < 1e-6);
        assert_eq!((c[2], c[3], c[5], c[6]), (0.75, 1.0, 0.75, 0.0));
    }

    #[test]
    fn durations_round_to_frames() {
        let c = Canvas { height: 4, width: 4, lags: 2, frame_rate_hz: 60.0, pixel_um: 50.0 };
        assert_eq!(c.frames(100.0), 6);
        assert!((c.ms(6.0) - 100.0).abs() < 1e-9);
    }
}
