//! Bad input reaches the user as one clear paragraph and a non-zero exit, never a panic.

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

fn inspect(args: &[&str]) -> (bool, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_sufficit")).arg("inspect").args(args).output().unwrap();
    (out.status.success(), String::from_utf8_lossy(&out.stdout).into(), String::from_utf8_lossy(&out.stderr).into())
}

/// Run inspect on a model and expect a clean failure whose message contains every `needle`.
fn refused(path: &Path, extra: &[&str], needles: &[&str]) -> String {
    let mut args = vec![path.to_str().unwrap()];
    args.extend(extra);
    let (ok, _, err) = inspect(&args);
    assert!(!ok, "{} should be refused", path.display());
    assert!(!err.contains("panicked"), "panic instead of an error: {err}");
    assert!(err.starts_with("sufficit: error: "), "error is not one paragraph: {err}");
    assert_eq!(err.trim_end().lines().count(), 1, "error spans several lines: {err}");
    for n in needles {
        assert!(err.contains(n), "error lacks '{n}': {err}");
    }
    err
}

fn temp(name: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join(name);
    (dir, p)
}

#[test]
fn the_tiny_model_itself_is_accepted() {
    let (_d, p) = temp("ok.onnx");
    save(&tiny(), &p);
    let (ok, out, err) = inspect(&[p.to_str().unwrap(), "--json"]);
    assert!(ok, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["input"]["lags"], 3);
    assert_eq!(v["hidden_layers"][0]["name"], "r");
    assert_eq!(v["hidden_layers"][0]["channels"], 2);
    assert_eq!(v["hidden_layers"][0]["receptive_field"]["width"], 3);
    assert_eq!(v["parameters"], 54 + 2 + 36 + 2);
}

#[test]
fn a_missing_file_is_named() {
    refused(Path::new("/nonexistent/model.onnx"), &[], &["/nonexistent/model.onnx", "cannot read"]);
}

#[test]
fn truncated_and_garbage_files_are_refused() {
    use prost::Message;
    let (_d, p) = temp("truncated.onnx");
    let bytes = tiny().encode_to_vec();
    std::fs::write(&p, &bytes[..bytes.len() * 2 / 3]).unwrap();
    refused(&p, &[], &["truncated.onnx", "not a readable ONNX model"]);
    std::fs::write(&p, b"this is a CSV file,1,2,3\n").unwrap();
    refused(&p, &[], &["truncated.onnx"]);
    std::fs::write(&p, []).unwrap();
    refused(&p, &[], &["empty"]);
}

#[test]
fn an_unsupported_op_names_node_op_and_the_supported_set() {
    let (mut nodes, inits) = tiny_parts();
    nodes[1] = node("HardSwish", "fancy_activation", &["c"], "r");
    let (_d, p) = temp("unsupported.onnx");
    save(&model(nodes, inits, vec![tiny_input()]), &p);
    refused(&p, &[], &["fancy_activation", "HardSwish", "Supported operators", "Conv", "Softplus"]);
}

#[test]
fn unbound_symbolic_dimensions_are_refused_and_can_be_bound() {
    let (nodes, inits) = tiny_parts();
    let (_d, p) = temp("symbolic.onnx");
    save(&model(nodes, inits, vec![value_info("x", &[D::S("N"), D::S("lags"), D::N(5), D::N(5)])]), &p);
    refused(&p, &[], &["'lags'", "--dim lags="]);
    let (ok, out, err) = inspect(&[p.to_str().unwrap(), "--dim", "lags=3", "--json"]);
    assert!(ok, "{err}");
    assert!(out.contains("\"lags\": 3"));
    refused(&p, &["--dim", "lags"], &["NAME=VALUE"]);
}

#[test]
fn an_input_rank_no_layout_fits_is_refused() {
    let (_d, p) = temp("rank6.onnx");
    let m = model(
        vec![node("Relu", "relu", &["x"], "y")],
        vec![],
        vec![value_info("x", &[D::S("N"), D::N(1), D::N(2), D::N(3), D::N(4), D::N(5)])],
    );
    save(&m, &p);
    refused(&p, &[], &["rank 6", "[N, L, H, W]"]);
}

#[test]
fn a_forced_layout_that_does_not_fit_is_refused() {
    let (_d, p) = temp("ok.onnx");
    save(&tiny(), &p);
    refused(&p, &["--input-layout", "volume"], &["volume", "[N, 1, L, H, W]"]);
    refused(&p, &["--input-layout", "sideways"], &["unknown input layout", "lags-first"]);
}

#[test]
fn nan_or_inf_weights_are_refused_with_the_tensor_name() {
    let (nodes, mut inits) = tiny_parts();
    inits[0].float_data[7] = f32::NAN;
    inits[0].float_data[8] = f32::INFINITY;
    let (_d, p) = temp("nan.onnx");
    save(&model(nodes, inits, vec![tiny_input()]), &p);
    refused(&p, &[], &["initializer 'w'", "2 NaN or infinite"]);
}

#[test]
fn several_inputs_are_refused_with_their_names() {
    let (mut nodes, inits) = tiny_parts();
    nodes.push(node("Add", "mix", &["y", "extra"], "z"));
    let (_d, p) = temp("two_inputs.onnx");
    let m = model(
        nodes,
        inits,
        vec![value_info("x", &[D::S("N"), D::N(3), D::N(5), D::N(5)]), value_info("extra", &[D::S("N"), D::N(2)])],
    );
    save(&m, &p);
    refused(&p, &[], &["2 inputs", "'x'", "'extra'"]);
}

#[test]
fn shape_errors_name_the_node() {
    let (nodes, mut inits) = tiny_parts();
    inits[2] = floats("k", &[17, 2], vec![0.0; 34]);
    let (_d, p) = temp("mismatch.onnx");
    save(&model(nodes, inits, vec![tiny_input()]), &p);
    refused(&p, &[], &["'readout'", "Gemm"]);
}
