//! `sufficit study` and `merge` on the small planted circuit: a study runs end to end with its
//! report; a run killed with SIGKILL resumes to results identical, byte for byte, to an
//! uninterrupted run without recomputing finished jobs; four shards merged equal the whole; bad
//! study files are reported all at once before any work.

mod cli_support;
mod planted;

use cli_support::{s, sufficit};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

/// A study of the planted model: 2 protocols x 2 cells = 4 jobs.
fn study(d: &Path) -> PathBuf {
    planted::write_planted(&d.join("planted.onnx"));
    let file = d.join("study.toml");
    std::fs::write(
        &file,
        "out = \"results\"\nmodels = [\"planted.onnx\"]\ncells = \"all\"\nlayers = \"all\"\n\
         [attribution]\nsteps = 16\n[reduction]\nfidelity = 0.9\n\
         [[protocols]]\nname = \"flashes\"\n[[protocols]]\nname = \"steps\"\nstep_ms = 600\n",
    )
    .unwrap();
    file
}

/// Every result file under `dir` with its bytes, except records of time and place (run.json,
/// done.json, study.json) and the report (which names folders).
fn results(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<PathBuf, Vec<u8>>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            let rel = p.strip_prefix(root).unwrap().to_path_buf();
            let name = p.file_name().unwrap().to_string_lossy().into_owned();
            if p.is_dir() {
                if rel != Path::new("report") {
                    walk(root, &p, out);
                }
            } else if !["run.json", "done.json", "study.json"].contains(&name.as_str()) {
                out.insert(rel, std::fs::read(&p).unwrap());
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, dir, &mut out);
    out
}

/// Sealed job folders (cell-N with a done.json) and the record's bytes.
fn sealed_jobs(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    for m in std::fs::read_dir(dir).into_iter().flatten().flatten().filter(|e| e.path().is_dir()) {
        for p in std::fs::read_dir(m.path()).into_iter().flatten().flatten().filter(|e| e.path().is_dir()) {
            for c in std::fs::read_dir(p.path()).into_iter().flatten().flatten() {
                let done = c.path().join("done.json");
                if c.file_name().to_string_lossy().starts_with("cell-") && done.is_file() {
                    out.insert(c.path(), std::fs::read(&done).unwrap());
                }
            }
        }
    }
    out
}

fn same(a: &BTreeMap<PathBuf, Vec<u8>>, b: &BTreeMap<PathBuf, Vec<u8>>) {
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>(), "different files");
    for (k, v) in a {
        assert!(v == &b[k], "{} differs", k.display());
    }
}

