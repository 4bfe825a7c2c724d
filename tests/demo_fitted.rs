//! The fitted demo model against the planted sensor it was fitted to: it predicts movies it never
//! saw, and it reproduces each cell's planted phenomenon by the protocols' own metrics, within
//! 25 % of the planted circuit's value (issue 6). The planted values are measured here, not
//! copied.
//!
//! Issue 6 is open: no fit passes every check yet, so these checks run on the latest draft
//! (models/synthetic-sensor-fitted-draft.onnx, run Y1 of docs/performance.md) and are ignored in
//! the suite (`cargo test --release --test demo_fitted -- --ignored` runs them). Run Y1 passes the
//! omitted-flash and object-motion checks and fails held-out r for cell 1 (0.66) and the
//! reversal (5.2 against 10.4), measured against the planted sensor it was fitted to, before
//! session 11 capped the planted reversal units (docs/models.md); against the capped sensor
//! these checks measure it on a teacher it never saw. When a fit passes, it ships as the demo
//! model and the ignores go.

mod demo_support;

use demo_support::{load, run};
use ndarray::Array3;
use sufficit::demo::fit::FLICKER_SD;
use sufficit::demo::movies::{binary_noise, full_field_flicker, naturalistic, reversing_bars, scene_with_object};
use sufficit::demo::planted::{LAGS, SIZE};
use sufficit::demo::PLANTED_FILE;
use sufficit::response::measure::correlation;
use sufficit::response::rates;

const FITTED_FILE: &str = "synthetic-sensor-fitted-draft.onnx";

/// Fresh movies of each kind the fit trains on, from seeds no fit uses (fits draw theirs from
/// seed * 1000 + small offsets, and the reversing movies from seed + 2^32).
fn fresh_movies() -> Vec<(&'static str, Array3<f32>)> {
    let frames = 2000;
    vec![
        ("binary noise", binary_noise(frames, SIZE, SIZE, 2, 1.0, 90_001)),
        ("flicker", full_field_flicker(frames, SIZE, SIZE, FLICKER_SD, 5, 90_002)),
        ("naturalistic", naturalistic(frames, SIZE, SIZE, 90_003)),
        ("reversing bars", reversing_bars(frames, SIZE, SIZE, 90_004)),
        ("scene with object", scene_with_object(frames, SIZE, SIZE, 90_005)),
    ]
}

#[test]
#[ignore = "issue 6 open: the draft fit fails the reversal and cell 1's held-out r"]
fn the_fitted_model_predicts_fresh_movies_with_r_of_at_least_0_8_per_cell() {
    let (planted, fitted) = (load(PLANTED_FILE), load(FITTED_FILE));
    let movies = fresh_movies();
    let pairs: Vec<_> = movies
        .iter()
        .map(|(_, m)| (rates(&planted, m, &|_| {}).unwrap(), rates(&fitted, m, &|_| {}).unwrap()))
        .collect();
    let mut short = Vec::new();
    for cell in 0..3 {
        let (mut a, mut b) = (Vec::new(), Vec::new());
        let mut each = Vec::new();
        for ((name, m), (p, f)) in movies.iter().zip(&pairs) {
            let t0 = a.len();
            for t in LAGS - 1..m.shape()[0] {
                a.push(p[[t, cell]] as f64);
                b.push(f[[t, cell]] as f64);
            }
            each.push(format!("{name} {:.2}", correlation(&a[t0..], &b[t0..])));
        }
        let r = correlation(&a, &b);
        eprintln!("cell {cell}: pooled r {r:.3} ({})", each.join(", "));
        // Every cell is measured and printed before the verdict.
        if r.is_nan() || r < 0.8 {
            short.push(format!("cell {cell}: held-out r {r:.3} < 0.8 ({})", each.join(", ")));
        }
    }
    assert!(short.is_empty(), "{}", short.join("; "));
}

/// The metric `pick` of `protocol` (with `params`) on the planted and on the fitted model.
fn both(protocol: &str, params: &[&str], pick: &dyn Fn(&serde_json::Value) -> f64) -> (f64, f64) {
    let planted = pick(&run(&load(PLANTED_FILE), protocol, params).2);
    let fitted = pick(&run(&load(FITTED_FILE), protocol, params).2);
    eprintln!("{protocol}: planted {planted:.3}, fitted {fitted:.3}");
    (planted, fitted)
}

/// Within 25 % of the planted value (issue 6).
fn assert_close(what: &str, (planted, fitted): (f64, f64)) {
    let off = (fitted - planted).abs() / planted.abs();
    assert!(off <= 0.25, "{what}: fitted {fitted:.3} is {:.0} % off the planted {planted:.3}", 100.0 * off);
}

#[test]
#[ignore = "issue 6 open: the draft fit fails the reversal and cell 1's held-out r"]
fn the_fitted_resonant_cell_answers_the_omitted_flash_as_the_planted_one() {
    // Cell 0 at the resonant period (100 ms): the peak after the omission above baseline.
    let pick = |s: &serde_json::Value| {
        let periods = s["cells"][0]["periods"].as_array().unwrap();
        let p = periods.iter().find(|p| p["period_ms"].as_f64() == Some(100.0)).unwrap();
        p["peak_above_baseline"].as_f64().unwrap()
    };
    assert_close("omitted flash, cell 0", both("omitted-flash", &[], &pick));
}

#[test]
#[ignore = "issue 6 open: the draft fit fails the reversal and cell 1's held-out r"]
fn the_fitted_reversal_cell_answers_the_reversing_bar_as_the_planted_one() {
    // The reversal 300 um right of the centre, so the smooth-motion window finds the bar over
    // the centre (docs/models.md).
    let pick = |s: &serde_json::Value| s["cells"][1]["reversal_to_smooth_ratio"].as_f64().unwrap();
    assert_close("reversing bar, cell 1", both("reversing-bar", &["reversal_um=1550"], &pick));
}

#[test]
#[ignore = "issue 6 open: the draft fit fails the reversal and cell 1's held-out r"]
fn the_fitted_object_motion_cell_tells_differential_from_global_motion_as_the_planted_one() {
    let pick = |s: &serde_json::Value| s["cells"][2]["object_motion_index"].as_f64().unwrap();
    assert_close("differential motion, cell 2", both("differential-motion", &[], &pick));
}
