//! Results folders: every file is written to a temporary name and renamed into place, so a
//! folder never holds a half-written file; `run.json` records how the results were made.

use crate::{Error, Result};
use ndarray::{ArrayBase, Data, Dimension};
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::io::Write;
use std::path::{Path, PathBuf};

/// A results folder.
pub struct OutputDir {
    dir: PathBuf,
}

impl OutputDir {
    /// Create the folder (and parents) if needed.
    pub fn create(dir: &Path) -> Result<Self> {
        std::fs::create_dir_all(dir).map_err(|e| Error::io("create the folder", dir, e))?;
        Ok(OutputDir { dir: dir.to_path_buf() })
    }

    /// The folder's path.
    pub fn path(&self) -> &Path {
        &self.dir
    }

    /// Write `name` (a file name, or a path inside the folder such as `units/a.npy`) atomically
    /// from a closure that fills a writer.
    pub fn write_with(&self, name: &str, fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>) -> Result<()> {
        let target = self.dir.join(name);
        let parent = target.parent().unwrap_or(&self.dir).to_path_buf();
        let file = target.file_name().map_or_else(|| name.into(), |f| f.to_string_lossy().into_owned());
        let tmp = parent.join(format!(".{file}.tmp-{}", std::process::id()));
        let result = (|| {
            std::fs::create_dir_all(&parent)?;
            let mut f = std::io::BufWriter::new(std::fs::File::create(&tmp)?);
            fill(&mut f)?;
            f.into_inner().map_err(|e| e.into_error())?.sync_all()?;
            std::fs::rename(&tmp, &target)
        })();
        result.map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            Error::io("write", &target, e)
        })
    }

    /// Write bytes.
    pub fn write_bytes(&self, name: &str, bytes: &[u8]) -> Result<()> {
        self.write_with(name, |w| w.write_all(bytes))
    }

    /// Write a value as pretty JSON.
    pub fn write_json(&self, name: &str, value: &impl Serialize) -> Result<()> {
        let text =
            serde_json::to_string_pretty(value).map_err(|e| Error::Usage(format!("cannot serialise {name}: {e}")))?;
        self.write_bytes(name, text.as_bytes())
    }

    /// Write an f32 array as `.npy`.
    pub fn write_npy<S: Data<Elem = f32>, D: Dimension>(&self, name: &str, a: &ArrayBase<S, D>) -> Result<()> {
        use ndarray_npy::WriteNpyExt;
        let owned = a.as_standard_layout();
        self.write_with(name, |w| owned.write_npy(w).map_err(std::io::Error::other))
    }

    /// Write an RGB image as PNG.
    pub fn write_png(&self, name: &str, img: &image::RgbImage) -> Result<()> {
        let mut bytes = Vec::new();
        img.write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png)
            .map_err(|e| Error::Usage(format!("cannot encode {name}: {e}")))?;
        self.write_bytes(name, &bytes)
    }
}

/// Read a JSON result file, naming the file when it is missing or malformed.
pub fn read_json(path: &Path) -> Result<serde_json::Value> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io("read", path, e))?;
    serde_json::from_str(&text)
        .map_err(|e| Error::input(path, format!("is not valid JSON ({e}); was it written completely?")))
}

/// Read an f32 `.npy` array of any rank, naming the file when it is missing or of another type.
/// The header is checked against the file's real size before any array is allocated, so a file
/// declaring a huge shape (or header) is refused at once instead of exhausting memory.
pub fn read_npy(path: &Path) -> Result<crate::Tensor> {
    let size = std::fs::metadata(path).map_err(|e| Error::io("read", path, e))?.len();
    crate::memory::check(&format!("reading '{}'", path.display()), Some(size), 0.5)?;
    let bytes = std::fs::read(path).map_err(|e| Error::io("read", path, e))?;
    parse_npy(&bytes, path)
}

/// As [`read_npy`], from the file's bytes (`path` names it in messages).
pub fn parse_npy(bytes: &[u8], path: &Path) -> Result<crate::Tensor> {
    use ndarray_npy::ReadNpyExt;
    let expected = "expected a float32 .npy array (numpy: np.save(path, a.astype(np.float32)))";
    let header_end = npy_header_end(bytes).ok_or_else(|| {
        Error::input(
            path,
            format!("is not a .npy file, or its header is cut short or longer than the file; {expected}"),
        )
    })?;
    let depth = bracket_depth(&bytes[..header_end]);
    if depth > MAX_HEADER_DEPTH {
        return Err(Error::input(
            path,
            format!(
                "has a .npy header nested {depth} brackets deep (a float32 array's header is a dict holding \
                 a shape tuple, {MAX_HEADER_DEPTH} deep at most); {expected}"
            ),
        ));
    }
    let header = ndarray_npy::npy::header::Header::from_reader(&mut &bytes[..header_end])
        .map_err(|e| Error::input(path, format!("has an unreadable .npy header ({e}); {expected}")))?;
    let declared = header.shape.iter().try_fold(4usize, |n, &d| n.checked_mul(d));
    let data = bytes.len() - header_end;
    if declared != Some(data) {
        return Err(Error::input(
            path,
            format!(
                "declares shape {:?} ({} bytes of float32) but holds {data} bytes of data; {expected}",
                header.shape,
                declared.map_or("too many".to_string(), |d| d.to_string())
            ),
        ));
    }
    crate::Tensor::read_npy(bytes).map_err(|e| Error::input(path, format!("is not an f32 .npy array: {e}")))
}

