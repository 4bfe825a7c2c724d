//! Joining the results of sharded runs: every sealed folder (one holding a completion record)
//! is copied into one results folder, its record last; the same unit from two shards must carry
//! the same settings hash.

use super::run::{settings_hash, DONE};
use crate::output::OutputDir;
use crate::{Error, Result};
use std::path::{Path, PathBuf};

/// What a merge did.
#[derive(Debug, Default)]
pub struct Merged {
    /// Sealed folders copied.
    pub copied: usize,
    /// Sealed folders already present with the same settings.
    pub already: usize,
}

/// Every sealed folder under `dir` (relative paths), sorted.
fn sealed(dir: &Path, root: &Path, out: &mut Vec<PathBuf>) -> Result<()> {
    if dir.join(DONE).is_file() {
        out.push(dir.strip_prefix(root).unwrap_or(dir).to_path_buf());
    }
    let mut subs: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| Error::io("read the folder", dir, e))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_dir())
        .collect();
    subs.sort();
    for s in subs {
        sealed(&s, root, out)?;
    }
    Ok(())
}

/// Copy a sealed folder's files and sub-folders, except sub-folders that are sealed units of
/// their own; the completion record goes last.
fn copy_unit(from: &Path, to: &OutputDir, rel: &Path) -> Result<()> {
    let mut stack = vec![PathBuf::new()];
    while let Some(sub) = stack.pop() {
        let dir = from.join(&sub);
        let mut entries: Vec<PathBuf> = std::fs::read_dir(&dir)
            .map_err(|e| Error::io("read the folder", &dir, e))?
            .filter_map(|e| e.ok().map(|e| e.path()))
            .collect();
        entries.sort();
        for p in entries {
            let name = sub.join(p.file_name().unwrap_or_default());
            if p.is_dir() {
                if !p.join(DONE).is_file() {
                    stack.push(name);
                }
            } else if name != Path::new(DONE) {
                let bytes = std::fs::read(&p).map_err(|e| Error::io("read", &p, e))?;
                to.write_bytes(&rel.join(&name).to_string_lossy(), &bytes)?;
            }
        }
    }
    let record = std::fs::read(from.join(DONE)).map_err(|e| Error::io("read", from.join(DONE), e))?;
    to.write_bytes(&rel.join(DONE).to_string_lossy(), &record)
}

/// Merge the sealed results of `inputs` into `out`.
pub fn merge(inputs: &[PathBuf], out: &Path) -> Result<Merged> {
    if let Some(input) = inputs.iter().find(|i| !i.join("study.json").is_file()) {
        return Err(Error::input(input, "holds no study.json: give the output folders of `sufficit study` runs"));
    }
    let target = OutputDir::create(out)?;
    let mut merged = Merged::default();
    for input in inputs {
        let mut units = Vec::new();
        sealed(input, input, &mut units)?;
        for rel in units {
            let (from, to) = (input.join(&rel), out.join(&rel));
            match (settings_hash(&from), settings_hash(&to)) {
                (Some(a), Some(b)) if a == b => merged.already += 1,
                (Some(_), Some(_)) => {
                    return Err(Error::Usage(format!(
                        "'{}' and '{}' hold the same job with different settings: were the shards run from \
                         different study files?",
                        from.display(),
                        to.display()
                    )))
                }
                _ => {
                    copy_unit(&from, &target, &rel)?;
                    merged.copied += 1;
                }
            }
        }
        if !out.join("study.json").is_file() {
            let bytes = std::fs::read(input.join("study.json")).map_err(|e| Error::io("read", input, e))?;
            target.write_bytes("study.json", &bytes)?;
        }
    }
    Ok(merged)
}
