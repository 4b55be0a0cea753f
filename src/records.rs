//! The record pipeline, end to end on in-memory tables and caller-supplied
//! readers/writers: fit a layout and train a codebook on tables, encode a
//! CSV stream against a codebook while measuring the error in the user's
//! units, and decode a stream back into CSV rows. Opens no files itself.

use std::io::{Read, Write};

use crate::codebook::{bits_for_size, Codebook, Meaning, RecordLayout, TrainingFacts};
use crate::encode::Encoder;
use crate::error::{Error, ErrorKind, Result};
use crate::export::{undo_scaling, RecordCsvWriter, TimeOut};
use crate::format::{RecordInfo, StreamHeader};
use crate::kmeans::{train_observed, CheckedTrainConfig, TrainEvent, TrainReport};
use crate::limits;
use crate::load::{
    fit_layout, frames_of, to_vectors, CsvOptions, RecordStream, RecordTable, TimeInfo,
};
use crate::metrics::{ColumnError, ErrorAccumulator};
use crate::vectors::VectorSet;

/// Error of decoded records against the originals, in the user's units and
/// in the training (scaled) space.
#[derive(Debug, Clone)]
pub struct RecordError {
    /// Column names.
    pub columns: Vec<String>,
    /// Per-column statistics, user units.
    pub per_column: Vec<ColumnError>,
    /// All values together: mse per value and largest error in user units;
    /// `snr_db` from the summed variances and squared errors in the scaled
    /// space (summing across columns of different units means nothing).
    pub overall: ColumnError,
    /// Mean squared error per value in the scaled space.
    pub mse_scaled: f64,
    /// Rows measured (padding excluded).
    pub rows: u64,
}

/// Measures decoded rows against originals as they stream past.
#[derive(Debug, Clone)]
pub struct RecordErrorMeter {
    user: ErrorAccumulator,
    scaled_sum_sq: f64,
    layout: RecordLayout,
}

impl RecordErrorMeter {
    /// A meter for rows of `layout`'s columns.
    pub fn new(layout: &RecordLayout) -> Self {
        RecordErrorMeter {
            user: ErrorAccumulator::new(layout.columns.len()),
            scaled_sum_sq: 0.0,
            layout: layout.clone(),
        }
    }

    /// Adds rows: `original` and `decoded` are rows × columns in user units.
    /// Decoded values are measured as written to CSV (rounded to `f32`).
    pub fn add(&mut self, original: &[f64], decoded: &[f64]) {
        let w = self.layout.columns.len();
        let mut written = vec![0.0f64; w];
        for (o, d) in original.chunks_exact(w).zip(decoded.chunks_exact(w)) {
            for c in 0..w {
                written[c] = d[c] as f32 as f64;
                let s = self.layout.scales[c];
                let e = s.apply(o[c]) - s.apply(written[c]);
                self.scaled_sum_sq += e * e;
            }
            self.user.add_row(o, &written);
        }
    }

    /// The statistics so far.
    pub fn finish(&self) -> RecordError {
        let w = self.layout.columns.len();
        let per_column: Vec<ColumnError> = (0..w).map(|c| self.user.column(c)).collect();
        let scaled_variance: f64 = per_column
            .iter()
            .zip(&self.layout.scales)
            .map(|(c, s)| c.variance / (s.factor * s.factor))
            .sum();
        let mut overall = self.user.overall();
        overall.snr_db = crate::metrics::snr_db(
            scaled_variance,
            self.scaled_sum_sq / self.user.rows().max(1) as f64,
        );
        RecordError {
            columns: self.layout.columns.clone(),
            per_column,
            overall,
            mse_scaled: self.scaled_sum_sq / (self.user.rows().max(1) * w as u64) as f64,
            rows: self.user.rows(),
        }
    }
}

/// What training on record tables produced.
#[derive(Debug, Clone)]
pub struct RecordTraining {
    /// The codebook, ready to write.
    pub codebook: Codebook,
    /// The k-means report (distortion in the scaled space, per vector).
    pub report: TrainReport,
    /// Error of the training rows decoded with the codebook.
    pub error: RecordError,
    /// Vectors trained on (frames, padding included).
    pub vectors: usize,
    /// Rows read over all tables.
    pub rows: usize,
    /// Messages for the user.
    pub notices: Vec<String>,
}

