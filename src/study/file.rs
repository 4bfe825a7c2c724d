//! The study file (TOML): parsed with positions, so every problem names its key and line, and
//! validated completely before any work: all problems are reported together.
//!
//! ```toml
//! out = "results"                      # relative to the study file (default: <stem>-results)
//! models = ["model.onnx"]              # one or more ONNX models
//! cells = "all"                        # "all", [0, 2] or "0-2"
//! layers = "all"                       # hidden layers to attribute and reduce
//! seed = 1
//! frame_rate_hz = 100                  # stimulus frame rate
//! pixel_um = 50                        # pixel size on the sensor surface
//! [attribution]
//! steps = "auto"                       # or a number of path steps
//! baseline = "gray"
//! compare_baselines = ["blurred"]      # optional: ranking stability (Kendall tau)
//! [reduction]
//! fidelity = 0.9
//! metric = "fve"                       # or "peak"
//! [[protocols]]
//! name = "omitted-flash"
//! period_ms = [60, 80, 100]            # any parameter of the protocol
//! ```

use crate::attribution::Baseline;
use crate::stimulus::{protocols, Params};
use crate::{Error, Result};
use serde::Serialize;
use std::path::{Path, PathBuf};
use toml_edit::{Item, Table, Value};

/// Which cells a study covers.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub enum Cells {
    /// Every output of each model.
    All,
    /// These cells.
    List(Vec<usize>),
}

/// One protocol with its parameters (as `NAME=VALUE` arguments of `stimulus`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProtocolEntry {
    /// Protocol name.
    pub name: String,
    /// Parameters as `NAME=VALUE`.
    pub params: Vec<String>,
    /// Line of the entry in the study file.
    #[serde(skip)]
    pub line: usize,
}

/// A validated study file.
#[derive(Debug, Clone, Serialize)]
pub struct StudyFile {
    /// The file.
    pub path: PathBuf,
    /// Output folder (absolute or relative to the working folder).
    pub out: PathBuf,
    /// Models (paths resolved against the study file's folder).
    pub models: Vec<PathBuf>,
    /// Cells.
    pub cells: Cells,
    /// Line of `cells` (for errors found when the models are loaded).
    #[serde(skip)]
    pub cells_line: usize,
    /// `--layer` of attribute and reduce.
    pub layers: String,
    /// Seed of every command.
    pub seed: u64,
    /// Frame rate of the stimuli (Hz).
    pub frame_rate_hz: f64,
    /// Pixel size on the sensor surface (micrometres).
    pub pixel_um: f64,
    /// Attribution path steps ("auto" or a number).
    pub steps: String,
    /// Attribution baseline.
    pub baseline: String,
    /// Extra baselines for ranking stability.
    pub compare_baselines: Vec<String>,
    /// Reduction target.
    pub fidelity: f64,
    /// Reduction criterion.
    pub metric: String,
    /// Protocols.
    pub protocols: Vec<ProtocolEntry>,
}

/// Collects every problem with its line.
struct Problems<'a> {
    raw: &'a str,
    file: &'a Path,
    list: Vec<String>,
}

impl Problems<'_> {
    fn line(&self, span: Option<std::ops::Range<usize>>) -> usize {
        span.map_or(0, |s| self.raw[..s.start.min(self.raw.len())].matches('\n').count() + 1)
    }

    fn add(&mut self, line: usize, key: &str, message: impl std::fmt::Display) {
        self.list.push(format!("{}:{line}: '{key}': {message}", self.file.display()));
    }

    /// Unknown keys of `table`, each with the nearest known key suggested.
    fn unknown_keys(&mut self, table: &Table, prefix: &str, known: &[&str]) {
        for (key, item) in table.iter() {
            if known.contains(&key) {
                continue;
            }
            let hint = match nearest(known, key) {
                Some(n) if strsim::levenshtein(n, key) <= 3 => format!("; did you mean '{n}'?"),
                _ => format!("; known keys here: {}", known.join(", ")),
            };
            let span = table.key(key).and_then(|k| k.span()).or_else(|| item.span());
            let line = self.line(span);
            self.add(line, &format!("{prefix}{key}"), format!("unknown key{hint}"));
        }
    }
}

const TOP: [&str; 11] = [
    "out",
    "models",
    "model",
    "cells",
    "layers",
    "seed",
    "frame_rate_hz",
    "pixel_um",
    "attribution",
    "reduction",
    "protocols",
];
const ATTRIBUTION: [&str; 3] = ["steps", "baseline", "compare_baselines"];
const REDUCTION: [&str; 2] = ["fidelity", "metric"];

