//! The `vqforge` binary on bad input: every case must fail with the right
//! exit code (2 usage, 1 failure), exactly one `error:` line on stderr that
//! names the problem, nothing on stdout, no panic, and no file created or
//! changed in its folder (temporary files included).
//!
//! The catalogue (this file, `bad_input_files.rs` for codebooks and streams
//! field by field, and the bad-input tests of `cli_palette.rs` and
//! `cli_curve.rs`), counted as distinct inputs or flag sets:
//!
//! | area | cases | where |
//! |---|---:|---|
//! | CSV refused (empty, header only, ragged, non-numeric, NaN, inf, wrong delimiter, non-UTF-8 cell, Latin-1 header, UTF-16, quote never closed, codebook given as table, …) | 15 | here |
//! | CSV accepted as the clean file (BOM, CRLF, quoted, `;`, tab, 2 MB line) | 6 | here |
//! | codebooks: cut and bit-flipped in each of 21 fields, 10 resealed impossible values, 6 older cases, over the limit, as a stream | 61 | `bad_input_files.rs`, here |
//! | streams: cut and bit-flipped in each of 14 fields, 12 resealed (index beyond k, padding, sizes, fingerprint …), other codebook ×3, over the limit ×2, 2 older cases, codebook given as stream ×2 | 49 | `bad_input_files.rs`, here |
//! | images (100000 × 100000 header, 0 wide, 0 × 0, bit-flipped, truncated, GIF, table named .png, over --max-pixels, training set over --max-vectors) | 14 | here, `cli_palette.rs` |
//! | flags (train, palette, curve, limits) | 43 | here, `cli_palette.rs`, `cli_curve.rs` |
//! | output paths (equal to an input, folder, missing folder, two outputs one file, one of several failing, missing inputs) | 31 | here, `cli_palette.rs` |

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

/// Writes each case's file into `dir` and runs `command` followed by the
/// file name and `rest`: each run must fail naming the file and the phrases.
fn each_file_fails(dir: &TempDir, cases: &[(&str, &[u8], &[&str])], command: &str, rest: &[&str]) {
    for (name, bytes, phrases) in cases {
        write(dir, name, bytes);
        let mut args = vec![command];
        if command == "encode" {
            args.extend(["wine.csv", "-b", name]);
        } else {
            args.push(name);
        }
        args.extend_from_slice(rest);
        fails(dir, &args, FAILURE, &[&[*name], *phrases].concat());
    }
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
    each_file_fails(&dir, cases, "encode", &["-o", "s.vqs"]);
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
    each_file_fails(&dir, cases, "decode", &["-b", "w.vqb", "-o", "out.csv"]);
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

// ---- CSV variations that must give the clean file's result ------------------

/// Trains on `name` (written with `bytes`) with `extra` flags and returns
/// the codebook's bytes.
fn train_bytes(dir: &TempDir, name: &str, bytes: &[u8], extra: &[&str]) -> Vec<u8> {
    write(dir, name, bytes);
    let book = format!("{name}.vqb");
    let mut args = vec!["train", name, "-k", "3", "-o", &book];
    args.extend_from_slice(extra);
    prepare(dir, &args);
    read(dir, &book)
}

/// A byte-order mark, CRLF line ends, quoted numbers, another delimiter and
/// a very long line in a text column change nothing: the codebook is the
/// clean file's, byte for byte. (RFC 4180 allows CRLF and quoted fields;
/// the BOM is the UTF-8 signature of Unicode section 23.8; common practice
/// for spreadsheet exports.)
#[test]
fn csv_variations_give_the_clean_result() {
    let dir = sandbox();
    let clean = read(&dir, "wine.csv");
    let text = String::from_utf8(clean.clone()).unwrap();
    let want = train_bytes(&dir, "clean.csv", &clean, &[]);

    let mut bom = b"\xEF\xBB\xBF".to_vec();
    bom.extend_from_slice(&clean);
    let crlf = text.replace('\n', "\r\n");
    let quoted: String = text
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                format!("{l}\n")
            } else {
                let cells: Vec<String> = l.split(',').map(|c| format!("\"{c}\"")).collect();
                format!("{}\n", cells.join(","))
            }
        })
        .collect();
    let semicolons = text.replace(',', ";");
    let tabs = text.replace(',', "\t");
    // A text column whose cell on one line is 2 MB long.
    let long: String = text
        .lines()
        .enumerate()
        .map(|(i, l)| match i {
            0 => format!("{l},note\n"),
            100 => format!("{l},{}\n", "x".repeat(2_000_000)),
            _ => format!("{l},x\n"),
        })
        .collect();
    let cases: [(&str, &[u8], &[&str]); 6] = [
        ("bom.csv", &bom, &[]),
        ("crlf.csv", crlf.as_bytes(), &[]),
        ("quoted.csv", quoted.as_bytes(), &[]),
        (
            "semicolons.csv",
            semicolons.as_bytes(),
            &["--delimiter", ";"],
        ),
        ("tabs.csv", tabs.as_bytes(), &["--delimiter", "tab"]),
        ("long.csv", long.as_bytes(), &[]),
    ];
    for (name, bytes, flags) in cases {
        assert_eq!(train_bytes(&dir, name, bytes, flags), want, "{name}");
    }
}

