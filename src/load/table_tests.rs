//! Tests of `read_table`: every reading error with its exact message, line
//! and column, the accepted CSV variations, column and time choice.

use super::*;
use crate::codebook::TimeFormat;
use crate::error::ErrorKind;
use crate::load::{time_axis, Missing, TimeChoice, TimeInfo};

fn read(text: &str) -> crate::Result<RecordTable> {
    read_table(text.as_bytes(), "log.csv", &CsvOptions::new())
}

fn read_with(text: &str, opts: CsvOptions) -> crate::Result<RecordTable> {
    read_table(text.as_bytes(), "log.csv", &opts)
}

fn read_bytes(bytes: &[u8]) -> crate::Result<RecordTable> {
    read_table(bytes, "log.csv", &CsvOptions::new())
}

fn message(result: crate::Result<RecordTable>) -> String {
    result.unwrap_err().to_string()
}

#[test]
fn reads_a_plain_table() {
    let t = read("a,b\n1,2\n3.5,-4e1\n").unwrap();
    assert_eq!(t.columns, ["a", "b"]);
    assert_eq!(t.values, [1.0, 2.0, 3.5, -40.0]);
    assert_eq!(t.rows(), 2);
    assert_eq!(t.row(1), &[3.5, -40.0]);
    assert_eq!(t.column(1).collect::<Vec<_>>(), [2.0, -40.0]);
    assert!(t.times.is_none());
    assert!(t.notices.is_empty());
}

#[test]
fn empty_file() {
    let e = read("").unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Shape(_)));
    assert_eq!(e.to_string(), "reading records: log.csv: the file is empty");
    assert_eq!(
        message(read("\n\r\n  \n")),
        "reading records: log.csv: the file is empty"
    );
}

#[test]
fn header_only() {
    assert_eq!(
        message(read("a,b\n")),
        "reading records: log.csv: no data rows after the header"
    );
}

#[test]
fn ragged_row_names_its_line() {
    let text = "a,b,c,d,e\n1,2,3,4,5\n1,2,3,4,5\n1,2,3,4,5\n1,2,3,4,5\n1,2,3,4,5\n1,2,3\n";
    let e = read(text).unwrap_err();
    assert_eq!(e.position().line, Some(7));
    assert_eq!(
        e.to_string(),
        "reading records: log.csv, line 7: the row has 3 fields, the header has 5"
    );
    assert_eq!(
        message(read("a,b\n1,2,3\n")),
        "reading records: log.csv, line 2: the row has 3 fields, the header has 2"
    );
}

#[test]
fn ragged_row_is_an_error_even_when_skipping() {
    let e = read_with("a,b\n1,2\n3\n", CsvOptions::new().missing(Missing::Skip)).unwrap_err();
    assert_eq!(e.position().line, Some(3));
}

#[test]
fn non_numeric_cell() {
    let e = read("time,temp,humidity\n0,20,40\n1,21,n/a\n").unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Parse(_)));
    assert_eq!(e.position().line, Some(3));
    assert_eq!(e.position().column.as_deref(), Some("humidity"));
    assert_eq!(
        e.to_string(),
        "reading records: log.csv, line 3, column \"humidity\": \"n/a\" is not a number"
    );
}

#[test]
fn non_finite_cells() {
    assert_eq!(
        message(read("x\n1\ninf\n")),
        "reading records: log.csv, line 3, column \"x\": \"inf\" is not a finite number"
    );
    assert_eq!(
        message(read("x\n1\n2\n NaN \n")),
        "reading records: log.csv, line 4, column \"x\": \"NaN\" is not a finite number"
    );
    // A non-finite first cell keeps the column numeric, so it is reported.
    assert_eq!(
        message(read("x,y\n-inf,1\n")),
        "reading records: log.csv, line 2, column \"x\": \"-inf\" is not a finite number"
    );
}

#[test]
fn empty_cell() {
    let e = read("a,b\n1,2\n3,\n").unwrap_err();
    assert_eq!(
        e.to_string(),
        "reading records: log.csv, line 3, column \"b\": the cell is empty"
    );
    assert_eq!(
        message(read("a,b\n1,2\n  ,4\n")),
        "reading records: log.csv, line 3, column \"a\": the cell is empty"
    );
}

#[test]
fn unknown_column_lists_the_columns() {
    let e = read_with(
        "date,temp,humidity\n2024-01-01,1,2\n",
        CsvOptions::new().columns(["temp", "humdity"]),
    )
    .unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::InvalidParameter(_)));
    assert_eq!(
        e.to_string(),
        "reading records: log.csv, line 1, column \"humdity\": there is no such column; \
         the columns are \"date\", \"temp\", \"humidity\""
    );
    let e = read_with(
        "a,b\n1,2\n",
        CsvOptions::new().time(TimeChoice::Named("t".into())),
    )
    .unwrap_err();
    assert_eq!(e.position().column.as_deref(), Some("t"));
}

