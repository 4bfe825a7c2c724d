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
    /// An input file (movie, stimulus description, study file, result file, model bytes) cannot
    /// be read as what it should be.
    #[error("'{path}': {message}")]
    Input {
        /// The file (or folder) involved.
        path: PathBuf,
        /// What is wrong and what was expected.
        message: String,
    },
    /// A forward or backward pass produced NaN or infinity.
    #[error("numerical failure at node '{node}' ({op}): {message}")]
    Numerical {
        /// The first node whose output was not finite.
        node: String,
        /// Its ONNX op_type.
        op: String,
        /// What was found and what to try.
        message: String,
    },
    /// The work would need more memory than allowed.
    #[error("{0}")]
    TooLarge(String),
    /// The user interrupted the run (Ctrl-C); finished files are complete, nothing is half-written.
    #[error("interrupted; files already written are complete, the rest were not started")]
    Interrupted,
    /// A request made by the caller cannot be honoured (bad option, unknown node name, ...).
    #[error("{0}")]
    Usage(String),
}

/// Exit codes of the `sufficit` command, one per kind of failure (documented in docs/errors.md).
pub mod exit {
    /// Any failure not listed below (e.g. an output file could not be written).
    pub const OTHER: u8 = 1;
    /// Bad command line or options (clap uses the same code for its own errors).
    pub const USAGE: u8 = 2;
    /// An input file is missing, unreadable or malformed.
    pub const BAD_INPUT: u8 = 3;
    /// The ONNX model is readable but uses something sufficit does not support.
    pub const UNSUPPORTED_MODEL: u8 = 4;
    /// NaN or infinity appeared in a computation.
    pub const NUMERICAL: u8 = 5;
    /// The work would exceed the memory limit.
    pub const TOO_LARGE: u8 = 6;
    /// Interrupted by Ctrl-C (128 + SIGINT, the shell's convention: common practice).
    pub const INTERRUPTED: u8 = 130;
}

impl Error {
    /// The process exit code for this error (see [`exit`]).
    pub fn exit_code(&self) -> u8 {
        match self {
            Error::Io { action, .. } if action.starts_with("read") || action.starts_with("open") => exit::BAD_INPUT,
            Error::Io { .. } => exit::OTHER,
            Error::Input { .. } => exit::BAD_INPUT,
            Error::Model { .. } | Error::UnsupportedOp { .. } | Error::Node { .. } => exit::UNSUPPORTED_MODEL,
            Error::Numerical { .. } => exit::NUMERICAL,
            Error::TooLarge(_) => exit::TOO_LARGE,
            Error::Interrupted => exit::INTERRUPTED,
            Error::Usage(_) => exit::USAGE,
        }
    }

    /// Shorthand for a malformed input file.
    pub fn input(path: impl Into<PathBuf>, message: impl Into<String>) -> Self {
        Error::Input { path: path.into(), message: message.into() }
    }

    /// Shorthand for an I/O error on `path`.
    pub fn io(action: &'static str, path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io { action, path: path.into(), source }
    }
}