/// The deepest bracket nesting a `.npy` header may have: the dict holding the shape tuple is 2,
/// one more is slack. Deeper headers are refused before parsing, because the header parser's
/// time grows steeply with nesting: a fuzzed header of 33 nested braces was still being parsed
/// after 9 minutes (release build) before this check.
const MAX_HEADER_DEPTH: usize = 3;

/// How deeply `(`, `[` and `{` nest in `header` (closing brackets of any kind close a level).
fn bracket_depth(header: &[u8]) -> usize {
    let (mut depth, mut deepest) = (0usize, 0usize);
    for b in header {
        match b {
            b'(' | b'[' | b'{' => {
                depth += 1;
                deepest = deepest.max(depth);
            }
            b')' | b']' | b'}' => depth = depth.saturating_sub(1),
            _ => {}
        }
    }
    deepest
}

/// Where a `.npy` file's header ends (magic, version, header length field, header), or `None`
/// when the bytes are not a `.npy` file or the declared header runs past their end.
fn npy_header_end(bytes: &[u8]) -> Option<usize> {
    // The .npy format: "\x93NUMPY", major and minor version, then the header length as a
    // little-endian u16 (version 1) or u32 (versions 2 and 3). numpy.lib.format documentation.
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return None;
    }
    let (len, start) = match bytes[6] {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10usize),
        2 | 3 if bytes.len() >= 12 => (u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize, 12),
        _ => return None,
    };
    let end = start.checked_add(len)?;
    (end <= bytes.len()).then_some(end)
}

/// SHA-256 of a file, hex encoded.
pub fn file_sha256(path: &Path) -> Result<String> {
    let bytes = std::fs::read(path).map_err(|e| Error::io("read", path, e))?;
    Ok(Sha256::digest(&bytes).iter().map(|b| format!("{b:02x}")).collect())
}

/// What `run.json` records: enough to reproduce the results.
#[derive(Debug, Serialize)]
pub struct RunRecord {
    /// Always "sufficit/1".
    pub schema: &'static str,
    /// Tool name and version.
    pub tool: String,
    /// The command that ran.
    pub command: String,
    /// Model file and its SHA-256, when a model was used.
    pub model: Option<ModelRecord>,
    /// Every setting of the run.
    pub settings: serde_json::Value,
    /// Random seed.
    pub seed: u64,
    /// Wall-clock seconds per step.
    pub timings: Vec<(String, f64)>,
}

/// A model as identified in run.json.
#[derive(Debug, Serialize)]
pub struct ModelRecord {
    /// Path as given.
    pub path: String,
    /// SHA-256 of the file.
    pub sha256: String,
}

impl RunRecord {
    /// A record for `command` with `settings`.
    pub fn new(command: &str, model: Option<&Path>, settings: serde_json::Value, seed: u64) -> Result<Self> {
        let model = model
            .map(|p| Ok::<_, Error>(ModelRecord { path: p.display().to_string(), sha256: file_sha256(p)? }))
            .transpose()?;
        Ok(RunRecord {
            schema: "sufficit/1",
            tool: format!("sufficit {}", env!("CARGO_PKG_VERSION")),
            command: command.into(),
            model,
            settings,
            seed,
            timings: Vec::new(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_leave_no_temporary_files() {
        let dir = tempfile::tempdir().unwrap();
        let out = OutputDir::create(&dir.path().join("a/b")).unwrap();
        out.write_json("x.json", &serde_json::json!({"k": 1})).unwrap();
        out.write_npy("m.npy", &ndarray::Array2::<f32>::zeros((2, 3))).unwrap();
        let names: Vec<_> = std::fs::read_dir(out.path()).unwrap().map(|e| e.unwrap().file_name()).collect();
        assert_eq!(names.len(), 2, "{names:?}");
    }

    #[test]
    fn npy_headers_as_numpy_writes_them_pass_the_depth_check_and_deep_ones_are_refused() {
        // numpy.lib.format: the header is a dict literal with 'descr', 'fortran_order', 'shape'.
        let mut bytes = Vec::new();
        ndarray_npy::WriteNpyExt::write_npy(&ndarray::Array3::<f32>::zeros((2, 3, 4)), &mut bytes).unwrap();
        let end = npy_header_end(&bytes).unwrap();
        assert_eq!(bracket_depth(&bytes[..end]), 2);
        assert_eq!(parse_npy(&bytes, Path::new("ok.npy")).unwrap().shape(), &[2, 3, 4]);
        // The same file with the shape tuple wrapped in two more brackets.
        let text = String::from_utf8_lossy(&bytes[10..end]).replace("(2, 3, 4)", "[[(2, 3, 4)]]");
        let mut deep = bytes[..8].to_vec();
        deep.extend_from_slice(&(text.len() as u16).to_le_bytes());
        deep.extend_from_slice(text.as_bytes());
        deep.extend_from_slice(&bytes[end..]);
        let err = parse_npy(&deep, Path::new("deep.npy")).unwrap_err().to_string();
        assert!(err.contains("deep.npy") && err.contains("nested 4 brackets deep"), "{err}");
    }

    #[test]
    fn sha256_matches_a_known_digest() {
        // FIPS 180-2 test vector: SHA-256("abc").
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("abc");
        std::fs::write(&p, b"abc").unwrap();
        assert_eq!(file_sha256(&p).unwrap(), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    }
}