/// Read and validate a study file (models are checked to exist, not loaded). Returns the
/// study and every problem found (with key and line); only unreadable TOML fails at once.
pub fn read(path: &Path) -> Result<(StudyFile, Vec<String>)> {
    let raw = std::fs::read_to_string(path).map_err(|e| Error::io("read the study file", path, e))?;
    parse(raw, path)
}

/// As [`read`], from the file's text (`path` names it in messages and anchors relative paths).
pub fn parse(raw: String, path: &Path) -> Result<(StudyFile, Vec<String>)> {
    let doc = toml_edit::Document::parse(raw.clone()).map_err(|e| {
        let line = e.span().map_or(0, |s| raw[..s.start.min(raw.len())].matches('\n').count() + 1);
        Error::input(path, format!("line {line}: not valid TOML: {}", e.message()))
    })?;
    let base = path.parent().unwrap_or(Path::new(".")).to_path_buf();
    let mut p = Problems { raw: &raw, file: path, list: Vec::new() };
    let root = doc.as_table();
    p.unknown_keys(root, "", &TOP);

    let line_of = |p: &Problems, key: &str| p.line(root.get(key).and_then(Item::span));
    let string = |p: &mut Problems, table: &Table, key: &str, prefix: &str, default: &str| -> String {
        match table.get(key) {
            None => default.to_string(),
            Some(item) => match item.as_str() {
                Some(s) => s.to_string(),
                None => {
                    let line = p.line(item.span());
                    p.add(line, &format!("{prefix}{key}"), "expected a string");
                    default.to_string()
                }
            },
        }
    };

    let out = match root.get("out") {
        // Default: "<file stem>-results" beside the study file.
        None => base.join(format!("{}-results", path.file_stem().map_or("study".into(), |s| s.to_string_lossy()))),
        Some(_) => base.join(string(&mut p, root, "out", "", "")),
    };

    let mut models = Vec::new();
    match (root.get("models"), root.get("model")) {
        (None, None) => p.add(1, "models", "missing: list the ONNX models, e.g. models = [\"model.onnx\"]"),
        (Some(_), Some(_)) => p.add(line_of(&p, "model"), "model", "give either 'model' or 'models', not both"),
        (Some(item), None) => match item.as_array() {
            Some(a) if !a.is_empty() => {
                for v in a.iter() {
                    match v.as_str() {
                        Some(s) => models.push((base.join(s), p.line(v.span()))),
                        None => {
                            let line = p.line(v.span());
                            p.add(line, "models", "every entry must be a path (string)")
                        }
                    }
                }
            }
            _ => p.add(line_of(&p, "models"), "models", "expected a non-empty list of paths"),
        },
        (None, Some(item)) => match item.as_str() {
            Some(s) => models.push((base.join(s), line_of(&p, "model"))),
            None => p.add(line_of(&p, "model"), "model", "expected a path (string)"),
        },
    }
    for (m, line) in &models {
        if !m.is_file() {
            p.add(*line, "models", format!("'{}' does not exist (paths are relative to the study file)", m.display()));
        }
    }

    let cells_line = line_of(&p, "cells");
    let cells = match root.get("cells") {
        None => Cells::All,
        Some(item) => match cells_value(item) {
            Ok(c) => c,
            Err(msg) => {
                p.add(cells_line, "cells", msg);
                Cells::All
            }
        },
    };

    let layers = string(&mut p, root, "layers", "", "auto");
    let seed = match root.get("seed") {
        None => 1,
        Some(item) => match item.as_integer() {
            Some(v) if v >= 0 => v as u64,
            _ => {
                p.add(line_of(&p, "seed"), "seed", "expected a non-negative integer");
                1
            }
        },
    };

    let positive = |p: &mut Problems, key: &str, default: f64| -> f64 {
        match root.get(key) {
            None => default,
            Some(item) => match number(item) {
                Some(v) if v > 0.0 && v.is_finite() => v,
                _ => {
                    let line = p.line(item.span());
                    p.add(line, key, "expected a positive number");
                    default
                }
            },
        }
    };
    let frame_rate_hz = positive(&mut p, "frame_rate_hz", 100.0);
    let pixel_um = positive(&mut p, "pixel_um", 50.0);

    let empty = Table::new();
    let section = |p: &mut Problems, name: &str| -> Table {
        match root.get(name) {
            None => empty.clone(),
            Some(item) => match item.as_table() {
                Some(t) => t.clone(),
                None => {
                    let line = p.line(item.span());
                    p.add(line, name, format!("expected a table: [{name}]"));
                    empty.clone()
                }
            },
        }
    };
    let att = section(&mut p, "attribution");
    p.unknown_keys(&att, "attribution.", &ATTRIBUTION);
    let steps = match att.get("steps") {
        None => "auto".to_string(),
        Some(item) => match (item.as_str(), item.as_integer()) {
            (Some("auto"), _) => "auto".into(),
            (_, Some(n)) if n >= 1 => n.to_string(),
            _ => {
                let line = p.line(item.span());
                p.add(line, "attribution.steps", "expected \"auto\" or a positive integer");
                "auto".into()
            }
        },
    };
    let baseline = string(&mut p, &att, "baseline", "attribution.", "gray");
    if let Err(e) = Baseline::parse(&baseline) {
        let line = p.line(att.get("baseline").and_then(Item::span));
        p.add(line, "attribution.baseline", e);
    }
    let mut compare_baselines = Vec::new();
    if let Some(item) = att.get("compare_baselines") {
        let line = p.line(item.span());
        let names: Vec<Option<&str>> = match (item.as_str(), item.as_array()) {
            (Some(s), _) => vec![Some(s)],
            (_, Some(a)) => a.iter().map(Value::as_str).collect(),
            _ => vec![None],
        };
        for n in names {
            match n {
                Some(s) => match Baseline::parse(s) {
                    Ok(_) => compare_baselines.push(s.to_string()),
                    Err(e) => p.add(line, "attribution.compare_baselines", e),
                },
                None => p.add(line, "attribution.compare_baselines", "expected a baseline name or a list of them"),
            }
        }
    }

    let red = section(&mut p, "reduction");
    p.unknown_keys(&red, "reduction.", &REDUCTION);
    let fidelity = match red.get("fidelity") {
        None => 0.9,
        Some(item) => match number(item) {
            Some(f) if f > 0.0 && f <= 1.0 => f,
            _ => {
                let line = p.line(item.span());
                p.add(line, "reduction.fidelity", "expected a number in (0, 1], e.g. 0.9");
                0.9
            }
        },
    };
    let metric = string(&mut p, &red, "metric", "reduction.", "fve");
    if crate::reduction::fidelity::Criterion::parse(&metric).is_none() {
        let line = p.line(red.get("metric").and_then(Item::span));
        p.add(line, "reduction.metric", format!("expected \"fve\" or \"peak\", not \"{metric}\""));
    }

    let protocols = protocol_entries(&mut p, root);
    let study = StudyFile {
        path: path.to_path_buf(),
        out,
        models: models.into_iter().map(|(m, _)| m).collect(),
        cells,
        cells_line,
        layers,
        seed,
        frame_rate_hz,
        pixel_um,
        steps,
        baseline,
        compare_baselines,
        fidelity,
        metric,
        protocols,
    };
    Ok((study, p.list))
}

