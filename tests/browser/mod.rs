//! Opening a page in headless Chromium (Debian's `chromium`, installed by `.ci/run`): the DOM
//! after load, every console message, every network request the page made, and a screenshot.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// What the browser saw.
pub struct Page {
    /// The DOM after load (serialised HTML).
    pub dom: String,
    /// Console messages (errors, warnings, logs).
    pub console: Vec<String>,
    /// URLs the page requested over the network (not file: or data:).
    pub requests: Vec<String>,
}

/// The Chromium binary, or None (with a loud note) when `SUFFICIT_SKIP_BROWSER=1` says the
/// machine has none. Without that variable a missing browser fails the test.
pub fn chromium() -> Option<PathBuf> {
    let found = ["chromium", "chromium-browser", "google-chrome"].iter().find_map(|name| {
        std::env::var_os("PATH")
            .and_then(|paths| std::env::split_paths(&paths).map(|p| p.join(name)).find(|p| p.is_file()))
    });
    if found.is_none() && std::env::var("SUFFICIT_SKIP_BROWSER").as_deref() == Ok("1") {
        eprintln!("SKIPPED: no chromium on PATH and SUFFICIT_SKIP_BROWSER=1; the browser checks did not run");
        return None;
    }
    Some(found.expect("the report checks need headless Chromium: apt-get install chromium (or run .ci/run)"))
}

/// Flags that keep Chromium's own background traffic (sync, updates, safe browsing) out of
/// the way, so the network log shows the page's requests.
const QUIET: [&str; 12] = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--hide-scrollbars",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-default-apps",
    "--enable-logging=stderr",
    "--log-level=0",
    "--v=1",
];

/// Load `html` and report what happened; writes a `width` x `height` screenshot to `shot`.
pub fn open(browser: &Path, html: &Path, shot: &Path, (width, height): (u32, u32)) -> Page {
    let dir = tempfile::tempdir().unwrap();
    let url = format!("file://{}", html.canonicalize().unwrap().display());
    let netlog = dir.path().join("net.json");
    let out = Command::new(browser)
        .args(QUIET)
        .arg(format!("--user-data-dir={}", dir.path().join("profile").display()))
        .arg(format!("--log-net-log={}", netlog.display()))
        .args(["--dump-dom", &url])
        .output()
        .unwrap();
    assert!(out.status.success(), "chromium failed: {}", String::from_utf8_lossy(&out.stderr));
    let stderr = String::from_utf8_lossy(&out.stderr);
    let console = stderr.lines().filter(|l| l.contains(":CONSOLE")).map(String::from).collect();
    let log: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&netlog).unwrap()).unwrap();
    // A request the page made carries the page's (file://) network isolation key.
    let mut requests: Vec<String> = Vec::new();
    for e in log["events"].as_array().unwrap() {
        let p = &e["params"];
        if p["network_isolation_key"].as_str().is_some_and(|k| k.starts_with("file://")) {
            let source = e["source"]["id"].clone();
            let url = log["events"]
                .as_array()
                .unwrap()
                .iter()
                .find(|x| x["source"]["id"] == source && x["params"]["url"].is_string())
                .and_then(|x| x["params"]["url"].as_str())
                .unwrap_or("(unknown url)");
            if !url.starts_with("file:") && !url.starts_with("data:") {
                requests.push(url.to_string());
            }
        }
    }
    let status = Command::new(browser)
        .args(QUIET)
        .arg(format!("--user-data-dir={}", dir.path().join("profile2").display()))
        .arg(format!("--window-size={width},{height}"))
        .arg(format!("--screenshot={}", shot.display()))
        .arg(&url)
        .output()
        .unwrap();
    assert!(status.status.success() && shot.is_file(), "no screenshot: {}", String::from_utf8_lossy(&status.stderr));
    Page { dom: String::from_utf8_lossy(&out.stdout).into_owned(), console, requests }
}

/// Fraction of a PNG's pixels that are not (near) white.
pub fn ink(png: &Path) -> f64 {
    let img = image::open(png).unwrap().to_rgb8();
    let dark = img.pixels().filter(|p| p.0.iter().any(|&c| c < 230)).count();
    dark as f64 / (img.width() * img.height()) as f64
}
