//! Damaged codebook and stream files, field by field: every field of the
//! frame and of the header (laid out as `docs/file-formats.md` specifies)
//! is cut short and bit-flipped, and resealed copies (CRC recomputed) carry
//! impossible values, so each check behind the checksum is reached too.
//! Every case must fail as `common::fails` demands: the exit code, one
//! `error:` line naming the file and the fault, no panic, nothing written.
//!
//! The files are real ones the tool wrote from the wine table and then
//! damaged here.

use std::ops::Range;

use tempfile::TempDir;

mod common;
use common::{data, fails, ok, FAILURE};

/// A fresh folder with the wine table, a codebook of 3 codewords trained on
/// it (`w.vqb`) and its stream (`w.vqs`).
fn sandbox() -> TempDir {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(data("wine.csv"), dir.path().join("wine.csv")).unwrap();
    ok(
        dir.path(),
        &["train", "wine.csv", "-k", "3", "--seed", "1", "-o", "w.vqb"],
    );
    ok(
        dir.path(),
        &["encode", "wine.csv", "-b", "w.vqb", "-o", "w.vqs"],
    );
    dir
}

fn read(dir: &TempDir, name: &str) -> Vec<u8> {
    std::fs::read(dir.path().join(name)).unwrap()
}

fn write(dir: &TempDir, name: &str, bytes: &[u8]) {
    std::fs::write(dir.path().join(name), bytes).unwrap();
}

/// A postcard unsigned varint: 7 bits a byte, low group first, high bit on
/// every byte but the last (docs/file-formats.md, "Header encoding").
fn varint(mut v: u64) -> Vec<u8> {
    let mut out = Vec::new();
    loop {
        let low = (v & 0x7F) as u8;
        v >>= 7;
        if v == 0 {
            out.push(low);
            return out;
        }
        out.push(low | 0x80);
    }
}

/// Reads fields off a header, recording where each lies in the file.
struct Cursor<'a> {
    bytes: &'a [u8],
    at: usize,
    fields: Vec<(&'static str, Range<usize>)>,
}

impl Cursor<'_> {
    fn take(&mut self, name: &'static str, len: usize) {
        self.fields.push((name, self.at..self.at + len));
        self.at += len;
    }

    fn varint_len(&self) -> usize {
        1 + self.bytes[self.at..]
            .iter()
            .take_while(|b| **b & 0x80 != 0)
            .count()
    }

    fn varint_value(&self) -> u64 {
        let mut v = 0u64;
        for (i, b) in self.bytes[self.at..self.at + self.varint_len()]
            .iter()
            .enumerate()
        {
            v |= u64::from(b & 0x7F) << (7 * i);
        }
        v
    }

    fn varint(&mut self, name: &'static str) -> u64 {
        let v = self.varint_value();
        let len = self.varint_len();
        self.take(name, len);
        v
    }

    /// A `Vec<String>` (count, then length-prefixed UTF-8) as one field.
    fn strings(&mut self, name: &'static str) {
        let start = self.at;
        let count = self.varint("");
        for _ in 0..count {
            let len = self.varint("") as usize;
            self.at += len;
        }
        self.fields.retain(|(n, _)| !n.is_empty());
        self.fields.push((name, start..self.at));
    }
}