/// The first of `tables`, after checking they all have its value columns
/// (errors name `stage`).
///
/// # Errors
///
/// [`ErrorKind::EmptyInput`] for no tables, [`ErrorKind::Mismatch`] naming
/// both column lists when two differ.
pub fn same_columns<'a>(tables: &'a [RecordTable], stage: &'static str) -> Result<&'a RecordTable> {
    let first = tables
        .first()
        .ok_or_else(|| Error::new(stage, ErrorKind::EmptyInput))?;
    for t in &tables[1..] {
        if t.columns != first.columns {
            return Err(Error::new(
                stage,
                ErrorKind::Mismatch(format!(
                    "the inputs have different value columns ({} vs {}); choose common ones with --columns",
                    first.columns.join(","),
                    t.columns.join(",")
                )),
            ));
        }
    }
    Ok(first)
}

/// Trains a codebook on one or more tables with the same columns. Scaling is
/// fitted on all rows together; frames never span two tables.
pub fn train_tables(
    tables: &[RecordTable],
    opts: &CsvOptions,
    config: &CheckedTrainConfig,
    observe: &(dyn Fn(TrainEvent) + Sync),
) -> Result<RecordTraining> {
    const STAGE: &str = "training on records";
    let first = same_columns(tables, STAGE)?;
    let values: usize = tables.iter().map(|t| t.values.len()).sum();
    let mut all = limits::vec_with_capacity(values, STAGE, "a copy of the table")?;
    for t in tables {
        all.extend_from_slice(&t.values);
    }
    let merged = RecordTable::new(first.columns.clone(), all);
    let fitted = fit_layout(&merged, opts)?;
    let mut layout = fitted.layout;
    layout.time_column = first.times.as_ref().map(|t| t.name.clone());
    let mut notices: Vec<String> = tables.iter().flat_map(|t| t.notices.clone()).collect();
    notices.extend(fitted.notices);

    let frames: usize = tables
        .iter()
        .map(|t| frames_of(t.rows(), layout.frame))
        .sum();
    let mut data = limits::vec_with_capacity(
        frames.saturating_mul(layout.dimension()),
        STAGE,
        "the training vectors",
    )?;
    let mut per_table = Vec::new();
    for t in tables {
        let v = to_vectors(t, &layout)?;
        per_table.push(v.len());
        data.extend_from_slice(v.as_flat());
    }
    let vectors = VectorSet::new(layout.dimension(), data)?;
    let trained = train_observed(&vectors, config, observe)?;
    notices.extend(trained.report.notices.iter().cloned());

    // Measure the training rows decoded with the final codebook.
    let encoder = Encoder::new(&trained.codewords, layout.dimension())?;
    let mut meter = RecordErrorMeter::new(&layout);
    let mut offset = 0;
    let d = layout.dimension();
    for (t, &n) in tables.iter().zip(&per_table) {
        let flat = &vectors.as_flat()[offset * d..(offset + n) * d];
        offset += n;
        let mut idx = Vec::new();
        encoder.encode_flat_into(flat, &mut idx);
        let decoded = decode_vectors(&trained.codewords, d, &idx);
        let rows = undo_scaling(&decoded, d, &layout, t.rows())?;
        meter.add(&t.values, &rows);
    }
    let report = trained.report;
    let codebook = Codebook {
        dimension: d,
        codewords: trained.codewords,
        meaning: Meaning::Records(layout),
        training: TrainingFacts::from_report(&report),
    };
    codebook.validate()?;
    Ok(RecordTraining {
        codebook,
        report,
        error: meter.finish(),
        vectors: vectors.len(),
        rows: tables.iter().map(|t| t.rows()).sum(),
        notices,
    })
}

/// The codewords of `indices`, flat.
pub fn decode_vectors(codewords: &[f32], dimension: usize, indices: &[u32]) -> Vec<f32> {
    let mut out = Vec::with_capacity(indices.len() * dimension);
    for &i in indices {
        let i = i as usize;
        out.extend_from_slice(&codewords[i * dimension..(i + 1) * dimension]);
    }
    out
}

