//! Decoded records: undoing the scaling of decoded vectors
//! ([`undo_scaling`]) and writing rows as CSV ([`RecordCsvWriter`],
//! [`write_records_csv`]), with the time column rebuilt from a regular axis
//! or a row number. Never decodes, trains or measures.

use std::io::Write;

use crate::codebook::{RecordLayout, TimeAxis};
use crate::error::{Error, ErrorKind, Result};
use crate::load::{format_time, frames_of};

const STAGE: &str = "writing records";

/// What goes in the first column of written records.
#[derive(Debug, Clone, PartialEq)]
pub enum TimeOut {
    /// The time column, named `column`, rebuilt as `start + row × step` and
    /// written in the axis's format.
    Regular {
        /// The axis read from the input.
        axis: TimeAxis,
        /// Header name of the time column.
        column: String,
    },
    /// A 0-based row number in a column named `row` (with `_` appended
    /// while that clashes with a value column).
    RowNumber,
}

/// Turns decoded vectors (codewords in the scaled space, `dimension`
/// components each, flat) back into rows × columns in the user's units,
/// keeping the first `real_rows` rows and dropping the padding of the last
/// frame.
///
/// # Errors
///
/// At stage "decoding records": [`ErrorKind::DimensionMismatch`] when
/// `dimension` is not the layout's; [`ErrorKind::Shape`] when the values do
/// not make whole vectors or `real_rows` does not fit the vectors (it must
/// need exactly that many frames).
pub fn undo_scaling(
    vectors: &[f32],
    dimension: usize,
    layout: &RecordLayout,
    real_rows: usize,
) -> Result<Vec<f64>> {
    const DECODE: &str = "decoding records";
    if layout.scales.len() != layout.columns.len() {
        return Err(Error::new(
            DECODE,
            ErrorKind::Shape(format!(
                "the record layout has {} columns but {} column scales",
                layout.columns.len(),
                layout.scales.len()
            )),
        ));
    }
    if dimension != layout.dimension() {
        return Err(Error::new(
            DECODE,
            ErrorKind::DimensionMismatch {
                expected: layout.dimension(),
                found: dimension,
            },
        ));
    }
    if dimension == 0 || vectors.len() % dimension != 0 {
        return Err(Error::new(
            DECODE,
            ErrorKind::Shape(format!(
                "{} values do not make whole vectors of {dimension}",
                vectors.len()
            )),
        ));
    }
    let count = vectors.len() / dimension;
    if frames_of(real_rows, layout.frame) != count {
        return Err(Error::new(
            DECODE,
            ErrorKind::Shape(format!(
                "{real_rows} rows do not fill {count} vectors of {} rows each",
                layout.frame
            )),
        ));
    }
    let width = layout.columns.len();
    Ok(vectors[..real_rows * width]
        .iter()
        .enumerate()
        .map(|(i, &v)| layout.scales[i % width].undo(f64::from(v)))
        .collect())
}

/// Writes decoded records as CSV, a batch of rows at a time: a header
/// (the time or row column, then the layout's columns), then one line per
/// row. Values are written as the shortest text that reads back as the same
/// `f32` (decoded values are `f32` codewords, so more digits would be
/// noise); times in the axis's format.
pub struct RecordCsvWriter<W: Write> {
    csv: csv::Writer<W>,
    width: usize,
    time: TimeOut,
    next_row: u64,
}

fn write_error(e: csv::Error) -> Error {
    let message = e.to_string();
    let kind = match e.into_kind() {
        csv::ErrorKind::Io(io) => ErrorKind::Io(io),
        _ => ErrorKind::Format(message),
    };
    Error::new(STAGE, kind)
}

impl<W: Write> RecordCsvWriter<W> {
    /// Starts the output and writes the header.
    pub fn new(writer: W, layout: &RecordLayout, time: TimeOut) -> Result<Self> {
        let mut csv = csv::Writer::from_writer(writer);
        let first = match &time {
            TimeOut::Regular { column, .. } => column.clone(),
            TimeOut::RowNumber => {
                let mut name = String::from("row");
                while layout.columns.contains(&name) {
                    name.push('_');
                }
                name
            }
        };
        csv.write_record(std::iter::once(&first).chain(&layout.columns))
            .map_err(write_error)?;
        Ok(RecordCsvWriter {
            csv,
            width: layout.columns.len(),
            time,
            next_row: 0,
        })
    }