/// Every field of a file from the tool: the frame's magic, version and
/// header length, the header's fields, the payload and the CRC.
fn fields(bytes: &[u8]) -> Vec<(&'static str, Range<usize>)> {
    let header_len = u32::from_le_bytes(bytes[10..14].try_into().unwrap()) as usize;
    let mut c = Cursor {
        bytes,
        at: 14,
        fields: vec![
            ("magic", 0..8),
            ("version", 8..10),
            ("header length", 10..14),
        ],
    };
    if bytes.starts_with(b"VQFORGEB") {
        c.varint("dimension");
        c.varint("size");
        assert_eq!(c.varint("meaning"), 0, "a record codebook");
        c.strings("columns");
        c.varint("frame");
        c.varint("scaling");
        let columns = c.varint_value() as usize;
        let len = c.varint_len() + 16 * columns;
        c.take("scales", len);
        assert_eq!(bytes[c.at], 0, "no time column");
        c.take("time column", 1);
        for name in [
            "seed",
            "restarts",
            "seeding",
            "iterations",
            "stopped by",
            "training vectors",
            "distinct vectors",
        ] {
            c.varint(name);
        }
        c.take("mse", 8);
    } else {
        for name in ["size", "bits", "vectors", "fingerprint", "dimension"] {
            c.varint(name);
        }
        assert_eq!(bytes[c.at], 1, "records present");
        c.take("records", 1);
        c.varint("rows");
        assert_eq!(bytes[c.at], 0, "no time axis");
        c.take("time axis", 1);
        assert_eq!(bytes[c.at], 0, "no image");
        c.take("image", 1);
    }
    assert_eq!(c.at, 14 + header_len, "every header field was read");
    c.take("payload", bytes.len() - 4 - c.at);
    c.take("checksum", 4);
    c.fields
}

/// The file rebuilt around `header` and `payload`, with a correct CRC-32
/// (the CRC of zlib and PNG, docs/file-formats.md "Checksum"; computed with
/// crc32fast as the format page says the tool does).
fn sealed(magic_and_version: &[u8], header: &[u8], payload: &[u8]) -> Vec<u8> {
    let mut out = magic_and_version[..10].to_vec();
    out.extend_from_slice(&(header.len() as u32).to_le_bytes());
    out.extend_from_slice(header);
    out.extend_from_slice(payload);
    let crc = crc32fast::hash(&out);
    out.extend_from_slice(&crc.to_le_bytes());
    out
}

/// `good` with the header field `name` replaced by `value`, resealed.
fn with_field(good: &[u8], name: &str, value: &[u8]) -> Vec<u8> {
    let fields = fields(good);
    let range = |n: &str| fields.iter().find(|(f, _)| *f == n).unwrap().1.clone();
    let header = 14..range("payload").start;
    let field = range(name);
    let mut new_header = good[header.start..field.start].to_vec();
    new_header.extend_from_slice(value);
    new_header.extend_from_slice(&good[field.end..header.end]);
    sealed(good, &new_header, &good[range("payload")])
}

fn encode_with(dir: &TempDir, book: &str, phrases: &[&str]) {
    let args = ["encode", "wine.csv", "-b", book, "-o", "s.vqs"];
    fails(dir, &args, FAILURE, &[&[book], phrases].concat());
}

fn decode_with(dir: &TempDir, stream: &str, phrases: &[&str]) {
    let args = ["decode", stream, "-b", "w.vqb", "-o", "out.csv"];
    fails(dir, &args, FAILURE, &[&[stream], phrases].concat());
}

/// What cutting the file inside a field or flipping its last byte's top
/// bit must say. Cuts always say "truncated" (a short frame, a header
/// running past the end, or a length other than the header describes).
fn flip_phrase(field: &str, kind: &str) -> String {
    match field {
        "magic" => format!("not a vqforge {kind} file"),
        "version" => "unsupported format version 32769".into(),
        "header length" => "truncated file: the header length says".into(),
        _ => "checksum mismatch".into(),
    }
}

/// One cut and one bit flip in every field of the file `name` in `dir`,
/// each used through `use_file`.
fn damage_every_field(
    dir: &TempDir,
    name: &str,
    kind: &str,
    use_file: fn(&TempDir, &str, &[&str]),
) {
    let good = read(dir, name);
    let fields = fields(&good);
    assert!(fields.len() >= 14, "{fields:?}");
    for (field, range) in &fields {
        let cut = format!("cut-{}", field.replace(' ', "-"));
        write(dir, &cut, &good[..range.start + 1]);
        use_file(dir, &cut, &["truncated"]);

        let mut flipped = good.clone();
        flipped[range.end - 1] ^= 0x80;
        let flip = format!("flip-{}", field.replace(' ', "-"));
        write(dir, &flip, &flipped);
        use_file(dir, &flip, &[&flip_phrase(field, kind)]);
    }
}

