//! The CSV reading shared by [`read_table`](super::read_table) and
//! [`RecordStream`](super::RecordStream), so both apply exactly the same
//! rules: line counting, the header, choosing value and time columns from
//! the first data row, and turning one row's cells into numbers (or
//! dropping the row). Holds no more than one record at a time; never
//! scales, frames or prints.

use std::collections::VecDeque;
use std::io::{self, Read};

use csv::{ByteRecord, ReaderBuilder, Terminator};

use crate::codebook::TimeFormat;
use crate::error::{Error, ErrorKind, Position, Result};

use super::options::{Missing, TimeChoice};
use super::time::{describe, merge_formats, parse_time};
use super::STAGE;

/// Column names that [`TimeChoice::Auto`] takes for a time column.
const TIME_NAMES: [&str; 4] = ["time", "timestamp", "date", "datetime"];

/// An error while reading records, at a place in the file.
pub(super) fn error_at(
    file: &str,
    line: Option<u64>,
    column: Option<&str>,
    kind: ErrorKind,
) -> Error {
    Error::new(STAGE, kind).at(Position {
        file: Some(file.to_string()),
        line,
        column: column.map(str::to_string),
        record: None,
    })
}

/// `"a", "b", "c"`
pub(super) fn quoted_list(names: &[String]) -> String {
    names
        .iter()
        .map(|n| format!("\"{n}\""))
        .collect::<Vec<_>>()
        .join(", ")
}

/// "1 row", "3 rows"
pub(super) fn plural(n: u64, word: &str) -> String {
    if n == 1 {
        format!("1 {word}")
    } else {
        format!("{n} {word}s")
    }
}

/// Records where every newline byte is, so each record gets the line it
/// starts on. (csv's own count is taken before any blank lines and before
/// the LF of a CRLF, so it can be one or more lines short.) Offsets are
/// dropped once passed, so memory stays within the read-ahead buffer.
pub(super) struct LineCounter<R> {
    inner: R,
    offset: u64,
    newlines: VecDeque<u64>,
    lines_before: u64,
    /// Whether an odd number of `"` bytes has been read: every quoted
    /// field adds two, and a doubled quote inside one adds two more.
    odd_quotes: bool,
    /// Whether a line break and then more than white space came after the
    /// last `"` byte read.
    lines_after_quote: bool,
    break_after_quote: bool,
}

impl<R: Read> Read for LineCounter<R> {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        let n = self.inner.read(buf)?;
        for (i, &b) in buf[..n].iter().enumerate() {
            if b == b'\n' {
                self.newlines.push_back(self.offset + i as u64);
                self.break_after_quote = true;
            } else if b == b'"' {
                self.odd_quotes = !self.odd_quotes;
                self.break_after_quote = false;
                self.lines_after_quote = false;
            } else if self.break_after_quote && !b.is_ascii_whitespace() {
                self.lines_after_quote = true;
            }
        }
        self.offset += n as u64;
        Ok(n)
    }
}

impl<R> LineCounter<R> {
    /// The 1-based line of the record whose reading began at byte `start`
    /// (skipping the blank lines csv passes over before the record).
    fn line_at(&mut self, start: u64) -> u64 {
        while self.newlines.front().is_some_and(|&o| o < start) {
            self.newlines.pop_front();
            self.lines_before += 1;
        }
        let mut at = start;
        while self.newlines.front() == Some(&at) {
            self.newlines.pop_front();
            self.lines_before += 1;
            at += 1;
        }
        self.lines_before + 1
    }
}

/// A CSV reader that hands out non-blank records with their line numbers.
pub(super) struct CsvSource<R> {
    reader: csv::Reader<LineCounter<R>>,
    pub(super) file: String,
    /// The line of the last record read and whether a field of it spans
    /// several lines (what a quote that is never closed produces).
    last: Option<(u64, bool)>,
}

