//! Fuzz target: see `harness::codebook_reader` for what it checks.
#![no_main]

#[path = "../harness.rs"]
mod harness;

libfuzzer_sys::fuzz_target!(|data: &[u8]| harness::codebook_reader(data));