// ---- codebooks ----------------------------------------------------------

#[test]
fn codebook_cut_and_flipped_in_every_field() {
    let dir = sandbox();
    damage_every_field(&dir, "w.vqb", "codebook", encode_with);
}

#[test]
fn codebook_resealed_with_impossible_values() {
    let dir = sandbox();
    let good = read(&dir, "w.vqb");
    let fields = fields(&good);
    let payload = fields
        .iter()
        .find(|(f, _)| *f == "payload")
        .unwrap()
        .1
        .clone();
    let mut nan = good.clone();
    nan[payload.start..payload.start + 4].copy_from_slice(&f32::NAN.to_le_bytes());
    let nan = sealed(&good, &good[14..payload.start], &nan[payload.clone()]);
    let mut version = good.clone();
    version[8] = 2;
    let version = sealed(&version, &good[14..payload.start], &good[payload.clone()]);
    let mut extra = good[14..payload.start].to_vec();
    extra.push(0);
    let extra = sealed(&good, &extra, &good[payload]);
    let cases: Vec<(&str, Vec<u8>, &[&str])> = vec![
        (
            "dim0.vqb",
            with_field(&good, "dimension", &varint(0)),
            &["0 components"],
        ),
        (
            "size0.vqb",
            with_field(&good, "size", &varint(0)),
            &["0 codewords"],
        ),
        // Four billion codewords of 13 components: 208 GB claimed by a file
        // of under a kilobyte, refused from the header and the file length.
        (
            "huge.vqb",
            with_field(&good, "size", &varint(4_000_000_000)),
            &[
                "4000000000 codewords of dimension 13",
                "but the payload has 156 bytes",
            ],
        ),
        (
            "dim-huge.vqb",
            with_field(&good, "dimension", &varint(u64::MAX)),
            &["more than 2^64"],
        ),
        (
            "meaning.vqb",
            with_field(&good, "meaning", &varint(9)),
            &["the header cannot be read"],
        ),
        (
            "frame.vqb",
            with_field(&good, "frame", &varint(2)),
            &["disagrees with dimension 13"],
        ),
        (
            "scaling.vqb",
            with_field(&good, "scaling", &varint(7)),
            &["the header cannot be read"],
        ),
        ("nan.vqb", nan, &["non-finite"]),
        (
            "version2.vqb",
            version,
            &["unsupported format version 2", "reads version 1"],
        ),
        ("extra.vqb", extra, &["1 unexpected bytes after its fields"]),
    ];
    for (name, bytes, phrases) in cases {
        write(&dir, name, &bytes);
        encode_with(&dir, name, phrases);
    }
}

#[test]
fn codebook_above_the_codeword_limit() {
    let dir = sandbox();
    fails(
        &dir,
        &[
            "encode",
            "wine.csv",
            "-b",
            "w.vqb",
            "-o",
            "s.vqs",
            "--max-codewords",
            "2",
        ],
        FAILURE,
        &[
            "w.vqb",
            "3 codewords, above the limit of 2",
            "raise it with --max-codewords",
        ],
    );
    fails(
        &dir,
        &["info", "w.vqb", "--max-codewords", "2"],
        FAILURE,
        &["w.vqb", "raise it with --max-codewords"],
    );
}

// ---- streams ------------------------------------------------------------

#[test]
fn stream_cut_and_flipped_in_every_field() {
    let dir = sandbox();
    damage_every_field(&dir, "w.vqs", "stream", decode_with);
}

