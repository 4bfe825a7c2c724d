//! How a stimulus movie is fed to the model: which input axes hold the lags (time history) and
//! which hold space. Detected from the ONNX input shape, overridable by the user.

use crate::{Error, Result, Tensor};
use ndarray::{Array4, Axis};
use serde::Serialize;

/// The supported arrangements of a window of `L` frames in the model input.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum InputLayout {
    /// `[N, L, H, W]`: lags as channels of a 2-D convolution.
    LagsFirst,
    /// `[N, H, W, L]`: lags last (channels-last exports, transposed inside the model).
    LagsLast,
    /// `[N, 1, L, H, W]`: one channel, lags as the depth of a 3-D convolution.
    Volume,
    /// `[N, L, P]`: lags as channels over a 1-D line of P pixels.
    Line,
}

impl InputLayout {
    /// All layouts with their command-line names.
    pub const ALL: [(&'static str, InputLayout); 4] = [
        ("lags-first", InputLayout::LagsFirst),
        ("lags-last", InputLayout::LagsLast),
        ("volume", InputLayout::Volume),
        ("line", InputLayout::Line),
    ];

    /// Parse a command-line name.
    pub fn parse(s: &str) -> Result<Self> {
        Self::ALL.iter().find(|(n, _)| *n == s).map(|(_, l)| *l).ok_or_else(|| {
            let names: Vec<_> = Self::ALL.iter().map(|(n, _)| *n).collect();
            Error::Usage(format!("unknown input layout '{s}'; choose one of: {}", names.join(", ")))
        })
    }

    /// The command-line name.
    pub fn name(self) -> &'static str {
        Self::ALL.iter().find(|(_, l)| *l == self).map_or("?", |(n, _)| n)
    }

    /// The shape pattern, for messages.
    pub fn pattern(self) -> &'static str {
        match self {
            InputLayout::LagsFirst => "[N, L, H, W]",
            InputLayout::LagsLast => "[N, H, W, L]",
            InputLayout::Volume => "[N, 1, L, H, W]",
            InputLayout::Line => "[N, L, P]",
        }
    }
}

/// A layout applied to a concrete input shape: lag count and frame size.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InputBinding {
    /// The layout.
    pub layout: InputLayout,
    /// Number of frames in one window (the model's temporal history).
    pub lags: usize,
    /// Frame height in pixels (1 for the line layout).
    pub height: usize,
    /// Frame width in pixels (P for the line layout).
    pub width: usize,
}

impl InputBinding {
    /// Bind `layout` (or the detected one) to an input shape with batch axis first.
    /// `transposed_to_lags_first` says whether the graph starts with a Transpose that moves the
    /// last axis to position 1, as channels-last exports do.
    pub fn bind(shape: &[usize], layout: Option<InputLayout>, transposed_to_lags_first: bool) -> Result<Self> {
        let layout = match layout {
            Some(l) => l,
            None => match shape.len() {
                3 => InputLayout::Line,
                4 if transposed_to_lags_first => InputLayout::LagsLast,
                4 => InputLayout::LagsFirst,
                5 => InputLayout::Volume,
                r => {
                    return Err(Error::Usage(format!(
                        "the model input has rank {r} (shape {shape:?}); sufficit understands \
                         [N, L, H, W], [N, H, W, L], [N, 1, L, H, W] and [N, L, P]"
                    )))
                }
            },
        };
        let fits = |rank: usize| shape.len() == rank;
        let (lags, height, width) = match layout {
            InputLayout::LagsFirst if fits(4) => (shape[1], shape[2], shape[3]),
            InputLayout::LagsLast if fits(4) => (shape[3], shape[1], shape[2]),
            InputLayout::Volume if fits(5) && shape[1] == 1 => (shape[2], shape[3], shape[4]),
            InputLayout::Line if fits(3) => (shape[1], 1, shape[2]),
            _ => {
                return Err(Error::Usage(format!(
                    "the model input shape {shape:?} does not fit the layout '{}' {}",
                    layout.name(),
                    layout.pattern()
                )))
            }
        };
        Ok(InputBinding { layout, lags, height, width })
    }