// ---- CSV that must be refused -----------------------------------------------

/// Tables refused for their bytes, each trained on: what the message must
/// name besides the file.
#[test]
fn tables_refused_for_their_bytes() {
    let dir = sandbox();
    wine_book(&dir, "w.vqb", "1");
    let book = read(&dir, "w.vqb");
    let cases: &[(&str, &[u8], &[&str])] = &[
        (
            "cell.csv",
            b"a,b\n1,2\n3,\xff\n",
            &[
                "line 3",
                "column \"b\"",
                "not valid UTF-8 (byte 0xFF)",
                "save the file as UTF-8",
            ],
        ),
        // "température" in ISO 8859-1: é is the single byte 0xE9.
        (
            "latin1.csv",
            b"temp\xe9rature,b\n1,2\n3,4\n",
            &["line 1", "not valid UTF-8 (byte 0xE9)"],
        ),
        // "a,b" and "1,2" in UTF-16LE with its byte-order mark FF FE.
        (
            "utf16.csv",
            b"\xff\xfea\x00,\x00b\x00\n\x001\x00,\x002\x00\n\x00",
            &["UTF-16", "save it as UTF-8"],
        ),
        // Regression: the open quote took the rest of the file as one cell
        // of a text column and training went on with one row.
        (
            "quote.csv",
            b"a,b\n1,x\n2,\"y\n3,z\n4,w\n",
            &["line 3", "quoted field is never closed"],
        ),
        (
            "book.csv",
            &book,
            &["a vqforge codebook file, not a CSV table"],
        ),
    ];
    each_file_fails(&dir, cases, "train", &["-k", "2", "-o", "b.vqb"]);
}

// ---- limits -----------------------------------------------------------------

#[test]
fn table_above_the_vector_limit() {
    let dir = sandbox();
    wine_book(&dir, "w.vqb", "1");
    let cases: &[&[&str]] = &[
        &[
            "train",
            "wine.csv",
            "-k",
            "2",
            "-o",
            "b.vqb",
            "--max-vectors",
            "100",
        ],
        &[
            "encode",
            "wine.csv",
            "-b",
            "w.vqb",
            "-o",
            "s.vqs",
            "--max-vectors",
            "100",
        ],
        &[
            "curve",
            "wine.csv",
            "--sizes",
            "2,4",
            "--max-vectors",
            "100",
        ],
    ];
    for args in cases {
        fails(
            &dir,
            args,
            FAILURE,
            &[
                "wine.csv",
                "line 102",
                "more than 100 vectors",
                "raise it with --max-vectors",
            ],
        );
    }
    // Two tables of 178 rows, each under the limit, together over it.
    fails(
        &dir,
        &[
            "train",
            "wine.csv",
            "wine.csv",
            "-k",
            "2",
            "-o",
            "b.vqb",
            "--max-vectors",
            "200",
        ],
        FAILURE,
        &[
            "the training set has 356 vectors, above the limit of 200",
            "--max-vectors",
        ],
    );
}

#[test]
fn bad_limit_flags() {
    let dir = sandbox();
    let cases: &[(&[&str], &[&str])] = &[
        (
            &[
                "train",
                "wine.csv",
                "-k",
                "2",
                "-o",
                "b.vqb",
                "--max-vectors",
                "0",
            ],
            &["--max-vectors must be at least 1"],
        ),
        (
            &[
                "train",
                "wine.csv",
                "-k",
                "2",
                "-o",
                "b.vqb",
                "--max-codewords",
                "0",
            ],
            &["--max-codewords must be at least 1"],
        ),
        (
            &[
                "train",
                "wine.csv",
                "-k",
                "100",
                "-o",
                "b.vqb",
                "--max-codewords",
                "50",
            ],
            &[
                "--size asks for 100 codewords, above the limit of 50",
                "--max-codewords",
            ],
        ),
        (
            &[
                "curve",
                "wine.csv",
                "--sizes",
                "2..64",
                "--max-codewords",
                "32",
            ],
            &[
                "--sizes asks for 64 codewords",
                "raise it with --max-codewords",
            ],
        ),
        (
            &[
                "train",
                "wine.csv",
                "-k",
                "2",
                "-o",
                "b.vqb",
                "--max-vectors",
                "lots",
            ],
            &["--max-vectors", "lots"],
        ),
    ];
    for (args, phrases) in cases {
        fails(&dir, args, USAGE, phrases);
    }
}

// ---- images -----------------------------------------------------------------