impl<R: Read> CsvSource<R> {
    pub(super) fn new(reader: R, file: &str, delimiter: u8) -> Self {
        let counter = LineCounter {
            inner: reader,
            offset: 0,
            newlines: VecDeque::new(),
            lines_before: 0,
            odd_quotes: false,
            lines_after_quote: false,
            break_after_quote: false,
        };
        // Records end at LF only; a CR before it stays in the last field and
        // is trimmed with the other surrounding white space.
        let reader = ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .delimiter(delimiter)
            .terminator(Terminator::Any(b'\n'))
            .from_reader(counter);
        CsvSource {
            reader,
            file: file.to_string(),
            last: None,
        }
    }

    /// Reads the next record that is not a blank line; returns its line, or
    /// `None` at the end of the input.
    pub(super) fn next(&mut self, record: &mut ByteRecord) -> Result<Option<u64>> {
        loop {
            let more = self.reader.read_byte_record(record).map_err(|e| {
                let line = e.position().map(|p| p.line());
                let message = e.to_string();
                let kind = match e.into_kind() {
                    csv::ErrorKind::Io(io) => ErrorKind::Io(io),
                    _ => ErrorKind::Parse(message),
                };
                error_at(&self.file, line, None, kind)
            })?;
            if !more {
                return self.unclosed_quote();
            }
            let start = record.position().map_or(0, |p| p.byte());
            let line = self.reader.get_mut().line_at(start);
            self.last = Some((line, record.iter().any(|f| f.contains(&b'\n'))));
            let blank = record.len() == 1 && record[0].iter().all(u8::is_ascii_whitespace);
            if !blank {
                return Ok(Some(line));
            }
        }
    }
}

impl<R: Read> CsvSource<R> {
    /// At the end of the input: an error when a quote was never closed.
    /// The csv reader then takes the rest of the file as one field, so the
    /// signs are: the quotes do not pair up, the last record has a field
    /// that spans lines, and more lines follow the last quote. A quote
    /// inside an unquoted field (`5" disc`) is read as a character and
    /// does not by itself count as unclosed.
    fn unclosed_quote(&mut self) -> Result<Option<u64>> {
        let counter = self.reader.get_ref();
        let unclosed = counter.odd_quotes && counter.lines_after_quote;
        match self.last {
            Some((line, true)) if unclosed => Err(error_at(
                &self.file,
                Some(line),
                None,
                ErrorKind::Parse(
                    "a quoted field is never closed: it runs to the end of the file; \
                     add the missing '\"'"
                        .into(),
                ),
            )),
            _ => Ok(None),
        }
    }
}

/// The cell's text, trimmed, or a clear error when it is not UTF-8.
fn strict_text<'r>(
    record: &'r ByteRecord,
    index: usize,
    file: &str,
    line: u64,
    column: &str,
) -> Result<&'r str> {
    let bytes = record.get(index).unwrap_or_default();
    std::str::from_utf8(bytes).map(str::trim).map_err(|e| {
        let bad = bytes[e.valid_up_to()];
        error_at(
            file,
            Some(line),
            Some(column),
            ErrorKind::Parse(format!(
                "the text is not valid UTF-8 (byte 0x{bad:02X}); save the file as UTF-8"
            )),
        )
    })
}

/// The cell's trimmed text if it is UTF-8 (for guessing from the first row).
fn loose_text(record: &ByteRecord, index: usize) -> Option<&str> {
    std::str::from_utf8(record.get(index)?).ok().map(str::trim)
}

/// The header: decoded, trimmed, non-empty and distinct names.
pub(super) struct Header {
    pub(super) names: Vec<String>,
    pub(super) line: u64,
}

