//! Finding results: every folder under the given paths that holds a sufficit result JSON, read
//! with its `run.json`, its schema version checked, and grouped by the model it came from.

use crate::output::read_json;
use crate::{Error, Result};
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The schema version this build writes and reads.
pub const SCHEMA: u64 = 1;

/// What a results folder holds, by its main JSON file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Kind {
    /// `stimulus`: stimulus.json + movie.npy.
    Stimulus,
    /// `respond`: metrics.json + responses.npy.
    Responses,
    /// `attribute`: attribution.json + conductance_time.npy.
    Attribution,
    /// `reduce`: subcircuit.json and its pieces.
    Reduction,
    /// `knockout`: knockouts.json.
    Knockouts,
    /// `demo`: ground_truth.json, the recovered-vs-planted comparison of a model whose
    /// mechanisms are known.
    GroundTruth,
}

impl Kind {
    /// The JSON file that marks a folder of this kind.
    pub fn file(self) -> &'static str {
        match self {
            Kind::Stimulus => "stimulus.json",
            Kind::Responses => "metrics.json",
            Kind::Attribution => "attribution.json",
            Kind::Reduction => "subcircuit.json",
            Kind::Knockouts => "knockouts.json",
            Kind::GroundTruth => "ground_truth.json",
        }
    }

    const ALL: [Kind; 6] =
        [Kind::Stimulus, Kind::Responses, Kind::Attribution, Kind::Reduction, Kind::Knockouts, Kind::GroundTruth];
}

/// One results folder.
#[derive(Debug, Clone)]
pub struct Folder {
    /// Where it is.
    pub dir: PathBuf,
    /// What it holds.
    pub kind: Kind,
    /// Its main JSON.
    pub doc: Value,
    /// Its run.json, if present.
    pub run: Option<Value>,
}

impl Folder {
    /// SHA-256 of the model the results came from.
    pub fn model_sha(&self) -> Option<String> {
        let from_run = self.run.as_ref().and_then(|r| r.pointer("/model/sha256")).and_then(Value::as_str);
        from_run.or_else(|| self.doc["model_sha256"].as_str()).map(str::to_string)
    }

    /// The model file as recorded in run.json.
    pub fn model_path(&self) -> Option<PathBuf> {
        self.run.as_ref().and_then(|r| r.pointer("/model/path")).and_then(Value::as_str).map(PathBuf::from)
    }

    /// The stimulus folder the results were computed on (run.json's settings).
    pub fn stimulus_dir(&self) -> Option<PathBuf> {
        self.run.as_ref().and_then(|r| r.pointer("/settings/stimulus")).and_then(Value::as_str).map(PathBuf::from)
    }

    /// The cell the results are about (attribution, reduction, knock-outs).
    pub fn cell(&self) -> Option<usize> {
        let v = match self.kind {
            Kind::Attribution => self.doc.pointer("/target/cells/0/cell"),
            Kind::Reduction => self.doc.pointer("/target/cell"),
            Kind::Knockouts => self.doc.get("cell"),
            _ => None,
        };
        v.and_then(Value::as_u64).map(|c| c as usize)
    }

    /// A file of the folder.
    pub fn file(&self, name: &str) -> PathBuf {
        self.dir.join(name)
    }
}

/// Every results folder found, and what the reader should know about them.
#[derive(Debug, Default)]
pub struct Gathered {
    /// Folders with a model, grouped by model SHA-256 (sorted).
    pub by_model: BTreeMap<String, Vec<Folder>>,
    /// Stimulus folders (no model), by canonical path.
    pub stimuli: BTreeMap<PathBuf, Folder>,
    /// Things worth a warning (several models mixed, folders without a model hash).
    pub warnings: Vec<String>,
}

