//! Training movies for the fitted demo model: binary white noise, full-field flicker, and
//! procedurally generated naturalistic movies: a large image with a 1/f amplitude spectrum (the
//! statistics of natural scenes: Field, J. Opt. Soc. Am. A 1987) viewed through the frame as it
//! drifts with a temporally correlated velocity (an Ornstein-Uhlenbeck process) interrupted by
//! occasional jumps to a new position (saccade-like).

use ndarray::{Array2, Array3};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rustfft::{num_complex::Complex, FftPlanner};

/// A `size x size` image with amplitude spectrum 1/f and random phases, scaled to RMS contrast
/// `rms` and clipped to -1..1.
pub fn pink_image(size: usize, rms: f64, rng: &mut ChaCha8Rng) -> Array2<f32> {
    let mut spec: Vec<Complex<f64>> = (0..size * size)
        .map(|i| {
            let (ky, kx) = (freq(i / size, size), freq(i % size, size));
            let f = (ky * ky + kx * kx).sqrt();
            if f == 0.0 {
                Complex::new(0.0, 0.0)
            } else {
                let phase = rng.random_range(0.0..std::f64::consts::TAU);
                Complex::from_polar(1.0 / f, phase)
            }
        })
        .collect();
    fft2(&mut spec, size, true);
    // The real part of an inverse transform of random phases keeps the 1/f amplitude spectrum.
    let real: Vec<f64> = spec.iter().map(|c| c.re).collect();
    let mean = real.iter().sum::<f64>() / real.len() as f64;
    let sd = (real.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / real.len() as f64).sqrt().max(1e-12);
    Array2::from_shape_vec((size, size), real.iter().map(|v| ((v - mean) / sd * rms).clamp(-1.0, 1.0) as f32).collect())
        .expect("size * size values")
}

/// Signed frequency (cycles per image) of FFT index `k`.
fn freq(k: usize, n: usize) -> f64 {
    if k <= n / 2 {
        k as f64
    } else {
        k as f64 - n as f64
    }
}

/// In-place 2-D FFT of a row-major `n x n` array (inverse when `inverse`).
fn fft2(data: &mut [Complex<f64>], n: usize, inverse: bool) {
    let mut planner = FftPlanner::new();
    let fft = if inverse { planner.plan_fft_inverse(n) } else { planner.plan_fft_forward(n) };
    for row in data.chunks_mut(n) {
        fft.process(row);
    }
    let mut col = vec![Complex::new(0.0, 0.0); n];
    for x in 0..n {
        for y in 0..n {
            col[y] = data[y * n + x];
        }
        fft.process(&mut col);
        for y in 0..n {
            data[y * n + x] = col[y];
        }
    }
}

/// A naturalistic movie `[frames, height, width]`: a view onto a pink image of `4 x` the frame
/// size, moving with an Ornstein-Uhlenbeck velocity (s.d. `speed_px` pixels per frame,
/// correlation time `tau_frames`) and jumping to a random position with probability `jump` per
/// frame. Positions wrap around (the image is periodic).
pub fn naturalistic(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let image = pink_image(size, 0.35, &mut rng);
    let (speed_px, tau_frames, jump): (f64, f64, f64) = (0.3, 20.0, 0.01);
    let (mut y, mut x) = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
    let (mut vy, mut vx) = (0.0f64, 0.0f64);
    let decay = (-1.0 / tau_frames).exp();
    let kick = speed_px * (1.0 - decay * decay).sqrt();
    let mut movie = Array3::zeros((frames, height, width));
    for t in 0..frames {
        if rng.random_range(0.0..1.0) < jump {
            y = rng.random_range(0.0..size as f64);
            x = rng.random_range(0.0..size as f64);
        }
        let (ny, nx): (f64, f64) = (StandardNormal.sample(&mut rng), StandardNormal.sample(&mut rng));
        vy = decay * vy + kick * ny;
        vx = decay * vx + kick * nx;
        y = (y + vy).rem_euclid(size as f64);
        x = (x + vx).rem_euclid(size as f64);
        render(&image, (y, x), movie.index_axis_mut(ndarray::Axis(0), t));
    }
    movie
}

/// A naturalistic movie with a moving object `[frames, height, width]`: [`naturalistic`]'s
/// drifting scene (same seed), and over it a disk (radius 4 to 10 pixels) cut from a second
/// pink image that moves rigidly with its own Ornstein-Uhlenbeck velocity (same statistics as
/// the scene's, independent of it), kept within 12 pixels of the frame centre by reflection.
/// Objects moving against their background are everyday visual input; drifting scenes alone
/// never show the centre and surround of a receptive field moving differently.
pub fn scene_with_object(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut movie = naturalistic(frames, height, width, seed);
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x0b1e_c7ed);
    let size = 4 * height.max(width).next_power_of_two();
    let texture = pink_image(size, 0.35, &mut rng);
    let radius: f64 = rng.random_range(4.0..10.0);
    let (cy, cx, reach) = (height as f64 / 2.0, width as f64 / 2.0, 12.0);
    let (mut y, mut x) = (cy + rng.random_range(-reach..reach), cx + rng.random_range(-reach..reach));
    let offset = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
    let (speed_px, tau_frames): (f64, f64) = (0.3, 20.0);
    let decay = (-1.0 / tau_frames).exp();
    let kick = speed_px * (1.0 - decay * decay).sqrt();
    let (mut vy, mut vx) = (0.0f64, 0.0f64);
    let mut view = Array2::zeros((height, width));
    for t in 0..frames {
        let (ny, nx): (f64, f64) = (StandardNormal.sample(&mut rng), StandardNormal.sample(&mut rng));
        vy = decay * vy + kick * ny;
        vx = decay * vx + kick * nx;
        (y, vy) = reflect(y + vy, vy, cy, reach);
        (x, vx) = reflect(x + vx, vx, cx, reach);
        let disk = Disk { texture: &texture, offset, centre: (y, x), radius };
        disk.paste(movie.index_axis_mut(ndarray::Axis(0), t), &mut view);
    }
    movie
}

