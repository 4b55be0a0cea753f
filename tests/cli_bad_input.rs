//! The `vqforge` binary on bad input: every case must fail with the right
//! exit code (2 usage, 1 failure), exactly one `error:` line on stderr that
//! names the problem, nothing on stdout, no panic, and no file created or
//! changed in its folder (temporary files included).

use std::process::Command;

use tempfile::TempDir;

mod common;
use common::{data, fails, FAILURE, USAGE};

/// A fresh folder holding copies of the sample tables.
fn sandbox() -> TempDir {
    let dir = tempfile::tempdir().unwrap();
    for name in ["wine.csv", "seattle-weather.csv"] {
        std::fs::copy(data(name), dir.path().join(name)).unwrap();
    }
    dir
}

fn write(dir: &TempDir, name: &str, bytes: impl AsRef<[u8]>) {
    std::fs::write(dir.path().join(name), bytes).unwrap();
}

fn read(dir: &TempDir, name: &str) -> Vec<u8> {
    std::fs::read(dir.path().join(name)).unwrap()
}

/// Runs a command that must succeed (to prepare a case).
fn prepare(dir: &TempDir, args: &[&str]) {
    let out = Command::new(env!("CARGO_BIN_EXE_vqforge"))
        .current_dir(dir.path())
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "preparing with {args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// `book` trained on wine with `seed`.
fn wine_book(dir: &TempDir, book: &str, seed: &str) {
    prepare(
        dir,
        &["train", "wine.csv", "-k", "4", "--seed", seed, "-o", book],
    );
}

/// `w.vqb` and the stream `w.vqs` it made from wine.
fn wine_book_and_stream(dir: &TempDir) {
    wine_book(dir, "w.vqb", "1");
    prepare(dir, &["encode", "wine.csv", "-b", "w.vqb", "-o", "w.vqs"]);
}

/// Training on a CSV with this text.
fn train_fails_on(text: &str, code: i32, phrases: &[&str]) {
    let dir = sandbox();
    write(&dir, "in.csv", text);
    fails(
        &dir,
        &["train", "in.csv", "-k", "2", "-o", "b.vqb"],
        code,
        phrases,
    );
}

// ---- CSV contents -------------------------------------------------------

#[test]
fn empty_file() {
    train_fails_on("", FAILURE, &["in.csv", "empty"]);
}

#[test]
fn header_only() {
    train_fails_on("a,b\n", FAILURE, &["in.csv", "no data rows"]);
}

#[test]
fn ragged_row() {
    train_fails_on("a,b\n1,2\n3\n4,5\n", FAILURE, &["line 3", "1 field", "2"]);
}

#[test]
fn non_numeric_cell_names_line_and_column() {
    train_fails_on(
        "a,b\n1,2\n3,4\n5,n/a\n",
        FAILURE,
        &["line 4", "column \"b\"", "\"n/a\" is not a number"],
    );
}

#[test]
fn nan_cell() {
    train_fails_on(
        "a,b\n1,2\nNaN,4\n",
        FAILURE,
        &["line 3", "column \"a\"", "not a finite number"],
    );
}

#[test]
fn infinite_cell() {
    train_fails_on(
        "a,b\n1,2\n3,-inf\n",
        FAILURE,
        &["line 3", "column \"b\"", "not a finite number"],
    );
}

#[test]
fn bad_cell_met_while_encoding() {
    let dir = sandbox();
    write(&dir, "ok.csv", "a,b\n1,2\n3,4\n5,7\n");
    write(&dir, "bad.csv", "a,b\n1,2\n3,x\n");
    prepare(&dir, &["train", "ok.csv", "-k", "2", "-o", "b.vqb"]);
    fails(
        &dir,
        &["encode", "bad.csv", "-b", "b.vqb", "-o", "s.vqs"],
        FAILURE,
        &["line 3", "column \"b\"", "\"x\" is not a number"],
    );
}

#[test]
fn wrong_delimiter_while_encoding() {
    let dir = sandbox();
    write(&dir, "ok.csv", "a,b\n1,2\n3,4\n5,7\n");
    prepare(&dir, &["train", "ok.csv", "-k", "2", "-o", "b.vqb"]);
    fails(
        &dir,
        &[
            "encode",
            "ok.csv",
            "-b",
            "b.vqb",
            "-o",
            "s.vqs",
            "--delimiter",
            ";",
        ],
        FAILURE,
        &["ok.csv", "no columns", "the input has \"a,b\""],
    );
}

#[test]
fn empty_file_met_while_encoding() {
    let dir = sandbox();
    wine_book(&dir, "w.vqb", "1");
    write(&dir, "empty.csv", "");
    fails(
        &dir,
        &["encode", "empty.csv", "-b", "w.vqb", "-o", "s.vqs"],
        FAILURE,
        &["empty.csv", "empty"],
    );
}

// ---- flags --------------------------------------------------------------

/// Train flags on wine that must be refused as usage errors.
#[test]
fn bad_train_flags() {
    let cases: &[(&[&str], &[&str])] = &[
        (
            &["--columns", "alcohol,nope"],
            &["column \"nope\"", "no such column"],
        ),
        (&["-k", "0"], &["codebook size", "at least 1", "got 0"]),
        (&["--frame", "0"], &["frame", "at least 1", "got 0"]),
        (
            &["--delimiter", ";;"],
            &["--delimiter", "one ASCII character", "\";;\""],
        ),
        (&["--restarts", "0"], &["restarts"]),
        (&["-k", "four"], &["--size", "four"]),
        (&["--bogus"], &["--bogus"]),
    ];
    let dir = sandbox();
    for (flags, phrases) in cases {
        let mut args = vec!["train", "wine.csv", "-o", "b.vqb"];
        if !flags.contains(&"-k") {
            args.extend(["-k", "4"]);
        }
        args.extend_from_slice(flags);
        fails(&dir, &args, USAGE, phrases);
    }
}

/// Regression: clap's message put the missing flag on a second line, so the
/// one-line error said "not provided:" without saying what.
#[test]
fn missing_size_names_the_flag() {
    let dir = sandbox();
    fails(
        &dir,
        &["train", "wine.csv", "-o", "b.vqb"],
        USAGE,
        &["required", "--size"],
    );
}

// ---- codebook and stream files ------------------------------------------

#[test]
fn codebook_columns_do_not_match_the_input() {
    let dir = sandbox();
    wine_book(&dir, "w.vqb", "1");
    fails(
        &dir,
        &[
            "encode",
            "seattle-weather.csv",
            "-b",
            "w.vqb",
            "-o",
            "s.vqs",
        ],
        FAILURE,
        &["no columns", "\"alcohol\"", "the codebook was trained on"],
    );
}

/// Damaged copies of a good codebook, each used to encode wine.
#[test]
fn damaged_codebooks() {
    let dir = sandbox();
    wine_book(&dir, "w.vqb", "1");
    let good = read(&dir, "w.vqb");
    let mut flipped = good.clone();
    let last_codeword_byte = flipped.len() - 6;
    flipped[last_codeword_byte] ^= 0x01;
    let mut version = good.clone();
    version[8..10].copy_from_slice(&7u16.to_le_bytes());
    let cases: &[(&str, &[u8], &[&str])] = &[
        ("truncated.vqb", &good[..good.len() - 40], &["truncated"]),
        ("stub.vqb", &good[..12], &["truncated"]),
        ("flipped.vqb", &flipped, &["checksum", "corrupted"]),
        ("version.vqb", &version, &["version 7", "reads version 1"]),
        (
            "text.vqb",
            b"alcohol,ash\n1,2\n",
            &["not a vqforge codebook"],
        ),
        ("empty.vqb", b"", &["empty"]),
    ];
    for (name, bytes, phrases) in cases {
        write(&dir, name, bytes);
        fails(
            &dir,
            &["encode", "wine.csv", "-b", name, "-o", "s.vqs"],
            FAILURE,
            &[&[*name], *phrases].concat(),
        );
    }
}

#[test]
fn stream_decoded_with_another_codebook() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    wine_book(&dir, "other.vqb", "2");
    fails(
        &dir,
        &["decode", "w.vqs", "-b", "other.vqb", "-o", "out.csv"],
        FAILURE,
        &["different codebook", "fingerprint"],
    );
}

