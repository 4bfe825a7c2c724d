//! The `.npy` reader: any bytes become an f32 array whose size matches the file, or an error.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    sufficit::memory::set_limit(256 << 20, 1);
    if let Ok(a) = sufficit::output::parse_npy(data, Path::new("fuzz.npy")) {
        // An accepted array never holds more data than the file.
        assert!(a.len() * 4 <= data.len());
    }
});
