//! `preview.png`: a strip of frames around each event, so a person can see what the protocol
//! drew and when. Event frames get a coloured border (no text, so no font is needed).

use super::Stimulus;
use image::{Rgb, RgbImage};

const MAX_TILES: usize = 16;
const GAP: u32 = 2;
const BORDER: u32 = 2;

/// Colour of an event's border; any other frame gets none.
fn colour(name: &str) -> Rgb<u8> {
    match name {
        "omitted_flash" => Rgb([220, 40, 40]),
        "reversal" => Rgb([230, 140, 20]),
        _ => Rgb([40, 110, 220]),
    }
}

/// The frames to show: every event frame (up to the limit), else evenly spaced frames.
fn chosen(stim: &Stimulus) -> Vec<(usize, Option<Rgb<u8>>)> {
    let m = &stim.meta;
    let mut frames: Vec<(usize, Option<Rgb<u8>>)> = Vec::new();
    let mut events: Vec<_> = m.events.iter().collect();
    events.sort_by_key(|e| e.frame);
    let stride = events.len().div_ceil(MAX_TILES).max(1);
    for e in events.iter().step_by(stride) {
        if !frames.iter().any(|(f, _)| *f == e.frame) {
            frames.push((e.frame, Some(colour(&e.name))));
        }
    }
    if frames.is_empty() {
        let n = m.frames.saturating_sub(m.history_frames);
        let step = n.div_ceil(MAX_TILES).max(1);
        frames = (m.history_frames..m.frames).step_by(step).map(|f| (f, None)).collect();
    }
    frames.truncate(MAX_TILES);
    frames
}

/// Draw the strip: each tile is a frame scaled to about 64 pixels high, contrast -1..1 as
/// black..white.
pub fn strip(stim: &Stimulus) -> RgbImage {
    let (h, w) = (stim.meta.height as u32, stim.meta.width as u32);
    let scale = (64 / h.max(1)).clamp(1, 8);
    let (th, tw) = (h * scale + 2 * BORDER, w * scale + 2 * BORDER);
    let frames = chosen(stim);
    let width = (frames.len() as u32).max(1) * (tw + GAP);
    let mut img = RgbImage::from_pixel(width, th, Rgb([255, 255, 255]));
    for (i, (f, border)) in frames.iter().enumerate() {
        let x0 = i as u32 * (tw + GAP);
        if let Some(c) = border {
            for y in 0..th {
                for x in 0..tw {
                    img.put_pixel(x0 + x, y, *c);
                }
            }
        }
        for y in 0..h * scale {
            for x in 0..w * scale {
                let v = stim.movie[[*f, (y / scale) as usize, (x / scale) as usize]];
                let g = ((v.clamp(-1.0, 1.0) + 1.0) * 127.5).round() as u8;
                img.put_pixel(x0 + BORDER + x, BORDER + y, Rgb([g, g, g]));
            }
        }
    }
    img
}
