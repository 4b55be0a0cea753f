//! Fuzz target: see `harness::stream_reader` for what it checks.
#![no_main]

#[path = "../harness.rs"]
mod harness;

libfuzzer_sys::fuzz_target!(|data: &[u8]| harness::stream_reader(data));
