//! The planted demo model (models/synthetic-sensor-planted.onnx): each cell shows its own
//! phenomenon by the protocols' metrics and not the others', the shipped file is what the code
//! writes, and reduction recovers the planted pathways.

mod cli_support;
mod demo_support;

use cli_support::{json, s, sufficit};
use demo_support::run;
use serde_json::Value;
use sufficit::demo::planted::{kernel_terms, synthetic_sensor};
use sufficit::demo::REVERSAL_BAR;
use sufficit::model::builder::to_bytes;
use sufficit::model::Model;

fn shipped() -> std::path::PathBuf {
    demo_support::shipped(sufficit::demo::PLANTED_FILE)
}

fn model() -> Model {
    demo_support::load(sufficit::demo::PLANTED_FILE)
}

#[test]
fn the_shipped_planted_model_is_the_one_the_code_writes() {
    let bytes = std::fs::read(shipped()).expect("models/ holds the planted model");
    assert!(bytes == to_bytes(&synthetic_sensor()), "regenerate with `sufficit demo-models --out models`");
}

#[test]
fn the_resonant_cell_alone_responds_after_the_omitted_flash() {
    let m = model();
    let (stim, r, summary) = run(&m, "omitted-flash", &[]);
    // Per cell and period: the peak after the omission and the peak over the last three flashes
    // of the train, both above the pre-train baseline.
    let margins: Vec<Vec<(f64, f64)>> = (0..3)
        .map(|cell| {
            summary["cells"][cell]["periods"]
                .as_array()
                .unwrap()
                .iter()
                .map(|p| {
                    let cond = p["condition"].as_str().unwrap();
                    let last = stim
                        .meta
                        .events
                        .iter()
                        .find(|e| e.name == "last_flash" && e.condition.as_deref() == Some(cond))
                        .unwrap()
                        .frame;
                    let period = (p["period_ms"].as_f64().unwrap() / 10.0).round() as usize;
                    let base = p["baseline"].as_f64().unwrap();
                    let train =
                        (last - 3 * period..last + period / 2).map(|t| r[[t, cell]] as f64).fold(f64::MIN, f64::max);
                    (p["peak_above_baseline"].as_f64().unwrap(), train - base)
                })
                .collect()
        })
        .collect();
    // The resonant cell: at its resonant period (100 ms) the response after the omission is more
    // than twice the train's; it also answers the omission at 80 ms where the train is cancelled.
    let (after, train) = margins[0][2];
    assert!(after > 2.0 * train && after > 5.0, "resonant cell at 100 ms: {after} vs train {train}");
    assert!(margins[0][1].0 > 2.0 && margins[0][1].1 < 0.5, "resonant cell at 80 ms: {:?}", margins[0][1]);
    // The others: nothing after the omission beyond what the train itself evokes.
    for (cell, rows) in margins.iter().enumerate().skip(1) {
        for &(after, train) in rows {
            assert!(after <= train.max(0.0) + 0.5, "cell {cell}: {rows:?}");
        }
    }
}

#[test]
fn the_reversal_cell_alone_responds_at_motion_reversal() {
    // The demo's bar (sufficit::demo::REVERSAL_BAR): the reversal 250 um right of the centre, so
    // the smooth-motion window finds the bar over the receptive-field centre and a cell that
    // merely sees the bar is not mistaken for a reversal cell.
    let (_, _, summary) = run(&model(), "reversing-bar", &REVERSAL_BAR);
    let ratio = |cell: usize| summary["cells"][cell]["reversal_to_smooth_ratio"].as_f64().unwrap();
    assert!(ratio(1) > 5.0, "reversal cell: {}", ratio(1));
    assert!(ratio(0) < 1.5 && ratio(2) < 1.5, "others: {} {}", ratio(0), ratio(2));
}

/// The planted sensor with its two hidden ReLU layers replaced by softplus, the first layer's
/// weights and bias and the second layer's bias multiplied by `k` (the second layer's weights
/// then see inputs `k` times larger) and the readout's weights divided by it: each hidden unit
/// becomes `softplus(k x) / k`, a rectifier whose bend is `1 / k` wide.
fn softplus_copy(k: f32) -> Model {
    let mut proto = synthetic_sensor();
    let graph = proto.graph.as_mut().unwrap();
    for node in graph.node.iter_mut().filter(|n| n.op_type == "Relu") {
        node.op_type = "Softplus".into();
    }
    for init in graph.initializer.iter_mut() {
        let factor = match init.name.as_str() {
            "conv1.weight" | "conv1.bias" | "conv2.bias" => k,
            "readout.weight" => 1.0 / k,
            _ => 1.0,
        };
        let values: Vec<f32> = floats(init).iter().map(|v| factor * v).collect();
        set_floats(init, &values);
    }
    Model::from_proto(proto, std::path::Path::new("softplus-copy.onnx"), &Default::default()).unwrap()
}

/// The values of an initializer stored as raw little-endian f32 (as the project's writer stores
/// them).
fn floats(init: &tract_onnx::pb::TensorProto) -> Vec<f32> {
    init.raw_data.chunks(4).map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])).collect()
}

