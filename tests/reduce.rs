//! `reduce` on a planted circuit whose answer is known by construction: the kept channels, their
//! filters and signs, minimality, the exported model, knock-out ranking, and refusals.

mod cli_support;
mod planted;

use cli_support::{json, s, sufficit};
use ndarray::{Array1, Array2};
use ndarray_npy::read_npy;
use planted::{planted_filters, write_planted};
use std::path::{Path, PathBuf};

/// Pearson correlation.
fn corr(a: &[f32], b: &[f32]) -> f64 {
    let n = a.len() as f64;
    let (ma, mb) = (a.iter().map(|&v| v as f64).sum::<f64>() / n, b.iter().map(|&v| v as f64).sum::<f64>() / n);
    let cov: f64 = a.iter().zip(b).map(|(&x, &y)| (x as f64 - ma) * (y as f64 - mb)).sum();
    let va: f64 = a.iter().map(|&x| (x as f64 - ma).powi(2)).sum();
    let vb: f64 = b.iter().map(|&y| (y as f64 - mb).powi(2)).sum();
    cov / (va * vb).sqrt()
}

/// The planted model and a flash stimulus for it, with the analysis window spanning every flash.
fn setup(d: &Path) -> (PathBuf, PathBuf, String) {
    let (model, stim) = (d.join("planted.onnx"), d.join("stim"));
    write_planted(&model);
    let (ok, text) = sufficit(&["stimulus", "flashes", "--model", s(&model), "--out", s(&stim), "--quiet"]);
    assert!(ok, "{text}");
    let meta = json(&stim.join("stimulus.json"));
    let frames = meta["frames"].as_u64().unwrap();
    let rest = meta["windows"][0]["end"].as_u64().unwrap();
    (model, stim, format!("{rest}:{frames}"))
}

/// Run `reduce MODEL STIM --out OUT --quiet` with `extra` options.
fn reduce_cli(model: &Path, stim: &Path, out: &Path, extra: &[&str]) -> (bool, String) {
    let mut args = vec!["reduce", s(model), s(stim), "--out", s(out), "--quiet"];
    args.extend_from_slice(extra);
    sufficit(&args)
}

