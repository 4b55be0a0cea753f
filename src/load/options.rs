//! [`CsvOptions`]: how a CSV file of records is read, with documented
//! defaults and a [`CsvOptions::check`] step. Holds settings only; never
//! reads input.

use crate::codebook::Scaling;
use crate::error::{Error, ErrorKind, Result};
use crate::limits::Limits;

/// What to do with a row whose chosen cell is empty, not a number or not
/// finite.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Missing {
    /// Stop with an error naming the line and column (the default).
    Error,
    /// Drop the row, count it in [`RecordTable::skipped_rows`](super::RecordTable::skipped_rows)
    /// and say how many in a notice.
    Skip,
}

/// Which column, if any, holds the time of each row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TimeChoice {
    /// The first column named `time`, `timestamp`, `date` or `datetime`
    /// (any letter case) whose first cell is a time, or else the first column
    /// if its first cell is an ISO date or date-time. Columns listed in
    /// [`CsvOptions::columns`] are never picked. The default.
    Auto,
    /// This column, by header name.
    Named(String),
    /// No time column.
    Off,
}

/// How to read a CSV file of records. Build with [`CsvOptions::new`] and the
/// setter methods; every setting has a default:
///
/// | setting | default |
/// |---|---|
/// | `columns` | `None`: every column that is numeric in the first data row, except the time column |
/// | `frame` | 1 row per vector |
/// | `scaling` | [`Scaling::None`] |
/// | `missing` | [`Missing::Error`] |
/// | `time` | [`TimeChoice::Auto`] |
/// | `delimiter` | `b','` |
/// | `max_vectors` | [`Limits::DEFAULT_MAX_VECTORS`] |
#[derive(Debug, Clone, PartialEq)]
pub struct CsvOptions {
    /// Value columns by header name, in vector order. `None` picks every
    /// column whose cell in the first data row parses as a number (the time
    /// column excluded); the others are listed in a notice.
    pub columns: Option<Vec<String>>,
    /// Consecutive rows joined into one vector (row 0's columns, then row 1's …).
    pub frame: usize,
    /// Per-column scaling fitted by [`fit_scales`](super::fit_scales).
    pub scaling: Scaling,
    /// What to do with empty, non-numeric or non-finite cells in chosen columns.
    pub missing: Missing,
    /// Which column holds the time of each row.
    pub time: TimeChoice,
    /// Field separator, one ASCII byte (e.g. `b';'` or `b'\t'`).
    pub delimiter: u8,
    /// The most vectors (frames of kept rows) one file may give; reading
    /// stops with an [`ErrorKind::Limit`] error naming `--max-vectors`
    /// as soon as the file gives more.
    pub max_vectors: u64,
}

impl Default for CsvOptions {
    fn default() -> Self {
        CsvOptions {
            columns: None,
            frame: 1,
            scaling: Scaling::None,
            missing: Missing::Error,
            time: TimeChoice::Auto,
            delimiter: b',',
            max_vectors: Limits::DEFAULT_MAX_VECTORS,
        }
    }
}

impl CsvOptions {
    /// The defaults listed on [`CsvOptions`].
    pub fn new() -> Self {
        CsvOptions::default()
    }

    /// Use these value columns, in this order.
    pub fn columns<I, S>(mut self, names: I) -> Self
    where
        I: IntoIterator<Item = S>,
        S: Into<String>,
    {
        self.columns = Some(names.into_iter().map(Into::into).collect());
        self
    }

    /// Join `rows` consecutive rows into one vector.
    pub fn frame(mut self, rows: usize) -> Self {
        self.frame = rows;
        self
    }

    /// Scale each column by this rule.
    pub fn scaling(mut self, scaling: Scaling) -> Self {
        self.scaling = scaling;
        self
    }

    /// Treat unusable cells this way.
    pub fn missing(mut self, missing: Missing) -> Self {
        self.missing = missing;
        self
    }

    /// Take the time of each row from here.
    pub fn time(mut self, time: TimeChoice) -> Self {
        self.time = time;
        self
    }

    /// Separate fields with this byte.
    pub fn delimiter(mut self, delimiter: u8) -> Self {
        self.delimiter = delimiter;
        self
    }

    /// Sets [`CsvOptions::max_vectors`].
    pub fn max_vectors(mut self, vectors: u64) -> Self {
        self.max_vectors = vectors;
        self
    }