#[test]
fn duplicate_and_empty_header_names() {
    assert_eq!(
        message(read("a,b,a\n1,2,3\n")),
        "reading records: log.csv, line 1, column \"a\": the header names this column twice \
         (columns 1 and 3)"
    );
    assert_eq!(
        message(read("a,,c\n1,2,3\n")),
        "reading records: log.csv, line 1: column 2 has no name in the header"
    );
}

#[test]
fn non_utf8_is_reported_with_its_line() {
    let mut bytes = b"a,b\n1,2\n3,".to_vec();
    bytes.extend([0xE9, b'\n']);
    let e = read_table(&bytes[..], "log.csv", &CsvOptions::new()).unwrap_err();
    assert_eq!(
        e.to_string(),
        "reading records: log.csv, line 3, column \"b\": the text is not valid UTF-8 \
         (byte 0xE9); save the file as UTF-8"
    );
    let mut header = b"a,".to_vec();
    header.extend([b'b', 0xFF, b'\n', b'1', b',', b'2', b'\n']);
    let e = read_table(&header[..], "log.csv", &CsvOptions::new()).unwrap_err();
    assert_eq!(e.position().line, Some(1));
    assert_eq!(e.position().column.as_deref(), Some("2"));
}

#[test]
fn non_utf8_in_an_unused_column_is_ignored() {
    let mut bytes = b"a,note\n1,x\n2,".to_vec();
    bytes.extend([0xE9, b'\n']);
    let t = read_table(&bytes[..], "log.csv", &CsvOptions::new()).unwrap();
    assert_eq!(t.values, [1.0, 2.0]);
}

#[test]
fn skip_drops_and_counts_rows() {
    let text = "a,b\n1,2\n,3\n4,n/a\n5,inf\n6,7\n";
    let t = read_with(text, CsvOptions::new().missing(Missing::Skip)).unwrap();
    assert_eq!(t.values, [1.0, 2.0, 6.0, 7.0]);
    assert_eq!(t.skipped_rows, 3);
    assert_eq!(
        t.notices,
        ["skipped 3 rows with a missing, non-numeric or non-finite value"]
    );
}

#[test]
fn skip_with_every_row_dropped_is_an_error() {
    let e = read_with(
        "a\n1\nx\n",
        CsvOptions::new().columns(["a"]).missing(Missing::Skip),
    );
    assert!(e.is_ok());
    let e = read_with(
        "a,b\n1,x\n2,\n",
        CsvOptions::new().columns(["b"]).missing(Missing::Skip),
    );
    assert_eq!(
        message(e),
        "reading records: log.csv: all 2 data rows have a missing, non-numeric or non-finite value"
    );
}

#[test]
fn byte_order_mark_is_removed() {
    let t = read("\u{feff}temp,wind\n1,2\n").unwrap();
    assert_eq!(t.columns, ["temp", "wind"]);
}

#[test]
fn crlf_line_ends_and_blank_lines_keep_line_numbers() {
    let t = read("a,b\r\n1,2\r\n3,4\r\n").unwrap();
    assert_eq!(t.values, [1.0, 2.0, 3.0, 4.0]);
    let e = read("a,b\r\n1,2\r\n\r\n\n3,x\r\n").unwrap_err();
    assert_eq!(e.position().line, Some(5));
    let e = read("a,b\n\n1,2\n\n\n3,x").unwrap_err();
    assert_eq!(e.position().line, Some(6));
}

#[test]
fn quoted_fields_and_spaces() {
    let text = "\"name, with comma\",\"b\"\n\" 1.5 \",  2  \n\"3\",\"4\"\n";
    let t = read(text).unwrap();
    assert_eq!(t.columns, ["name, with comma", "b"]);
    assert_eq!(t.values, [1.5, 2.0, 3.0, 4.0]);
}

#[test]
fn quoted_line_breaks_count_as_lines() {
    let text = "note,x\n\"two\nlines\",1\n\"three\nline\nnote\",oops\n";
    let e = read_with(text, CsvOptions::new().columns(["x"])).unwrap_err();
    assert_eq!(e.position().line, Some(4));
}

#[test]
fn semicolon_delimiter() {
    let t = read_with("a;b\n1;2\n", CsvOptions::new().delimiter(b';')).unwrap();
    assert_eq!(t.columns, ["a", "b"]);
    assert_eq!(t.values, [1.0, 2.0]);
}

#[test]
fn explicit_columns_set_the_order() {
    let t = read_with("a,b,c\n1,2,3\n", CsvOptions::new().columns(["c", "a"])).unwrap();
    assert_eq!(t.columns, ["c", "a"]);
    assert_eq!(t.values, [3.0, 1.0]);
    assert_eq!(t.skipped_columns, ["b"]);
    assert!(t.notices.is_empty());
}

