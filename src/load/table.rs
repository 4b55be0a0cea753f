//! [`read_table`]: a whole CSV file of records in memory as a
//! [`RecordTable`] of `f64` values in the user's units. Never scales or
//! frames (see [`fit_scales`](super::fit_scales) and
//! [`to_vectors`](super::to_vectors)); for files larger than memory use
//! [`RecordStream`](super::RecordStream).

use std::io::Read;

use crate::codebook::TimeFormat;
use crate::error::Result;
use crate::limits;

use super::cells::{all_dropped, dropped_notice, read_header, start, CsvSource, Row, Started};
use super::options::CsvOptions;
use super::STAGE;

/// The time of every kept row, as read.
#[derive(Debug, Clone, PartialEq)]
pub struct TimeColumn {
    /// Header name of the column.
    pub name: String,
    /// The cell text of each row (surrounding spaces removed).
    pub raw: Vec<String>,
    /// Each row's time: the number itself, or seconds since
    /// 1970-01-01T00:00:00 for dates and date-times.
    pub values: Vec<f64>,
    /// The format that writes the values back as they were read.
    pub format: TimeFormat,
}

/// A CSV file of records: the chosen value columns of every kept row.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordTable {
    /// The value columns, in the order of `values` within a row.
    pub columns: Vec<String>,
    /// Rows × columns, row after row, in the user's units.
    pub values: Vec<f64>,
    /// The time column, if there is one (never a value column).
    pub times: Option<TimeColumn>,
    /// Header columns that are neither values nor the time.
    pub skipped_columns: Vec<String>,
    /// Data rows dropped by [`Missing::Skip`](super::Missing::Skip).
    pub skipped_rows: u64,
    /// Messages for the user (skipped columns and rows, time column choice).
    pub notices: Vec<String>,
}

impl RecordTable {
    /// A table of `values` (rows × columns, user units) with no time column,
    /// nothing skipped and no notices: for building tables in memory.
    pub fn new(columns: Vec<String>, values: Vec<f64>) -> Self {
        RecordTable {
            columns,
            values,
            times: None,
            skipped_columns: Vec::new(),
            skipped_rows: 0,
            notices: Vec::new(),
        }
    }

    /// Number of kept rows.
    pub fn rows(&self) -> usize {
        if self.columns.is_empty() {
            0
        } else {
            self.values.len() / self.columns.len()
        }
    }

    /// The values of row `i`, one per column. Panics if `i` is out of range,
    /// like slice indexing.
    pub fn row(&self, i: usize) -> &[f64] {
        let width = self.columns.len();
        &self.values[i * width..(i + 1) * width]
    }

    /// The values of column `j`, top to bottom.
    pub fn column(&self, j: usize) -> impl Iterator<Item = f64> + '_ {
        self.values
            .iter()
            .skip(j)
            .step_by(self.columns.len().max(1))
            .copied()
    }
}

/// Reads a whole CSV file of records.
///
/// The first non-blank line is the header; a UTF-8 byte-order mark, CRLF or
/// LF line ends, quoted fields and spaces around numbers are all accepted.
/// Blank lines are skipped. Line numbers in errors count the header as
/// line 1. `source_name` names the input in errors.
///
/// Value columns are the ones in [`CsvOptions::columns`], or else every
/// column whose cell in the first data row parses as a number (`"inf"` and
/// `"nan"` count, and then fail the finite check): the first data row
/// decides, and later rows follow the [`Missing`](super::Missing) rule. The
/// time column (see [`TimeChoice`](super::TimeChoice)) is never a value
/// column.
///
/// # Errors
///
/// All at stage "reading records", with the file, line and column where
/// they apply: an empty file; no data rows; an empty, repeated or non-UTF-8
/// header name; a row with the wrong number of fields; a cell that is
/// empty, not a number or not finite (unless [`Missing::Skip`](super::Missing::Skip),
/// which drops the row — but not if it drops them all); a time cell that is
/// not a time or differs in kind from the first; text that is not UTF-8;
/// an unknown column name ([`ErrorKind::InvalidParameter`](crate::ErrorKind::InvalidParameter),
/// listing the columns); and the option errors of [`CsvOptions::check`].
///
/// # Example
///
/// ```
/// use vqforge::load::{read_table, CsvOptions, Missing};
///
/// let csv = "\u{feff}date;temp;note\r\n2024-01-01;\"1,5\";ok\r\n2024-01-02; 2 ;\r\n2024-01-03;;late\r\n";
/// let opts = CsvOptions::new()
///     .delimiter(b';')
///     .columns(["temp"])
///     .missing(Missing::Skip);
/// // "1,5" is not a number (the decimal separator is '.'), and the third
/// // row's temperature is empty: both rows are dropped.
/// let table = read_table(csv.as_bytes(), "t.csv", &opts)?;
/// assert_eq!(table.columns, ["temp"]);
/// assert_eq!(table.values, [2.0]);
/// assert_eq!(table.skipped_rows, 2);
/// assert_eq!(table.times.as_ref().unwrap().raw, ["2024-01-02"]);
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn read_table<R: Read>(reader: R, source_name: &str, opts: &CsvOptions) -> Result<RecordTable> {
    opts.check()?;
    let mut source = CsvSource::new(reader, source_name, opts.delimiter);
    let header = read_header(&mut source)?;
    let Started {
        mut source,
        plan,
        mut rows,
        mut record,
        mut line,
    } = start(
        source,
        &header,
        opts.columns.as_deref(),
        &opts.time,
        opts.missing,
    )?;
    let mut values = Vec::new();
    let mut raw = Vec::new();
    let mut times = Vec::new();
    let mut dropped = 0u64;
    let mut kept = 0u64;
    let width = plan.value_index.len();
    loop {
        limits::reserve(&mut values, width, STAGE, "the table")?;
        match rows.read(&record, line, &mut values)? {
            Row::Kept(time) => {
                kept += 1;
                opts.check_rows(kept, source_name, line)?;
                if let Some(time) = time {
                    times.push(time.value);
                    raw.push(time.text.to_string());
                }
            }
            Row::Dropped => dropped += 1,
        }
        match source.next(&mut record)? {
            Some(next) => line = next,
            None => break,
        }
    }
    if values.is_empty() {
        return Err(all_dropped(source_name, dropped));
    }
    let mut notices = plan.notices;
    notices.extend(dropped_notice(dropped));
    let times = match (rows.time_name(), rows.time_format()) {
        (Some(name), Some(format)) => Some(TimeColumn {
            name: name.to_string(),
            raw,
            values: times,
            format,
        }),
        _ => None,
    };
    Ok(RecordTable {
        columns: plan.value_names,
        values,
        times,
        skipped_columns: plan.skipped,
        skipped_rows: dropped,
        notices,
    })
}

#[cfg(test)]
#[path = "table_tests.rs"]
mod tests;
