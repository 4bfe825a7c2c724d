//! stimulus.json: any text becomes a description that passes the folder checks, or an error.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let dir = Path::new("fuzz-stimulus");
    if let Ok(meta) = sufficit::stimulus::parse_meta(&text, &dir.join("stimulus.json")) {
        let shape = [meta.frames, meta.height, meta.width];
        let _ = sufficit::stimulus::check_stimulus(&meta, &shape, dir);
        let _ = sufficit::stimulus::check_stimulus(&meta, &[1, 1, 1], dir);
    }
});
