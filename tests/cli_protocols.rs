//! `stimulus` and `respond` end to end through the command line, and their refusals.

mod cli_support;
mod common;

use cli_support::{s, sufficit};
use common::*;
use ndarray::{Array3, Array4};
use std::path::{Path, PathBuf};
use tract_onnx::pb;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/models").join(name)
}

/// Expect a refusal mentioning every needle, with `out` left uncreated.
fn refused(args: &[&str], out: &Path, needles: &[&str]) {
    let (ok, text) = sufficit(args);
    assert!(!ok, "{args:?} should fail");
    assert!(!text.contains("panicked"), "{text}");
    for n in needles {
        assert!(text.contains(n), "'{n}' missing from: {text}");
    }
    assert!(!out.exists(), "{} was written despite the error", out.display());
}

#[test]
fn omitted_flash_stimulus_and_responses_round_trip() {
    let d = tempfile::tempdir().unwrap();
    let (stim, res) = (d.path().join("stim"), d.path().join("res"));
    let model = fixture("pytorch_style.onnx");
    let (ok, text) = sufficit(&[
        "stimulus",
        "omitted-flash",
        "--model",
        s(&model),
        "--out",
        s(&stim),
        "period_ms=80,100",
        "--quiet",
    ]);
    assert!(ok, "{text}");
    for f in ["movie.npy", "stimulus.json", "preview.png", "run.json"] {
        assert!(stim.join(f).exists(), "{f}");
    }
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(stim.join("stimulus.json")).unwrap()).unwrap();
    assert_eq!(meta["schema"], "sufficit/1");
    assert_eq!(meta["history_frames"], 8, "one model window of gray frames (8 lags)");
    assert_eq!(meta["parameters"]["period_ms"]["unit"], "ms");
    let (ok, text) = sufficit(&["respond", s(&model), s(&stim), "--out", s(&res), "--quiet", "--threads", "2"]);
    assert!(ok, "{text}");
    let rates: ndarray::Array2<f32> = ndarray_npy::read_npy(res.join("responses.npy")).unwrap();
    assert_eq!(rates.dim(), (meta["frames"].as_u64().unwrap() as usize, 5));
    let metrics: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(res.join("metrics.json")).unwrap()).unwrap();
    assert_eq!(metrics["metrics"]["cells"].as_array().unwrap().len(), 5);
    assert_eq!(metrics["metrics"]["cells"][0]["periods"].as_array().unwrap().len(), 2);
    let run: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(res.join("run.json")).unwrap()).unwrap();
    assert_eq!(run["model"]["sha256"].as_str().unwrap().len(), 64);
    let csv = std::fs::read_to_string(res.join("responses.csv")).unwrap();
    assert_eq!(csv.lines().count(), rates.nrows() + 1);
    assert!(std::fs::read_to_string(res.join("responses.svg")).unwrap().starts_with("<svg"));
}

#[test]
fn bad_protocol_requests_are_refused_and_nothing_is_written() {
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("never");
    let base = ["stimulus", "--size", "10x10", "--lags", "4", "--out", s(&out)];
    fn with<'a>(base: &[&'a str], extra: &[&'a str]) -> Vec<&'a str> {
        base.iter().chain(extra).copied().collect()
    }
    refused(&with(&base, &["omited-flash"]), &out, &["unknown protocol", "did you mean 'omitted-flash'"]);
    refused(&with(&base, &["omitted-flash", "flashes=6", "omitted=9"]), &out, &["beyond the train"]);
    refused(&with(&base, &["omitted-flash", "flash_ms=150", "period_ms=100"]), &out, &["does not fit"]);
    refused(&with(&base, &["flashes", "contrasts=0.5,2"]), &out, &["contrasts", "between"]);
    refused(&with(&base, &["gratings", "speed=3"]), &out, &["no parameter 'speed'"]);
    refused(&["stimulus", "flashes", "--out", s(&out)], &out, &["--model"]);
}