/// A disk cut from a periodic `texture` that moves rigidly with it: the texture's view is
/// shifted by the disk's `centre`, from `offset`.
struct Disk<'a> {
    texture: &'a Array2<f32>,
    offset: (f64, f64),
    centre: (f64, f64),
    radius: f64,
}

impl Disk<'_> {
    /// Paste the disk over `frame` (`view`: scratch of the frame's shape).
    fn paste(&self, mut frame: ndarray::ArrayViewMut2<f32>, view: &mut Array2<f32>) {
        let size = self.texture.nrows() as f64;
        let (y, x) = self.centre;
        let at = ((self.offset.0 - y).rem_euclid(size), (self.offset.1 - x).rem_euclid(size));
        render(self.texture, at, view.view_mut());
        for ((r, c), v) in frame.indexed_iter_mut() {
            if (r as f64 + 0.5 - y).powi(2) + (c as f64 + 0.5 - x).powi(2) < self.radius * self.radius {
                *v = view[[r, c]];
            }
        }
    }
}

/// A pink scene under fixational jitter with objects that either move with it or jitter on their
/// own `[frames, height, width]`. The scene (as [`naturalistic`]'s image) steps every frame
/// with probability 0.3, by 0.5 to 1.5 pixels in a random direction (small eye movements). In
/// segments of 60 to 150 frames a disk (radius 4 to 10 pixels, cut from a second pink image,
/// within 12 pixels of the frame centre) either moves with the scene (an object still in the
/// world, so the whole image shifts together; held at the edge of its range, it slips against
/// the scene) or takes steps of its own with the same statistics (an object moving against its
/// background). Drifting scenes move smoothly and mostly at coarse scales; here the centre and
/// surround of a receptive field see the same fine steps together or apart, the contrast an
/// object-motion-sensitive cell is built on.
pub fn jittering_scene_with_object(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let (scene, texture) = (pink_image(size, 0.35, &mut rng), pink_image(size, 0.35, &mut rng));
    let (cy, cx, reach) = (height as f64 / 2.0, width as f64 / 2.0, 12.0);
    let step = |rng: &mut ChaCha8Rng| -> (f64, f64) {
        if rng.random_range(0.0..1.0) < 0.3 {
            let (length, angle): (f64, f64) =
                (rng.random_range(0.5..1.5), rng.random_range(0.0..std::f64::consts::TAU));
            (length * angle.sin(), length * angle.cos())
        } else {
            (0.0, 0.0)
        }
    };
    let mut at = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
    let mut movie = Array3::zeros((frames, height, width));
    let mut view = Array2::zeros((height, width));
    let mut t = 0;
    while t < frames {
        let end = (t + rng.random_range(60..=150)).min(frames);
        let own = rng.random_bool(0.5);
        let radius: f64 = rng.random_range(4.0..10.0);
        let (mut y, mut x) = (cy + rng.random_range(-reach..reach), cx + rng.random_range(-reach..reach));
        let offset = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
        for frame_index in t..end {
            let (dy, dx) = step(&mut rng);
            at = ((at.0 + dy).rem_euclid(size as f64), (at.1 + dx).rem_euclid(size as f64));
            // The scene's content moves by minus its view's step; a disk still in the world with it.
            let (oy, ox) = if own { step(&mut rng) } else { (-dy, -dx) };
            y = keep_within(y + oy, cy, reach);
            x = keep_within(x + ox, cx, reach);
            let mut frame = movie.index_axis_mut(ndarray::Axis(0), frame_index);
            render(&scene, at, frame.view_mut());
            Disk { texture: &texture, offset, centre: (y, x), radius }.paste(frame, &mut view);
        }
        t = end;
    }
    movie
}

/// Position and velocity after reflecting `p` back into `centre +- reach`: a position outside
/// is put on the edge and the velocity turns.
fn reflect(p: f64, v: f64, centre: f64, reach: f64) -> (f64, f64) {
    if (p - centre).abs() > reach {
        (keep_within(p, centre, reach), -v)
    } else {
        (p, v)
    }
}

/// `p` put on the nearer edge of `centre +- reach` when it is outside, else `p` itself.
fn keep_within(p: f64, centre: f64, reach: f64) -> f64 {
    if (p - centre).abs() > reach {
        centre + (p - centre).clamp(-reach, reach)
    } else {
        p
    }
}