/// The record layout of a codebook, or a clear error when it holds no records.
pub fn layout_of(codebook: &Codebook) -> Result<&RecordLayout> {
    match &codebook.meaning {
        Meaning::Records(l) => Ok(l),
        Meaning::Plain => Err(Error::new(
            "checking codebook",
            ErrorKind::Mismatch("this codebook was not trained on CSV records".into()),
        )),
        Meaning::Pixels(_) => Err(Error::new(
            "checking codebook",
            ErrorKind::Mismatch(
                "this codebook is a palette trained on images; give it an image, not CSV records"
                    .into(),
            ),
        )),
    }
}

/// What encoding a CSV stream produced.
#[derive(Debug, Clone)]
pub struct RecordEncoding {
    /// Stream header, ready to write with the indices.
    pub header: StreamHeader,
    /// One index per vector.
    pub indices: Vec<u32>,
    /// Error of the decoded rows against the input.
    pub error: RecordError,
    /// Messages for the user.
    pub notices: Vec<String>,
}

/// Encodes records read from `reader` with `codebook`, chunk by chunk, and
/// measures the error of the decoded rows. `on_rows` is told the rows read so far.
pub fn encode_reader<R: Read>(
    reader: R,
    source_name: &str,
    codebook: &Codebook,
    opts: &CsvOptions,
    on_rows: &dyn Fn(u64),
) -> Result<RecordEncoding> {
    let layout = layout_of(codebook)?;
    let d = codebook.dimension;
    let encoder = Encoder::new(&codebook.codewords, d)?;
    let mut stream = RecordStream::new(reader, source_name, layout, opts)?;
    let mut meter = RecordErrorMeter::new(layout);
    let mut indices: Vec<u32> = Vec::new();
    let mut chunk_idx = Vec::new();
    let mut rows: u64 = 0;
    while let Some(chunk) = stream.next_chunk()? {
        encoder.encode_into(&chunk.vectors, &mut chunk_idx)?;
        let decoded = decode_vectors(&codebook.codewords, d, &chunk_idx);
        let values = undo_scaling(&decoded, d, layout, chunk.rows)?;
        meter.add(&chunk.values, &values);
        indices.extend_from_slice(&chunk_idx);
        rows += chunk.rows as u64;
        on_rows(rows);
    }
    if indices.is_empty() {
        return Err(Error::new("encoding records", ErrorKind::EmptyInput).in_file(source_name));
    }
    let mut notices = stream.notices();
    let time = match stream.time_axis() {
        TimeInfo::Regular(axis) => Some(axis),
        TimeInfo::Absent => None,
        TimeInfo::Irregular { notice } => {
            notices.push(notice);
            None
        }
    };
    let header = StreamHeader::for_codebook(
        codebook,
        indices.len() as u64,
        Some(RecordInfo { rows, time }),
    )?;
    debug_assert_eq!(header.bits, bits_for_size(codebook.size()));
    debug_assert_eq!(indices.len(), frames_of(rows as usize, layout.frame));
    Ok(RecordEncoding {
        header,
        indices,
        error: meter.finish(),
        notices,
    })
}

/// Writes the records a stream stands for as CSV; returns the rows written.
/// The caller has checked the stream against the codebook.
pub fn decode_to_writer<W: Write>(
    header: &StreamHeader,
    indices: &[u32],
    codebook: &Codebook,
    writer: W,
) -> Result<u64> {
    let layout = layout_of(codebook)?;
    let info = header.records.as_ref().ok_or_else(|| {
        Error::new(
            "decoding records",
            ErrorKind::Mismatch("the stream holds no record information".into()),
        )
    })?;
    let time = match (&info.time, &layout.time_column) {
        (Some(axis), Some(column)) => TimeOut::Regular {
            axis: *axis,
            column: column.clone(),
        },
        _ => TimeOut::RowNumber,
    };
    let mut out = RecordCsvWriter::new(writer, layout, time)?;
    let d = codebook.dimension;
    let frame = layout.frame;
    let total_rows = info.rows as usize;
    // Decode in slices of whole frames to bound memory for long streams.
    let per_slice = 65_536;
    let mut row = 0usize;
    for slice in indices.chunks(per_slice) {
        let decoded = decode_vectors(&codebook.codewords, d, slice);
        let rows_here = (slice.len() * frame).min(total_rows - row);
        let values = undo_scaling(&decoded, d, layout, rows_here)?;
        out.write_rows(&values)?;
        row += rows_here;
    }
    let mut w = out.finish()?;
    w.flush()
        .map_err(|e| Error::new("writing records", ErrorKind::Io(e)))?;
    Ok(row as u64)
}
