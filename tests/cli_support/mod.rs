//! Running the `sufficit` binary from tests, and reading what it wrote.

#![allow(dead_code)]

use serde_json::Value;
use std::path::Path;
use std::process::Command;

/// Run `sufficit ARGS`: (succeeded, stdout followed by stderr).
pub fn sufficit(args: &[&str]) -> (bool, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_sufficit")).args(args).output().unwrap();
    (out.status.success(), format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr)))
}

/// A path as a command-line argument.
pub fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// A JSON file the run wrote.
pub fn json(p: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))).unwrap()
}
