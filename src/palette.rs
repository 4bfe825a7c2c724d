//! The plot colours of every figure sufficit draws: a colour-blind-safe set of our own choosing
//! (blue, orange, bluish green, reddish purple) and one diverging map centred at zero for signed
//! quantities, so a sign reads the same in every plot.

use plotters::style::RGBColor;

/// Series colours, in order of use (blue, orange, bluish green, reddish purple, sky blue,
/// vermilion, yellow, black: distinguishable with the common colour-vision deficiencies).
pub const SERIES: [RGBColor; 8] = [
    RGBColor(0, 114, 178),
    RGBColor(230, 159, 0),
    RGBColor(0, 158, 115),
    RGBColor(204, 121, 167),
    RGBColor(86, 180, 233),
    RGBColor(213, 94, 0),
    RGBColor(240, 228, 66),
    RGBColor(0, 0, 0),
];

/// Positive end of the diverging map (vermilion).
pub const POSITIVE: RGBColor = RGBColor(213, 94, 0);

/// Negative end of the diverging map (blue).
pub const NEGATIVE: RGBColor = RGBColor(0, 114, 178);

/// Colour of `v` on a symmetric scale `[-scale, scale]`: white at zero, fading to
/// [`POSITIVE`] or [`NEGATIVE`].
pub fn diverging(v: f64, scale: f64) -> RGBColor {
    let t = (v / scale.max(1e-30)).clamp(-1.0, 1.0);
    let end = if t >= 0.0 { POSITIVE } else { NEGATIVE };
    let fade = |c: u8| (255.0 - (255.0 - c as f64) * t.abs()) as u8;
    RGBColor(fade(end.0), fade(end.1), fade(end.2))
}