/// Store `values` in an initializer as raw little-endian f32.
fn set_floats(init: &mut tract_onnx::pb::TensorProto, values: &[f32]) {
    init.raw_data = values.iter().flat_map(|v| v.to_le_bytes()).collect();
}

/// The reversal cell's reversal / smooth ratio on `m` (the demo's bar).
fn reversal_ratio(m: &Model) -> f64 {
    run(m, "reversing-bar", &REVERSAL_BAR).2["cells"][1]["reversal_to_smooth_ratio"].as_f64().unwrap()
}

#[test]
fn the_reversal_response_needs_sharp_rectification() {
    // Why the fitted model's hidden units are ReLU (docs/performance.md, session 9): the same
    // circuit with softplus in place of ReLU loses its reversal response, because softplus
    // bends over a unit-wide range and the circuit's thresholds (4 on a drive of about 7, 0.5
    // on a pooled drive of about 2.6) need a sharp one. Only with weights scaled up several
    // times does the softplus copy come back. Measured on the demo's bar: ratio 1.19 at k = 1,
    // 7.9 at k = 4, 11.8 at k = 10, against 12.0 for the planted circuit (on the earlier 1 mm/s
    // bar 1.04, 6.2, 9.6 against 10.0).
    let ratio = reversal_ratio;
    let (planted, soft, sharp) = (ratio(&model()), ratio(&softplus_copy(1.0)), ratio(&softplus_copy(10.0)));
    eprintln!("reversal / smooth: planted {planted:.2}, softplus copy at k = 1 {soft:.2}, at k = 4 {:.2}, at k = 10 {sharp:.2}", ratio(&softplus_copy(4.0)));
    assert!(soft < 0.25 * planted, "softplus copy at k = 1: {soft:.2} against {planted:.2}");
    assert!((sharp - planted).abs() < 0.1 * planted, "softplus copy at k = 10: {sharp:.2} against {planted:.2}");
}

/// The planted sensor with each direction-selective pathway's kernel `[lags, K1 * K1]` replaced
/// by its best rank-`rank` approximation (truncated SVD, Eckart-Young): the form of the fitted
/// student's first layer, whose kernels are sums of `rank` products of a temporal filter and a
/// spatial map.
fn low_rank_copy(rank: usize) -> Model {
    let mut proto = synthetic_sensor();
    let graph = proto.graph.as_mut().unwrap();
    let init = graph.initializer.iter_mut().find(|i| i.name == "conv1.weight").unwrap();
    let mut w = floats(init);
    let (lags, area) = (sufficit::demo::planted::LAGS, sufficit::demo::planted::K1.pow(2));
    for pathway in 4..8 {
        let kept = &mut w[pathway * lags * area..(pathway + 1) * lags * area];
        kept.fill(0.0);
        for (temporal, spatial) in kernel_terms(pathway, rank) {
            for (l, t) in temporal.iter().enumerate() {
                for (p, s) in spatial.iter().enumerate() {
                    kept[l * area + p] += t * s;
                }
            }
        }
    }
    set_floats(init, &w);
    Model::from_proto(proto, std::path::Path::new("low-rank-copy.onnx"), &Default::default()).unwrap()
}

#[test]
fn rank_two_kernels_can_carry_the_reversal_response() {
    // Why the fitted student's first-layer kernels have rank 2 (src/demo/fit.rs, RANK): the
    // planted direction-selective kernels (a spot moving across a Gaussian envelope) are not
    // separable, and with one term the reversal response is gone; with two (a space-time
    // oriented filter as a sum of two separable ones: Adelson & Bergen, J. Opt. Soc. Am. A 1985)
    // the circuit keeps it within 25 %. Measured on the demo's bar: ratio 1.0 at rank 1, 11.4 at
    // rank 2, 11.6 at rank 3, against 12.0 for the planted circuit.
    let ratio = reversal_ratio;
    let (planted, one, two) = (ratio(&model()), ratio(&low_rank_copy(1)), ratio(&low_rank_copy(2)));
    eprintln!(
        "reversal / smooth: planted {planted:.2}, rank 1 {one:.2}, rank 2 {two:.2}, rank 3 {:.2}",
        ratio(&low_rank_copy(3))
    );
    assert!(one < 0.2 * planted, "rank 1: {one:.2} against {planted:.2}");
    assert!((two - planted).abs() < 0.25 * planted, "rank 2: {two:.2} against {planted:.2}");
}

#[test]
fn the_object_motion_cell_alone_prefers_differential_motion() {
    let (_, _, summary) = run(&model(), "differential-motion", &[]);
    let index = |cell: usize| summary["cells"][cell]["object_motion_index"].as_f64().unwrap();
    // Object-motion index > 0.5 (issue criterion); the others near zero.
    assert!(index(2) > 0.5, "object-motion cell: {}", index(2));
    assert!(index(0).abs() < 0.3 && index(1).abs() < 0.3, "others: {} {}", index(0), index(1));
}