pub(super) fn read_header<R: Read>(source: &mut CsvSource<R>) -> Result<Header> {
    let file = source.file.clone();
    let mut record = ByteRecord::new();
    let Some(line) = source.next(&mut record)? else {
        return Err(error_at(
            &file,
            None,
            None,
            ErrorKind::Shape("the file is empty".into()),
        ));
    };
    let first = record.get(0).unwrap_or_default();
    let refuse = |why: String| Err(error_at(&file, None, None, ErrorKind::Shape(why)));
    if first.starts_with(&[0xFF, 0xFE]) || first.starts_with(&[0xFE, 0xFF]) {
        return refuse(
            "the file is UTF-16 text (it starts with a UTF-16 byte-order mark); save it as UTF-8"
                .into(),
        );
    }
    if let Some(kind) = crate::format::detect_kind(first) {
        let noun = match kind {
            crate::format::FileKind::Codebook => "codebook",
            crate::format::FileKind::Stream => "stream",
        };
        return refuse(format!(
            "this is a vqforge {noun} file, not a CSV table of records"
        ));
    }
    let mut names: Vec<String> = Vec::with_capacity(record.len());
    for j in 0..record.len() {
        let number = (j + 1).to_string();
        let name = strict_text(&record, j, &file, line, &number)?;
        let name = name.trim_start_matches('\u{feff}').trim();
        if name.is_empty() {
            return Err(error_at(
                &file,
                Some(line),
                None,
                ErrorKind::Shape(format!("column {number} has no name in the header")),
            ));
        }
        if let Some(i) = names.iter().position(|n| n == name) {
            return Err(error_at(
                &file,
                Some(line),
                Some(name),
                ErrorKind::Shape(format!(
                    "the header names this column twice (columns {} and {number})",
                    i + 1
                )),
            ));
        }
        names.push(name.to_string());
    }
    Ok(Header { names, line })
}

/// Fails unless the row has as many fields as the header.
fn check_width(record: &ByteRecord, width: usize, file: &str, line: u64) -> Result<()> {
    if record.len() == width {
        return Ok(());
    }
    Err(error_at(
        file,
        Some(line),
        None,
        ErrorKind::Shape(format!(
            "the row has {}, the header has {width}",
            plural(record.len() as u64, "field"),
        )),
    ))
}

/// Which header columns are values and which one is the time.
pub(super) struct Plan {
    pub(super) value_index: Vec<usize>,
    pub(super) value_names: Vec<String>,
    pub(super) time_index: Option<usize>,
    pub(super) skipped: Vec<String>,
    pub(super) notices: Vec<String>,
}

fn unknown_column(name: &str, header: &Header, file: &str) -> Error {
    error_at(
        file,
        Some(header.line),
        Some(name),
        ErrorKind::InvalidParameter(format!(
            "there is no such column; the columns are {}",
            quoted_list(&header.names)
        )),
    )
}

/// Chooses the columns from the header and the first data row (see
/// [`CsvOptions`](super::CsvOptions) and [`TimeChoice`]).
pub(super) fn plan(
    header: &Header,
    first: &ByteRecord,
    first_line: u64,
    wanted: Option<&[String]>,
    time: &TimeChoice,
    file: &str,
) -> Result<Plan> {
    let names = &header.names;
    let find = |name: &str| {
        names
            .iter()
            .position(|n| n == name)
            .ok_or_else(|| unknown_column(name, header, file))
    };
    let mut notices = Vec::new();
    let time_index = match time {
        TimeChoice::Off => None,
        TimeChoice::Named(name) => Some(find(name)?),
        TimeChoice::Auto => auto_time(names, first, wanted, &mut notices),
    };
    let mut value_index = Vec::new();
    let mut skipped = Vec::new();
    match wanted {
        Some(list) => {
            for name in list {
                let j = find(name)?;
                if Some(j) == time_index {
                    return Err(error_at(
                        file,
                        Some(header.line),
                        Some(name),
                        ErrorKind::InvalidParameter(
                            "the time column cannot also be a value column".into(),
                        ),
                    ));
                }
                value_index.push(j);
            }
            skipped = (0..names.len())
                .filter(|j| Some(*j) != time_index && !value_index.contains(j))
                .map(|j| names[j].clone())
                .collect();
        }
        None => {
            let mut reasons = Vec::new();
            for j in (0..names.len()).filter(|&j| Some(j) != time_index) {
                match loose_text(first, j) {
                    Some(text) if text.parse::<f64>().is_ok() => value_index.push(j),
                    Some("") => reasons.push(format!("\"{}\" (empty)", names[j])),
                    Some(text) => reasons.push(format!("\"{}\" (\"{text}\")", names[j])),
                    None => reasons.push(format!("\"{}\" (not UTF-8)", names[j])),
                }
                if value_index.last() != Some(&j) {
                    skipped.push(names[j].clone());
                }
            }
            if value_index.is_empty() {
                return Err(error_at(
                    file,
                    Some(first_line),
                    None,
                    ErrorKind::Shape(format!(
                        "no column holds a number in the first data row; the columns are {}",
                        quoted_list(names)
                    )),
                ));
            }
            if !reasons.is_empty() {
                notices.push(format!(
                    "skipped {} not numeric in the first data row: {}",
                    plural(reasons.len() as u64, "column"),
                    reasons.join(", ")
                ));
            }
        }
    }
    let value_names = value_index.iter().map(|&j| names[j].clone()).collect();
    Ok(Plan {
        value_index,
        value_names,
        time_index,
        skipped,
        notices,
    })
}

