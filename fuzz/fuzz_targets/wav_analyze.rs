//! Fuzz target: arbitrary bytes as a WAV file through parsing and the whole
//! analysis. Run with `bash scripts/fuzz.sh` (needs nightly and cargo-fuzz).
#![no_main]

use libfuzzer_sys::fuzz_target;

include!("body.rs");

fuzz_target!(|data: &[u8]| {
    let _ = run(data);
});
