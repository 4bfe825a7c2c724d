//! Probe stimuli: classic physiology protocols drawn in physical units at a model's input size,
//! each with named events (frame indices) and the analysis windows its metrics use. A stimulus
//! folder holds `movie.npy` (f32 `[frames, height, width]`, contrast: 0 = mean luminance, -1..1
//! full contrast), `stimulus.json` and `preview.png`.

pub mod canvas;
pub mod params;
mod preview;
pub mod protocols;
mod store;

pub use canvas::Canvas;
pub use params::{Params, Spec};
pub use store::{check_stimulus, parse_meta, read_meta, read_movie, read_stimulus, write_stimulus};

use ndarray::Array3;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// A named moment of the stimulus (a flash, the omitted flash, a reversal).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Event {
    /// Event name, e.g. `flash`, `omitted_flash`, `reversal`.
    pub name: String,
    /// Frame index in the movie (history frames included).
    pub frame: usize,
    /// Which condition of a sweep it belongs to (e.g. `period_ms=100`), if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub condition: Option<String>,
}

/// A frame range `[start, end)` a metric analyses.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Window {
    /// Window name, e.g. `after_omission`, `baseline`.
    pub name: String,
    /// First frame.
    pub start: usize,
    /// One past the last frame.
    pub end: usize,
    /// Which condition of a sweep it belongs to, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub condition: Option<String>,
}

/// What stimulus.json holds: enough to redraw the stimulus and to compute its metrics.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Meta {
    /// Always "sufficit/1".
    pub schema: String,
    /// Protocol name.
    pub protocol: String,
    /// Every parameter with value, unit and the source of its default.
    pub parameters: BTreeMap<String, serde_json::Value>,
    /// Frames per second.
    pub frame_rate_hz: f64,
    /// Micrometres per pixel on the sensor surface.
    pub pixel_size_um: f64,
    /// Frame height in pixels.
    pub height: usize,
    /// Frame width in pixels.
    pub width: usize,
    /// Number of frames, history included.
    pub frames: usize,
    /// Gray frames prepended so the first protocol frame has a full model history.
    pub history_frames: usize,
    /// Random seed (for protocols that draw random numbers).
    pub seed: u64,
    /// Named events.
    pub events: Vec<Event>,
    /// Analysis windows.
    pub windows: Vec<Window>,
}

impl Meta {
    /// Events called `name`.
    pub fn events_named<'a>(&'a self, name: &'a str) -> impl Iterator<Item = &'a Event> + 'a {
        self.events.iter().filter(move |e| e.name == name)
    }

    /// Windows called `name`.
    pub fn windows_named<'a>(&'a self, name: &'a str) -> impl Iterator<Item = &'a Window> + 'a {
        self.windows.iter().filter(move |w| w.name == name)
    }

    /// A numeric parameter's value as recorded.
    pub fn number(&self, name: &str) -> Option<f64> {
        self.parameters.get(name).and_then(|p| p["value"].as_f64())
    }
}

/// What a protocol draws, before history frames are added.
#[derive(Debug, Clone)]
pub struct Drawn {
    /// `[frames, height, width]` contrast movie.
    pub movie: Array3<f32>,
    /// Events, frame indices relative to the drawn movie.
    pub events: Vec<Event>,
    /// Windows, relative to the drawn movie.
    pub windows: Vec<Window>,
}

/// A complete stimulus: movie and metadata.
#[derive(Debug, Clone)]
pub struct Stimulus {
    /// `[frames, height, width]`, history frames included.
    pub movie: Array3<f32>,
    /// Metadata.
    pub meta: Meta,
}

impl Stimulus {
    /// Prepend `canvas.lags` gray frames to a drawn protocol and shift its events and windows.
    pub fn assemble(protocol: &str, params: &Params, canvas: &Canvas, seed: u64, drawn: Drawn) -> Stimulus {
        let h = canvas.lags;
        let mut movie = Array3::zeros((h + drawn.movie.shape()[0], canvas.height, canvas.width));
        movie.slice_mut(ndarray::s![h.., .., ..]).assign(&drawn.movie);
        let shift_e = |e: Event| Event { frame: e.frame + h, ..e };
        let shift_w = |w: Window| Window { start: w.start + h, end: w.end + h, ..w };
        let meta = Meta {
            schema: "sufficit/1".into(),
            protocol: protocol.into(),
            parameters: params
                .recorded()
                .into_iter()
                .map(|(k, v)| (k, serde_json::to_value(v).unwrap_or(serde_json::Value::Null)))
                .collect(),
            frame_rate_hz: canvas.frame_rate_hz,
            pixel_size_um: canvas.pixel_um,
            height: canvas.height,
            width: canvas.width,
            frames: movie.shape()[0],
            history_frames: h,
            seed,
            events: drawn.events.into_iter().map(shift_e).collect(),
            windows: drawn.windows.into_iter().map(shift_w).collect(),
        };
        Stimulus { movie, meta }
    }
}
