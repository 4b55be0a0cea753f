//! [`RecordStream`]: reads a CSV file of records chunk by chunk against a
//! known [`RecordLayout`] (a codebook's), so a file larger than memory can
//! be encoded. Same parsing and error rules as
//! [`read_table`](super::read_table); never fits scales or chooses columns
//! by content.

use std::io::Read;

use csv::ByteRecord;

use crate::codebook::RecordLayout;
use crate::error::Result;
use crate::limits;
use crate::vectors::VectorSet;

use super::cells::{
    all_dropped, dropped_notice, read_header, start, CsvSource, Row, RowReader, Started,
};
use super::frame::{check_columns, frame_vectors};
use super::options::CsvOptions;
use super::time::{AxisCheck, TimeInfo};
use super::STAGE;

/// Vectors per chunk unless [`RecordStream::with_chunk_vectors`] says otherwise.
pub const DEFAULT_CHUNK_VECTORS: usize = 65_536;

/// One chunk of a [`RecordStream`]: whole frames of consecutive kept rows.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordChunk {
    /// The frames as scaled `f32` vectors (the last one of the file padded
    /// by repeating its last row).
    pub vectors: VectorSet,
    /// The kept rows in the user's units, rows × layout columns, without
    /// padding — for measuring the error of the decoded rows.
    pub values: Vec<f64>,
    /// Number of real (kept) rows in this chunk.
    pub rows: usize,
    /// Each real row's time, if the input has a time column (numbers, or
    /// seconds since 1970-01-01 for dates).
    pub times: Option<Vec<f64>>,
    /// 0-based number of this chunk's first row among all kept rows.
    pub first_row: u64,
}

/// Reads records in chunks of at most [`DEFAULT_CHUNK_VECTORS`] vectors
/// (changeable), holding one chunk in memory at a time: about
/// vectors × dimension × 12 bytes.
///
/// The layout decides the value columns (by name, in any header order),
/// the frame and the scales; `opts` gives the delimiter, the missing-value
/// rule and the time column choice (its `columns`, `frame` and `scaling`
/// are replaced by the layout's). The chunks together hold exactly the
/// vectors that [`read_table`](super::read_table) with the layout's columns
/// followed by [`to_vectors`](super::to_vectors) would give, and errors are
/// the same, except that a layout column missing from the header is an
/// [`ErrorKind::Mismatch`](crate::ErrorKind::Mismatch) naming it.
///
/// Use it as an iterator of `Result<RecordChunk>` or call
/// [`next_chunk`](RecordStream::next_chunk); after the last chunk,
/// [`time_axis`](RecordStream::time_axis), [`skipped_rows`](RecordStream::skipped_rows)
/// and [`notices`](RecordStream::notices) describe the whole file.
pub struct RecordStream<R> {
    source: CsvSource<R>,
    rows: RowReader,
    record: ByteRecord,
    line: u64,
    waiting: bool,
    finished: bool,
    layout: RecordLayout,
    chunk_vectors: usize,
    kept: u64,
    dropped: u64,
    axis: AxisCheck,
    notices: Vec<String>,
    options: CsvOptions,
}

impl<R: Read> RecordStream<R> {
    /// Reads the header and the first data row of `reader` and checks them
    /// against `layout`. `source_name` names the input in errors.
    pub fn new(
        reader: R,
        source_name: &str,
        layout: &RecordLayout,
        opts: &CsvOptions,
    ) -> Result<Self> {
        let effective = CsvOptions {
            columns: Some(layout.columns.clone()),
            frame: layout.frame,
            scaling: layout.scaling,
            ..opts.clone()
        };
        effective.check()?;
        let mut source = CsvSource::new(reader, source_name, effective.delimiter);
        let header = read_header(&mut source)?;
        check_columns(&header.names, layout).map_err(|e| e.in_file(source_name))?;
        let Started {
            source,
            plan,
            rows,
            record,
            line,
        } = start(
            source,
            &header,
            effective.columns.as_deref(),
            &effective.time,
            effective.missing,
        )?;
        Ok(RecordStream {
            source,
            rows,
            record,
            line,
            waiting: true,
            finished: false,
            layout: layout.clone(),
            chunk_vectors: DEFAULT_CHUNK_VECTORS,
            kept: 0,
            dropped: 0,
            axis: AxisCheck::default(),
            notices: plan.notices,
            options: effective,
        })
    }

