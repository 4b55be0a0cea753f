//! Fuzz target: see `harness::csv_loader` for what it checks.
#![no_main]

#[path = "../harness.rs"]
mod harness;

libfuzzer_sys::fuzz_target!(|data: &[u8]| harness::csv_loader(data));