    /// Fails with [`ErrorKind::Limit`] when `rows` kept rows make more than
    /// [`CsvOptions::max_vectors`] vectors.
    pub(super) fn check_rows(&self, rows: u64, file: &str, line: u64) -> Result<()> {
        let vectors = rows.div_ceil(self.frame.max(1) as u64);
        if vectors <= self.max_vectors {
            return Ok(());
        }
        Err(Error::new(
            super::STAGE,
            ErrorKind::Limit(format!(
                "the table holds more than {} vectors (the limit, reached at this line); \
                 raise it with --max-vectors",
                self.max_vectors
            )),
        )
        .at(crate::error::Position {
            file: Some(file.to_string()),
            line: Some(line),
            column: None,
            record: None,
        }))
    }

    /// Checks the settings on their own (before any input is seen): a frame
    /// of 0 rows is [`ErrorKind::ZeroFrame`]; an empty or repeating column
    /// list, a time column that is also a value column, and a delimiter that
    /// is a quote, a line break or not ASCII are
    /// [`ErrorKind::InvalidParameter`]. [`read_table`](super::read_table)
    /// calls this first.
    pub fn check(&self) -> Result<()> {
        let invalid = |m: String| {
            Err(Error::new(
                "checking record options",
                ErrorKind::InvalidParameter(m),
            ))
        };
        if self.frame == 0 {
            return Err(Error::new("checking record options", ErrorKind::ZeroFrame));
        }
        if self.max_vectors == 0 {
            return invalid(
                "--max-vectors must be at least 1, got 0 (it would refuse every input)".into(),
            );
        }
        if let Some(columns) = &self.columns {
            if columns.is_empty() {
                return invalid("the list of value columns is empty".into());
            }
            for (i, name) in columns.iter().enumerate() {
                if columns[..i].contains(name) {
                    return invalid(format!("column \"{name}\" is listed twice"));
                }
            }
            if let TimeChoice::Named(time) = &self.time {
                if columns.contains(time) {
                    return invalid(format!(
                        "column \"{time}\" cannot be both the time column and a value column"
                    ));
                }
            }
        }
        if let TimeChoice::Named(time) = &self.time {
            if time.trim().is_empty() {
                return invalid("the time column name is empty".into());
            }
        }
        let d = self.delimiter;
        if d == b'"' || d == b'\n' || d == b'\r' || !d.is_ascii() {
            return invalid(format!(
                "the delimiter must be an ASCII character other than a quote or a line break, got byte 0x{d:02X}"
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_as_documented() {
        let o = CsvOptions::new();
        assert_eq!(o.columns, None);
        assert_eq!(o.frame, 1);
        assert_eq!(o.scaling, Scaling::None);
        assert_eq!(o.missing, Missing::Error);
        assert_eq!(o.time, TimeChoice::Auto);
        assert_eq!(o.delimiter, b',');
        assert!(o.check().is_ok());
    }

    #[test]
    fn frame_zero_is_a_usage_error() {
        let e = CsvOptions::new().frame(0).check().unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::ZeroFrame));
        assert!(e.is_usage());
        assert_eq!(
            e.to_string(),
            "checking record options: the frame length must be at least 1 row, got 0"
        );
    }

    #[test]
    fn empty_column_list_is_rejected() {
        let e = CsvOptions::new()
            .columns(Vec::<String>::new())
            .check()
            .unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::InvalidParameter(_)));
        assert_eq!(
            e.to_string(),
            "checking record options: the list of value columns is empty"
        );
    }

    #[test]
    fn repeated_column_is_rejected() {
        let e = CsvOptions::new()
            .columns(["a", "b", "a"])
            .check()
            .unwrap_err();
        assert_eq!(
            e.to_string(),
            "checking record options: column \"a\" is listed twice"
        );
    }

    #[test]
    fn time_column_cannot_be_a_value_column() {
        let e = CsvOptions::new()
            .columns(["t", "x"])
            .time(TimeChoice::Named("t".into()))
            .check()
            .unwrap_err();
        assert!(e.is_usage());
        assert!(e
            .to_string()
            .contains("both the time column and a value column"));
    }

    #[test]
    fn quote_and_non_ascii_delimiters_are_rejected() {
        assert!(CsvOptions::new().delimiter(b'"').check().is_err());
        assert!(CsvOptions::new().delimiter(b'\n').check().is_err());
        assert!(CsvOptions::new().delimiter(0xE9).check().is_err());
        assert!(CsvOptions::new().delimiter(b';').check().is_ok());
        assert!(CsvOptions::new().delimiter(b'\t').check().is_ok());
    }
}
