//! Writing a `respond` results folder.

use crate::output::OutputDir;
use crate::stimulus::protocols::Measured;
use crate::stimulus::Meta;
use crate::Result;
use ndarray::Array2;
use serde_json::json;

/// Write responses.npy, responses.csv, responses.svg, metrics.json and any metric arrays.
pub fn write_responses(
    out: &OutputDir,
    rates: &Array2<f32>,
    meta: &Meta,
    rf_centres: &[(f64, f64)],
    measured: &Measured,
    model_sha256: &str,
) -> Result<()> {
    out.write_npy("responses.npy", rates)?;
    let mut csv = String::from("frame,time_ms");
    for c in 0..rates.ncols() {
        csv += &format!(",cell_{c}");
    }
    csv.push('\n');
    for (t, row) in rates.rows().into_iter().enumerate() {
        csv += &format!("{t},{:.3}", t as f64 * 1000.0 / meta.frame_rate_hz);
        for v in row {
            csv += &format!(",{v}");
        }
        csv.push('\n');
    }
    out.write_bytes("responses.csv", csv.as_bytes())?;
    let svg = crate::figure::svg(&super::Responses { rates, meta })?;
    out.write_bytes("responses.svg", svg.as_bytes())?;
    for (name, a) in &measured.arrays {
        out.write_npy(&format!("{name}.npy"), a)?;
    }
    let metrics = json!({
        "schema": "sufficit/1",
        "protocol": meta.protocol,
        "model_sha256": model_sha256,
        "frames": rates.nrows(),
        "cells": rates.ncols(),
        "rf_centres_px": rf_centres.iter().map(|(r, c)| json!({"row": r, "column": c})).collect::<Vec<_>>(),
        "metrics": measured.summary,
    });
    out.write_json("metrics.json", &metrics)
}