/// Fill `frame` with the view of the periodic `image` whose top-left corner is at the sub-pixel
/// position `(y, x)` (bilinear interpolation).
fn render(image: &Array2<f32>, (y, x): (f64, f64), mut frame: ndarray::ArrayViewMut2<f32>) {
    let size = image.nrows();
    let (y0, x0) = (y.floor(), x.floor());
    let (fy, fx) = ((y - y0) as f32, (x - x0) as f32);
    let at = |yy: usize, xx: usize| image[[yy % size, xx % size]];
    for ((r, c), v) in frame.indexed_iter_mut() {
        let (yy, xx) = (y0 as usize + r, x0 as usize + c);
        *v = (1.0 - fy) * ((1.0 - fx) * at(yy, xx) + fx * at(yy, xx + 1))
            + fy * ((1.0 - fx) * at(yy + 1, xx) + fx * at(yy + 1, xx + 1));
    }
}

/// A pink texture in steady motion that now and then reverses abruptly `[frames, height,
/// width]`: each segment lasts 15 to 60 frames at a constant velocity (0.1 to 0.4 pixels per
/// frame, any direction); at a segment's end the motion reverses (probability 0.7) or takes a
/// new random velocity. Smooth drift (see [`naturalistic`]) never holds a velocity long enough
/// for a cell that answers changes of motion to be told apart from one that answers motion.
pub fn reversing_texture(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let image = pink_image(size, 0.35, &mut rng);
    reversing_view(&image, frames, height, width, &mut rng)
}

/// As [`reversing_texture`], but the image holds thin lines (see [`line_image`]): fine moving
/// features that drive the reversal cell's direction-selective subunits one at a time, which a
/// pink texture does not (its responses there survive blurring the movie by 2 pixels;
/// `scripts/reversal_balance.py`).
pub fn reversing_lines(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let image = line_image(size, LINES, &mut rng);
    reversing_view(&image, frames, height, width, &mut rng)
}

/// Parallel bars (see [`bar_image`]) moving across their length and now and then reversing
/// (the segments of [`reversing_texture`], 0.1 to 0.4 pixels per frame): the moving bars of the
/// classic direction and reversal protocols, at one of eight orientations per movie.
pub fn reversing_bars(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    bars_in_motion(frames, (height, width), BAR_GAPS, SEGMENT_FRAMES, seed)
}

/// As [`reversing_bars`], with the bars 40 to 120 pixels apart: mostly one bar in view, as in
/// the reversing-bar protocol, so steady motion of a lone bar over a receptive field (where the
/// reversal cell stays silent) is common instead of rare.
pub fn reversing_lone_bars(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    bars_in_motion(frames, (height, width), LONE_BAR_GAPS, SEGMENT_FRAMES, seed)
}

/// As [`reversing_bars`], each velocity held 40 to 160 frames instead of 15 to 60: long enough
/// for steady motion to outlast the reversal cell's memory (its delayed copies lag 180 ms behind
/// the response), so the movie shows that cell falling silent while a bar keeps moving, as the
/// reversing-bar protocol does. With the short segments most bar frames follow a reversal or a
/// new velocity within 300 ms.
pub fn steady_bars(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    bars_in_motion(frames, (height, width), BAR_GAPS, STEADY_SEGMENT_FRAMES, seed)
}

/// As [`reversing_lone_bars`], each velocity held as long as in [`steady_bars`].
pub fn steady_lone_bars(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    bars_in_motion(frames, (height, width), LONE_BAR_GAPS, STEADY_SEGMENT_FRAMES, seed)
}

/// Frames each velocity of the reversing movies is held (inclusive range).
const SEGMENT_FRAMES: (usize, usize) = (15, 60);

/// Frames each velocity of [`steady_bars`] is held (inclusive range).
const STEADY_SEGMENT_FRAMES: (usize, usize) = (40, 160);

/// Gaps between the bars of [`reversing_bars`], pixels.
const BAR_GAPS: (f64, f64) = (6.0, 30.0);

/// Gaps between the bars of [`reversing_lone_bars`], pixels.
const LONE_BAR_GAPS: (f64, f64) = (40.0, 120.0);

/// Bars `gaps` apart (see [`bar_image`]) in the motion of [`reversing_bars`].
fn bars_in_motion(
    frames: usize,
    (height, width): (usize, usize),
    gaps: (f64, f64),
    segments: (usize, usize),
    seed: u64,
) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let (image, (a, b)) = bar_image(size, gaps, &mut rng);
    // Across the bars: the image's value depends on `a x + b y`, so its normal is (b, a) in
    // (down, right) order.
    let norm = ((a * a + b * b) as f64).sqrt();
    let across = |rng: &mut ChaCha8Rng| {
        let speed = rng.random_range(0.1..0.4) * random_sign(rng);
        (speed * b as f64 / norm, speed * a as f64 / norm)
    };
    moving_view(&image, frames, (height, width), &across, segments, &mut rng)
}

/// A binary checkerboard texture (2-pixel checkers, 100 um, each bright or dark at full
/// contrast, as [`binary_noise`]'s frames) in the steady, now and then reversing motion of
/// [`reversing_texture`]: edges of every orientation and fine detail at every position, where
/// a pink texture's power sits at coarse scales.
pub fn reversing_checkers(frames: usize, height: usize, width: usize, seed: u64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let size = 4 * height.max(width).next_power_of_two();
    let image = checkerboard((size, size), 2, 1.0, &mut rng);
    reversing_view(&image, frames, height, width, &mut rng)
}