    /// Writes whole rows: `decoded` holds rows × layout columns in the
    /// user's units. Row numbers and times continue from earlier batches.
    pub fn write_rows(&mut self, decoded: &[f64]) -> Result<()> {
        if self.width == 0 || decoded.len() % self.width != 0 {
            return Err(Error::new(
                STAGE,
                ErrorKind::Shape(format!(
                    "{} values do not make whole rows of {} columns",
                    decoded.len(),
                    self.width
                )),
            ));
        }
        for row in decoded.chunks_exact(self.width) {
            let first = match &self.time {
                TimeOut::Regular { axis, .. } => {
                    format_time(axis.start + self.next_row as f64 * axis.step, axis.format)
                }
                TimeOut::RowNumber => self.next_row.to_string(),
            };
            self.csv.write_field(first).map_err(write_error)?;
            for &value in row {
                self.csv
                    .write_field(format!("{}", value as f32))
                    .map_err(write_error)?;
            }
            self.csv.write_record(None::<&[u8]>).map_err(write_error)?;
            self.next_row += 1;
        }
        Ok(())
    }

    /// Rows written so far.
    pub fn rows_written(&self) -> u64 {
        self.next_row
    }

    /// Flushes the output and hands back the writer.
    pub fn finish(self) -> Result<W> {
        self.csv
            .into_inner()
            .map_err(|e| Error::new(STAGE, ErrorKind::Io(e.into_error())))
    }
}

