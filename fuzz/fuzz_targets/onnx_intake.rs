//! ONNX intake: any bytes become a validated model or an error, never a panic, a hang or a huge
//! allocation.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    // Far below libFuzzer's 2 GB limit, so a declared size the guards miss shows as a crash.
    sufficit::memory::set_limit(256 << 20, 1);
    let path = Path::new("fuzz.onnx");
    if let Ok(proto) = sufficit::model::decode_proto(data, path) {
        let _ = sufficit::model::Model::from_proto(proto, path, &Default::default());
    }
});