    /// At most `vectors` vectors per chunk (at least 1).
    pub fn with_chunk_vectors(mut self, vectors: usize) -> Self {
        self.chunk_vectors = vectors.max(1);
        self
    }

    /// The next chunk, or `None` after the last one. After an error the
    /// stream is finished.
    pub fn next_chunk(&mut self) -> Result<Option<RecordChunk>> {
        if self.finished {
            return Ok(None);
        }
        let result = self.read_chunk();
        if !matches!(result, Ok(Some(_))) {
            self.finished = true;
        }
        result
    }

    /// Fails once the kept rows (`in_chunk` of them in the chunk being
    /// read) make more vectors than the options allow.
    fn max_vectors_check(&self, in_chunk: usize) -> Result<()> {
        self.options
            .check_rows(self.kept + in_chunk as u64, &self.source.file, self.line)
    }

    fn read_chunk(&mut self) -> Result<Option<RecordChunk>> {
        let width = self.layout.columns.len();
        let target = self.chunk_vectors.saturating_mul(self.layout.frame);
        let mut values = Vec::new();
        let mut times = self.rows.time_name().map(|_| Vec::new());
        let mut rows = 0usize;
        while rows < target && self.waiting {
            limits::reserve(&mut values, width, STAGE, "the chunk of records")?;
            match self.rows.read(&self.record, self.line, &mut values)? {
                Row::Kept(time) => {
                    rows += 1;
                    self.max_vectors_check(rows)?;
                    if let (Some(times), Some(time)) = (times.as_mut(), time) {
                        times.push(time.value);
                        self.axis.push(time.value);
                    }
                }
                Row::Dropped => self.dropped += 1,
            }
            match self.source.next(&mut self.record)? {
                Some(line) => self.line = line,
                None => self.waiting = false,
            }
        }
        if rows == 0 {
            return if self.kept == 0 {
                Err(all_dropped(&self.source.file, self.dropped))
            } else {
                Ok(None)
            };
        }
        let identity: Vec<usize> = (0..width).collect();
        let vectors = frame_vectors(&values, width, rows, &identity, &self.layout, self.kept)?;
        let first_row = self.kept;
        self.kept += rows as u64;
        Ok(Some(RecordChunk {
            vectors,
            values,
            rows,
            times,
            first_row,
        }))
    }

    /// Kept rows read so far.
    pub fn rows_read(&self) -> u64 {
        self.kept
    }

    /// Rows dropped so far by [`Missing::Skip`](super::Missing::Skip).
    pub fn skipped_rows(&self) -> u64 {
        self.dropped
    }

    /// Name of the time column, if there is one.
    pub fn time_column(&self) -> Option<&str> {
        self.rows.time_name()
    }

    /// Whether the times read so far are regularly spaced (the verdict for
    /// the whole file once the stream is finished).
    pub fn time_axis(&self) -> TimeInfo {
        match (self.rows.time_name(), self.rows.time_format()) {
            (Some(name), Some(format)) => self.axis.verdict(name, format),
            _ => TimeInfo::Absent,
        }
    }

    /// Messages for the user: column choices, and rows dropped so far.
    pub fn notices(&self) -> Vec<String> {
        let mut notices = self.notices.clone();
        notices.extend(dropped_notice(self.dropped));
        notices
    }
}

impl<R> std::fmt::Debug for RecordStream<R> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("RecordStream")
            .field("file", &self.source.file)
            .field("layout", &self.layout)
            .field("chunk_vectors", &self.chunk_vectors)
            .field("rows_read", &self.kept)
            .field("skipped_rows", &self.dropped)
            .field("finished", &self.finished)
            .finish_non_exhaustive()
    }
}

impl<R: Read> Iterator for RecordStream<R> {
    type Item = Result<RecordChunk>;

    fn next(&mut self) -> Option<Self::Item> {
        self.next_chunk().transpose()
    }
}

#[cfg(test)]
#[path = "stream_tests.rs"]
mod tests;
