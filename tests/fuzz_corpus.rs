//! Replays every committed fuzz corpus file (`fuzz/corpus/<target>/`)
//! through the checks the fuzz targets make (`fuzz/harness.rs`), so the
//! inputs fuzzing found interesting keep passing on stable Rust without
//! cargo-fuzz. Each check is that the entry point returns `Ok` or a clean
//! `Err` without panicking, and that what a reader accepts survives a
//! write-read round trip.

use std::path::{Path, PathBuf};

#[path = "../fuzz/harness.rs"]
mod harness;

/// The corpus files of one target, sorted so failures name the same file
/// on every run.
fn corpus(target: &str) -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fuzz/corpus")
        .join(target);
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|entry| entry.unwrap().path())
        .filter(|p| p.is_file())
        .collect();
    files.sort();
    assert!(!files.is_empty(), "{} holds no inputs", dir.display());
    files
}

fn replay(target: &str, check: fn(&[u8])) {
    for file in corpus(target) {
        let bytes = std::fs::read(&file).unwrap();
        let outcome = std::panic::catch_unwind(|| check(&bytes));
        assert!(outcome.is_ok(), "{target} panicked on {}", file.display());
    }
}

#[test]
fn codebook_reader_corpus() {
    replay("codebook_reader", harness::codebook_reader);
}

#[test]
fn stream_reader_corpus() {
    replay("stream_reader", harness::stream_reader);
}

#[test]
fn csv_loader_corpus() {
    replay("csv_loader", harness::csv_loader);
}