    /// Arrange windows `[N, L, H, W]` as the model input.
    pub fn to_model_input(&self, windows: Array4<f32>) -> Tensor {
        match self.layout {
            InputLayout::LagsFirst => windows.into_dyn(),
            InputLayout::LagsLast => windows.permuted_axes([0, 2, 3, 1]).as_standard_layout().into_owned().into_dyn(),
            InputLayout::Volume => windows.insert_axis(Axis(1)).into_dyn(),
            InputLayout::Line => windows.index_axis_move(Axis(2), 0).into_dyn(),
        }
    }
}

impl InputBinding {
    /// Inverse of [`InputBinding::to_model_input`]: a model-input-shaped tensor (e.g. an input
    /// gradient) back to windows `[N, L, H, W]`.
    pub fn from_model_input(&self, t: &Tensor) -> Result<Array4<f32>> {
        let fail = |e: ndarray::ShapeError| {
            Error::Usage(format!("input-shaped tensor {:?} does not fit the layout: {e}", t.shape()))
        };
        let n = t.shape()[0];
        let arranged = match self.layout {
            InputLayout::LagsFirst | InputLayout::Volume | InputLayout::Line => t.as_standard_layout().into_owned(),
            InputLayout::LagsLast => t.view().permuted_axes(vec![0, 3, 1, 2]).as_standard_layout().into_owned(),
        };
        arranged.into_shape_with_order((n, self.lags, self.height, self.width)).map_err(fail)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layouts_are_detected_from_rank_and_the_leading_transpose() {
        assert_eq!(InputBinding::bind(&[1, 40, 50, 50], None, false).unwrap().layout, InputLayout::LagsFirst);
        let b = InputBinding::bind(&[1, 20, 30, 8], None, true).unwrap();
        assert_eq!((b.layout, b.lags, b.height, b.width), (InputLayout::LagsLast, 8, 20, 30));
        let b = InputBinding::bind(&[1, 1, 10, 12, 14], None, false).unwrap();
        assert_eq!((b.layout, b.lags), (InputLayout::Volume, 10));
        let b = InputBinding::bind(&[1, 15, 64], None, false).unwrap();
        assert_eq!((b.layout, b.lags, b.height, b.width), (InputLayout::Line, 15, 1, 64));
    }

    #[test]
    fn a_rank_no_layout_fits_is_refused_with_the_known_patterns() {
        let e = InputBinding::bind(&[1, 2, 3, 4, 5, 6], None, false).unwrap_err().to_string();
        assert!(e.contains("rank 6") && e.contains("[N, L, P]"), "{e}");
        assert!(InputBinding::bind(&[1, 2, 3, 4, 5], Some(InputLayout::Volume), false).is_err());
    }

    #[test]
    fn windows_are_arranged_for_each_layout() {
        let w = Array4::from_shape_fn((2, 3, 1, 5), |(n, l, _, x)| (n * 100 + l * 10 + x) as f32);
        let line = InputBinding { layout: InputLayout::Line, lags: 3, height: 1, width: 5 };
        let t = line.to_model_input(w.clone());
        assert_eq!(t.shape(), &[2, 3, 5]);
        assert_eq!(t[[1, 2, 4]], 124.0);
        let last = InputBinding { layout: InputLayout::LagsLast, lags: 3, height: 1, width: 5 };
        let t = last.to_model_input(w.clone());
        assert_eq!(t.shape(), &[2, 1, 5, 3]);
        assert_eq!(t[[1, 0, 4, 2]], 124.0);
        assert_eq!(last.from_model_input(&t).unwrap(), w);
        assert_eq!(line.from_model_input(&line.to_model_input(w.clone())).unwrap(), w);
    }
}
