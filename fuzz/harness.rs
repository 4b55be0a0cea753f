//! What each fuzz target does with one input, shared by the targets in
//! `fuzz/fuzz_targets/` and by `tests/fuzz_corpus.rs`, which replays the
//! committed corpora through the same code on stable Rust.
//!
//! Every function must return normally for any input: the readers answer
//! malformed bytes with an `Err`, never a panic. When a reader accepts an
//! input, the function also checks what acceptance promises (the value is
//! valid, writes back, and reads back the same), so a reader that lets a
//! bad file through is caught too.

// Each fuzz target uses one of these functions.
#![allow(dead_code)]

use vqforge::codebook::Scaling;
use vqforge::format::{
    codebook_from_bytes, codebook_to_bytes, fingerprint, stream_file_len, stream_from_bytes,
    stream_to_bytes,
};
use vqforge::load::{
    fit_layout, read_table, time_axis, to_vectors, CsvOptions, Missing, RecordStream, TimeChoice,
};

/// The bytes of a codebook file, through the codebook reader.
pub fn codebook_reader(data: &[u8]) {
    let Ok(book) = codebook_from_bytes(data) else {
        return;
    };
    // The reader validates what it returns, so the writer, which refuses
    // invalid codebooks, must take it; and the written file reads back to
    // the same file bytes.
    let written = codebook_to_bytes(&book).expect("an accepted codebook writes back");
    let again = codebook_from_bytes(&written).expect("a written codebook reads back");
    assert_eq!(
        codebook_to_bytes(&again).expect("and writes again"),
        written,
        "a codebook changed on a write-read round trip"
    );
    fingerprint(&book).expect("an accepted codebook has a fingerprint");
}

/// The bytes of a stream file, through the stream reader.
pub fn stream_reader(data: &[u8]) {
    let Ok((header, indices)) = stream_from_bytes(data) else {
        return;
    };
    assert_eq!(indices.len() as u64, header.vectors, "index count");
    assert!(
        indices.iter().all(|&i| u64::from(i) < header.size),
        "an index outside the codebook was accepted"
    );
    let written = stream_to_bytes(&header, &indices).expect("an accepted stream writes back");
    assert_eq!(
        stream_file_len(&header).expect("an accepted stream has a size"),
        written.len() as u64
    );
    let (header2, indices2) = stream_from_bytes(&written).expect("a written stream reads back");
    assert_eq!(header2, header);
    assert_eq!(indices2, indices);
}

/// The CSV options the first byte of a CSV fuzz input chooses: bits 0–1
/// the delimiter, bit 2 the missing-value rule, bit 3 the time column,
/// bits 4–5 the frame (1 to 4 rows), bits 6–7 the scaling.
pub fn csv_options(control: u8) -> CsvOptions {
    let delimiter = [b',', b';', b'\t', b' '][usize::from(control & 3)];
    let missing = if control & 4 == 0 {
        Missing::Error
    } else {
        Missing::Skip
    };
    let time = if control & 8 == 0 {
        TimeChoice::Auto
    } else {
        TimeChoice::Off
    };
    let frame = usize::from((control >> 4) & 3) + 1;
    let scaling = [
        Scaling::None,
        Scaling::ZScore,
        Scaling::MinMax,
        Scaling::None,
    ][usize::from(control >> 6)];
    CsvOptions::new()
        .delimiter(delimiter)
        .missing(missing)
        .time(time)
        .frame(frame)
        .scaling(scaling)
}

/// One byte of options ([`csv_options`]) and then the text of a CSV file,
/// through the table reader, scaling, framing, the time-axis check, and
/// the chunked record stream, which must give the same vectors as framing
/// the whole table.
pub fn csv_loader(data: &[u8]) {
    let Some((&control, text)) = data.split_first() else {
        return;
    };
    let opts = csv_options(control);
    let Ok(table) = read_table(text, "fuzz.csv", &opts) else {
        return;
    };
    assert!(table.rows() > 0, "a table without rows was accepted");
    assert_eq!(table.values.len(), table.rows() * table.columns.len());
    assert!(table.values.iter().all(|v| v.is_finite()));
    let _ = time_axis(&table);
    let fitted = fit_layout(&table, &opts).expect("the frame is at least 1");
    let Ok(whole) = to_vectors(&table, &fitted.layout) else {
        return;
    };
    let stream = RecordStream::new(text, "fuzz.csv", &fitted.layout, &opts)
        .expect("the stream opens a file the table reader read")
        .with_chunk_vectors(2);
    let mut chunked = Vec::new();
    for chunk in stream {
        let chunk = chunk.expect("the stream reads a file the table reader read");
        chunked.extend(chunk.vectors.as_flat().iter().map(|v| v.to_bits()));
    }
    let whole: Vec<u32> = whole.as_flat().iter().map(|v| v.to_bits()).collect();
    assert_eq!(chunked, whole, "the stream and the table disagree");
}