#[test]
fn default_columns_skip_text_with_a_notice() {
    let t = read("id,weather,temp,note\n1,rain,5.5,\n2,sun,7,x\n").unwrap();
    assert_eq!(t.columns, ["id", "temp"]);
    assert_eq!(t.skipped_columns, ["weather", "note"]);
    assert_eq!(
        t.notices,
        ["skipped 2 columns not numeric in the first data row: \"weather\" (\"rain\"), \"note\" (empty)"]
    );
}

#[test]
fn default_columns_then_follow_the_missing_rule() {
    // The first row makes "b" numeric; its later empty cell is an error,
    // not a reason to drop the column.
    let e = read("a,b\n1,2\n3,\n").unwrap_err();
    assert_eq!(e.position().column.as_deref(), Some("b"));
}

#[test]
fn no_numeric_column_is_an_error() {
    assert_eq!(
        message(read("a,b\nx,y\n")),
        "reading records: log.csv, line 2: no column holds a number in the first data row; \
         the columns are \"a\", \"b\""
    );
}

#[test]
fn time_column_found_by_name() {
    let t = read("Temp,TIME,x\n20,0.5,1\n21,1.0,2\n22,1.5,3\n").unwrap();
    assert_eq!(t.columns, ["Temp", "x"]);
    let times = t.times.as_ref().unwrap();
    assert_eq!(times.name, "TIME");
    assert_eq!(times.raw, ["0.5", "1.0", "1.5"]);
    assert_eq!(times.values, [0.5, 1.0, 1.5]);
    assert_eq!(times.format, TimeFormat::Number { decimals: 1 });
    assert_eq!(
        time_axis(&t),
        TimeInfo::Regular(crate::codebook::TimeAxis {
            start: 0.5,
            step: 0.5,
            format: TimeFormat::Number { decimals: 1 }
        })
    );
}

#[test]
fn time_column_found_by_iso_first_cell() {
    let t = read("when,x\n2024-02-28T23:00,1\n2024-02-29 00:00:30,2\n").unwrap();
    let times = t.times.unwrap();
    assert_eq!(times.name, "when");
    assert_eq!(
        times.format,
        TimeFormat::DateTime {
            t_separator: true,
            seconds: true,
            slashes: false,
        }
    );
    // A numeric first column without a time name stays a value column.
    let t = read("n,x\n1,2\n").unwrap();
    assert_eq!(t.columns, ["n", "x"]);
    assert!(t.times.is_none());
}

#[test]
fn slashed_dates_are_a_time_axis() {
    // The date format of vega-datasets' seattle-weather.csv.
    let t = read("date,temp\n2012/01/01,5\n2012/01/02,6\n").unwrap();
    assert_eq!(t.columns, ["temp"]);
    let times = t.times.expect("time column");
    assert_eq!(times.format, TimeFormat::Date { slashes: true });
    assert_eq!(times.values[1] - times.values[0], 86_400.0);
}

#[test]
fn named_and_off_time_choices() {
    let text = "t,x\n10,1\n20,2\n";
    let t = read_with(text, CsvOptions::new().time(TimeChoice::Named("t".into()))).unwrap();
    assert_eq!(t.columns, ["x"]);
    assert_eq!(t.times.unwrap().values, [10.0, 20.0]);
    let t = read_with("time,x\n0,1\n", CsvOptions::new().time(TimeChoice::Off)).unwrap();
    assert_eq!(t.columns, ["time", "x"]);
    assert!(t.times.is_none());
    // Listing the auto-detected name as a value column keeps it a value.
    let t = read_with("time,x\n0,1\n", CsvOptions::new().columns(["time", "x"])).unwrap();
    assert!(t.times.is_none());
}

#[test]
fn bad_time_cells() {
    assert_eq!(
        message(read("date,x\n2024-01-01,1\n2024-01-32,2\n")),
        "reading records: log.csv, line 3, column \"date\": \"2024-01-32\" is not a time: \
         expected a number, a date (YYYY-MM-DD or YYYY/MM/DD) or a date and time (YYYY-MM-DDTHH:MM[:SS])"
    );
    assert_eq!(
        message(read("time,x\n1,1\n2024-01-02,2\n")),
        "reading records: log.csv, line 3, column \"time\": \"2024-01-02\" is a date \
         (YYYY-MM-DD or YYYY/MM/DD), but the time column began with a number"
    );
    assert_eq!(
        message(read("time,x\n1,1\n,2\n")),
        "reading records: log.csv, line 3, column \"time\": the cell is empty"
    );
}