/// Writes `rows` decoded rows (rows × layout columns in the user's units,
/// real rows only) as CSV in one go; see [`RecordCsvWriter`].
///
/// # Errors
///
/// At stage "writing records": [`ErrorKind::Shape`] when `decoded` does not
/// hold `rows` rows of the layout's columns; [`ErrorKind::Io`] when writing
/// fails.
///
/// # Example
///
/// ```
/// use vqforge::codebook::{ColumnScale, RecordLayout, Scaling, TimeAxis, TimeFormat};
/// use vqforge::export::{write_records_csv, TimeOut};
///
/// let layout = RecordLayout {
///     columns: vec!["temp".into()],
///     frame: 1,
///     scaling: Scaling::None,
///     scales: vec![ColumnScale::IDENTITY],
///     time_column: Some("date".into()),
/// };
/// let axis = TimeAxis { start: 951_782_400.0, step: 86_400.0, format: TimeFormat::Date { slashes: false } };
/// let time = TimeOut::Regular { axis, column: "date".into() };
/// let mut out = Vec::new();
/// write_records_csv(&mut out, &layout, &[0.1, 2.5], 2, time)?;
/// assert_eq!(String::from_utf8(out).unwrap(), "date,temp\n2000-02-29,0.1\n2000-03-01,2.5\n");
///
/// let err = write_records_csv(Vec::new(), &layout, &[0.1, 2.5], 3, TimeOut::RowNumber);
/// assert!(err.is_err());
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn write_records_csv<W: Write>(
    writer: W,
    layout: &RecordLayout,
    decoded: &[f64],
    rows: usize,
    time: TimeOut,
) -> Result<()> {
    if decoded.len() != rows.saturating_mul(layout.columns.len()) {
        return Err(Error::new(
            STAGE,
            ErrorKind::Shape(format!(
                "{} decoded values for {rows} rows of {} columns",
                decoded.len(),
                layout.columns.len()
            )),
        ));
    }
    let mut out = RecordCsvWriter::new(writer, layout, time)?;
    out.write_rows(decoded)?;
    out.finish().map(drop)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codebook::{ColumnScale, Scaling, TimeFormat};
    use crate::load::{
        fit_layout, read_table, time_axis, to_vectors, CsvOptions, TimeChoice, TimeInfo,
    };

    fn layout(columns: &[&str], frame: usize, scales: Vec<ColumnScale>) -> RecordLayout {
        RecordLayout {
            columns: columns.iter().map(|c| c.to_string()).collect(),
            frame,
            scaling: Scaling::None,
            scales,
            time_column: None,
        }
    }

    fn written(layout: &RecordLayout, decoded: &[f64], rows: usize, time: TimeOut) -> String {
        let mut out = Vec::new();
        write_records_csv(&mut out, layout, decoded, rows, time).unwrap();
        String::from_utf8(out).unwrap()
    }

    #[test]
    fn row_numbers_and_shortest_f32_text() {
        let l = layout(&["a", "b"], 1, vec![ColumnScale::IDENTITY; 2]);
        let text = written(&l, &[0.1, 1.0 / 3.0, -2.0, 1e-3], 2, TimeOut::RowNumber);
        assert_eq!(text, "row,a,b\n0,0.1,0.33333334\n1,-2,0.001\n");
    }

    #[test]
    fn row_column_name_avoids_value_columns() {
        let l = layout(&["row", "row_"], 1, vec![ColumnScale::IDENTITY; 2]);
        assert!(written(&l, &[1.0, 2.0], 1, TimeOut::RowNumber).starts_with("row__,row,row_\n"));
    }

    #[test]
    fn times_are_written_in_their_format() {
        let l = layout(&["x"], 1, vec![ColumnScale::IDENTITY]);
        let regular = |start, step, format| TimeOut::Regular {
            axis: TimeAxis {
                start,
                step,
                format,
            },
            column: "t".into(),
        };
        let dt = TimeFormat::DateTime {
            t_separator: false,
            seconds: false,
            slashes: false,
        };
        // 2024-02-28T23:30 is 1709163000 s (Python datetime, UTC).
        assert_eq!(
            written(&l, &[1.0, 2.0], 2, regular(1_709_163_000.0, 1_800.0, dt)),
            "t,x\n2024-02-28 23:30,1\n2024-02-29 00:00,2\n"
        );
        let n = TimeFormat::Number { decimals: 2 };
        assert_eq!(
            written(&l, &[1.0, 2.0, 3.0], 3, regular(0.5, 0.1, n)),
            "t,x\n0.50,1\n0.60,2\n0.70,3\n"
        );
    }

    #[test]
    fn batches_continue_rows_and_names_are_quoted() {
        let l = layout(&["a,b"], 1, vec![ColumnScale::IDENTITY]);
        let mut w = RecordCsvWriter::new(Vec::new(), &l, TimeOut::RowNumber).unwrap();
        w.write_rows(&[1.5]).unwrap();
        w.write_rows(&[2.5, 3.5]).unwrap();
        assert_eq!(w.rows_written(), 3);
        let text = String::from_utf8(w.finish().unwrap()).unwrap();
        assert_eq!(text, "row,\"a,b\"\n0,1.5\n1,2.5\n2,3.5\n");
    }

    #[test]
    fn shape_errors() {
        let l = layout(&["a", "b"], 1, vec![ColumnScale::IDENTITY; 2]);
        let e =
            write_records_csv(Vec::new(), &l, &[1.0, 2.0, 3.0], 2, TimeOut::RowNumber).unwrap_err();
        assert_eq!(
            e.to_string(),
            "writing records: 3 decoded values for 2 rows of 2 columns"
        );
        let mut w = RecordCsvWriter::new(Vec::new(), &l, TimeOut::RowNumber).unwrap();
        assert!(matches!(
            w.write_rows(&[1.0]).unwrap_err().kind(),
            ErrorKind::Shape(_)
        ));
    }

    #[test]
    fn io_failures_are_reported() {
        struct Broken;
        impl Write for Broken {
            fn write(&mut self, _: &[u8]) -> std::io::Result<usize> {
                Err(std::io::Error::other("disk full"))
            }
            fn flush(&mut self) -> std::io::Result<()> {
                Err(std::io::Error::other("disk full"))
            }
        }
        let l = layout(&["a"], 1, vec![ColumnScale::IDENTITY]);
        let e = write_records_csv(Broken, &l, &[1.0], 1, TimeOut::RowNumber).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Io(_)));
        assert_eq!(e.to_string(), "writing records: disk full");
    }

    #[test]
    fn undo_scaling_unscales_and_drops_padding() {
        let scales = vec![
            ColumnScale {
                offset: 10.0,
                factor: 2.0,
            },
            ColumnScale {
                offset: 0.0,
                factor: 0.5,
            },
        ];
        let l = layout(&["a", "b"], 2, scales);
        let vectors = [0.0, 2.0, 1.0, 4.0, -1.0, 6.0, -1.0, 6.0];
        let rows = undo_scaling(&vectors, 4, &l, 3).unwrap();
        assert_eq!(rows, [10.0, 1.0, 12.0, 2.0, 8.0, 3.0]);
    }

    #[test]
    fn undo_scaling_rejects_the_wrong_shape() {
        let l = layout(&["a", "b"], 2, vec![ColumnScale::IDENTITY; 2]);
        let e = undo_scaling(&[0.0; 6], 3, &l, 2).unwrap_err();
        assert!(matches!(
            e.kind(),
            ErrorKind::DimensionMismatch {
                expected: 4,
                found: 3
            }
        ));
        assert!(undo_scaling(&[0.0; 6], 4, &l, 2).is_err());
        let e = undo_scaling(&[0.0; 8], 4, &l, 5).unwrap_err();
        assert_eq!(
            e.to_string(),
            "decoding records: 5 rows do not fill 2 vectors of 2 rows each"
        );
        assert!(undo_scaling(&[0.0; 8], 4, &l, 2).is_err());
        assert_eq!(undo_scaling(&[0.0; 8], 4, &l, 3).unwrap().len(), 6);
    }

    #[test]
    fn records_survive_framing_and_export() {
        let text = "date,temp,humidity\n\
                    2024-02-27,20.5,40\n2024-02-28,21.25,41\n2024-02-29,19.75,39\n\
                    2024-03-01,22,45\n2024-03-02,23.5,44\n";
        let opts = CsvOptions::new().frame(3).scaling(Scaling::ZScore);
        let table = read_table(text.as_bytes(), "in.csv", &opts).unwrap();
        let layout = fit_layout(&table, &opts).unwrap().layout;
        let vectors = to_vectors(&table, &layout).unwrap();
        assert_eq!(vectors.len(), 2);
        let rows = undo_scaling(
            vectors.as_flat(),
            vectors.dimension(),
            &layout,
            table.rows(),
        )
        .unwrap();
        let TimeInfo::Regular(axis) = time_axis(&table) else {
            panic!("the dates are one day apart");
        };
        let time = TimeOut::Regular {
            axis,
            column: "date".into(),
        };
        let mut out = Vec::new();
        write_records_csv(&mut out, &layout, &rows, table.rows(), time).unwrap();
        let back = read_table(&out[..], "out.csv", &CsvOptions::new()).unwrap();
        assert_eq!(back.columns, table.columns);
        assert_eq!(back.rows(), table.rows());
        assert_eq!(
            back.times.as_ref().unwrap().raw,
            table.times.as_ref().unwrap().raw
        );
        for (a, b) in back.values.iter().zip(&table.values) {
            assert!((a - b).abs() <= 1e-5 * b.abs(), "{a} vs {b}");
        }
        // With the time column off, the row column comes back as a value.
        let mut out = Vec::new();
        write_records_csv(&mut out, &layout, &rows, table.rows(), TimeOut::RowNumber).unwrap();
        let back = read_table(
            &out[..],
            "out.csv",
            &CsvOptions::new().time(TimeChoice::Off),
        )
        .unwrap();
        assert_eq!(back.columns, ["row", "temp", "humidity"]);
        assert_eq!(
            back.column(0).collect::<Vec<_>>(),
            [0.0, 1.0, 2.0, 3.0, 4.0]
        );
    }
}