/// A folder with chelsea (scikit-image's sample photo, 451 × 300) as `c.png`.
fn image_sandbox() -> TempDir {
    let dir = sandbox();
    std::fs::copy(data("images/chelsea.png"), dir.path().join("c.png")).unwrap();
    dir
}

/// chelsea with its IHDR width and height replaced and the IHDR CRC
/// recomputed (PNG specification, second edition, sections 5.3 and 11.2.2:
/// IHDR follows the 8-byte signature; length, type, width, height, …, then
/// the CRC-32 of type and data).
fn png_claiming(dir: &TempDir, width: u32, height: u32) -> Vec<u8> {
    let mut png = read(dir, "c.png");
    assert_eq!(&png[12..16], b"IHDR");
    png[16..20].copy_from_slice(&width.to_be_bytes());
    png[20..24].copy_from_slice(&height.to_be_bytes());
    let crc = crc32fast::hash(&png[12..29]);
    png[29..33].copy_from_slice(&crc.to_be_bytes());
    png
}

#[test]
fn images_with_impossible_dimensions() {
    let dir = image_sandbox();
    write(&dir, "huge.png", png_claiming(&dir, 100_000, 100_000));
    write(&dir, "wide0.png", png_claiming(&dir, 0, 300));
    let mut flipped = read(&dir, "c.png");
    let middle = flipped.len() / 2;
    flipped[middle] ^= 0x10;
    write(&dir, "flipped.png", flipped);
    let cases: &[(&[&str], &[&str])] = &[
        (
            &["palette", "huge.png", "-k", "4", "-o", "o.png"],
            &[
                "huge.png",
                "100000 × 100000 = 10000000000 pixels",
                "raise it with --max-pixels",
            ],
        ),
        (
            &["train", "huge.png", "-k", "4", "-o", "b.vqb"],
            &["huge.png", "10000000000 pixels", "--max-pixels"],
        ),
        (
            &["palette", "wide0.png", "-k", "4", "-o", "o.png"],
            &["wide0.png", "0 × 300", "no pixels"],
        ),
        (
            &["palette", "flipped.png", "-k", "4", "-o", "o.png"],
            &["flipped.png", "truncated or corrupted"],
        ),
        (
            &[
                "train",
                "c.png",
                "c.png",
                "-k",
                "4",
                "-o",
                "b.vqb",
                "--max-vectors",
                "200000",
            ],
            &[
                "the training set has 270600 vectors, above the limit of 200000",
                "--max-vectors",
            ],
        ),
    ];
    for (args, phrases) in cases {
        fails(&dir, args, FAILURE, phrases);
    }
}

#[test]
fn image_stream_above_the_pixel_limit() {
    let dir = image_sandbox();
    prepare(&dir, &["train", "c.png", "-k", "4", "-o", "p.vqb"]);
    prepare(&dir, &["encode", "c.png", "-b", "p.vqb", "-o", "p.vqs"]);
    fails(
        &dir,
        &[
            "decode",
            "p.vqs",
            "-b",
            "p.vqb",
            "-o",
            "out.png",
            "--max-pixels",
            "1000",
        ],
        FAILURE,
        &[
            "p.vqs",
            "135300 pixels, above the limit of 1000",
            "raise it with --max-pixels",
        ],
    );
}

// ---- several outputs ----------------------------------------------------------

#[test]
fn two_outputs_naming_one_file() {
    let dir = image_sandbox();
    let cases: &[(&[&str], &[&str])] = &[
        (
            &[
                "palette", "c.png", "-k", "4", "-o", "o.png", "--raw", "o.png",
            ],
            &["--out and --raw both name o.png"],
        ),
        (
            &[
                "palette",
                "c.png",
                "-k",
                "4",
                "-o",
                "o.png",
                "--c-source",
                "x.h",
                "--raw",
                "./x.h",
            ],
            &["--c-source and --raw both name"],
        ),
    ];
    for (args, phrases) in cases {
        fails(&dir, args, USAGE, phrases);
    }
}

/// Regression: the PNG was committed before the C header failed, so a
/// failed run left a new o.png behind.
#[test]
fn one_output_failing_leaves_none_of_them() {
    let dir = image_sandbox();
    let cases: &[&[&str]] = &[
        &[
            "palette",
            "c.png",
            "-k",
            "4",
            "-o",
            "o.png",
            "--c-source",
            "no-such/o.h",
        ],
        &[
            "palette",
            "c.png",
            "-k",
            "4",
            "-o",
            "o.png",
            "--raw",
            "no-such/o.bin",
        ],
        &[
            "curve",
            "wine.csv",
            "--sizes",
            "2,4",
            "--table",
            "t.csv",
            "--plot",
            "no-such/p.svg",
        ],
    ];
    for args in cases {
        fails(&dir, args, FAILURE, &["no-such"]);
    }
}
