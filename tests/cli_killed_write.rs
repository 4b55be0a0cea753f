//! A `vqforge` process killed while it writes its output (SIGKILL on Unix,
//! through `std::process::Child::kill`) must leave the target either as it
//! was before, byte for byte, or absent if there was none — or, if the kill
//! came after the rename, complete — never a partial file. A temporary file
//! may be left behind; it must be hidden and named
//! `.NAME.tmp-vqforge-PID-N` beside the target (see `src/atomic.rs`).
//!
//! The kill lands at several delays, from before the process has started
//! to after it has finished, so the test holds wherever it lands.

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

mod common;
use common::{data, ok};

/// How long to wait before each kill: immediately, through the reading of
/// the inputs and the writing of the output, to well after the end.
const DELAYS_MS: [u64; 10] = [0, 2, 10, 30, 60, 100, 200, 400, 800, 3000];

/// True for the name of a temporary file of `target` left by a writer.
fn is_temp_of(name: &str, target: &str) -> bool {
    let Some(rest) = name.strip_prefix(&format!(".{target}.tmp-vqforge-")) else {
        return false;
    };
    let parts: Vec<&str> = rest.split('-').collect();
    parts.len() == 2
        && parts
            .iter()
            .all(|p| !p.is_empty() && p.bytes().all(|b| b.is_ascii_digit()))
}

/// Everything in `dir` apart from `keep`, after checking each is a
/// recognisable temporary file of `target`; removes them.
fn clear_leftovers(dir: &Path, keep: &[&str], target: &str) -> usize {
    let mut leftovers = 0;
    for entry in std::fs::read_dir(dir).unwrap() {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        if keep.contains(&name.as_str()) {
            continue;
        }
        assert!(
            is_temp_of(&name, target),
            "unexpected file {name:?} beside {target}"
        );
        std::fs::remove_file(dir.join(&name)).unwrap();
        leftovers += 1;
    }
    leftovers
}

#[test]
fn killed_decode_leaves_the_old_file_or_none() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // The wine table repeated: real values, many rows, so the decoded CSV
    // (about 20 MB) takes a while to write.
    let wine = std::fs::read_to_string(data("wine.csv")).unwrap();
    let (header, rows) = wine.split_once('\n').unwrap();
    let mut big = format!("{header}\n");
    for _ in 0..1000 {
        big.push_str(rows);
    }
    std::fs::write(d.join("big.csv"), big).unwrap();
    ok(d, &["train", "big.csv", "-k", "4", "-o", "w.vqb"]);
    ok(d, &["encode", "big.csv", "-b", "w.vqb", "-o", "big.vqs"]);
    let args = ["decode", "big.vqs", "-b", "w.vqb", "-o", "out.csv"];
    ok(d, &args);
    let complete = std::fs::read(d.join("out.csv")).unwrap();
    assert!(complete.len() > 10_000_000, "{} bytes", complete.len());
    let old = b"time,value\n0,1\n".to_vec();
    let inputs = ["big.csv", "w.vqb", "big.vqs"];

    let mut leftovers = 0;
    for (i, delay) in DELAYS_MS.iter().enumerate() {
        // Every other round starts without a target.
        let had_old = i % 2 == 0;
        if had_old {
            std::fs::write(d.join("out.csv"), &old).unwrap();
        } else {
            let _ = std::fs::remove_file(d.join("out.csv"));
        }
        let mut child = Command::new(env!("CARGO_BIN_EXE_vqforge"))
            .current_dir(d)
            .args(args)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(*delay));
        // Fails only if the process has already been reaped, which `wait`
        // below does; a finished but unreaped process is killed harmlessly.
        child.kill().unwrap();
        child.wait().unwrap();

        match std::fs::read(d.join("out.csv")) {
            Ok(bytes) => assert!(
                (had_old && bytes == old) || bytes == complete,
                "killed after {delay} ms: out.csv has {} bytes, neither the old {} nor the complete {}",
                bytes.len(),
                old.len(),
                complete.len()
            ),
            Err(e) => {
                assert_eq!(e.kind(), std::io::ErrorKind::NotFound);
                assert!(!had_old, "killed after {delay} ms: the old out.csv is gone");
            }
        }
        let mut keep = inputs.to_vec();
        keep.push("out.csv");
        leftovers += clear_leftovers(d, &keep, "out.csv");
    }
    // Not asserted: whether a kill happened to land mid-write depends on
    // the machine. Printed for whoever reads the test output.
    eprintln!("temporary files left by killed runs: {leftovers}");
}

#[test]
fn temporary_names_are_recognised() {
    assert!(is_temp_of(".out.csv.tmp-vqforge-1234-0", "out.csv"));
    assert!(!is_temp_of("out.csv", "out.csv"));
    assert!(!is_temp_of(".out.csv.tmp-vqforge-12a-0", "out.csv"));
    assert!(!is_temp_of(".other.tmp-vqforge-1-0", "out.csv"));
}