/// The known name closest to `name` (edit distance).
fn nearest<'a>(known: &[&'a str], name: &str) -> Option<&'a str> {
    known.iter().min_by_key(|k| strsim::levenshtein(k, name)).copied()
}

/// A TOML number, integer or float.
fn number(item: &Item) -> Option<f64> {
    item.as_float().or_else(|| item.as_integer().map(|i| i as f64))
}

/// One error holding every problem, one per line.
pub fn problems_error(path: &Path, list: &[String]) -> Error {
    Error::input(
        path,
        format!("the study file has {} problem(s); nothing was run:\n  {}", list.len(), list.join("\n  ")),
    )
}

fn cells_value(item: &Item) -> std::result::Result<Cells, String> {
    if let Some(s) = item.as_str() {
        if s == "all" {
            return Ok(Cells::All);
        }
        let (a, b) = s.split_once('-').ok_or("expected \"all\", a list such as [0, 2], or a range \"0-2\"")?;
        let (a, b): (usize, usize) = (
            a.trim().parse().map_err(|_| "range start is not a number")?,
            b.trim().parse().map_err(|_| "range end is not a number")?,
        );
        if a > b {
            return Err(format!("range {a}-{b} is empty"));
        }
        return Ok(Cells::List((a..=b).collect()));
    }
    if let Some(a) = item.as_array() {
        let cells: Option<Vec<usize>> =
            a.iter().map(|v| v.as_integer().filter(|&i| i >= 0).map(|i| i as usize)).collect();
        return match cells {
            Some(c) if !c.is_empty() => Ok(Cells::List(c)),
            _ => Err("expected a non-empty list of cell numbers (0, 1, ...)".into()),
        };
    }
    Err("expected \"all\", a list such as [0, 2], or a range \"0-2\"".into())
}

