//! A table of malformed inputs across every reader (ONNX intake, `.npy` movies, stimulus
//! folders, study files, result folders, options). Each case asserts the documented exit code
//! (docs/errors.md), that the message names the file or option and the problem, that nothing
//! panicked, and that the case's folder is byte-for-byte unchanged afterwards: no output folder
//! created, no input altered.

mod cli_support;
mod common;
mod planted;

use common::*;
use prost::Message;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

const USAGE: i32 = 2;
const BAD_INPUT: i32 = 3;
const UNSUPPORTED: i32 = 4;
const NUMERICAL: i32 = 5;
const TOO_LARGE: i32 = 6;

/// One malformed input: how to make it (inside the case folder, which already holds the valid
/// `planted.onnx` and stimulus folder `stim`), the command to run, the exit code and words the
/// message must contain. `{d}` in arguments and words stands for the case folder.
struct Case {
    name: &'static str,
    make: fn(&Path),
    args: &'static [&'static str],
    code: i32,
    words: &'static [&'static str],
}

/// Every file under `dir` with its bytes (folders as empty entries).
fn snapshot(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    fn walk(dir: &Path, out: &mut BTreeMap<PathBuf, Vec<u8>>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                out.insert(p.clone(), Vec::new());
                walk(&p, out);
            } else {
                out.insert(p.clone(), std::fs::read(&p).unwrap());
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, &mut out);
    out
}

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let p = e.unwrap().path();
        let q = to.join(p.file_name().unwrap());
        if p.is_dir() {
            copy_dir(&p, &q);
        } else {
            std::fs::copy(&p, &q).unwrap();
        }
    }
}

/// A `.npy` file with this header dictionary and data bytes (format version 1.0).
fn npy(path: &Path, dict: &str, data: &[u8]) {
    let mut header = dict.to_string();
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
    bytes.extend((header.len() as u16).to_le_bytes());
    bytes.extend(header.as_bytes());
    bytes.extend(data);
    std::fs::write(path, bytes).unwrap();
}

/// `n` float32 values `v`, little endian.
fn f32s(n: usize, v: f32) -> Vec<u8> {
    (0..n).flat_map(|_| v.to_le_bytes()).collect()
}

/// A movie file for the planted model (8 lags, 16 x 16) with `frames` frames of value `v`.
fn movie(path: &Path, frames: usize, v: f32) {
    npy(
        path,
        &format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({frames}, 16, 16), }}"),
        &f32s(frames * 256, v),
    );
}

fn edit_json(path: &Path, f: impl FnOnce(&mut serde_json::Value)) {
    let mut v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    f(&mut v);
    std::fs::write(path, serde_json::to_string_pretty(&v).unwrap()).unwrap();
}

fn study_file(d: &Path, body: &str) {
    std::fs::write(d.join("study.toml"), body).unwrap();
}

const STUDY_OK: &str = "out = \"results\"\nmodels = [\"planted.onnx\"]\ncells = \"all\"\nlayers = \"all\"\n\
                        [[protocols]]\nname = \"flashes\"\n";

/// A model whose two convolutions' huge weights overflow f32 (1e20 x 1e20 > 3.4e38).
fn overflowing(d: &Path) {
    let nodes = vec![
        node("Conv", "conv", &["x", "w", "b"], "c"),
        node("Conv", "amplify", &["c", "w2", "b2"], "c2"),
        node("Flatten", "flatten", &["c2"], "f"),
        node("Gemm", "readout", &["f", "k", "kb"], "y"),
    ];
    let inits = vec![
        floats("w", &[2, 3, 3, 3], vec![1e20; 54]),
        floats("b", &[2], vec![0.0, 0.0]),
        floats("w2", &[2, 2, 1, 1], vec![1e20; 4]),
        floats("b2", &[2], vec![0.0, 0.0]),
        floats("k", &[18, 2], vec![0.0; 36]),
        floats("kb", &[2], vec![0.0, 0.0]),
    ];
    save(&model(nodes, inits, vec![tiny_input()]), &d.join("overflow.onnx"));
    // A stimulus folder for the tiny input (3 lags, 5 x 5): full contrast.
    std::fs::create_dir_all(d.join("bright")).unwrap();
    npy(&d.join("bright/movie.npy"), "{'descr': '<f4', 'fortran_order': False, 'shape': (4, 5, 5), }", &f32s(100, 1.0));
    let mut meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("stim/stimulus.json")).unwrap()).unwrap();
    meta["frames"] = 4.into();
    meta["height"] = 5.into();
    meta["width"] = 5.into();
    meta["history_frames"] = 0.into();
    meta["events"] = serde_json::json!([]);
    meta["windows"] = serde_json::json!([]);
    std::fs::write(d.join("bright/stimulus.json"), meta.to_string()).unwrap();
}