/// Lone bars swept over the frame's centre and reversed over it, as a lab sweeps bars over a
/// cell's receptive field once it has found what drives the cell: each sweep draws a bar (1.5
/// to 4 pixels wide, bright in three sweeps of four, at full contrast in a share `full` of the
/// sweeps and else at a contrast of 0.6 to 1; with `full` 0 no draw is spent on it), a direction
/// across it (horizontal in three sweeps of four, else any of the eight of [`bar_image`]), a
/// speed of 0.1 to 0.3 pixels per frame (0.5 to 1.5 mm/s at 50 um and 100 Hz) and a turning
/// point within 8 pixels of the centre. The bar approaches the point for 40 to 120 frames, then
/// reverses (two sweeps in three) or passes straight on, for another 40 to 120 frames. Unlike
/// [`steady_bars`], whose reversals fall anywhere in a periodic image and seldom over the
/// centre with a bar that drives the planted reversal cell (it answers bright bars of 2 pixels
/// or more in horizontal motion), most reversals here happen over the receptive fields of the
/// central cells, after a long steady approach.
pub fn sweeping_bars(frames: usize, height: usize, width: usize, seed: u64, full: f64) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (cy, cx) = (height as f64 / 2.0, width as f64 / 2.0);
    let mut movie = Array3::zeros((frames, height, width));
    let mut t = 0;
    while t < frames {
        let normal = if rng.random_range(0..4) < 3 { 0 } else { rng.random_range(0..BAR_NORMALS.len()) };
        let (a, b) = (BAR_NORMALS[normal].0 as f64, BAR_NORMALS[normal].1 as f64);
        let norm = (a * a + b * b).sqrt();
        let bar = rng.random_range(1.5..4.0);
        let sign = if rng.random_range(0..4) < 3 { 1.0 } else { -1.0 };
        let at_full = full > 0.0 && rng.random_range(0.0..1.0) < full;
        let contrast = (sign * if at_full { 1.0 } else { rng.random_range(0.6..1.0) }) as f32;
        let speed = rng.random_range(0.1..0.3) * random_sign(&mut rng);
        let turn = rng.random_range(-8.0..8.0);
        let reverses = rng.random_range(0..3) < 2;
        let (approach, leave) = (rng.random_range(40..=120), rng.random_range(40..=120));
        for k in 0..(approach + leave).min(frames - t) {
            let from_turn = k as f64 - approach as f64;
            let at = turn + speed * if reverses { -from_turn.abs() } else { from_turn };
            for ((y, x), v) in movie.index_axis_mut(ndarray::Axis(0), t + k).indexed_iter_mut() {
                let across = (a * (x as f64 + 0.5 - cx) + b * (y as f64 + 0.5 - cy)) / norm;
                let cover = (across + 0.5).min(at + bar / 2.0) - (across - 0.5).max(at - bar / 2.0);
                *v = contrast * cover.clamp(0.0, 1.0) as f32;
            }
        }
        t += approach + leave;
    }
    movie
}

/// The eight bar normals `(a, b)` of [`bar_image`] and [`sweeping_bars`] (0, 45, 90, 135
/// degrees and the four in between at slopes of 1/2 and 2); the first, `(1, 0)`, gives
/// vertical bars in horizontal motion.
const BAR_NORMALS: [(i64, i64); 8] = [(1, 0), (0, 1), (1, 1), (1, -1), (2, 1), (1, 2), (2, -1), (1, -2)];

/// -1 or +1 with equal probability.
fn random_sign(rng: &mut ChaCha8Rng) -> f64 {
    if rng.random_range(0..2) == 0 {
        -1.0
    } else {
        1.0
    }
}

/// A periodic `size x size` gray image of parallel bars, 1 to 3 pixels wide with gaps of
/// `gaps.0` to `gaps.1` pixels, each bright or dark at a contrast of 0.5 to 1. The bars' normal
/// `(a, b)` is one of eight integer directions (0, 45, 90, 135 degrees and the four in between
/// at slopes of 1/2 and 2), so the stripes wrap seamlessly on the torus: the across-bar
/// coordinate is `(a x + b y) mod size`, a bar of width `w` spanning `w * |(a, b)|` of it.
/// Returns the image and its normal `(a, b)`.
pub fn bar_image(size: usize, gaps: (f64, f64), rng: &mut ChaCha8Rng) -> (Array2<f32>, (i64, i64)) {
    let (a, b) = BAR_NORMALS[rng.random_range(0..BAR_NORMALS.len())];
    let norm = ((a * a + b * b) as f64).sqrt();
    // The across-bar coordinate runs over `size` units; one pixel across the bars is `norm` units.
    let mut profile = vec![0.0f32; size];
    let mut at = rng.random_range(0.0..6.0 * norm);
    while at < size as f64 {
        let width = rng.random_range(1.0..3.0) * norm;
        let sign = random_sign(rng);
        let contrast = (sign * rng.random_range(0.5..1.0)) as f32;
        let span = (at.floor() as usize)..((at + width).ceil() as usize).min(size);
        profile[span].iter_mut().for_each(|v| *v = contrast);
        at += width + rng.random_range(gaps.0..gaps.1) * norm;
    }
    let image = Array2::from_shape_fn((size, size), |(y, x)| {
        profile[(a * x as i64 + b * y as i64).rem_euclid(size as i64) as usize]
    });
    (image, (a, b))
}

/// Line segments in the image of [`reversing_lines`]: about a third of a 13 x 13 pixel patch
/// then holds a line (60 lines left most frames' centre empty).
const LINES: usize = 300;