/// Read every results folder under `paths`.
pub fn gather(paths: &[PathBuf]) -> Result<Gathered> {
    let mut dirs = Vec::new();
    for p in paths {
        if !p.is_dir() {
            return Err(Error::input(p, "is not a folder: give the folders that hold sufficit results"));
        }
        walk(p, &mut dirs)?;
    }
    let mut g = Gathered::default();
    for dir in dirs {
        for kind in Kind::ALL {
            // A reduction folder also holds knockouts.json for its kept units: part of the reduction.
            if kind == Kind::Knockouts && dir.join(Kind::Reduction.file()).exists() {
                continue;
            }
            let path = dir.join(kind.file());
            if !path.exists() {
                continue;
            }
            let doc = read_json(&path)?;
            check_schema(&path, &doc)?;
            let run_path = dir.join("run.json");
            let run = if run_path.exists() { Some(read_json(&run_path)?) } else { None };
            let folder = Folder { dir: dir.clone(), kind, doc, run };
            if kind == Kind::Stimulus {
                g.stimuli.insert(canonical(&dir), folder);
                continue;
            }
            match folder.model_sha() {
                Some(sha) => g.by_model.entry(sha).or_default().push(folder),
                None => g
                    .warnings
                    .push(format!("'{}' has no model SHA-256 (no run.json?): left out of the report", dir.display())),
            }
        }
    }
    if g.by_model.is_empty() {
        let names: Vec<&str> = Kind::ALL.iter().map(|k| k.file()).collect();
        let listed = paths.iter().map(|p| format!("'{}'", p.display())).collect::<Vec<_>>().join(", ");
        return Err(Error::input(
            paths.first().cloned().unwrap_or_default(),
            format!(
                "no sufficit results with a model under {listed}: looked for folders holding {} (and run.json). \
                 Give the folders written by respond, attribute, reduce or knockout.",
                names.join(", ")
            ),
        ));
    }
    if g.by_model.len() > 1 {
        g.warnings.push(format!(
            "results of {} different models found; the report has one part per model (grouped by the \
             model file's SHA-256)",
            g.by_model.len()
        ));
    }
    for folders in g.by_model.values_mut() {
        folders.sort_by(|a, b| (a.kind, a.cell(), &a.dir).cmp(&(b.kind, b.cell(), &b.dir)));
    }
    Ok(g)
}

/// The folder and every folder below it, sorted, hidden ones skipped.
fn walk(dir: &Path, out: &mut Vec<PathBuf>) -> Result<()> {
    out.push(dir.to_path_buf());
    let mut children: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| Error::io("read the folder", dir, e))?
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.is_dir() && !p.file_name().is_some_and(|n| n.to_string_lossy().starts_with('.')))
        .collect();
    children.sort();
    for c in children {
        walk(&c, out)?;
    }
    Ok(())
}

/// A path made absolute and free of `..` where the file system allows.
pub fn canonical(p: &Path) -> PathBuf {
    std::fs::canonicalize(p).unwrap_or_else(|_| p.to_path_buf())
}

/// Accept `"schema": "sufficit/1"`; name the file and the versions otherwise.
fn check_schema(path: &Path, doc: &Value) -> Result<()> {
    let schema = doc.get("schema").and_then(Value::as_str).unwrap_or("");
    let version = schema.strip_prefix("sufficit/").and_then(|v| v.parse::<u64>().ok());
    match version {
        Some(SCHEMA) => Ok(()),
        Some(v) if v > SCHEMA => Err(Error::input(
            path,
            format!(
                "was written by a newer sufficit (schema \"sufficit/{v}\"); this version reads \
                 \"sufficit/{SCHEMA}\". Update sufficit to report on these results."
            ),
        )),
        _ => Err(Error::input(
            path,
            format!(
                "has schema {}, expected \"sufficit/{SCHEMA}\": not a result this version of sufficit wrote",
                doc.get("schema").map(|s| s.to_string()).unwrap_or_else(|| "(none)".into())
            ),
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn schema_versions_are_checked_by_number() {
        let p = Path::new("x/metrics.json");
        assert!(check_schema(p, &serde_json::json!({"schema": "sufficit/1"})).is_ok());
        let newer = check_schema(p, &serde_json::json!({"schema": "sufficit/2"})).unwrap_err().to_string();
        assert!(newer.contains("newer sufficit") && newer.contains("x/metrics.json"), "{newer}");
        let none = check_schema(p, &serde_json::json!({"cells": 3})).unwrap_err().to_string();
        assert!(none.contains("(none)"), "{none}");
    }
}
