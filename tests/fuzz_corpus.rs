//! The fuzz targets' seed corpus (fuzz/corpus/TARGET/), written by the project's own test
//! helpers: this test regenerates every seed, checks the committed files equal them and that each
//! is accepted by the reader its target fuzzes. `SUFFICIT_WRITE_CORPUS=1 cargo test --release
//! --test fuzz_corpus` rewrites the committed files after a deliberate change.

mod cli_support;
mod common;
mod planted;

use prost::Message;
use std::path::{Path, PathBuf};

/// Every seed: (target, file name, bytes).
fn seeds(scratch: &Path) -> Vec<(&'static str, String, Vec<u8>)> {
    let mut out = Vec::new();
    let fixtures = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/models");
    // ONNX: the tiny test model, the small planted circuit and the layout fixtures.
    out.push(("onnx_intake", "tiny.onnx".to_string(), common::tiny().encode_to_vec()));
    let planted_path = scratch.join("planted.onnx");
    planted::write_planted(&planted_path);
    out.push(("onnx_intake", "planted-small.onnx".into(), std::fs::read(&planted_path).unwrap()));
    for name in ["line.onnx", "volume.onnx", "pytorch_style.onnx"] {
        out.push(("onnx_intake", name.into(), std::fs::read(fixtures.join(name)).unwrap()));
    }
    // .npy: a small movie and a vector, as ndarray-npy writes them.
    let npy = |a: ndarray::ArrayD<f32>| {
        let mut b = Vec::new();
        ndarray_npy::WriteNpyExt::write_npy(&a, &mut b).unwrap();
        b
    };
    let movie = ndarray::ArrayD::from_shape_fn(ndarray::IxDyn(&[3, 4, 5]), |i| (i[0] + i[1] + i[2]) as f32 * 0.1 - 0.5);
    out.push(("npy_reader", "movie.npy".into(), npy(movie)));
    out.push(("npy_reader", "vector.npy".into(), npy(ndarray::ArrayD::from_elem(ndarray::IxDyn(&[7]), 0.25))));
    // stimulus.json of two protocols drawn for the small planted model.
    for protocol in ["flashes", "omitted-flash"] {
        let dir = scratch.join(protocol);
        let (ok, text) = cli_support::sufficit(&[
            "stimulus",
            protocol,
            "--model",
            cli_support::s(&planted_path),
            "--out",
            cli_support::s(&dir),
            "--quiet",
        ]);
        assert!(ok, "{text}");
        out.push(("stimulus_json", format!("{protocol}.json"), std::fs::read(dir.join("stimulus.json")).unwrap()));
    }
    // Study files: a small one and the shipped example.
    let small = "out = \"results\"\nmodels = [\"planted.onnx\"]\ncells = [0, 1]\nlayers = \"all\"\nseed = 3\n\
                 [attribution]\nsteps = 16\n[reduction]\nfidelity = 0.9\n[[protocols]]\nname = \"flashes\"\n";
    out.push(("study_file", "small.toml".into(), small.as_bytes().to_vec()));
    let example = Path::new(env!("CARGO_MANIFEST_DIR")).join("stimuli/example-study.toml");
    out.push(("study_file", "example.toml".into(), std::fs::read(example).unwrap()));
    // Engine: byte strings choosing shapes, activation and weights.
    for (i, seed) in [7u8, 31, 99, 200].iter().enumerate() {
        let bytes: Vec<u8> = (0..96u32).map(|k| (k as u8).wrapping_mul(*seed).wrapping_add(i as u8)).collect();
        out.push(("engine_forward", format!("bytes-{i}"), bytes));
    }
    out
}

/// Whether the reader fuzzed by `target` accepts `bytes`.
fn accepted(target: &str, bytes: &[u8]) -> Result<(), String> {
    let text = String::from_utf8_lossy(bytes).into_owned();
    let r = match target {
        "onnx_intake" => sufficit::model::decode_proto(bytes, Path::new("seed.onnx"))
            .and_then(|p| sufficit::model::Model::from_proto(p, Path::new("seed.onnx"), &Default::default()))
            .map(drop),
        "npy_reader" => sufficit::output::parse_npy(bytes, Path::new("seed.npy")).map(drop),
        "stimulus_json" => sufficit::stimulus::parse_meta(&text, Path::new("stimulus.json"))
            .and_then(|m| sufficit::stimulus::check_stimulus(&m, &[m.frames, m.height, m.width], Path::new("seed"))),
        "study_file" => sufficit::study::file::parse(text, Path::new("study.toml")).map(drop),
        "engine_forward" => Ok(()),
        other => panic!("unknown target {other}"),
    };
    r.map_err(|e| e.to_string())
}

#[test]
fn the_committed_seed_corpus_is_what_the_helpers_write_and_every_seed_is_accepted() {
    let scratch = tempfile::tempdir().unwrap();
    let corpus = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/corpus");
    let write = std::env::var("SUFFICIT_WRITE_CORPUS").is_ok_and(|v| v == "1");
    let seeds = seeds(scratch.path());
    for (target, name, bytes) in &seeds {
        accepted(target, bytes).unwrap_or_else(|e| panic!("seed {target}/{name} is refused by its reader: {e}"));
        let path: PathBuf = corpus.join(target).join(name);
        if write {
            std::fs::create_dir_all(path.parent().unwrap()).unwrap();
            std::fs::write(&path, bytes).unwrap();
        } else {
            let committed = std::fs::read(&path)
                .unwrap_or_else(|e| panic!("{}: {e}; write the corpus with SUFFICIT_WRITE_CORPUS=1", path.display()));
            assert!(
                &committed == bytes,
                "{} differs from what the helpers write now; if the change is deliberate, rewrite the corpus \
                 with SUFFICIT_WRITE_CORPUS=1",
                path.display()
            );
        }
    }
    for target in ["onnx_intake", "npy_reader", "stimulus_json", "study_file", "engine_forward"] {
        assert!(seeds.iter().filter(|s| s.0 == target).count() >= 2, "{target} needs seeds");
    }
}

#[test]
fn inputs_that_crashed_a_fuzz_target_are_now_refused_cleanly() {
    // fuzz/regressions/TARGET/: every input a fuzz target once crashed on (docs/robustness.md).
    // Each must now give an error from its reader, without a panic or an abort.
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/regressions");
    let mut checked = 0;
    for target in std::fs::read_dir(&dir).unwrap() {
        let target = target.unwrap().path();
        let name = target.file_name().unwrap().to_string_lossy().to_string();
        for file in std::fs::read_dir(&target).unwrap() {
            let file = file.unwrap().path();
            let bytes = std::fs::read(&file).unwrap();
            let result = accepted(&name, &bytes);
            assert!(result.is_err(), "{} is accepted; a regression input should be refused", file.display());
            checked += 1;
        }
    }
    assert!(checked >= 1, "no regression inputs found under {}", dir.display());
}
