//! `sufficit demo`: the whole pipeline on the shipped model, end to end.

mod cli_support;

use cli_support::{json, s, sufficit};
use sufficit::demo::recovered::PLANTED;

#[test]
fn demo_runs_every_stage_for_every_cell_and_says_where_it_wrote() {
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("demo");
    let (ok, text) = sufficit(&["demo", "--out", s(&out), "--quiet"]);
    assert!(ok, "{text}");
    assert!(text.contains(out.to_str().unwrap()), "demo must say where its results are: {text}");
    for protocol in [
        "omitted-flash",
        "reversing-bar",
        "differential-motion",
        "flashes",
        "steps",
        "moving-bar",
        "gratings",
        "white-noise",
    ] {
        assert!(out.join("stimuli").join(protocol).join("stimulus.json").is_file(), "{protocol} stimulus");
        assert!(out.join("responses").join(protocol).join("metrics.json").is_file(), "{protocol} metrics");
    }
    for cell in 0..3 {
        let base = out.join(format!("cell-{cell}"));
        let sub = json(&base.join("reduce/subcircuit.json"));
        assert_eq!(sub["target"]["cell"], cell);
        assert!(sub["fidelity"]["fve"].as_f64().unwrap() >= 0.9, "cell {cell}: {}", sub["fidelity"]);
        assert!(json(&base.join("attribute/attribution.json"))["completeness_residual"].as_f64().unwrap() < 0.01);
        assert!(!json(&base.join("knockout/knockouts.json"))["knockouts"].as_array().unwrap().is_empty());
    }
    assert_eq!(json(&out.join("run.json"))["command"], "demo");
    // The report: every cell's sections, and the demo says where it is.
    let report = out.join("report/report.html");
    assert!(text.contains(report.to_str().unwrap()), "demo must say where the report is: {text}");
    let html = std::fs::read_to_string(&report).unwrap();
    for (cell, protocol) in [(0, "omitted-flash"), (1, "reversing-bar"), (2, "differential-motion")] {
        for part in ["attribution", "circuit", "knockouts"] {
            let id = format!("id=\"m1-cell-{cell}-{protocol}-{part}\"");
            assert!(html.contains(&id), "{id} missing from the demo report");
        }
    }
    assert!(html.matches("<figure class=\"image\"").count() == 8, "a stimulus strip per protocol");
    assert!(html.contains("Kendall tau"), "baseline stability");
    // Recovered vs planted: each cell's top first-layer unit is matched to one of that cell's
    // planted pathways, and the kept units together are compared with each pathway. The demo
    // model is the fitted one (issue 6): every cell is recovered (top unit's filter r >= 0.8,
    // right sign).
    let truth = json(&out.join("ground-truth/ground_truth.json"));
    for (cell, c) in truth["cells"].as_array().unwrap().iter().enumerate() {
        assert_eq!(c["cell"], cell);
        let matched = c["matched_channel"].as_u64().unwrap();
        assert!(PLANTED[cell].iter().any(|&(p, _)| p as u64 == matched), "cell {cell} matched channel {matched}");
        for p in c["planted"].as_array().unwrap() {
            let (top, span) = (p["filter_correlation"].as_f64().unwrap(), p["span_correlation"].as_f64().unwrap());
            // The top unit is one of the kept units, so the span carries at least |its r|.
            assert!(span >= top.abs() - 1e-6 && span <= 1.0 + 1e-9, "cell {cell}: span {span} vs top {top}");
        }
        assert!(c["recovered"].as_bool().unwrap(), "cell {cell}: {c}");
    }
    assert!(html.contains("id=\"m1-recovered\"") && html.contains("Recovered vs planted"));
    assert!(text.contains("closest to the planted resonant pathway"), "{text}");
}

#[test]
fn demo_on_a_model_file_that_is_not_there_names_it_and_writes_nothing() {
    // The maintainers' `--model` (a candidate fit instead of the embedded model) is read before
    // anything is written.
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("demo");
    let missing = d.path().join("candidate.onnx");
    let (ok, text) = sufficit(&["demo", "--model", s(&missing), "--out", s(&out), "--quiet"]);
    assert!(!ok, "{text}");
    assert!(text.contains("candidate.onnx"), "the error must name the file: {text}");
    assert!(!out.exists(), "nothing may be written when the model cannot be read");
}

#[test]
fn demo_models_check_on_a_model_file_that_is_not_there_names_it_and_writes_nothing() {
    // The maintainers' `demo-models --check` judges a candidate fit and writes nothing, not even
    // the planted model into the default output folder.
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("models");
    let missing = d.path().join("candidate.onnx");
    let (ok, text) = sufficit(&["demo-models", "--check", s(&missing), "--out", s(&out)]);
    assert!(!ok, "{text}");
    assert!(text.contains("candidate.onnx"), "the error must name the file: {text}");
    assert!(!out.exists(), "--check writes nothing");
}
