//! From a validated study file to the list of jobs: models loaded (cells counted, memory per
//! window measured), cells expanded, every job's folder and settings hash fixed. Jobs are in a
//! deterministic order, so `--shard K/N` always takes the same slice.

use super::file::{problems_error, Cells, StudyFile};
use crate::model::{LoadOptions, Model};
use crate::output::file_sha256;
use crate::stimulus::{protocols, Canvas, Params};
use crate::Result;
use serde_json::{json, Value};
use sha2::{Digest, Sha256};
use std::path::PathBuf;

/// A model of the study.
#[derive(Debug, Clone)]
pub struct StudyModel {
    /// The file.
    pub path: PathBuf,
    /// Its SHA-256.
    pub sha256: String,
    /// Folder name: file stem and the first 8 hex digits of the hash.
    pub id: String,
    /// Output cells.
    pub cells: usize,
    /// Activation bytes of one window through the whole graph.
    pub bytes_per_window: usize,
    /// Frames of history one window spans.
    pub lags: usize,
    /// Bytes of one stimulus frame (f32).
    pub frame_bytes: usize,
    /// Frame height and width in pixels.
    pub size: (usize, usize),
}

/// The protocol part shared by all cells: stimulus and responses of one model.
#[derive(Debug, Clone)]
pub struct Shared {
    /// Model index.
    pub model: usize,
    /// Protocol index in the study file.
    pub protocol: usize,
    /// `OUT/<model>/<protocol>`.
    pub dir: PathBuf,
    /// Hash of everything that determines the folder's contents.
    pub hash: String,
    /// Frames of the stimulus movie (drawn once while planning, to check it and size the work).
    pub frames: usize,
}

/// One job: attribute, reduce and knock out one cell on one protocol of one model.
#[derive(Debug, Clone)]
pub struct Job {
    /// Index into [`Plan::shared`].
    pub shared: usize,
    /// The cell.
    pub cell: usize,
    /// `OUT/<model>/<protocol>/cell-<c>`.
    pub dir: PathBuf,
    /// Hash of everything that determines the job's results.
    pub hash: String,
}

/// Everything a study will do.
#[derive(Debug, Clone)]
pub struct Plan {
    /// The study file.
    pub file: StudyFile,
    /// Its models.
    pub models: Vec<StudyModel>,
    /// Protocol folders, one per (model, protocol).
    pub shared: Vec<Shared>,
    /// Jobs in their fixed order.
    pub jobs: Vec<Job>,
}

fn hash(v: &Value) -> String {
    Sha256::digest(v.to_string().as_bytes()).iter().map(|b| format!("{b:02x}")).collect()
}

/// Folder name of a protocol entry: its name, plus a short hash of its parameters if it has any.
fn protocol_dir(name: &str, params: &[String]) -> String {
    if params.is_empty() {
        name.to_string()
    } else {
        format!("{name}-{}", &hash(&json!(params))[..8])
    }
}

