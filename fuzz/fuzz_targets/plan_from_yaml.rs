//! Any byte string handed to the plan reader must give a plan or a located error, never a
//! panic, a hang or unbounded memory.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        if let Err(err) = linbudget::Plan::from_yaml(text, "fuzz.yaml") {
            assert!(!err.problem.is_empty());
        }
    }
});
