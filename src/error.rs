//! One error type for the whole library: every variant names what was wrong (file, node, op,
//! parameter) and what was expected, so the CLI can print it as a single paragraph.

use std::path::PathBuf;

/// Library-wide result type.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can go wrong, phrased for the scientist who has to fix it.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be read or written.
    #[error("cannot {action} '{path}': {source}")]
    Io {
        /// What we tried to do ("read", "write", ...).
        action: &'static str,
        /// The file involved.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The file is not a valid ONNX model, or the model breaks a rule sufficit relies on.
    #[error("model '{path}': {message}")]
    Model {
        /// The model file.
        path: PathBuf,
        /// What is wrong and what was expected.
        message: String,
    },
    /// A node of the graph uses an operator sufficit does not support.
    #[error(
        "node '{node}' uses operator '{op}', which sufficit cannot differentiate. \
         Supported operators: {supported}. Re-export the model using only these, \
         or open an issue asking for '{op}'."
    )]
    UnsupportedOp {
        /// Node name (or its output name when unnamed).
        node: String,
        /// ONNX op_type.
        op: String,
        /// Comma-separated list of what is supported.
        supported: String,
    },
    /// A node's attributes or inputs break the operator's rules.
    #[error("node '{node}' ({op}): {message}")]
    Node {
        /// Node name (or its output name when unnamed).
        node: String,
        /// ONNX op_type.
        op: String,
        /// What is wrong and what was expected.
        message: String,
    },
    /// A request made by the caller cannot be honoured (bad option, unknown node name, ...).
    #[error("{0}")]
    Usage(String),
}

impl Error {
    /// Shorthand for an I/O error on `path`.
    pub fn io(action: &'static str, path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io { action, path: path.into(), source }
    }
}