#[test]
fn reduce_recovers_the_planted_circuit_its_filters_signs_and_knockouts() {
    let d = tempfile::tempdir().unwrap();
    let (model, stim, window) = setup(d.path());
    let out = d.path().join("reduced");
    let (ok, text) = reduce_cli(&model, &stim, &out, &["--cell", "0", "--layer", "all", "--window", &window]);
    assert!(ok, "{text}");
    let sub = json(&out.join("subcircuit.json"));
    assert_eq!(sub["schema"], "sufficit/1");
    let kept = |name: &str| -> Vec<u64> {
        let l = sub["layers"].as_array().unwrap().iter().find(|l| l["layer"] == name).unwrap();
        let mut k: Vec<u64> = l["kept"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap()).collect();
        k.sort();
        k
    };
    assert_eq!(kept("bipolar"), vec![0, 2], "{sub:#}");
    assert_eq!(kept("amacrine"), vec![0], "{sub:#}");
    assert!(sub["fidelity"]["fve"].as_f64().unwrap() >= 0.9);

    // Signs: ON excites, OFF inhibits (through the negative second-layer weight).
    let unit = |layer: &str, c: u64| {
        sub["units"].as_array().unwrap().iter().find(|u| u["layer"] == layer && u["channel"] == c).unwrap().clone()
    };
    assert_eq!(unit("bipolar", 0)["sign"], "excitatory");
    assert_eq!(unit("bipolar", 2)["sign"], "inhibitory");
    assert_eq!(unit("amacrine", 0)["sign"], "excitatory");

    // Kernel SVD recovers the planted separable filters (r >= 0.99).
    let planted = planted_filters();
    for c in [0usize, 2] {
        let spatial: Array2<f32> = read_npy(out.join(format!("units/bipolar_{c}_spatial.npy"))).unwrap();
        let temporal: Array1<f32> = read_npy(out.join(format!("units/bipolar_{c}_temporal.npy"))).unwrap();
        let rs = corr(spatial.as_slice().unwrap(), planted[c].0.as_slice().unwrap());
        let rt = corr(temporal.as_slice().unwrap(), planted[c].1.as_slice().unwrap());
        assert!(rs >= 0.99 && rt >= 0.99, "channel {c}: spatial r {rs}, temporal r {rt}");
        let share = unit("bipolar", c as u64)["kernel"]["rank_one_share"].as_f64().unwrap();
        assert!((share - 1.0).abs() < 1e-4, "planted kernels are separable: share {share}");
    }
    // The first-layer nonlinearity is the model's own ReLU with bias 0.05: threshold -0.05, gain 1.
    let nl = &unit("bipolar", 0)["nonlinearity"];
    assert_eq!(nl["kind"], "exact");
    assert!((nl["gain"].as_f64().unwrap() - 1.0).abs() < 1e-3, "{nl}");
    assert!((nl["threshold"].as_f64().unwrap() + 0.05).abs() < 0.05, "{nl}");

    // Edges: ON -> amacrine:0 positive, OFF -> amacrine:0 negative, amacrine:0 -> cell 0.
    let edge = |from: &str, to: &str| {
        sub["edges"].as_array().unwrap().iter().find(|e| e["from"] == from && e["to"] == to).unwrap()["weight"]
            .as_f64()
            .unwrap()
    };
    assert!(edge("bipolar:0", "amacrine:0") > 0.0);
    assert!(edge("bipolar:2", "amacrine:0") < 0.0);
    assert!(edge("amacrine:0", "cell 0").abs() > 0.0);

    // Minimality, as recorded: dropping any kept unit falls below the target.
    for l in sub["layers"].as_array().unwrap() {
        for v in l["score_without_each_kept_unit"].as_array().unwrap() {
            assert!(v.as_f64().unwrap() < 0.9, "{l}");
        }
    }
    // The exported model equals the clamped reduction.
    let ex = &sub["export"];
    assert!(ex["max_relative_difference_engine"].as_f64().unwrap() < 1e-5, "{ex}");
    assert!(ex["max_relative_difference_tract"].as_f64().unwrap() < 1e-5, "{ex}");
    assert!(ex["layers"].as_array().unwrap().iter().all(|l| l["method"] == "removed"), "{ex}");

    for f in ["units/bipolar_0.svg", "units/amacrine_0.svg"] {
        let svg = std::fs::read_to_string(out.join(f)).unwrap();
        for label in ["x (um)", "time before response (ms)", "generator signal", "activation (model units)"] {
            assert!(svg.contains(label), "{f} lacks the axis label '{label}'");
        }
    }
    for f in [
        "fidelity_curve.csv",
        "fidelity_curve.svg",
        "reduced_response.csv",
        "reduced_response.svg",
        "knockouts.json",
        "knockouts.csv",
        "conductance_time.npy",
        "run.json",
        "reduced.onnx",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }

    // Knock-outs over every unit rank the planted ones first.
    let ko = d.path().join("ko");
    let (ok, text) =
        sufficit(&["knockout", s(&model), s(&stim), "--cell", "0", "--window", &window, "--out", s(&ko), "--quiet"]);
    assert!(ok, "{text}");
    let k = json(&ko.join("knockouts.json"));
    let mut top: Vec<String> =
        k["knockouts"].as_array().unwrap()[..3].iter().map(|e| e["units"][0].as_str().unwrap().to_string()).collect();
    top.sort();
    assert_eq!(top, vec!["amacrine:0", "bipolar:0", "bipolar:2"], "{k:#}");
}

/// The planted model loaded, with its flash stimulus and the frames after the rest period.
fn loaded(d: &Path) -> (sufficit::model::Model, sufficit::stimulus::Stimulus, Vec<usize>) {
    let (model, stim, window) = setup(d);
    let m = sufficit::model::Model::load(&model, &Default::default()).unwrap();
    let st = sufficit::stimulus::read_stimulus(&stim).unwrap();
    let (a, b) = window.split_once(':').unwrap();
    (m, st, (a.parse().unwrap()..b.parse().unwrap()).collect())
}

