//! Study files: any text becomes a study with its list of problems, or an error.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data).into_owned();
    let _ = sufficit::study::file::parse(text, Path::new("/nonexistent-fuzz-dir/study.toml"));
});
