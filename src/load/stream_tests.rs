//! Tests of `RecordStream`: it must give exactly what `read_table` followed
//! by `to_vectors` gives, in any chunk size, with the same errors.

use super::*;
use crate::codebook::{ColumnScale, Scaling};
use crate::error::ErrorKind;
use crate::load::{fit_layout, read_table, time_axis, to_vectors, Missing, TimeChoice};

/// A log with a time column, a text column, three value columns in a
/// shuffled order and, when `holes` is set, some unusable cells.
fn log(rows: usize, holes: bool) -> String {
    let mut text = String::from("humidity,time,site,temp,wind\n");
    for i in 0..rows {
        let humidity = if holes && i % 11 == 4 {
            "n/a".to_string()
        } else {
            format!("{}", 40 + (i * 7) % 13)
        };
        let temp = if holes && i % 17 == 9 {
            String::new()
        } else {
            format!("{:.1}", 15.0 + ((i * 5) % 9) as f64 * 0.5)
        };
        text.push_str(&format!(
            "{humidity},{},north,{temp},{}\n",
            i * 60,
            (i * 3) % 4
        ));
    }
    text
}

fn collect<'t>(
    text: &'t str,
    layout: &crate::codebook::RecordLayout,
    opts: &CsvOptions,
    chunk: usize,
) -> (Vec<RecordChunk>, RecordStream<&'t [u8]>) {
    let mut stream = RecordStream::new(text.as_bytes(), "log.csv", layout, opts)
        .unwrap()
        .with_chunk_vectors(chunk);
    let mut chunks = Vec::new();
    while let Some(c) = stream.next_chunk().unwrap() {
        chunks.push(c);
    }
    (chunks, stream)
}

#[test]
fn stream_equals_table_then_vectors() {
    for holes in [false, true] {
        let text = log(53, holes);
        for frame in [1, 3, 4] {
            let opts = CsvOptions::new()
                .columns(["temp", "humidity", "wind"])
                .frame(frame)
                .scaling(Scaling::ZScore)
                .missing(Missing::Skip);
            let table = read_table(text.as_bytes(), "log.csv", &opts).unwrap();
            let layout = fit_layout(&table, &opts).unwrap().layout;
            let expected = to_vectors(&table, &layout).unwrap();
            for chunk in [1, 2, 5, 1000] {
                let (chunks, stream) = collect(&text, &layout, &opts, chunk);
                let flat: Vec<f32> = chunks
                    .iter()
                    .flat_map(|c| c.vectors.as_flat().to_vec())
                    .collect();
                assert_eq!(flat, expected.as_flat(), "frame {frame}, chunk {chunk}");
                let values: Vec<f64> = chunks.iter().flat_map(|c| c.values.clone()).collect();
                assert_eq!(values, table.values);
                let times: Vec<f64> = chunks
                    .iter()
                    .flat_map(|c| c.times.clone().unwrap())
                    .collect();
                assert_eq!(times, table.times.as_ref().unwrap().values);
                let rows: usize = chunks.iter().map(|c| c.rows).sum();
                assert_eq!(rows, table.rows());
                assert_eq!(stream.rows_read(), table.rows() as u64);
                assert_eq!(stream.skipped_rows(), table.skipped_rows);
                assert_eq!(stream.notices(), table.notices);
                assert_eq!(stream.time_axis(), time_axis(&table));
                assert_eq!(stream.time_column(), Some("time"));
                let mut first = 0;
                for c in &chunks {
                    assert_eq!(c.first_row, first);
                    assert!(c.vectors.len() <= chunk);
                    first += c.rows as u64;
                }
            }
        }
    }
}

#[test]
fn iterator_gives_the_same_chunks() {
    let text = log(10, false);
    let opts = CsvOptions::new().columns(["wind"]);
    let table = read_table(text.as_bytes(), "log.csv", &opts).unwrap();
    let layout = fit_layout(&table, &opts).unwrap().layout;
    let stream = RecordStream::new(text.as_bytes(), "log.csv", &layout, &opts)
        .unwrap()
        .with_chunk_vectors(4);
    assert!(format!("{stream:?}").starts_with("RecordStream { file: \"log.csv\""));
    let sizes: Vec<usize> = stream.map(|c| c.unwrap().rows).collect();
    assert_eq!(sizes, [4, 4, 2]);
}