/// A periodic `size x size` gray image holding `lines` straight line segments at random
/// positions and orientations, 1 to 3 pixels wide and 20 to 80 long, each bright or dark at a
/// contrast of 0.5 to 1 (later lines cover earlier ones).
pub fn line_image(size: usize, lines: usize, rng: &mut ChaCha8Rng) -> Array2<f32> {
    let mut image = Array2::zeros((size, size));
    let half = size as f64 / 2.0;
    for _ in 0..lines {
        let (cy, cx) = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
        let angle = rng.random_range(0.0..std::f64::consts::PI);
        let (width, length) = (rng.random_range(1.0..3.0), rng.random_range(20.0..80.0));
        let sign = random_sign(rng);
        let contrast = (sign * rng.random_range(0.5..1.0)) as f32;
        for ((y, x), v) in image.indexed_iter_mut() {
            // Offsets on the torus, then across and along the line.
            let dy = (y as f64 - cy + half).rem_euclid(size as f64) - half;
            let dx = (x as f64 - cx + half).rem_euclid(size as f64) - half;
            let (across, along) =
                ((dy * angle.cos() - dx * angle.sin()).abs(), (dx * angle.cos() + dy * angle.sin()).abs());
            if across < width / 2.0 && along < length / 2.0 {
                *v = contrast;
            }
        }
    }
    image
}

/// A view of the periodic `image` in steady motion that now and then reverses (the motion of
/// [`reversing_texture`]).
fn reversing_view(
    image: &Array2<f32>,
    frames: usize,
    height: usize,
    width: usize,
    rng: &mut ChaCha8Rng,
) -> Array3<f32> {
    let any_direction = |rng: &mut ChaCha8Rng| {
        let (speed, angle) = (rng.random_range(0.1..0.4), rng.random_range(0.0..std::f64::consts::TAU));
        (speed * angle.sin(), speed * angle.cos())
    };
    moving_view(image, frames, (height, width), &any_direction, SEGMENT_FRAMES, rng)
}

/// A view of the periodic `image` moving at constant velocities drawn by `velocity` (pixels per
/// frame, `(down, right)`), each held for a number of frames drawn from `segments` (inclusive);
/// at a segment's end the motion reverses (probability 0.7) or takes a new velocity.
fn moving_view(
    image: &Array2<f32>,
    frames: usize,
    (height, width): (usize, usize),
    velocity: &dyn Fn(&mut ChaCha8Rng) -> (f64, f64),
    segments: (usize, usize),
    rng: &mut ChaCha8Rng,
) -> Array3<f32> {
    let size = image.nrows();
    let (mut y, mut x) = (rng.random_range(0.0..size as f64), rng.random_range(0.0..size as f64));
    let mut v = velocity(rng);
    let mut left = rng.random_range(segments.0..=segments.1);
    let mut movie = Array3::zeros((frames, height, width));
    for t in 0..frames {
        if left == 0 {
            v = if rng.random_range(0.0..1.0) < 0.7 { (-v.0, -v.1) } else { velocity(rng) };
            left = rng.random_range(segments.0..=segments.1);
        }
        left -= 1;
        y = (y + v.0).rem_euclid(size as f64);
        x = (x + v.1).rem_euclid(size as f64);
        render(image, (y, x), movie.index_axis_mut(ndarray::Axis(0), t));
    }
    movie
}

/// Binary white noise `[frames, height, width]` of `checker` x `checker` pixel squares, contrast
/// +-`contrast`.
pub fn binary_noise(
    frames: usize,
    height: usize,
    width: usize,
    checker: usize,
    contrast: f32,
    seed: u64,
) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut movie = Array3::zeros((frames, height, width));
    for mut frame in movie.outer_iter_mut() {
        frame.assign(&checkerboard((height, width), checker, contrast, &mut rng));
    }
    movie
}

/// A `height x width` image of square checkers `checker` pixels wide, each +-`contrast` at
/// random (drawn row by row over the checker grid; the last row and column may be cut).
fn checkerboard((height, width): (usize, usize), checker: usize, contrast: f32, rng: &mut ChaCha8Rng) -> Array2<f32> {
    let gw = width.div_ceil(checker);
    let grid: Vec<f32> = (0..height.div_ceil(checker) * gw).map(|_| contrast * random_sign(rng) as f32).collect();
    Array2::from_shape_fn((height, width), |(r, c)| grid[(r / checker) * gw + c / checker])
}

