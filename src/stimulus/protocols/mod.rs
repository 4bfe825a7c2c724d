//! The protocol library, one file per protocol: parameters (physical units, ranges, sources),
//! the movie, its events and windows, and the protocol's metrics.

mod differential_motion;
mod flashes;
mod gratings;
mod movie;
mod moving_bar;
mod omitted_flash;
mod reversing_bar;
mod steps;
mod white_noise;

use super::{Canvas, Drawn, Meta, Spec};
use crate::{Error, Result, Tensor};
use ndarray::{Array3, ArrayView2};

pub use white_noise::{rank_one, spike_triggered_average};

/// What a protocol's metrics see: the stimulus, the model's rates, and each cell's
/// receptive-field centre.
pub struct Observed<'a> {
    /// stimulus.json.
    pub meta: &'a Meta,
    /// The movie, history included.
    pub movie: &'a Array3<f32>,
    /// Rates `[frames, cells]`.
    pub rates: ArrayView2<'a, f32>,
    /// Frames per model window.
    pub lags: usize,
    /// Receptive-field centre of each cell, (row, column) in pixels.
    pub rf_centres: &'a [(f64, f64)],
}

/// A protocol's metrics: a JSON summary and named arrays to save beside it.
pub struct Measured {
    /// Goes into metrics.json under "metrics".
    pub summary: serde_json::Value,
    /// Saved as `<name>.npy`.
    pub arrays: Vec<(String, Tensor)>,
}

/// One physiology protocol.
pub trait Protocol: Sync {
    /// Command-line name.
    fn name(&self) -> &'static str;
    /// One line on what it probes.
    fn summary(&self) -> &'static str;
    /// Its parameters.
    fn specs(&self) -> Vec<Spec>;
    /// Draw the movie for `params` on `canvas` (history frames are added by the caller).
    fn draw(&self, params: &super::Params, canvas: &Canvas, seed: u64) -> Result<Drawn>;
    /// Measure the protocol's effect in the model's rates.
    fn measure(&self, obs: &Observed) -> Result<Measured>;
    /// The analysis window (by name) whose frames make the default attribution target.
    fn target_window(&self) -> &'static str;
}

/// Every protocol, in the order `--list` shows them.
pub fn all() -> Vec<&'static dyn Protocol> {
    vec![
        &omitted_flash::OmittedFlash,
        &reversing_bar::ReversingBar,
        &differential_motion::DifferentialMotion,
        &flashes::Flashes,
        &steps::Steps,
        &moving_bar::MovingBar,
        &gratings::Gratings,
        &white_noise::WhiteNoise,
        &movie::UserMovie,
    ]
}

/// The frames of the protocol's own analysis window (its target window) in `meta`, in order.
pub fn target_frames(meta: &Meta) -> Result<Vec<usize>> {
    let protocol = find(&meta.protocol)?;
    let mut frames: Vec<usize> = meta.windows_named(protocol.target_window()).flat_map(|w| w.start..w.end).collect();
    frames.sort_unstable();
    frames.dedup();
    Ok(frames)
}

/// Find a protocol by name, suggesting the nearest when it is unknown.
pub fn find(name: &str) -> Result<&'static dyn Protocol> {
    let all = all();
    if let Some(p) = all.iter().find(|p| p.name() == name) {
        return Ok(*p);
    }
    let nearest = all.iter().min_by_key(|p| edit_distance(p.name(), name)).map(|p| p.name()).unwrap_or("");
    let names: Vec<_> = all.iter().map(|p| p.name()).collect();
    Err(Error::Usage(format!(
        "unknown protocol '{name}'; did you mean '{nearest}'? Protocols: {} (`sufficit stimulus --list`)",
        names.join(", ")
    )))
}

/// Levenshtein distance, for suggestions.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut prev = row[0];
        row[0] = i + 1;
        for j in 0..b.len() {
            let cur = row[j + 1];
            row[j + 1] = (prev + usize::from(ca != b[j])).min(row[j] + 1).min(cur + 1);
            prev = cur;
        }
    }
    row[b.len()]
}

/// `--describe`: parameters with units, defaults, ranges and sources.
pub fn describe(p: &dyn Protocol) -> String {
    let mut s = format!("{}: {}\n\n", p.name(), p.summary());
    for spec in p.specs() {
        let range = if spec.choices.is_empty() && spec.unit != "path" {
            format!("[{} .. {}]", spec.min, spec.max)
        } else {
            spec.choices.join("|")
        };
        s += &format!(
            "  {:<20} default {:<18} {:<10} {:<16} {}\n  {:<20} source: {}\n",
            spec.name,
            spec.default_text(),
            spec.unit,
            range,
            spec.doc,
            "",
            spec.source
        );
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unknown_names_get_the_nearest_suggestion() {
        let e = find("omited-flash").err().unwrap().to_string();
        assert!(e.contains("did you mean 'omitted-flash'"), "{e}");
        assert!(find("gratings").is_ok());
    }

    #[test]
    fn every_protocol_documents_units_and_sources() {
        for p in all() {
            for s in p.specs() {
                assert!(!s.source.is_empty() && !s.doc.is_empty(), "{}: {}", p.name(), s.name);
            }
            assert!(describe(p).contains(p.name()));
        }
    }
}