/// Damaged copies of a good stream, each decoded with its codebook.
#[test]
fn damaged_streams() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    let good = read(&dir, "w.vqs");
    let mut flipped = good.clone();
    let payload_byte = flipped.len() - 10;
    flipped[payload_byte] ^= 0x20;
    let cases: &[(&str, &[u8], &[&str])] = &[
        ("truncated.vqs", &good[..good.len() - 9], &["truncated"]),
        ("flipped.vqs", &flipped, &["checksum", "corrupted"]),
    ];
    for (name, bytes, phrases) in cases {
        write(&dir, name, bytes);
        fails(
            &dir,
            &["decode", name, "-b", "w.vqb", "-o", "out.csv"],
            FAILURE,
            &[&[*name], *phrases].concat(),
        );
    }
}

#[test]
fn stream_given_as_codebook_and_codebook_as_stream() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    fails(
        &dir,
        &["encode", "wine.csv", "-b", "w.vqs", "-o", "s2.vqs"],
        FAILURE,
        &["w.vqs", "is a vqforge stream, not a codebook"],
    );
    fails(
        &dir,
        &["decode", "w.vqs", "-b", "w.vqs", "-o", "out.csv"],
        FAILURE,
        &["is a vqforge stream, not a codebook"],
    );
    fails(
        &dir,
        &["decode", "w.vqb", "-b", "w.vqb", "-o", "out.csv"],
        FAILURE,
        &["is a vqforge codebook, not a stream"],
    );
}

