//! Fuzz target: `drive::report` (see `tests/fuzz/drive.rs`).
#![no_main]

#[path = "../drive.rs"]
mod drive;

libfuzzer_sys::fuzz_target!(|data: &[u8]| drive::report(data));