#[test]
fn every_kept_unit_is_necessary_for_the_target_when_checked_independently() {
    use sufficit::attribution::{attribute, Baseline, Request, Rule, Steps};
    use sufficit::engine::{Override, Part};
    use sufficit::reduction::circuit::{reduce, Plan};
    use sufficit::reduction::fidelity::Criterion;
    use sufficit::reduction::search::Judge;
    use sufficit::reduction::Clamp;
    let d = tempfile::tempdir().unwrap();
    let (m, st, frames) = loaded(d.path());
    let layers = sufficit::attribution::resolve_layers(&m, "all").unwrap();
    for (criterion, target) in [(Criterion::Fve, 0.9), (Criterion::Fve, 0.99), (Criterion::Peak, 0.8)] {
        let req = Request {
            cells: vec![(0, 1.0)],
            frames: frames.clone(),
            layers: layers.clone(),
            baseline: Baseline::Gray,
            rule: Rule::Midpoint,
            steps: Steps::Fixed(32),
            input_ig: false,
            seed: 1,
        };
        let att = attribute(&m, &st.movie, &req).unwrap();
        let plan = Plan { layers: layers.clone(), criterion, target, clamp: Clamp::Baseline, positions: false };
        let circuit = reduce(&m, &st.movie, 0, &frames, &plan, &att.layers, &|_| {}).unwrap();
        let judge = Judge::new(&m, &st.movie, 0, &frames).unwrap();
        let reached = criterion.score(&judge.fidelity(&judge.run(&circuit.overrides()).unwrap()));
        assert!(reached >= target, "{criterion:?} {target}: the circuit reaches only {reached}");
        for l in &circuit.layers {
            for &c in &l.channels {
                // The circuit with this one unit silenced as well.
                let mut o = circuit.overrides();
                o.push(Override { value: l.layer, part: Part::Channels(vec![c]), with: l.clamp.clone() });
                let score = criterion.score(&judge.fidelity(&judge.run(&o).unwrap()));
                assert!(
                    score < target,
                    "{criterion:?} {target}: unit {c} of layer {} is not needed ({score})",
                    l.layer
                );
            }
        }
    }
}

#[test]
fn positions_mode_keeps_fidelity_and_is_minimal() {
    let d = tempfile::tempdir().unwrap();
    let (model, stim, window) = setup(d.path());
    let out = d.path().join("pos");
    let (ok, text) = reduce_cli(&model, &stim, &out, &["--layer", "amacrine", "--positions", "--window", &window]);
    assert!(ok, "{text}");
    let sub = json(&out.join("subcircuit.json"));
    assert!(sub["fidelity"]["fve"].as_f64().unwrap() >= 0.9, "{sub:#}");
    let pos = &sub["layers"][0]["positions"];
    let kept = pos["kept"].as_u64().unwrap();
    // Fewer positions than the whole 10 x 10 channel, and each one needed.
    assert!(kept > 0 && kept < 100, "{pos}");
    assert!(pos["score_without_each_kept_position"].as_array().unwrap().iter().all(|v| v.as_f64().unwrap() < 0.9));
    // Positions pruned inside a channel cannot be deleted from the file: a constant input instead.
    assert_eq!(sub["export"]["layers"][0]["method"], "constant-input");
    assert!(sub["export"]["max_relative_difference_engine"].as_f64().unwrap() < 1e-5);
}

#[test]
fn reduce_refuses_bad_requests_with_clear_messages() {
    let d = tempfile::tempdir().unwrap();
    let (model, stim, _) = setup(d.path());
    let out = d.path().join("never");
    for (extra, expect) in [
        (vec!["--fidelity", "0"], "outside (0, 1]"),
        (vec!["--fidelity", "1.5"], "outside (0, 1]"),
        (vec!["--metric", "area"], "use fve or peak"),
        (vec!["--layer", "conv1"], "cannot be ablated"),
        (vec!["--layer", "nowhere"], "unknown layer 'nowhere'"),
        (vec!["--cell", "7"], "cell 7 is out of range"),
    ] {
        let (ok, text) = reduce_cli(&model, &stim, &out, &extra);
        assert!(!ok && text.contains(expect), "{extra:?}: {text}");
    }
    // A stimulus folder whose analysis windows were removed, and no --window.
    let bare = d.path().join("bare");
    std::fs::create_dir(&bare).unwrap();
    std::fs::copy(stim.join("movie.npy"), bare.join("movie.npy")).unwrap();
    let mut meta = json(&stim.join("stimulus.json"));
    meta["windows"] = serde_json::json!([]);
    std::fs::write(bare.join("stimulus.json"), meta.to_string()).unwrap();
    let (ok, text) = reduce_cli(&model, &bare, &out, &[]);
    assert!(!ok && text.contains("no analysis window") && text.contains("--window"), "{text}");
    assert!(!out.exists(), "a refused run must not create its output folder");
}