#[test]
fn info_on_a_file_that_is_neither() {
    let dir = sandbox();
    fails(
        &dir,
        &["info", "wine.csv"],
        FAILURE,
        &["wine.csv", "not a vqforge codebook or stream"],
    );
}

// ---- paths --------------------------------------------------------------

#[test]
fn output_inside_a_missing_folder() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    let cases: &[&[&str]] = &[
        &["train", "wine.csv", "-k", "2", "-o", "no-such/b.vqb"],
        &["encode", "wine.csv", "-b", "w.vqb", "-o", "no-such/s.vqs"],
        &["decode", "w.vqs", "-b", "w.vqb", "-o", "no-such/out.csv"],
    ];
    for args in cases {
        let out = args[args.len() - 1];
        fails(&dir, args, FAILURE, &["writing", out]);
    }
}

#[test]
fn output_is_a_folder() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    std::fs::create_dir(dir.path().join("folder")).unwrap();
    let cases: &[&[&str]] = &[
        &["train", "wine.csv", "-k", "2", "-o", "folder"],
        &["encode", "wine.csv", "-b", "w.vqb", "-o", "folder"],
        &["decode", "w.vqs", "-b", "w.vqb", "-o", "folder"],
    ];
    for args in cases {
        fails(&dir, args, USAGE, &["folder", "is a folder, not a file"]);
    }
}

#[test]
fn output_equal_to_an_input() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    let cases: &[&[&str]] = &[
        &["train", "wine.csv", "-k", "2", "-o", "wine.csv"],
        &["encode", "wine.csv", "-b", "w.vqb", "-o", "wine.csv"],
        &["encode", "wine.csv", "-b", "w.vqb", "-o", "w.vqb"],
        &["decode", "w.vqs", "-b", "w.vqb", "-o", "w.vqs"],
        &["decode", "w.vqs", "-b", "w.vqb", "-o", "w.vqb"],
    ];
    for args in cases {
        fails(&dir, args, USAGE, &["--out", "input"]);
    }
}

/// Regression: inputs and --out were compared as text, so `./wine.csv`
/// replaced `wine.csv` with the codebook or stream.
#[test]
fn output_equal_to_an_input_spelt_differently() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    let cases: &[&[&str]] = &[
        &["train", "wine.csv", "-k", "2", "-o", "./wine.csv"],
        &["encode", "./wine.csv", "-b", "w.vqb", "-o", "wine.csv"],
        &["decode", "w.vqs", "-b", "w.vqb", "-o", "./w.vqs"],
    ];
    for args in cases {
        fails(&dir, args, USAGE, &["--out", "input"]);
    }
}

#[test]
fn missing_inputs() {
    let dir = sandbox();
    wine_book_and_stream(&dir);
    let cases: &[&[&str]] = &[
        &["train", "no-such.csv", "-k", "2", "-o", "b.vqb"],
        &["encode", "no-such.csv", "-b", "w.vqb", "-o", "s.vqs"],
        &["encode", "wine.csv", "-b", "no-such.vqb", "-o", "s.vqs"],
        &["decode", "no-such.vqs", "-b", "w.vqb", "-o", "out.csv"],
        &["decode", "w.vqs", "-b", "no-such.vqb", "-o", "out.csv"],
        &["info", "no-such.vqb"],
    ];
    for args in cases {
        let missing = args.iter().find(|a| a.starts_with("no-such")).unwrap();
        let mut phrases = vec![*missing];
        if cfg!(unix) {
            phrases.push("No such file or directory");
        }
        fails(&dir, args, FAILURE, &phrases);
    }
}