#[test]
fn stream_resealed_with_impossible_values() {
    let dir = sandbox();
    let good = read(&dir, "w.vqs");
    let fields = fields(&good);
    let range = |n: &str| fields.iter().find(|(f, _)| *f == n).unwrap().1.clone();
    let header = &good[14..range("payload").start];
    // 178 indices of 2 bits: 356 bits, so the last byte has 4 padding bits
    // and every index may be 0, 1 or 2 but never 3 (k = 3).
    let mut beyond = good[range("payload")].to_vec();
    beyond[0] |= 0xC0;
    let beyond = sealed(&good, header, &beyond);
    let mut padding = good[range("payload")].to_vec();
    *padding.last_mut().unwrap() |= 0x01;
    let padding = sealed(&good, header, &padding);
    let cases: Vec<(&str, Vec<u8>, &[&str])> = vec![
        (
            "beyond.vqs",
            beyond,
            &["index 3 of vector 0 is outside the codebook of 3 codewords"],
        ),
        ("padding.vqs", padding, &["padding bits"]),
        (
            "size0.vqs",
            with_field(&good, "size", &varint(0)),
            &["0 codewords"],
        ),
        (
            "size-huge.vqs",
            with_field(&good, "size", &varint(1 << 40)),
            &["cannot be indexed with 32-bit indices"],
        ),
        (
            "bits.vqs",
            with_field(&good, "bits", &varint(3)),
            &["3 bits per index, but 3 codewords take 2"],
        ),
        (
            "vectors-huge.vqs",
            with_field(&good, "vectors", &varint(4_000_000_000)),
            &["4000000000 indices of 2 bits (1000000000 bytes), but the payload has 45 bytes"],
        ),
        (
            "dim0.vqs",
            with_field(&good, "dimension", &varint(0)),
            &["0 components"],
        ),
        (
            "dim.vqs",
            with_field(&good, "dimension", &varint(14)),
            &["different codebook", "3 codewords of dimension 14"],
        ),
        (
            "fingerprint.vqs",
            with_field(&good, "fingerprint", &varint(0x1234_5678)),
            &["different codebook", "fingerprint 12345678"],
        ),
        (
            "rows.vqs",
            with_field(&good, "rows", &varint(200)),
            &["200 table rows", "178 indices"],
        ),
        (
            "image.vqs",
            with_field(&good, "image", &[1, 178, 1, 1]),
            &["holds an image, but the codebook is not a palette"],
        ),
        (
            "records.vqs",
            with_field(&good, "records", &[7]),
            &["the header cannot be read"],
        ),
    ];
    for (name, bytes, phrases) in cases {
        write(&dir, name, &bytes);
        decode_with(&dir, name, phrases);
    }
}

#[test]
fn stream_with_a_codebook_it_was_not_made_with() {
    let dir = sandbox();
    // Same size and dimension, other seed: only the fingerprint tells.
    ok(
        dir.path(),
        &[
            "train",
            "wine.csv",
            "-k",
            "3",
            "--seed",
            "2",
            "-o",
            "other.vqb",
        ],
    );
    fails(
        &dir,
        &["decode", "w.vqs", "-b", "other.vqb", "-o", "out.csv"],
        FAILURE,
        &["w.vqs", "other.vqb", "different codebook", "fingerprint"],
    );
    // Another size: the header says so before the fingerprint is compared.
    ok(
        dir.path(),
        &["train", "wine.csv", "-k", "5", "-o", "five.vqb"],
    );
    fails(
        &dir,
        &["decode", "w.vqs", "-b", "five.vqb", "-o", "out.csv"],
        FAILURE,
        &["refers to 3 codewords", "this codebook has 5"],
    );
}

#[test]
fn stream_above_the_vector_limit() {
    let dir = sandbox();
    for args in [
        &[
            "decode",
            "w.vqs",
            "-b",
            "w.vqb",
            "-o",
            "out.csv",
            "--max-vectors",
            "100",
        ][..],
        &["info", "w.vqs", "--max-vectors", "100"][..],
    ] {
        fails(
            &dir,
            args,
            FAILURE,
            &[
                "w.vqs",
                "178 vectors, above the limit of 100",
                "raise it with --max-vectors",
            ],
        );
    }
}