#[test]
fn exported_reduced_model_runs_the_same_in_onnxruntime() {
    // Outside reference: onnxruntime (scripts/check_reduced_onnxruntime.py, versions recorded in
    // the fixture) runs a reduced.onnx that sufficit exported from the planted circuit.
    let fixtures = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/reduced");
    let d = tempfile::tempdir().unwrap();
    let (model, stim, window) = setup(d.path());
    let out = d.path().join("r");
    let (ok, text) = reduce_cli(&model, &stim, &out, &["--layer", "all", "--window", &window]);
    assert!(ok, "{text}");
    let fresh = out.join("reduced.onnx");
    let st = sufficit::stimulus::read_stimulus(&stim).unwrap();
    let first: usize = window.split_once(':').unwrap().0.parse().unwrap();
    let ends: Vec<usize> = (0..8).map(|k| first + 7 * k).collect();
    let x = sufficit::response::windows_at(&st.movie, planted::LAGS, &ends);
    if std::env::var_os("SUFFICIT_WRITE_FIXTURES").is_some() {
        std::fs::create_dir_all(&fixtures).unwrap();
        std::fs::copy(&fresh, fixtures.join("planted_reduced.onnx")).unwrap();
        ndarray_npy::write_npy(fixtures.join("input.npy"), &x).unwrap();
        return;
    }
    let reference = json(&fixtures.join("onnxruntime.json"));
    let ort: Vec<f64> = reference["output"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let input: ndarray::Array4<f32> = read_npy(fixtures.join("input.npy")).unwrap();
    let run = |p: &Path| -> Vec<f64> {
        let m = sufficit::model::Model::load(p, &Default::default()).unwrap();
        let t = m.graph.forward(input.clone().into_dyn(), &[]).unwrap();
        t.outputs()[0].iter().map(|&v| v as f64).collect()
    };
    let scale = ort.iter().fold(0f64, |m, v| m.max(v.abs()));
    for (label, ours) in
        [("committed export", run(&fixtures.join("planted_reduced.onnx"))), ("fresh export", run(&fresh))]
    {
        assert_eq!(ours.len(), ort.len());
        let err = ours.iter().zip(&ort).fold(0f64, |e, (a, b)| e.max((a - b).abs() / scale));
        assert!(err < 1e-5, "{label}: engine vs onnxruntime relative difference {err}");
    }
}

#[test]
fn reduce_reuses_a_matching_attribution_and_refuses_one_that_does_not_match() {
    let d = tempfile::tempdir().unwrap();
    let (model, stim, _) = setup(d.path());
    let att = d.path().join("att");
    let (ok, text) = sufficit(&[
        "attribute",
        s(&model),
        s(&stim),
        "--cell",
        "0",
        "--layer",
        "all",
        "--steps",
        "16",
        "--out",
        s(&att),
        "--quiet",
    ]);
    assert!(ok, "{text}");
    let (fresh, reused) = (d.path().join("fresh"), d.path().join("reused"));
    let common = ["--cell", "0", "--layer", "all", "--steps", "16"];
    assert!(reduce_cli(&model, &stim, &fresh, &common).0);
    let mut with = common.to_vec();
    with.extend(["--attribution", s(&att)]);
    let (ok, text) = reduce_cli(&model, &stim, &reused, &with);
    assert!(ok, "{text}");
    // The same path integral read back gives the same circuit, filters and numbers.
    assert_eq!(
        std::fs::read_to_string(fresh.join("subcircuit.json")).unwrap(),
        std::fs::read_to_string(reused.join("subcircuit.json")).unwrap()
    );
    // Knock-outs of every unit from `knockout`, read back for the kept units, give the same
    // subcircuit.json and knockouts.json as silencing them again.
    let ko = d.path().join("ko");
    assert!(sufficit(&["knockout", s(&model), s(&stim), "--cell", "0", "--out", s(&ko), "--quiet"]).0);
    let both = d.path().join("both");
    let mut with_ko = with.clone();
    with_ko.extend(["--knockouts", s(&ko)]);
    let (ok, text) = reduce_cli(&model, &stim, &both, &with_ko);
    assert!(ok, "{text}");
    for f in ["subcircuit.json", "knockouts.json"] {
        assert_eq!(
            std::fs::read_to_string(fresh.join(f)).unwrap(),
            std::fs::read_to_string(both.join(f)).unwrap(),
            "{f}"
        );
    }
    // Another cell or another step setting is refused, naming what differs.
    let (ok, text) = reduce_cli(
        &model,
        &stim,
        &d.path().join("x"),
        &["--cell", "1", "--layer", "all", "--steps", "16", "--attribution", s(&att)],
    );
    assert!(!ok && text.contains("target") && text.contains("does not match"), "{text}");
    let (ok, text) =
        reduce_cli(&model, &stim, &d.path().join("y"), &["--cell", "0", "--layer", "all", "--attribution", s(&att)]);
    assert!(!ok && text.contains("step setting"), "{text}");
    assert!(!d.path().join("x").exists() && !d.path().join("y").exists());
}