/// Load the models and expand the jobs; every problem (from the file and from the models) is
/// reported together.
pub fn plan(file: StudyFile, mut problems: Vec<String>) -> Result<Plan> {
    let mut models = Vec::new();
    for path in file.models.iter().filter(|p| p.is_file()) {
        match Model::load(path, &LoadOptions::default()) {
            Ok(m) => {
                let g = &m.graph;
                let cells: usize = g.values[g.outputs[0]].shape[1..].iter().product();
                let sha256 = file_sha256(path)?;
                let stem = path.file_stem().map_or("model".into(), |s| s.to_string_lossy().into_owned());
                models.push(StudyModel {
                    id: format!("{stem}-{}", &sha256[..8]),
                    path: path.clone(),
                    sha256,
                    cells,
                    bytes_per_window: g.bytes_per_sample(),
                    lags: m.binding.lags,
                    frame_bytes: 4 * m.binding.height * m.binding.width,
                    size: (m.binding.height, m.binding.width),
                });
            }
            Err(e) => problems.push(format!("{}: 'models': {e}", file.path.display())),
        }
    }
    if let Cells::List(list) = &file.cells {
        for m in &models {
            if let Some(c) = list.iter().find(|&&c| c >= m.cells) {
                problems.push(format!(
                    "{}:{}: 'cells': cell {c} is beyond the outputs of '{}', which has {} cells (0..={})",
                    file.path.display(),
                    file.cells_line,
                    m.path.display(),
                    m.cells,
                    m.cells.saturating_sub(1)
                ));
            }
        }
    }
    // Draw every protocol for every model: parameter combinations are checked before any work.
    let mut frames = vec![vec![0; file.protocols.len()]; models.len()];
    for (mi, m) in models.iter().enumerate() {
        let canvas = Canvas {
            height: m.size.0,
            width: m.size.1,
            lags: m.lags,
            frame_rate_hz: file.frame_rate_hz,
            pixel_um: file.pixel_um,
        };
        for (pi, p) in file.protocols.iter().enumerate() {
            let drawn = canvas.validate().and_then(|_| {
                let protocol = protocols::find(&p.name)?;
                let params = Params::parse(&p.name, protocol.specs(), &p.params)?;
                protocol.draw(&params, &canvas, file.seed)
            });
            match drawn {
                Ok(d) => frames[mi][pi] = d.movie.shape()[0] + m.lags,
                Err(e) => problems.push(format!(
                    "{}:{}: 'protocols[{pi}]' ({}) on '{}': {e}",
                    file.path.display(),
                    p.line,
                    p.name,
                    m.path.display()
                )),
            }
        }
    }
    if !problems.is_empty() {
        return Err(problems_error(&file.path, &problems));
    }
    let mut shared = Vec::new();
    let mut jobs = Vec::new();
    for (mi, m) in models.iter().enumerate() {
        for (pi, p) in file.protocols.iter().enumerate() {
            let dir = file.out.join(&m.id).join(protocol_dir(&p.name, &p.params));
            let base = json!({"tool": env!("CARGO_PKG_VERSION"), "model": m.sha256, "protocol": p.name,
                              "parameters": p.params, "seed": file.seed});
            shared.push(Shared {
                model: mi,
                protocol: pi,
                dir: dir.clone(),
                hash: hash(&base),
                frames: frames[mi][pi],
            });
            let cells: Vec<usize> = match &file.cells {
                Cells::All => (0..m.cells).collect(),
                Cells::List(l) => l.clone(),
            };
            for cell in cells {
                let settings = json!({"shared": base, "cell": cell, "layers": file.layers, "steps": file.steps,
                    "baseline": file.baseline, "compare_baselines": file.compare_baselines,
                    "fidelity": file.fidelity, "metric": file.metric});
                jobs.push(Job {
                    shared: shared.len() - 1,
                    cell,
                    dir: dir.join(format!("cell-{cell}")),
                    hash: hash(&settings),
                });
            }
        }
    }
    Ok(Plan { file, models, shared, jobs })
}

impl Plan {
    /// The jobs of shard `k` of `n` (1-based): every n-th job starting at the k-th.
    pub fn shard(&self, shard: Option<(usize, usize)>) -> Vec<usize> {
        shard_indices(self.jobs.len(), shard.unwrap_or((1, 1)))
    }

    /// A short name of a job for progress lines and the final table.
    pub fn job_name(&self, j: usize) -> String {
        let job = &self.jobs[j];
        let sh = &self.shared[job.shared];
        format!("{} / {} / cell {}", self.models[sh.model].id, self.file.protocols[sh.protocol].name, job.cell)
    }
}

/// Indices `0..len` that belong to shard `k` of `n` (1-based).
fn shard_indices(len: usize, (k, n): (usize, usize)) -> Vec<usize> {
    (0..len).filter(|i| i % n == k - 1).collect()
}

/// Parse `K/N` with 1 <= K <= N.
pub fn parse_shard(s: &str) -> Result<(usize, usize)> {
    let bad = || crate::Error::Usage(format!("--shard '{s}': expected K/N with 1 <= K <= N, e.g. --shard 2/8"));
    let (k, n) = s.split_once('/').ok_or_else(bad)?;
    let (k, n): (usize, usize) = (k.trim().parse().map_err(|_| bad())?, n.trim().parse().map_err(|_| bad())?);
    if k == 0 || k > n {
        return Err(bad());
    }
    Ok((k, n))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_the_jobs() {
        assert_eq!(parse_shard("2/4").unwrap(), (2, 4));
        assert!(parse_shard("0/4").is_err() && parse_shard("5/4").is_err() && parse_shard("x").is_err());
        let mut all: Vec<usize> = (1..=4).flat_map(|k| shard_indices(10, (k, 4))).collect();
        all.sort();
        assert_eq!(all, (0..10).collect::<Vec<_>>());
    }

    #[test]
    fn protocol_folders_differ_with_parameters() {
        assert_eq!(protocol_dir("steps", &[]), "steps");
        let a = protocol_dir("steps", &["step_ms=500".into()]);
        assert!(a.starts_with("steps-") && a != protocol_dir("steps", &["step_ms=600".into()]));
    }
}