#[test]
fn a_study_runs_end_to_end_and_a_killed_run_resumes_to_identical_results() {
    let d = tempfile::tempdir().unwrap();
    let file = study(d.path());
    // Uninterrupted reference run.
    let whole = d.path().join("whole");
    let (ok, text) = sufficit(&["study", s(&file), "--out", s(&whole), "--quiet"]);
    assert!(ok, "{text}");
    assert!(text.contains("4 jobs: 4 run, 0 skipped"), "{text}");
    assert!(whole.join("report/report.html").is_file(), "the study writes its report");
    let reference = results(&whole);
    assert!(reference.keys().any(|k| k.ends_with("reduce/subcircuit.json")));

    // A run killed (SIGKILL) as soon as its first job is sealed.
    let resumed = d.path().join("resumed");
    let mut child = Command::new(env!("CARGO_BIN_EXE_sufficit"))
        .args(["study", s(&file), "--out", s(&resumed), "--quiet"])
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    while sealed_jobs(&resumed).is_empty() {
        assert!(t0.elapsed() < Duration::from_secs(120), "no job finished in 2 minutes");
        assert!(child.try_wait().unwrap().is_none(), "the study ended before it could be killed");
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().unwrap(); // SIGKILL on Unix
    child.wait().unwrap();
    let before = sealed_jobs(&resumed);
    assert!(before.len() < 4, "killed too late to test resuming");

    let (ok, text) = sufficit(&["study", s(&file), "--out", s(&resumed), "--quiet"]);
    assert!(ok, "{text}");
    assert!(text.contains(&format!("{} skipped", before.len())), "finished jobs must be skipped: {text}");
    // Finished jobs were not recomputed: their records are untouched.
    let after = sealed_jobs(&resumed);
    for (job, record) in &before {
        assert_eq!(&after[job], record, "{} was recomputed", job.display());
    }
    same(&reference, &results(&resumed));
}

#[test]
fn four_shards_merged_equal_the_whole_study() {
    let d = tempfile::tempdir().unwrap();
    let file = study(d.path());
    let whole = d.path().join("whole");
    assert!(sufficit(&["study", s(&file), "--out", s(&whole), "--quiet"]).0);
    let mut shards = Vec::new();
    for k in 1..=4 {
        let out = d.path().join(format!("shard-{k}"));
        let (ok, text) = sufficit(&["study", s(&file), "--out", s(&out), "--shard", &format!("{k}/4"), "--quiet"]);
        assert!(ok, "{text}");
        assert!(text.contains("1 jobs: 1 run"), "{text}");
        shards.push(out);
    }
    let merged = d.path().join("merged");
    let mut args = vec!["merge"];
    args.extend(shards.iter().map(|p| s(p)));
    args.extend(["--out", s(&merged)]);
    let (ok, text) = sufficit(&args);
    assert!(ok, "{text}");
    assert!(merged.join("report/report.html").is_file());
    same(&results(&whole), &results(&merged));
}

#[test]
fn bad_study_files_are_reported_all_at_once_before_any_work() {
    let d = tempfile::tempdir().unwrap();
    planted::write_planted(&d.path().join("planted.onnx"));
    let file = d.path().join("bad.toml");
    std::fs::write(
        &file,
        "out = \"never\"\nmodels = [\"planted.onnx\", \"missing.onnx\"]\ncells = [0, 7]\nlayerz = \"all\"\n\
         seed = \"one\"\n[reduction]\nfidelity = 1.5\n\
         [[protocols]]\nname = \"flashes\"\ncontrasts = [0.5, 9]\n\
         [[protocols]]\nname = \"omited-flash\"\n",
    )
    .unwrap();
    let (ok, text) = sufficit(&["study", s(&file)]);
    assert!(!ok);
    for needle in [
        "bad.toml:4: 'layerz': unknown key; did you mean 'layers'?",
        "missing.onnx' does not exist",
        "bad.toml:5: 'seed': expected a non-negative integer",
        "bad.toml:7: 'reduction.fidelity'",
        "bad.toml:10: 'protocols[0].contrasts'",
        "'protocols[1].name'",
        "nearest: 'omitted-flash'",
        "bad.toml:3: 'cells': cell 7 is beyond the outputs",
    ] {
        assert!(text.contains(needle), "missing {needle:?} in:\n{text}");
    }
    assert!(!d.path().join("never").exists(), "nothing may be written");

    // With the file otherwise valid, a cell beyond the model's outputs is named with its line.
    std::fs::write(&file, "models = [\"planted.onnx\"]\ncells = [0, 7]\n[[protocols]]\nname = \"flashes\"\n").unwrap();
    let (ok, text) = sufficit(&["study", s(&file), "--check"]);
    assert!(!ok && text.contains("bad.toml:2: 'cells': cell 7 is beyond the outputs"), "{text}");

    // --check on a valid file: the job count and an estimate, nothing written.
    std::fs::write(&file, "models = [\"planted.onnx\"]\ncells = \"0-1\"\n[[protocols]]\nname = \"flashes\"\n").unwrap();
    let (ok, text) = sufficit(&["study", s(&file), "--check"]);
    assert!(ok && text.contains("2 jobs") && text.contains("estimated"), "{text}");
    assert!(!d.path().join("bad-results").exists());

    // A memory bound no job fits is refused before work.
    let (ok, text) = sufficit(&["study", s(&file), "--max-memory", "1K"]);
    assert!(!ok && text.contains("--max-memory"), "{text}");
}

#[test]
fn the_shipped_example_study_runs_on_a_small_model_and_writes_its_report() {
    // stimuli/example-study.toml with its model swapped for the small planted circuit: every
    // protocol and setting of the shipped file runs end to end.
    let d = tempfile::tempdir().unwrap();
    planted::write_planted(&d.path().join("planted.onnx"));
    let shipped =
        std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("stimuli/example-study.toml")).unwrap();
    let model_line = shipped.lines().find(|l| l.starts_with("models =")).unwrap();
    let out_line = shipped.lines().find(|l| l.starts_with("out =")).unwrap();
    let text = shipped.replace(model_line, "models = [\"planted.onnx\"]").replace(out_line, "out = \"results\"");
    let file = d.path().join("example.toml");
    std::fs::write(&file, text).unwrap();
    let (ok, text) = sufficit(&["study", s(&file), "--quiet"]);
    assert!(ok, "{text}");
    assert!(text.contains("16 jobs: 16 run"), "8 protocols x 2 cells: {text}");
    assert!(d.path().join("results/report/report.html").is_file());
}