/// The planted index is a steady function of the stimulus, not of how a grating's edges fall on
/// the 50 um pixel grid: periods of 3 to 14 pixels, among them the 4.5- and 9-pixel ones where the
/// cell with sustained subunits and an equal-weight surround answered global jitter (index -0.03
/// and 0.20, with global means of 6.6 and 5.5; docs/performance.md, sessions 16 and 17), all keep
/// it above 0.6 and the global mean below 1 (the resting rate is softplus(-1) = 0.313).
#[test]
fn the_object_motion_index_is_steady_over_grating_periods() {
    for period in ["150", "225", "300", "450", "700"] {
        let arg = format!("period_um={period}");
        let (_, _, summary) = run(&model(), "differential-motion", &[arg.as_str()]);
        let cell = &summary["cells"][2];
        let (index, global) = (cell["object_motion_index"].as_f64().unwrap(), cell["global_mean"].as_f64().unwrap());
        assert!(index > 0.6, "period {period} um: index {index}");
        assert!(global < 1.0, "period {period} um: global mean {global}");
    }
}

/// Reduce `cell` on a stimulus folder drawn from `protocol` and return its subcircuit.json.
fn reduce(protocol: &str, params: &[&str], cell: &str) -> Value {
    let d = tempfile::tempdir().unwrap();
    let (stim, out, m) = (d.path().join("stim"), d.path().join("reduced"), shipped());
    let mut args = vec!["stimulus", protocol];
    args.extend_from_slice(params);
    args.extend_from_slice(&["--model", s(&m), "--out", s(&stim), "--quiet"]);
    let (ok, text) = sufficit(&args);
    assert!(ok, "{text}");
    let (ok, text) =
        sufficit(&["reduce", s(&m), s(&stim), "--cell", cell, "--layer", "all", "--out", s(&out), "--quiet"]);
    assert!(ok, "{text}");
    json(&out.join("subcircuit.json"))
}

fn kept(sub: &Value, layer: &str) -> Vec<u64> {
    let l = sub["layers"].as_array().unwrap().iter().find(|l| l["layer"] == layer).unwrap();
    let mut k: Vec<u64> = l["kept"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap()).collect();
    k.sort();
    k
}

fn sign(sub: &Value, layer: &str, channel: u64) -> String {
    let u = sub["units"].as_array().unwrap().iter().find(|u| u["layer"] == layer && u["channel"] == channel).unwrap();
    u["sign"].as_str().unwrap().to_string()
}

#[test]
fn reduction_recovers_the_planted_pathways_and_their_signs() {
    // Object motion (shortened trials): centre-minus-surround unit 3 built from the ON and OFF
    // transient subunits (pathways 0 and 1).
    let oms = reduce("differential-motion", &["trial_ms=600", "trials=1"], "2");
    assert_eq!((kept(&oms, "units"), kept(&oms, "pathways")), (vec![3], vec![0, 1]), "{oms:#}");
    // A unit's sign is its path gradient summed over positions: the subunits excite from the
    // centre (weight +4) and inhibit from the surround (-5), so summed over space they inhibit.
    assert_eq!(sign(&oms, "units", 3), "excitatory");
    assert_eq!((sign(&oms, "pathways", 0), sign(&oms, "pathways", 1)), ("inhibitory".into(), "inhibitory".into()));
    // Omitted flash: unit 0 = resonant pathway (2, excitatory) minus the fast ON pathway (3,
    // inhibitory).
    let osr = reduce("omitted-flash", &[], "0");
    assert_eq!((kept(&osr, "units"), kept(&osr, "pathways")), (vec![0], vec![2, 3]), "{osr:#}");
    assert_eq!(sign(&osr, "pathways", 2), "excitatory");
    assert_eq!(sign(&osr, "pathways", 3), "inhibitory");
    // Reversal (the bar reversing leftwards): the leftward pathway (6, excitatory) minus its
    // delayed copy (7, inhibitory), through their unit (2) and that unit's cap (5, read
    // negatively): the whole planted mechanism. At 750 um/s the delayed copy catches up
    // within the 200 ms reversal window and ends the burst there, so it is needed (with the
    // earlier 1 mm/s bar it was silent in the window and reduction kept pathway 6 alone).
    let rev = reduce("reversing-bar", &REVERSAL_BAR, "1");
    assert_eq!((kept(&rev, "units"), kept(&rev, "pathways")), (vec![2, 5], vec![6, 7]), "{rev:#}");
    assert_eq!(sign(&rev, "pathways", 6), "excitatory");
    assert_eq!(sign(&rev, "pathways", 7), "inhibitory");
    assert_eq!(sign(&rev, "units", 2), "excitatory");
    assert_eq!(sign(&rev, "units", 5), "inhibitory");
    for sub in [&oms, &osr, &rev] {
        assert!(sub["fidelity"]["fve"].as_f64().unwrap() >= 0.9);
        assert!(sub["export"]["max_relative_difference_engine"].as_f64().unwrap() < 1e-5);
    }
}
