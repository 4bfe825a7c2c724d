//! The fitted demo model (models/synthetic-sensor-fitted.onnx, the model `demo` embeds) against
//! the planted sensor it was fitted to: it predicts movies it never saw, it reproduces each
//! cell's planted phenomenon by the protocols' own metrics within 25 % of the planted circuit's
//! value (issue 6). The planted values are measured here, not copied. The third check, that the
//! unit sufficit ranks first for each cell carries the matching planted pathway's filter with
//! the right sign, needs the whole demo run: tests/cli_demo.rs makes it on the embedded model,
//! which is this file (so the demo runs once in the suite). `sufficit demo-models --check FILE`
//! prints these checks for a candidate fit.
//!
//! The shipped fit is run W1 of docs/performance.md, session 23: each cell fitted alone by its
//! own recipe, recorded in the model's `.json`; cell 1 with its temporal filters in a smooth
//! basis and 45 % of its swept bars at full contrast, where the planted reversal units saturate.

mod demo_support;

use demo_support::load;
use sufficit::demo::checks::{relative_error, PHENOMENA};
use sufficit::demo::heldout::fresh_correlations;
use sufficit::demo::PLANTED_FILE;

const FITTED_FILE: &str = "synthetic-sensor-fitted.onnx";

#[test]
fn the_fitted_model_predicts_fresh_movies_with_r_of_at_least_0_8_per_cell() {
    let found = fresh_correlations(&load(PLANTED_FILE), &load(FITTED_FILE)).unwrap();
    let mut short = Vec::new();
    for (cell, c) in found.iter().enumerate() {
        eprintln!("cell {cell}: pooled r {:.3} ({})", c.pooled, c.by_movie_line());
        // Every cell is measured and printed before the verdict.
        if c.pooled.is_nan() || c.pooled < 0.8 {
            short.push(format!("cell {cell}: held-out r {:.3} < 0.8 ({})", c.pooled, c.by_movie_line()));
        }
    }
    assert!(short.is_empty(), "{}", short.join("; "));
}

/// Cell `cell`'s phenomenon (sufficit::demo::checks::PHENOMENA) on the planted and on the
/// fitted model, within 25 % of the planted value (issue 6).
fn assert_close(cell: usize) {
    let p = &PHENOMENA[cell];
    let planted = p.measure(&load(PLANTED_FILE)).unwrap();
    let fitted = p.measure(&load(FITTED_FILE)).unwrap();
    let off = relative_error(planted, fitted);
    eprintln!("cell {cell}, {}: planted {planted:.3}, fitted {fitted:.3}", p.name);
    assert!(
        off <= 0.25,
        "cell {cell}, {}: fitted {fitted:.3} is {:.0} % off the planted {planted:.3}",
        p.name,
        100.0 * off
    );
}

#[test]
fn the_fitted_resonant_cell_answers_the_omitted_flash_as_the_planted_one() {
    // Cell 0 at the resonant period (100 ms): the peak after the omission above baseline.
    assert_close(0);
}

#[test]
fn the_fitted_reversal_cell_answers_the_reversing_bar_as_the_planted_one() {
    // The demo's bar, where the planted ratio sits on a plateau (sufficit::demo::REVERSAL_BAR).
    assert_close(1);
}

#[test]
fn the_fitted_object_motion_cell_tells_differential_from_global_motion_as_the_planted_one() {
    assert_close(2);
}