/// `[[protocols]]` entries: each name known, each parameter known and in range.
fn protocol_entries(p: &mut Problems, root: &Table) -> Vec<ProtocolEntry> {
    let Some(item) = root.get("protocols") else {
        p.add(1, "protocols", "missing: add at least one [[protocols]] entry with a name");
        return Vec::new();
    };
    let Some(tables) = item.as_array_of_tables() else {
        let line = p.line(item.span());
        p.add(line, "protocols", "expected [[protocols]] entries (an array of tables)");
        return Vec::new();
    };
    let mut out = Vec::new();
    for (i, t) in tables.iter().enumerate() {
        let key = format!("protocols[{i}]");
        let line = p.line(t.span());
        let Some(name) = t.get("name").and_then(Item::as_str) else {
            p.add(
                line,
                &format!("{key}.name"),
                "missing: every protocol needs a name (see `sufficit stimulus --list`)",
            );
            continue;
        };
        let protocol = match protocols::find(name) {
            Ok(x) => x,
            Err(e) => {
                let line = p.line(t.get("name").and_then(Item::span));
                let names: Vec<&str> = protocols::all().iter().map(|x| x.name()).collect();
                p.add(line, &format!("{key}.name"), format!("{e}; nearest: '{}'", nearest(&names, name).unwrap_or("")));
                continue;
            }
        };
        let specs = protocol.specs();
        let mut params = Vec::new();
        for (k, v) in t.iter().filter(|(k, _)| *k != "name") {
            let vline = p.line(t.key(k).and_then(|x| x.span()).or_else(|| v.span()));
            let text = match v.as_value() {
                Some(Value::Integer(i)) => i.value().to_string(),
                Some(Value::Float(f)) => f.value().to_string(),
                Some(Value::String(s)) => s.value().clone(),
                Some(Value::Array(a)) => a
                    .iter()
                    .map(|x| x.as_float().map(|f| f.to_string()).or_else(|| x.as_integer().map(|i| i.to_string())))
                    .collect::<Option<Vec<_>>>()
                    .map(|v| v.join(","))
                    .unwrap_or_default(),
                _ => String::new(),
            };
            let arg = format!("{k}={text}");
            if !specs.iter().any(|s| s.name == k) {
                let names: Vec<&str> = specs.iter().map(|s| s.name).collect();
                let nearest = nearest(&names, k).unwrap_or("");
                p.add(
                    vline,
                    &format!("{key}.{k}"),
                    format!("{name} has no parameter '{k}'; did you mean '{nearest}'? It has: {}", names.join(", ")),
                );
            } else if let Err(e) = Params::parse(name, specs.clone(), std::slice::from_ref(&arg)) {
                p.add(vline, &format!("{key}.{k}"), e);
            } else {
                params.push(arg);
            }
        }
        // Combinations (e.g. a flash longer than its period) are checked when drawn.
        out.push(ProtocolEntry { name: name.to_string(), params, line });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write(text: &str) -> (tempfile::TempDir, PathBuf) {
        let d = tempfile::tempdir().unwrap();
        std::fs::write(d.path().join("m.onnx"), b"x").unwrap();
        let p = d.path().join("study.toml");
        std::fs::write(&p, text).unwrap();
        (d, p)
    }

    #[test]
    fn a_good_file_is_read_with_paths_relative_to_it() {
        let (d, p) = write(
            "out = \"res\"\nmodels = [\"m.onnx\"]\ncells = \"0-2\"\n[reduction]\nfidelity = 0.8\n\
             [[protocols]]\nname = \"omitted-flash\"\nperiod_ms = [60, 80]\n",
        );
        let (s, problems) = read(&p).unwrap();
        assert!(problems.is_empty(), "{problems:?}");
        assert_eq!(s.out, d.path().join("res"));
        assert_eq!(s.models, vec![d.path().join("m.onnx")]);
        assert_eq!(s.cells, Cells::List(vec![0, 1, 2]));
        assert_eq!(s.fidelity, 0.8);
        assert_eq!(s.protocols[0].params, vec!["period_ms=60,80"]);
    }

    #[test]
    fn every_problem_is_reported_at_once_with_key_and_line() {
        let (_d, p) = write(
            "out = \"res\"\nmodles = [\"m.onnx\"]\nseed = \"one\"\n[reduction]\nfidelity = 2\n\
             [[protocols]]\nname = \"omitted-flash\"\nperiod_ms = [-5]\nflahs_ms = 20\n",
        );
        let e = read(&p).unwrap().1.join("\n");
        for needle in [
            "study.toml:2: 'modles': unknown key; did you mean 'models'?",
            "study.toml:1: 'models': missing",
            "study.toml:3: 'seed': expected a non-negative integer",
            "study.toml:5: 'reduction.fidelity'",
            "study.toml:8: 'protocols[0].period_ms'",
            "study.toml:9: 'protocols[0].flahs_ms'",
            "did you mean 'flash_ms'",
        ] {
            assert!(e.contains(needle), "missing {needle:?} in:\n{e}");
        }
    }
}