#[test]
fn a_stimulus_of_the_wrong_size_or_type_is_refused() {
    let d = tempfile::tempdir().unwrap();
    let stim = d.path().join("small");
    let (ok, text) = sufficit(&["stimulus", "flashes", "--size", "10x10", "--lags", "8", "--out", s(&stim), "--quiet"]);
    assert!(ok, "{text}");
    let out = d.path().join("never");
    refused(&["respond", s(&fixture("pytorch_style.onnx")), s(&stim), "--out", s(&out)], &out, &["10x10", "14x14"]);
    let npy = d.path().join("movie.npy");
    ndarray_npy::write_npy(&npy, &Array3::<f64>::zeros((5, 14, 14))).unwrap();
    let arg = format!("path={}", npy.display());
    refused(
        &["stimulus", "movie", &arg, "--model", s(&fixture("pytorch_style.onnx")), "--out", s(&out)],
        &out,
        &["float32"],
    );
}

/// An LN cell as ONNX: one full-size convolution (the filter) and Exp.
fn ln_model(filter: &Array4<f32>, path: &Path) {
    let (l, h, w) = (filter.shape()[1], filter.shape()[2], filter.shape()[3]);
    let graph = pb::GraphProto {
        name: "ln".into(),
        node: vec![
            node("Conv", "filter", &["x", "k"], "g"),
            node("Flatten", "flat", &["g"], "f"),
            node("Exp", "exp", &["f"], "y"),
        ],
        initializer: vec![floats("k", &[1, l as i64, h as i64, w as i64], filter.iter().copied().collect())],
        input: vec![value_info("x", &[D::S("N"), D::N(l as i64), D::N(h as i64), D::N(w as i64)])],
        output: vec![value_info("y", &[D::S("N"), D::N(1)])],
        ..Default::default()
    };
    save(&model_of(graph), path);
}

#[test]
fn white_noise_through_an_onnx_ln_cell_recovers_its_filter() {
    // Chichilnisky (2001): the STA of an LN neuron under white noise is proportional to its
    // linear filter. Here the whole pipeline (stimulus, layout, windows, model, STA) must show it.
    let (l, h, w) = (6, 8, 8);
    let filter = Array4::from_shape_fn((1, l, h, w), |(_, k, y, x)| {
        let age = (l - 1 - k) as f32;
        let t = (-age / 1.2).exp() - 0.5 * (-age / 2.5).exp();
        t * (-(((y as f32 - 3.0).powi(2) + (x as f32 - 4.5).powi(2)) / 3.0)).exp() * 0.6
    });
    let d = tempfile::tempdir().unwrap();
    let (model, stim, res) = (d.path().join("ln.onnx"), d.path().join("noise"), d.path().join("res"));
    ln_model(&filter, &model);
    let (ok, text) = sufficit(&[
        "stimulus",
        "white-noise",
        "--model",
        s(&model),
        "--out",
        s(&stim),
        "checker_um=50",
        "duration_ms=200000",
        "--quiet",
    ]);
    assert!(ok, "{text}");
    let (ok, text) = sufficit(&["respond", s(&model), s(&stim), "--out", s(&res), "--quiet"]);
    assert!(ok, "{text}");
    let sta: ndarray::ArrayD<f32> = ndarray_npy::read_npy(res.join("sta.npy")).unwrap();
    assert_eq!(sta.shape(), &[1, l, h, w]);
    let (a, b): (Vec<f64>, Vec<f64>) = sta.iter().zip(filter.iter()).map(|(&p, &q)| (p as f64, q as f64)).unzip();
    let n = a.len() as f64;
    let (ma, mb) = (a.iter().sum::<f64>() / n, b.iter().sum::<f64>() / n);
    let cov: f64 = a.iter().zip(&b).map(|(x, y)| (x - ma) * (y - mb)).sum();
    let r = cov
        / (a.iter().map(|x| (x - ma).powi(2)).sum::<f64>() * b.iter().map(|y| (y - mb).powi(2)).sum::<f64>()).sqrt();
    assert!(r >= 0.95, "STA vs filter correlation {r}");
    // The static nonlinearity of an exponential LN cell rises monotonically.
    let m: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(res.join("metrics.json")).unwrap()).unwrap();
    let curve: Vec<f64> = m["metrics"]["cells"][0]["nonlinearity"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["rate"].as_f64().unwrap())
        .collect();
    assert!(curve.windows(2).all(|p| p[1] > p[0]), "{curve:?}");
}