/// Spatially uniform (full-field) flicker `[frames, height, width]`: Gaussian intensities of s.d.
/// `contrast` (clipped to -1..1), each held for 1 to `max_hold` frames (uniform). Drives the
/// wide-field temporal pathways that fine noise and drifting scenes hardly reach (full-field
/// flicker is the classic stimulus for temporal filters, common practice).
pub fn full_field_flicker(
    frames: usize,
    height: usize,
    width: usize,
    contrast: f32,
    max_hold: usize,
    seed: u64,
) -> Array3<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut movie = Array3::zeros((frames, height, width));
    let mut t = 0;
    while t < frames {
        let z: f32 = StandardNormal.sample(&mut rng);
        let hold = rng.random_range(1..=max_hold.max(1));
        let value = (z * contrast).clamp(-1.0, 1.0);
        for f in t..(t + hold).min(frames) {
            movie.index_axis_mut(ndarray::Axis(0), f).fill(value);
        }
        t += hold;
    }
    movie
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slope of log radially averaged power against log frequency, over 4..size/4 cycles.
    fn spectral_slope(img: &Array2<f32>) -> f64 {
        let n = img.nrows();
        let mut data: Vec<Complex<f64>> = img.iter().map(|&v| Complex::new(v as f64, 0.0)).collect();
        fft2(&mut data, n, false);
        let mut bins = vec![(0.0, 0usize); n];
        for (i, c) in data.iter().enumerate() {
            let f = (freq(i / n, n).powi(2) + freq(i % n, n).powi(2)).sqrt().round() as usize;
            if f < n {
                bins[f].0 += c.norm_sqr();
                bins[f].1 += 1;
            }
        }
        let pts: Vec<(f64, f64)> = (4..n / 4).map(|f| ((f as f64).ln(), (bins[f].0 / bins[f].1 as f64).ln())).collect();
        let (mx, my) = pts.iter().fold((0.0, 0.0), |(a, b), p| (a + p.0, b + p.1));
        let (mx, my) = (mx / pts.len() as f64, my / pts.len() as f64);
        let num: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
        num / pts.iter().map(|p| (p.0 - mx).powi(2)).sum::<f64>()
    }

    #[test]
    fn the_object_moves_over_the_scene_and_stays_near_the_centre() {
        let (scene, with) = (naturalistic(300, 50, 50, 4), scene_with_object(300, 50, 50, 4));
        let mut centres = Vec::new();
        for t in 0..300 {
            let differs: Vec<(usize, usize)> =
                (0..50 * 50).map(|i| (i / 50, i % 50)).filter(|&(r, c)| with[[t, r, c]] != scene[[t, r, c]]).collect();
            // A disk of radius 4 to 10 pixels (some of its pixels may match the scene by chance).
            assert!(differs.len() > 30 && differs.len() < 330, "frame {t}: {} pixels differ", differs.len());
            let n = differs.len() as f64;
            let (y, x) = differs.iter().fold((0.0, 0.0), |(a, b), &(r, c)| (a + r as f64 / n, b + c as f64 / n));
            assert!((y - 25.0).abs() < 13.5 && (x - 25.0).abs() < 13.5, "frame {t}: object at {y:.1}, {x:.1}");
            centres.push((y, x));
        }
        // It moves: over 300 frames its centre travels more than a few pixels.
        let travel =
            centres.windows(2).map(|w| ((w[1].0 - w[0].0).powi(2) + (w[1].1 - w[0].1).powi(2)).sqrt()).sum::<f64>();
        assert!(travel > 10.0, "travel {travel}");
    }

    #[test]
    fn a_jittering_scene_steps_as_often_as_set_and_its_objects_sometimes_move_on_their_own() {
        let m = jittering_scene_with_object(1200, 50, 50, 4);
        assert_eq!(m, jittering_scene_with_object(1200, 50, 50, 4));
        assert!(m.iter().all(|v| (-1.0..=1.0).contains(v)));
        let changed = |t: usize, (r0, r1): (usize, usize), (c0, c1): (usize, usize)| {
            let (a, b) = (m.index_axis(ndarray::Axis(0), t), m.index_axis(ndarray::Axis(0), t + 1));
            (r0..r1).any(|r| (c0..c1).any(|c| a[[r, c]] != b[[r, c]]))
        };
        // The corner lies beyond any disk (centre within 12 px of the frame's, radius < 10).
        let corner: Vec<bool> = (0..m.shape()[0] - 1).map(|t| changed(t, (0, 3), (0, 3))).collect();
        let steps = corner.iter().filter(|&&c| c).count() as f64 / corner.len() as f64;
        assert!((0.25..0.35).contains(&steps), "scene steps in {steps} of frames, set 0.3");
        // With the scene still, the central pixels change only when an object moves on its own
        // (expected in about 0.5 x 0.3 x 0.7 of frames, times how often a disk covers them).
        let own = (0..corner.len()).filter(|&t| !corner[t] && changed(t, (24, 26), (24, 26))).count();
        assert!(own as f64 > 0.02 * corner.len() as f64, "objects moved on their own in {own} frames");
    }

    #[test]
    fn pink_images_have_the_power_spectrum_of_natural_scenes() {
        // Natural images: power falls as 1/f^2 (slope -2 on log-log axes; Field 1987, from memory).
        let img = pink_image(128, 0.2, &mut ChaCha8Rng::seed_from_u64(3));
        let slope = spectral_slope(&img);
        assert!((slope + 2.0).abs() < 0.15, "slope {slope}");
        // White noise for contrast: flat (slope 0).
        let noise = binary_noise(1, 128, 128, 1, 1.0, 3).index_axis_move(ndarray::Axis(0), 0);
        assert!(spectral_slope(&noise).abs() < 0.15);
    }

    #[test]
    fn naturalistic_movies_move_smoothly_and_stay_in_range() {
        let m = naturalistic(200, 20, 20, 9);
        assert!(m.iter().all(|v| (-1.0..=1.0).contains(v)));
        // Consecutive frames are far more alike than frames 100 apart (temporal correlation).
        let corr = |a: usize, b: usize| {
            let (x, y) = (m.index_axis(ndarray::Axis(0), a), m.index_axis(ndarray::Axis(0), b));
            let (mx, my) = (x.mean().unwrap(), y.mean().unwrap());
            let c: f32 = x.iter().zip(y.iter()).map(|(p, q)| (p - mx) * (q - my)).sum();
            let vx: f32 = x.iter().map(|p| (p - mx).powi(2)).sum();
            let vy: f32 = y.iter().map(|q| (q - my).powi(2)).sum();
            c / (vx * vy).sqrt()
        };
        let near: f32 = (0..150).map(|t| corr(t, t + 1)).sum::<f32>() / 150.0;
        let far: f32 = (0..50).map(|t| corr(t, t + 100)).sum::<f32>() / 50.0;
        assert!(near > 0.8 && far < near - 0.3, "lag-1 {near}, lag-100 {far}");
    }

    #[test]
    fn full_field_flicker_is_uniform_in_space_and_holds_its_values() {
        let m = full_field_flicker(500, 6, 7, 0.35, 4, 2);
        for f in m.outer_iter() {
            let v = f[[0, 0]];
            assert!(f.iter().all(|&x| x == v) && (-1.0..=1.0).contains(&v));
        }
        // Runs of equal frames are 1..=4 long (a new draw could repeat a value only by chance).
        let (mut run, mut longest, mut changes) = (1, 1, 0);
        for t in 1..500 {
            if m[[t, 0, 0]] == m[[t - 1, 0, 0]] {
                run += 1;
            } else {
                changes += 1;
                run = 1;
            }
            longest = longest.max(run);
        }
        assert!(longest <= 4, "longest hold {longest}");
        // Mean hold 2.5 frames: about 200 changes in 500 frames.
        assert!((150..=250).contains(&changes), "{changes} changes");
        let sd = (m.iter().map(|v| v * v).sum::<f32>() / m.len() as f32).sqrt();
        assert!((sd - 0.35).abs() < 0.06, "s.d. {sd}");
    }

    #[test]
    fn lone_bars_are_sparser_than_bars() {
        // Bars 1-3 px wide, 40-120 px apart: about 2 % of the image lit (6-30 px apart: about
        // 10 %); the movie shows them.
        for seed in 0..8 {
            let lit = |gaps| {
                let (image, _) = bar_image(256, gaps, &mut ChaCha8Rng::seed_from_u64(seed));
                image.iter().filter(|&&v| v != 0.0).count() as f64 / image.len() as f64
            };
            let (lone, dense) = (lit(LONE_BAR_GAPS), lit(BAR_GAPS));
            assert!(lone > 0.005 && lone < 0.06 && lone < dense / 2.0, "seed {seed}: lit {lone:.3} vs {dense:.3}");
        }
        let movie = reversing_lone_bars(300, 50, 50, 3);
        assert_eq!(movie.shape(), &[300, 50, 50]);
        assert!(movie.iter().any(|&v| v != 0.0));
    }

    #[test]
    fn bar_images_hold_parallel_bars_that_wrap_seamlessly() {
        for seed in 0..8 {
            let (image, _) = bar_image(256, BAR_GAPS, &mut ChaCha8Rng::seed_from_u64(seed));
            let lit = image.iter().filter(|&&v| v != 0.0).count() as f64 / image.len() as f64;
            assert!(lit > 0.02 && lit < 0.5, "seed {seed}: {lit:.3} of the image on bars");
            assert!(image.iter().all(|&v| v == 0.0 || (0.5..=1.0).contains(&v.abs())), "seed {seed}: contrasts");
            // Parallel bars: some shift (one of the eight directions along the bars) maps the
            // image onto itself, the torus' wrap included.
            let along = [(0, 1), (1, 0), (1, -1), (1, 1), (2, -1), (1, -2), (2, 1), (1, 2)];
            let invariant = along.iter().any(|&(dy, dx): &(i64, i64)| {
                image.indexed_iter().all(|((y, x), &v)| {
                    let (yy, xx) = ((y as i64 + dy).rem_euclid(256) as usize, (x as i64 + dx).rem_euclid(256) as usize);
                    image[[yy, xx]] == v
                })
            });
            assert!(invariant, "seed {seed}: not parallel bars");
        }
    }

    #[test]
    fn line_images_hold_thin_lines_on_gray() {
        let img = line_image(64, 12, &mut ChaCha8Rng::seed_from_u64(4));
        assert!(img.iter().all(|&v| v == 0.0 || (0.5..=1.0).contains(&v.abs())), "gray or a line's contrast");
        let covered = img.iter().filter(|&&v| v != 0.0).count() as f64 / img.len() as f64;
        assert!(covered > 0.02 && covered < 0.5, "covered {covered}");
        // Lines are at most 3 pixels wide: almost every line pixel has gray within 2 pixels
        // along a row or a column (crossings aside).
        let n = 64;
        let near_gray = |y: usize, x: usize| {
            (1..=2).any(|d| {
                [(y + d) % n, (y + n - d) % n].iter().any(|&yy| img[[yy, x]] == 0.0)
                    || [(x + d) % n, (x + n - d) % n].iter().any(|&xx| img[[y, xx]] == 0.0)
            })
        };
        let line: Vec<(usize, usize)> = img.indexed_iter().filter(|(_, &v)| v != 0.0).map(|(i, _)| i).collect();
        let thin = line.iter().filter(|&&(y, x)| near_gray(y, x)).count() as f64 / line.len() as f64;
        assert!(thin > 0.95, "share of line pixels near gray {thin}");
    }

    #[test]
    fn reversing_texture_retraces_its_path_after_a_reversal() {
        // At a reversal the view runs back over the frames it just showed: frame t + k equals
        // frame t - k. Find such a t, and check the texture does move.
        assert_moves_and_reverses(&reversing_texture(400, 12, 12, 5), 0.05);
    }

    /// The 400-frame movie `m` moves (frames 0 and 10 differ by more than `moved` somewhere)
    /// and reverses at least twice: at a reversal the view runs back over the frames it just
    /// showed, frame t + k equal to frame t - k.
    fn assert_moves_and_reverses(m: &Array3<f32>, moved: f32) {
        let diff = |a: usize, b: usize| {
            (&m.index_axis(ndarray::Axis(0), a) - &m.index_axis(ndarray::Axis(0), b))
                .mapv(f32::abs)
                .fold(0.0f32, |x, &y| x.max(y))
        };
        assert!(diff(0, 10) > moved, "the view does not move");
        let reversals = reversal_frames(m).len();
        assert!(reversals >= 2, "{reversals} reversals in 400 frames");
    }

    /// Frames `t` of the movie `m` at which it reverses (frame t + k equals frame t - k for k
    /// up to 10) while showing something there (not gray throughout).
    fn reversal_frames(m: &Array3<f32>) -> Vec<usize> {
        let frame = |t: usize| m.index_axis(ndarray::Axis(0), t);
        let diff = |a: usize, b: usize| (&frame(a) - &frame(b)).mapv(f32::abs).fold(0.0f32, |x, &y| x.max(y));
        (12..m.shape()[0] - 12)
            .filter(|&t| diff(t - 10, t) > 0.1 && (1..=10).all(|k| diff(t + k, t - k) < 1e-3))
            .collect()
    }

    #[test]
    fn steady_bars_hold_each_velocity_far_longer_than_the_reversing_bars() {
        // Over the same frames and seeds, the reversing bars reverse within 15 to 60 frames of
        // their last change, the steady bars within 40 to 160: every two reversals of the steady
        // bars lie at least 40 frames apart, and they reverse less often.
        let (mut short, mut steady) = (0, 0);
        for seed in 0..4 {
            short += reversal_frames(&reversing_bars(600, 50, 50, seed)).len();
            let r = reversal_frames(&steady_bars(600, 50, 50, seed));
            assert!(r.windows(2).all(|w| w[1] - w[0] >= 40), "seed {seed}: reversals at {r:?}");
            steady += r.len();
        }
        assert!(steady >= 2 && short > 2 * steady, "{short} reversals of the bars, {steady} of the steady bars");
    }

    #[test]
    fn sweeping_bars_reverse_over_the_centre_after_a_long_approach() {
        let m = sweeping_bars(2000, 50, 50, 3, 0.0);
        assert_moves_and_reverses(&m, 0.5);
        let turns = reversal_frames(&m);
        assert!(turns.len() >= 5, "{} reversals in 2000 frames", turns.len());
        for &t in &turns {
            // The bar turns within 8 pixels of the centre, so it crosses the central 22 x 22
            // pixels: at least 10 of them show it.
            let frame = m.index_axis(ndarray::Axis(0), t);
            let central = frame.slice(ndarray::s![14..36, 14..36]).iter().filter(|v| v.abs() > 0.1).count();
            assert!(central >= 10, "reversal at frame {t}: only {central} bar pixels near the centre");
        }
    }

    #[test]
    fn a_share_of_sweeps_at_full_contrast_draws_that_share_and_zero_draws_none() {
        // The fraction of frames (showing a bar) whose strongest pixel is at full contrast. With
        // every sweep at full contrast it is the fraction of frames where the bar covers a whole
        // pixel; a share scales it. Sweeps last 80 to 240 frames, so 20,000 frames hold about 125.
        let at_full = |share: f64| {
            let m = sweeping_bars(20_000, 50, 50, 4, share);
            let peaks: Vec<f32> =
                m.outer_iter().map(|f| f.iter().fold(0.0f32, |a, v| a.max(v.abs()))).filter(|&p| p > 0.0).collect();
            assert!(peaks.iter().all(|&p| p <= 1.0), "share {share}: beyond full contrast");
            peaks.iter().filter(|&&p| p == 1.0).count() as f64 / peaks.len() as f64
        };
        assert_eq!(at_full(0.0), 0.0, "without the share every sweep is at 0.6 to 1 (below 1)");
        let all = at_full(1.0);
        assert!(all > 0.5, "a bar 1.5 pixels wide or more mostly covers a whole pixel: {all:.2}");
        for share in [0.25, 0.5] {
            // A share of sweeps, measured on frames (sweep lengths vary): within 0.1.
            let got = at_full(share) / all;
            assert!((got - share).abs() < 0.1, "share {share}: {got:.2} of the full-contrast frames");
        }
    }

    #[test]
    fn reversing_checkers_are_a_full_contrast_binary_texture_that_moves_and_reverses() {
        let m = reversing_checkers(400, 12, 12, 5);
        assert!(m.iter().all(|v| v.abs() <= 1.0 + 1e-6), "values beyond full contrast");
        let n = m.len() as f32;
        let (mean, magnitude) = (m.sum() / n, m.mapv(f32::abs).sum() / n);
        // Bilinear sampling blends neighbouring checkers only near their borders.
        assert!(mean.abs() < 0.1 && magnitude > 0.6, "mean {mean}, mean magnitude {magnitude}");
        assert_moves_and_reverses(&m, 0.5);
    }
}
