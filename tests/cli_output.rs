//! Where the command's printed output goes: a reader that stops reading (`| head`) ends the
//! process quietly, without a panic message.

use std::process::{Command, Stdio};

#[cfg(unix)]
#[test]
fn a_closed_pipe_ends_the_process_without_a_panic() {
    use std::os::unix::process::ExitStatusExt;
    // The read end is closed before the process starts, so its first line meets a closed pipe.
    let (reader, writer) = std::io::pipe().unwrap();
    drop(reader);
    let out = Command::new(env!("CARGO_BIN_EXE_sufficit"))
        .args(["stimulus", "--list"])
        .stdout(writer)
        .stderr(Stdio::piped())
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!stderr.contains("panicked"), "stderr: {stderr}");
    // Ended by SIGPIPE (13), as `cat` or `grep` would be.
    assert_eq!(out.status.signal(), Some(libc::SIGPIPE), "status {:?}, stderr: {stderr}", out.status);
}
