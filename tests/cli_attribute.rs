//! `attribute` through the command line: its files, and its refusals.

mod cli_support;
use cli_support::{s, sufficit};
use std::path::{Path, PathBuf};

fn model() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/models/pytorch_style.onnx")
}

#[test]
fn attribute_writes_its_results_and_refuses_bad_requests() {
    let d = tempfile::tempdir().unwrap();
    let (stim, out) = (d.path().join("stim"), d.path().join("attr"));
    let (ok, text) = sufficit(&["stimulus", "flashes", "--model", s(&model()), "--out", s(&stim), "--quiet"]);
    assert!(ok, "{text}");
    let (ok, text) = sufficit(&[
        "attribute",
        s(&model()),
        s(&stim),
        "--cell",
        "2",
        "--input-ig",
        "--compare-baselines",
        "shuffled",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert!(ok, "{text}");
    let a: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("attribution.json")).unwrap()).unwrap();
    assert_eq!(a["schema"], "sufficit/1");
    for key in ["target", "baseline", "steps", "f_input", "f_baseline", "completeness_residual", "units"] {
        assert!(!a[key].is_null(), "{key} missing");
    }
    assert!(a["completeness_residual"].as_f64().unwrap() <= 0.01);
    let units = a["units"].as_array().unwrap();
    assert_eq!(units.len(), 4);
    for key in ["layer", "channel", "conductance", "rank", "sign"] {
        assert!(!units[0][key].is_null(), "unit {key}");
    }
    assert_eq!(a["baseline_agreement"][0]["baseline"], "shuffled");
    let time: ndarray::Array2<f32> = ndarray_npy::read_npy(out.join("conductance_time.npy")).unwrap();
    assert_eq!(time.nrows(), 4);
    let space: ndarray::ArrayD<f32> = ndarray_npy::read_npy(out.join("conductance_space.npy")).unwrap();
    assert_eq!(space.shape(), &[4, 10, 10]);
    let ig: ndarray::Array3<f32> = ndarray_npy::read_npy(out.join("input_ig.npy")).unwrap();
    assert_eq!(ig.dim().1, 14);
    for f in ["conductance_time.svg", "conductance_ranking.svg", "run.json"] {
        assert!(out.join(f).exists(), "{f}");
    }

    let never = d.path().join("never");
    let m = model();
    for (args, needle) in [
        (vec!["--cell", "7"], "cell 7 is out of range"),
        (vec!["--layer", "conv9"], "attributable layers: relu1"),
        (vec!["--window", "5000:6000"], "outside the stimulus"),
        (vec!["--baseline", "purple"], "baseline 'purple'"),
        (vec!["--steps", "0"], "--steps '0'"),
    ] {
        let mut all = vec!["attribute", s(&m), s(&stim), "--out", s(&never)];
        all.extend(args);
        let (ok, text) = sufficit(&all);
        assert!(!ok && text.contains(needle) && !text.contains("panicked"), "{needle}: {text}");
        assert!(!never.exists());
    }
}