fn auto_time(
    names: &[String],
    first: &ByteRecord,
    wanted: Option<&[String]>,
    notices: &mut Vec<String>,
) -> Option<usize> {
    let eligible = |j: usize| wanted.is_none_or(|w| !w.contains(&names[j]));
    let by_name = (0..names.len())
        .find(|&j| eligible(j) && TIME_NAMES.contains(&names[j].to_ascii_lowercase().as_str()));
    if let Some(j) = by_name {
        match loose_text(first, j) {
            Some(text) if parse_time(text).is_some() => return Some(j),
            Some(text) if !text.is_empty() => notices.push(format!(
                "column \"{}\" is not used as the time axis: \"{text}\" is not a number, \
                 a date (YYYY-MM-DD) or a date and time (YYYY-MM-DDTHH:MM[:SS])",
                names[j]
            )),
            _ => notices.push(format!(
                "column \"{}\" is not used as the time axis: its first cell is empty",
                names[j]
            )),
        }
    }
    let iso_first = loose_text(first, 0)
        .and_then(parse_time)
        .is_some_and(|p| !matches!(p.format, TimeFormat::Number { .. }));
    (eligible(0) && iso_first).then_some(0)
}

/// A kept row's time cell.
pub(super) struct TimeCell<'r> {
    pub(super) value: f64,
    pub(super) text: &'r str,
}

/// What became of one data row.
pub(super) enum Row<'r> {
    /// Its values were appended; here is its time, if there is a time column.
    Kept(Option<TimeCell<'r>>),
    /// It had an unusable cell and [`Missing::Skip`] dropped it.
    Dropped,
}

/// Turns data rows into numbers by a [`Plan`], applying the missing-value
/// rule and keeping the time column's format consistent.
pub(super) struct RowReader {
    file: String,
    width: usize,
    value_index: Vec<usize>,
    value_names: Vec<String>,
    time: Option<(usize, String)>,
    missing: Missing,
    time_format: Option<TimeFormat>,
}

/// Why a number cell cannot be used.
fn number_cell(text: &str) -> std::result::Result<f64, String> {
    if text.is_empty() {
        return Err("the cell is empty".into());
    }
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(format!("\"{text}\" is not a finite number")),
        Err(_) if text.contains('\n') => {
            let start: String = text.chars().take_while(|&c| c != '\n').take(40).collect();
            Err(format!(
                "the cell \"{start}…\" runs over several lines, so it is not a number; \
                 a quote may be missing its closing '\"'"
            ))
        }
        Err(_) => Err(format!("\"{text}\" is not a number")),
    }
}

impl RowReader {
    pub(super) fn new(file: &str, header: &Header, plan: &Plan, missing: Missing) -> Self {
        RowReader {
            file: file.to_string(),
            width: header.names.len(),
            value_index: plan.value_index.clone(),
            value_names: plan.value_names.clone(),
            time: plan.time_index.map(|j| (j, header.names[j].clone())),
            missing,
            time_format: None,
        }
    }

    /// The time column's name, if there is one.
    pub(super) fn time_name(&self) -> Option<&str> {
        self.time.as_ref().map(|(_, name)| name.as_str())
    }

    /// The format covering every kept time cell so far.
    pub(super) fn time_format(&self) -> Option<TimeFormat> {
        self.time_format
    }