fn layout(columns: &[&str], frame: usize) -> crate::codebook::RecordLayout {
    crate::codebook::RecordLayout {
        columns: columns.iter().map(|c| c.to_string()).collect(),
        frame,
        scaling: Scaling::None,
        scales: vec![ColumnScale::IDENTITY; columns.len()],
        time_column: None,
    }
}

#[test]
fn errors_match_the_table_reader() {
    let text = "a,b\n1,2\n3,4\n5,n/a\n";
    let opts = CsvOptions::new();
    let table_error = read_table(
        text.as_bytes(),
        "log.csv",
        &opts.clone().columns(["a", "b"]),
    )
    .unwrap_err()
    .to_string();
    let mut stream = RecordStream::new(text.as_bytes(), "log.csv", &layout(&["a", "b"], 1), &opts)
        .unwrap()
        .with_chunk_vectors(1);
    assert_eq!(stream.next_chunk().unwrap().unwrap().values, [1.0, 2.0]);
    assert_eq!(stream.next_chunk().unwrap().unwrap().values, [3.0, 4.0]);
    let e = stream.next_chunk().unwrap_err();
    assert_eq!(e.to_string(), table_error);
    assert!(stream.next_chunk().unwrap().is_none());
    assert!(stream.next().is_none());
}

#[test]
fn missing_codebook_column_is_a_mismatch() {
    let e = RecordStream::new(
        "a,c\n1,2\n".as_bytes(),
        "log.csv",
        &layout(&["a", "b"], 1),
        &CsvOptions::new(),
    )
    .err()
    .unwrap();
    assert!(matches!(e.kind(), ErrorKind::Mismatch(_)));
    assert_eq!(
        e.to_string(),
        "matching the codebook: log.csv: the input has no column \"b\"; the codebook was \
         trained on the columns \"a\", \"b\" and the input has \"a\", \"c\""
    );
}

#[test]
fn header_and_empty_file_errors() {
    let l = layout(&["a"], 1);
    let opts = CsvOptions::new();
    let e = RecordStream::new("".as_bytes(), "log.csv", &l, &opts)
        .err()
        .unwrap();
    assert_eq!(e.to_string(), "reading records: log.csv: the file is empty");
    let e = RecordStream::new("a\n".as_bytes(), "log.csv", &l, &opts)
        .err()
        .unwrap();
    assert_eq!(
        e.to_string(),
        "reading records: log.csv: no data rows after the header"
    );
}

#[test]
fn every_row_dropped_is_an_error() {
    let opts = CsvOptions::new()
        .missing(Missing::Skip)
        .time(TimeChoice::Off);
    let mut stream =
        RecordStream::new("a\nx\ny\n".as_bytes(), "log.csv", &layout(&["a"], 1), &opts).unwrap();
    assert_eq!(
        stream.next_chunk().unwrap_err().to_string(),
        "reading records: log.csv: all 2 data rows have a missing, non-numeric or non-finite value"
    );
}

#[test]
fn frames_never_straddle_chunks() {
    let text = "x\n1\n2\n3\n4\n5\n6\n7\n";
    let mut stream = RecordStream::new(
        text.as_bytes(),
        "log.csv",
        &layout(&["x"], 3),
        &CsvOptions::new(),
    )
    .unwrap()
    .with_chunk_vectors(2);
    let first = stream.next_chunk().unwrap().unwrap();
    assert_eq!(first.rows, 6);
    assert_eq!(first.vectors.as_flat(), &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
    let last = stream.next_chunk().unwrap().unwrap();
    assert_eq!((last.rows, last.first_row), (1, 6));
    assert_eq!(last.vectors.as_flat(), &[7.0, 7.0, 7.0]);
    assert_eq!(last.times, None);
    assert!(stream.next_chunk().unwrap().is_none());
}