fn cases() -> Vec<Case> {
    vec![
        // ONNX intake.
        Case {
            name: "missing model",
            make: |_| {},
            args: &["respond", "{d}/absent.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["absent.onnx", "cannot read"],
        },
        Case {
            name: "empty model file",
            make: |d| std::fs::write(d.join("m.onnx"), []).unwrap(),
            args: &["respond", "{d}/m.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.onnx", "empty"],
        },
        Case {
            name: "truncated model",
            make: |d| {
                let b = std::fs::read(d.join("planted.onnx")).unwrap();
                std::fs::write(d.join("m.onnx"), &b[..b.len() / 2]).unwrap();
            },
            args: &["respond", "{d}/m.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.onnx", "not a readable ONNX model", "truncated"],
        },
        Case {
            name: "text instead of a model",
            make: |d| std::fs::write(d.join("m.onnx"), "time,rate\n0,1\n").unwrap(),
            args: &["inspect", "{d}/m.onnx"],
            code: BAD_INPUT,
            words: &["m.onnx"],
        },
        Case {
            name: "protobuf without a graph",
            make: |d| {
                let m = tract_onnx::pb::ModelProto { ir_version: 8, ..Default::default() };
                std::fs::write(d.join("m.onnx"), m.encode_to_vec()).unwrap();
            },
            args: &["inspect", "{d}/m.onnx"],
            code: BAD_INPUT,
            words: &["m.onnx", "no ONNX graph"],
        },
        Case {
            name: "unsupported operator",
            make: |d| {
                let (mut nodes, inits) = tiny_parts();
                nodes[1] = node("HardSwish", "odd_activation", &["c"], "r");
                save(&model(nodes, inits, vec![tiny_input()]), &d.join("m.onnx"));
            },
            args: &["respond", "{d}/m.onnx", "{d}/stim", "--out", "{d}/out"],
            code: UNSUPPORTED,
            words: &["odd_activation", "HardSwish", "Supported operators"],
        },
        Case {
            name: "NaN weights",
            make: |d| {
                let (nodes, mut inits) = tiny_parts();
                inits[0].float_data[3] = f32::NAN;
                save(&model(nodes, inits, vec![tiny_input()]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: UNSUPPORTED,
            words: &["initializer 'w'", "NaN"],
        },
        Case {
            name: "weights whose data disagree with their shape",
            make: |d| {
                let (nodes, mut inits) = tiny_parts();
                inits[0].float_data.truncate(50);
                save(&model(nodes, inits, vec![tiny_input()]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: UNSUPPORTED,
            words: &["'w'", "declares shape", "holds 50 values"],
        },
        Case {
            name: "tensor dims whose product overflows",
            make: |d| {
                let (nodes, mut inits) = tiny_parts();
                inits[0].dims = vec![i64::MAX, i64::MAX, 2, 2];
                save(&model(nodes, inits, vec![tiny_input()]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: UNSUPPORTED,
            words: &["'w'", "more values than this machine can address"],
        },
        Case {
            name: "a huge declared input",
            make: |d| {
                let (nodes, inits) = tiny_parts();
                let input = value_info("x", &[D::S("N"), D::N(3), D::N(1 << 20), D::N(1 << 20)]);
                save(&model(nodes, inits, vec![input]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: TOO_LARGE,
            words: &["m.onnx", "declared input", "--max-memory"],
        },
        Case {
            name: "a Gemm whose weights do not fit",
            make: |d| {
                let (nodes, mut inits) = tiny_parts();
                inits[2] = floats("k", &[17, 2], vec![0.0; 34]);
                save(&model(nodes, inits, vec![tiny_input()]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: UNSUPPORTED,
            words: &["'readout'", "Gemm"],
        },
        Case {
            name: "an unbound symbolic dimension",
            make: |d| {
                let (nodes, inits) = tiny_parts();
                let input = value_info("x", &[D::S("N"), D::S("lags"), D::N(5), D::N(5)]);
                save(&model(nodes, inits, vec![input]), &d.join("m.onnx"));
            },
            args: &["inspect", "{d}/m.onnx"],
            code: UNSUPPORTED,
            words: &["'lags'", "--dim lags="],
        },
        // Movies (.npy).
        Case {
            name: "text instead of a movie",
            make: |d| std::fs::write(d.join("m.npy"), "not numbers").unwrap(),
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "not a .npy file"],
        },
        Case {
            name: "float64 movie",
            make: |d| {
                npy(&d.join("m.npy"), "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 16, 16), }", &[0u8; 4096])
            },
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "float32"],
        },
        Case {
            name: "movie of rank 2",
            make: |d| {
                npy(&d.join("m.npy"), "{'descr': '<f4', 'fortran_order': False, 'shape': (16, 16), }", &f32s(256, 0.0))
            },
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "rank 2", "[frames, height, width]"],
        },
        Case {
            name: "movie holding NaN",
            make: |d| movie(&d.join("m.npy"), 3, f32::NAN),
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "NaN"],
        },
        Case {
            name: "movie header declaring far more data than the file holds",
            make: |d| {
                npy(
                    &d.join("m.npy"),
                    "{'descr': '<f4', 'fortran_order': False, 'shape': (1000000000, 100000, 100000), }",
                    &f32s(16, 0.0),
                )
            },
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "declares shape", "holds 64 bytes"],
        },
        Case {
            name: "movie header length beyond the file",
            make: |d| {
                let mut b = b"\x93NUMPY\x02\x00".to_vec();
                b.extend(u32::MAX.to_le_bytes());
                b.extend(b"{'descr'");
                std::fs::write(d.join("m.npy"), b).unwrap();
            },
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "header is cut short or longer than the file"],
        },
        Case {
            name: "movie of the wrong frame size",
            make: |d| {
                npy(&d.join("m.npy"), "{'descr': '<f4', 'fortran_order': False, 'shape': (3, 8, 8), }", &f32s(192, 0.0))
            },
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "8x8", "16x16", "resample"],
        },
        Case {
            name: "movie outside the contrast range",
            make: |d| movie(&d.join("m.npy"), 3, 255.0),
            args: &["stimulus", "movie", "path={d}/m.npy", "--model", "{d}/planted.onnx", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["m.npy", "-1..1"],
        },
        // Stimulus folders.
        Case {
            name: "stimulus folder without stimulus.json",
            make: |d| std::fs::remove_file(d.join("stim/stimulus.json")).unwrap(),
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "cannot read"],
        },
        Case {
            name: "stimulus.json that is not JSON",
            make: |d| std::fs::write(d.join("stim/stimulus.json"), "{\"protocol\": \"flashes\",").unwrap(),
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "not a sufficit stimulus description"],
        },
        Case {
            name: "stimulus.json lacking a field",
            make: |d| edit_json(&d.join("stim/stimulus.json"), |v| drop(v.as_object_mut().unwrap().remove("frames"))),
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "frames"],
        },
        Case {
            name: "movie.npy disagreeing with stimulus.json",
            make: |d| movie(&d.join("stim/movie.npy"), 5, 0.0),
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["movie.npy", "stimulus.json describes"],
        },
        Case {
            name: "an analysis window beyond the movie",
            make: |d| edit_json(&d.join("stim/stimulus.json"), |v| v["windows"][0]["end"] = 1_000_000.into()),
            args: &["attribute", "{d}/planted.onnx", "{d}/stim", "--cell", "0", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "window", "not inside the movie"],
        },
        Case {
            name: "an event beyond the movie",
            make: |d| edit_json(&d.join("stim/stimulus.json"), |v| v["events"][0]["frame"] = 1_000_000.into()),
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "event", "beyond the movie"],
        },
        // Study files.
        Case {
            name: "study file that is not TOML",
            make: |d| study_file(d, "out = \"results\"\nmodels = [\"planted.onnx\"\n"),
            args: &["study", "{d}/study.toml"],
            code: BAD_INPUT,
            words: &["study.toml", "not valid TOML"],
        },
        Case {
            name: "study file with an unknown key",
            make: |d| study_file(d, &STUDY_OK.replace("layers", "layerz")),
            args: &["study", "{d}/study.toml"],
            code: BAD_INPUT,
            words: &["study.toml:4", "unknown key", "did you mean 'layers'"],
        },
        Case {
            name: "study file naming a missing model",
            make: |d| study_file(d, &STUDY_OK.replace("planted.onnx", "gone.onnx")),
            args: &["study", "{d}/study.toml"],
            code: BAD_INPUT,
            words: &["study.toml:2", "gone.onnx"],
        },
        Case {
            name: "study file with an unknown protocol",
            make: |d| study_file(d, &STUDY_OK.replace("\"flashes\"", "\"flashez\"")),
            args: &["study", "{d}/study.toml"],
            code: BAD_INPUT,
            words: &["study.toml:6", "flashez", "flashes"],
        },
        Case {
            name: "study whose least memory exceeds --max-memory",
            make: |d| study_file(d, STUDY_OK),
            args: &["study", "{d}/study.toml", "--max-memory", "1K"],
            code: TOO_LARGE,
            words: &["planted.onnx", "--max-memory"],
        },
        // Result folders.
        Case {
            name: "report of something that is not a folder",
            make: |d| std::fs::write(d.join("notes.txt"), "results").unwrap(),
            args: &["report", "{d}/notes.txt", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["notes.txt", "is not a folder"],
        },
        Case {
            name: "report of results from a newer sufficit",
            make: |d| edit_json(&d.join("stim/stimulus.json"), |v| v["schema"] = "sufficit/9".into()),
            args: &["report", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stimulus.json", "newer sufficit", "sufficit/9"],
        },
        Case {
            name: "merge of a folder that is not a study run",
            make: |_| {},
            args: &["merge", "{d}/stim", "--out", "{d}/out"],
            code: BAD_INPUT,
            words: &["stim", "no study.json"],
        },
        // Options.
        Case {
            name: "a cell beyond the model's outputs",
            make: |_| {},
            args: &["attribute", "{d}/planted.onnx", "{d}/stim", "--cell", "7", "--out", "{d}/out"],
            code: USAGE,
            words: &["cell 7", "out of range"],
        },
        Case {
            name: "an unknown layer",
            make: |_| {},
            args: &[
                "attribute",
                "{d}/planted.onnx",
                "{d}/stim",
                "--cell",
                "0",
                "--layer",
                "retina",
                "--out",
                "{d}/out",
            ],
            code: USAGE,
            words: &["unknown layer 'retina'"],
        },
        Case {
            name: "a shard beyond the count",
            make: |d| study_file(d, STUDY_OK),
            args: &["study", "{d}/study.toml", "--shard", "5/4"],
            code: USAGE,
            words: &["5/4"],
        },
        Case {
            name: "an unreadable memory size",
            make: |_| {},
            args: &["respond", "{d}/planted.onnx", "{d}/stim", "--out", "{d}/out", "--max-memory", "lots"],
            code: USAGE,
            words: &["--max-memory 'lots'"],
        },
        Case {
            name: "a stimulus too long for the memory bound",
            make: |_| {},
            args: &[
                "stimulus",
                "white-noise",
                "duration_ms=3600000",
                "--model",
                "{d}/planted.onnx",
                "--out",
                "{d}/out",
                "--max-memory",
                "64M",
            ],
            code: TOO_LARGE,
            words: &["stimulus of", "frames", "--max-memory"],
        },
        // Numerical failure.
        Case {
            name: "a forward pass that overflows",
            make: overflowing,
            args: &["respond", "{d}/overflow.onnx", "{d}/bright", "--out", "{d}/out"],
            code: NUMERICAL,
            words: &["numerical failure at node 'amplify' (Conv)", "inputs were finite"],
        },
    ]
}

#[test]
fn every_malformed_input_gets_its_exit_code_a_named_problem_and_leaves_nothing_behind() {
    let base = tempfile::tempdir().unwrap();
    planted::write_planted(&base.path().join("planted.onnx"));
    let (ok, text) = cli_support::sufficit(&[
        "stimulus",
        "flashes",
        "--model",
        cli_support::s(&base.path().join("planted.onnx")),
        "--out",
        cli_support::s(&base.path().join("stim")),
        "--quiet",
    ]);
    assert!(ok, "{text}");
    let cases = cases();
    assert!(cases.len() >= 30, "the table should hold at least 30 cases, has {}", cases.len());
    let mut failures = Vec::new();
    for case in &cases {
        let d = tempfile::tempdir().unwrap();
        std::fs::copy(base.path().join("planted.onnx"), d.path().join("planted.onnx")).unwrap();
        copy_dir(&base.path().join("stim"), &d.path().join("stim"));
        (case.make)(d.path());
        let before = snapshot(d.path());
        let dir = d.path().to_str().unwrap();
        let args: Vec<String> = case.args.iter().map(|a| a.replace("{d}", dir)).collect();
        let t0 = Instant::now();
        let out = Command::new(env!("CARGO_BIN_EXE_sufficit")).args(&args).output().unwrap();
        let seconds = t0.elapsed().as_secs_f64();
        let err = String::from_utf8_lossy(&out.stderr).to_string();
        let mut problems = Vec::new();
        if out.status.code() != Some(case.code) {
            problems.push(format!("exit code {:?}, expected {}", out.status.code(), case.code));
        }
        if err.contains("panicked") || !err.starts_with("sufficit: error: ") {
            problems.push("not one clean error message".to_string());
        }
        for w in case.words {
            if !err.contains(&w.replace("{d}", dir)) {
                problems.push(format!("message lacks '{w}'"));
            }
        }
        if snapshot(d.path()) != before {
            problems.push("the folder changed (an output was created or an input altered)".into());
        }
        if seconds > 20.0 {
            problems.push(format!("took {seconds:.1} s to refuse"));
        }
        if !problems.is_empty() {
            failures.push(format!("{}: {}\n    stderr: {}", case.name, problems.join("; "), err.trim()));
        }
    }
    assert!(failures.is_empty(), "{} of {} cases failed:\n{}", failures.len(), cases.len(), failures.join("\n"));
}

#[test]
fn ctrl_c_stops_at_a_chunk_boundary_with_code_130_and_no_partial_files() {
    // A long attribution (many steps) interrupted once with SIGINT: exit 130, the message says
    // so, and no temporary or half-written file is left in the output folder.
    let d = tempfile::tempdir().unwrap();
    let model = d.path().join("planted.onnx");
    planted::write_planted(&model);
    let stim = d.path().join("stim");
    let (ok, text) = cli_support::sufficit(&[
        "stimulus",
        "white-noise",
        "duration_ms=200000",
        "--model",
        cli_support::s(&model),
        "--out",
        cli_support::s(&stim),
        "--quiet",
    ]);
    assert!(ok, "{text}");
    let out = d.path().join("out");
    let child = Command::new(env!("CARGO_BIN_EXE_sufficit"))
        .args(["attribute", cli_support::s(&model), cli_support::s(&stim), "--cell", "0", "--steps", "256", "--quiet"])
        .args(["--out", cli_support::s(&out)])
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(std::time::Duration::from_millis(1500));
    let killed = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(killed.success());
    let t0 = Instant::now();
    let result = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(130), "{err}");
    assert!(err.contains("interrupted"), "{err}");
    assert!(t0.elapsed().as_secs_f64() < 30.0, "stopping took {:?}", t0.elapsed());
    if out.exists() {
        for (p, _) in snapshot(&out) {
            let name = p.file_name().unwrap().to_string_lossy().to_string();
            assert!(!name.contains(".tmp-"), "a temporary file was left: {}", p.display());
        }
    }
}