    /// Reads one data row, appending its values to `values` when kept.
    /// Ragged rows and text that is not UTF-8 are errors whatever the
    /// missing-value rule says: they mean the file is not what it seems.
    pub(super) fn read<'r>(
        &mut self,
        record: &'r ByteRecord,
        line: u64,
        values: &mut Vec<f64>,
    ) -> Result<Row<'r>> {
        check_width(record, self.width, &self.file, line)?;
        let start = values.len();
        for (k, &j) in self.value_index.iter().enumerate() {
            let column = &self.value_names[k];
            let text = strict_text(record, j, &self.file, line, column)?;
            match number_cell(text) {
                Ok(v) => values.push(v),
                Err(why) => {
                    values.truncate(start);
                    return self.unusable(line, column, why);
                }
            }
        }
        let Some((j, column)) = &self.time else {
            return Ok(Row::Kept(None));
        };
        let text = strict_text(record, *j, &self.file, line, column)?;
        let parsed = match parse_time(text) {
            None if text.is_empty() => Err("the cell is empty".to_string()),
            None => Err(format!(
                "\"{text}\" is not a time: expected a number, a date (YYYY-MM-DD or YYYY/MM/DD) \
                 or a date and time (YYYY-MM-DDTHH:MM[:SS])"
            )),
            Some(p) => match self.time_format {
                None => Ok((p.value, p.format)),
                Some(seen) => merge_formats(seen, p.format)
                    .map(|f| (p.value, f))
                    .ok_or_else(|| {
                        format!(
                            "\"{text}\" is {}, but the time column began with {}",
                            describe(p.format),
                            describe(seen)
                        )
                    }),
            },
        };
        match parsed {
            Ok((value, format)) => {
                self.time_format = Some(format);
                Ok(Row::Kept(Some(TimeCell { value, text })))
            }
            Err(why) => {
                let column = column.clone();
                values.truncate(start);
                self.unusable(line, &column, why)
            }
        }
    }

    fn unusable<'r>(&self, line: u64, column: &str, why: String) -> Result<Row<'r>> {
        match self.missing {
            Missing::Skip => Ok(Row::Dropped),
            Missing::Error => Err(error_at(
                &self.file,
                Some(line),
                Some(column),
                ErrorKind::Parse(why),
            )),
        }
    }
}

/// The notice for rows dropped by [`Missing::Skip`].
pub(super) fn dropped_notice(dropped: u64) -> Option<String> {
    (dropped > 0).then(|| {
        format!(
            "skipped {} with a missing, non-numeric or non-finite value",
            plural(dropped, "row")
        )
    })
}

/// The error when [`Missing::Skip`] dropped every data row.
pub(super) fn all_dropped(file: &str, dropped: u64) -> Error {
    error_at(
        file,
        None,
        None,
        ErrorKind::Shape(format!(
            "all {} have a missing, non-numeric or non-finite value",
            plural(dropped, "data row")
        )),
    )
}

/// Everything needed to read data rows, after the header and the first
/// data row have been seen. `record` holds the first data row.
pub(super) struct Started<R> {
    pub(super) source: CsvSource<R>,
    pub(super) plan: Plan,
    pub(super) rows: RowReader,
    pub(super) record: ByteRecord,
    pub(super) line: u64,
}

/// Reads the first data row and chooses the columns.
pub(super) fn start<R: Read>(
    mut source: CsvSource<R>,
    header: &Header,
    wanted: Option<&[String]>,
    time: &TimeChoice,
    missing: Missing,
) -> Result<Started<R>> {
    let mut record = ByteRecord::new();
    let file = source.file.clone();
    let Some(line) = source.next(&mut record)? else {
        return Err(error_at(
            &file,
            None,
            None,
            ErrorKind::Shape("no data rows after the header".into()),
        ));
    };
    check_width(&record, header.names.len(), &file, line)?;
    let plan = plan(header, &record, line, wanted, time, &file)?;
    let rows = RowReader::new(&file, header, &plan, missing);
    Ok(Started {
        source,
        plan,
        rows,
        record,
        line,
    })
}