#[test]
fn irregular_time_axis_and_gaps_from_skipping() {
    let t = read("date,x\n2024-01-01,1\n2024-01-02,2\n2024-01-04,3\n").unwrap();
    assert_eq!(
        time_axis(&t),
        TimeInfo::Irregular {
            notice:
                "time column \"date\" is not regularly spaced; decode writes a row number instead"
                    .into()
        }
    );
    let skip = || CsvOptions::new().missing(Missing::Skip);
    let t = read_with(
        "t,x\n0,1\n1,n/a\n2,3\n3,4\n",
        skip().time(TimeChoice::Named("t".into())),
    )
    .unwrap();
    assert!(matches!(time_axis(&t), TimeInfo::Irregular { .. }));
    let t = read_with("time,x\n0,1\n1,2\n2,3\n3,x\n", skip()).unwrap();
    assert_eq!(t.times.as_ref().unwrap().values, [0.0, 1.0, 2.0]);
    assert!(matches!(time_axis(&t), TimeInfo::Regular(_)));
}

#[test]
fn time_column_decimals_are_the_widest() {
    let t = read("time,x\n0,1\n0.25,2\n0.5,3\n").unwrap();
    assert_eq!(t.times.unwrap().format, TimeFormat::Number { decimals: 2 });
}

#[test]
fn options_are_checked_first() {
    let e = read_with("a\n1\n", CsvOptions::new().frame(0)).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::ZeroFrame));
}

#[test]
fn bundled_samples_read_cleanly() {
    // vega-datasets seattle-weather.csv: 1461 days, dates written 2012/01/01.
    let seattle = include_str!("../../tests/data/seattle-weather.csv");
    let t = read(seattle).unwrap();
    assert_eq!(t.columns, ["precipitation", "temp_max", "temp_min", "wind"]);
    assert_eq!(t.rows(), 1461);
    assert_eq!(t.skipped_columns, ["weather"]);
    let times = t.times.as_ref().expect("the date column is the time axis");
    assert_eq!(times.name, "date");
    assert_eq!(times.format, TimeFormat::Date { slashes: true });
    // scikit-learn's wine data: 178 samples of 13 features.
    let wine = include_str!("../../tests/data/wine.csv");
    let t = read(wine).unwrap();
    assert_eq!((t.rows(), t.columns.len()), (178, 13));
}

#[test]
fn a_quote_never_closed_is_refused_at_its_line() {
    // The quote opened on line 3 swallows the rest of the file into
    // column "b", which the first data row made a text column.
    let text = "a,b\n1,x\n2,\"y\n3,z\n4,w\n";
    let e = read(text).unwrap_err();
    assert_eq!(e.position().line, Some(3));
    assert!(
        e.to_string().contains("a quoted field is never closed"),
        "{e}"
    );
    // In a value column the cell itself says what probably happened.
    let e = read("a,b\n1,2\n3,\"4\n5,6\n").unwrap_err();
    assert_eq!(e.position().line, Some(3));
    assert!(e.to_string().contains("runs over several lines"), "{e}");
    // A quote inside an unquoted field is a character, and quoted line
    // breaks that are closed are fine.
    let t = read("a,note\n1,5\" disc\n2,\"two\nlines\"\n").unwrap();
    assert_eq!(t.values, [1.0, 2.0]);
    let t = read("a,note\n1,5\" disc\n2,\"two\nlines\"\n3,x\n").unwrap();
    assert_eq!(t.values, [1.0, 2.0, 3.0]);
}

#[test]
fn utf16_and_vqforge_files_are_named_for_what_they_are() {
    let e = read_bytes(b"\xff\xfea\x00,\x00b\x00\n\x00").unwrap_err();
    assert!(e.to_string().contains("UTF-16"), "{e}");
    let e = read_bytes(b"VQFORGEB\x01\x00\x10\x00\x00\x00\x0d\x04").unwrap_err();
    assert!(
        e.to_string()
            .contains("a vqforge codebook file, not a CSV table"),
        "{e}"
    );
}

#[test]
fn reading_stops_at_the_vector_limit() {
    let text = "a\n1\n2\n3\n4\n5\n";
    let opts = || CsvOptions::new().max_vectors(2);
    let e = read_with(text, opts()).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Limit(_)), "{e}");
    assert_eq!(e.position().line, Some(4));
    assert!(e.to_string().contains("more than 2 vectors"), "{e}");
    assert!(
        e.to_string().ends_with("raise it with --max-vectors"),
        "{e}"
    );
    // Vectors are frames: 5 rows in frames of 3 make 2 vectors.
    assert_eq!(read_with(text, opts().frame(3)).unwrap().rows(), 5);
    assert!(CsvOptions::new()
        .max_vectors(0)
        .check()
        .unwrap_err()
        .is_usage());
}
