//! Curves of CSV records: the training and held-out vectors of some tables,
//! and what a codebook of one size costs and loses on them (distortion in
//! the scaled space, the largest error in the user's units, rate). Pure:
//! works on tables already read.

use crate::codebook::{bits_for_size, Codebook, Meaning, RecordLayout, TimeAxis};
use crate::encode::Encoder;
use crate::error::{Error, ErrorKind, Result};
use crate::export::undo_scaling;
use crate::format::{codebook_to_bytes, stream_file_len, RecordInfo, StreamHeader};
use crate::load::{
    fit_layout, frames_of, time_axis, to_vectors, CsvOptions, RecordTable, TimeInfo,
};
use crate::metrics::{index_counts, index_entropy_bits, snr_db, squared_error};
use crate::records::{decode_vectors, same_columns, RecordErrorMeter};
use crate::vectors::VectorSet;

use super::grow::Stage;
use super::holdout::holdout_blocks;
use super::{variance_per_component, CheckedCurveConfig, CurvePoint, HeldOut, Quality, Rate};

/// Record tables ready for a curve: the layout fitted on the training rows,
/// every vector, and which are held out.
#[derive(Debug, Clone)]
pub struct RecordSource {
    tables: Vec<RecordTable>,
    layout: RecordLayout,
    /// Every vector of every table, in order (frames never span two tables).
    all: VectorSet,
    /// Vectors per table.
    per_table: Vec<usize>,
    /// The training vectors, merged where identical (weighted).
    pub(super) unique: VectorSet,
    /// Per vector of `all`, whether it is held out; none without a holdout.
    held: Option<Vec<bool>>,
    /// Per table, its regular time axis, if it has one (for stream headers).
    times: Vec<Option<TimeAxis>>,
    /// Mean over components of the training vectors' variance (scaled space).
    pub(super) variance: f64,
    /// Messages for the user.
    pub notices: Vec<String>,
}

fn rows_of(table: &RecordTable, frame: usize, f: usize) -> std::ops::Range<usize> {
    f * frame..((f + 1) * frame).min(table.rows())
}

impl RecordSource {
    /// Prepares `tables` (same columns) with the frame and scaling of `opts`;
    /// with a holdout in `config`, that fraction of the vectors is held out
    /// as contiguous blocks ([`holdout_blocks`]) and the scaling is fitted on
    /// the rest only.
    pub fn new(
        tables: &[RecordTable],
        opts: &CsvOptions,
        config: &CheckedCurveConfig,
    ) -> Result<Self> {
        let holdout = config.get().holdout;
        let stage = "preparing records";
        let first = same_columns(tables, stage)?;
        if opts.frame == 0 {
            return Err(Error::new(stage, ErrorKind::ZeroFrame));
        }
        if tables.iter().any(|t| t.rows() == 0) {
            return Err(Error::new(stage, ErrorKind::EmptyInput));
        }
        let frames: Vec<usize> = tables
            .iter()
            .map(|t| frames_of(t.rows(), opts.frame))
            .collect();
        let total: usize = frames.iter().sum();
        let mask = match holdout {
            Some(f) => holdout_blocks(total, f)?,
            None => vec![false; total],
        };
        let width = first.columns.len();
        let mut training_rows = Vec::new();
        let mut at = 0;
        for (t, &n) in tables.iter().zip(&frames) {
            for f in 0..n {
                if !mask[at + f] {
                    let r = rows_of(t, opts.frame, f);
                    training_rows.extend_from_slice(&t.values[r.start * width..r.end * width]);
                }
            }
            at += n;
        }
        let fitted = fit_layout(
            &RecordTable::new(first.columns.clone(), training_rows),
            opts,
        )?;
        let mut layout = fitted.layout;
        layout.time_column = first.times.as_ref().map(|t| t.name.clone());
        let mut notices: Vec<String> = tables.iter().flat_map(|t| t.notices.clone()).collect();
        notices.extend(fitted.notices);

        let d = layout.dimension();
        let mut data = Vec::with_capacity(total * d);
        for t in tables {
            data.extend_from_slice(to_vectors(t, &layout)?.as_flat());
        }
        let all = VectorSet::new(d, data)?;
        let flat: Vec<f32> = all
            .rows()
            .zip(&mask)
            .filter(|(_, &held)| !held)
            .flat_map(|(r, _)| r.iter().copied())
            .collect();
        let unique = VectorSet::new(d, flat)?.deduplicated();
        let times = tables
            .iter()
            .map(|t| match time_axis(t) {
                TimeInfo::Regular(axis) => Some(axis),
                _ => None,
            })
            .collect();
        Ok(RecordSource {
            tables: tables.to_vec(),
            variance: variance_per_component(&unique),
            layout,
            unique,
            all,
            per_table: frames,
            held: holdout.map(|_| mask),
            times,
            notices,
        })
    }

    /// Components per vector.
    pub fn dimension(&self) -> usize {
        self.layout.dimension()
    }

    /// Vectors in all (training and held out).
    pub fn vectors(&self) -> usize {
        self.all.len()
    }

    /// Held-out vectors.
    pub fn held_out(&self) -> usize {
        self.held
            .as_ref()
            .map_or(0, |m| m.iter().filter(|&&h| h).count())
    }

    /// Distinct training vectors: the largest codebook worth training.
    pub fn distinct(&self) -> usize {
        self.unique.len()
    }

    /// Every value as a 32-bit float, the time column excluded.
    pub fn raw_bytes(&self) -> u64 {
        let rows: usize = self.tables.iter().map(|t| t.rows()).sum();
        (rows * self.layout.columns.len() * 4) as u64
    }

    /// What `stage`'s codebook costs and loses.
    pub(super) fn measure(&self, stage: &Stage) -> Result<CurvePoint> {
        let d = self.dimension();
        let codebook = Codebook {
            dimension: d,
            codewords: stage.codewords.clone(),
            meaning: Meaning::Records(self.layout.clone()),
            training: stage.facts.clone(),
        };
        let size = codebook.size();
        let codebook_bytes = codebook_to_bytes(&codebook)?.len() as u64;
        let encoder = Encoder::new(&codebook.codewords, d)?;
        let labels = encoder.encode(&self.all)?;
        let mut meter = RecordErrorMeter::new(&self.layout);
        let mut header = StreamHeader::for_codebook(&codebook, 0, None)?;
        let mut stream_bytes = 0;
        let mut offset = 0;
        for ((t, &n), time) in self.tables.iter().zip(&self.per_table).zip(&self.times) {
            let idx = &labels[offset..offset + n];
            offset += n;
            let decoded = decode_vectors(&codebook.codewords, d, idx);
            meter.add(
                &t.values,
                &undo_scaling(&decoded, d, &self.layout, t.rows())?,
            );
            header.vectors = n as u64;
            header.records = Some(RecordInfo {
                rows: t.rows() as u64,
                time: *time,
            });
            stream_bytes += stream_file_len(&header)?;
        }
        let mse = stage.distortion / (self.unique.total_weight() * d as f64);
        // The held-out vectors' labels are among those of all vectors.
        let holdout = self.held.as_ref().map(|mask| {
            let sq: f64 = self
                .all
                .rows()
                .zip(&labels)
                .zip(mask)
                .filter(|(_, &held)| held)
                .map(|((r, &i), _)| squared_error(r, codebook.codeword(i as usize)))
                .sum();
            HeldOut::new(sq / (self.held_out() * d) as f64, mse)
        });
        let rate = Rate::new(
            bits_for_size(size),
            index_entropy_bits(&index_counts(&labels, size)),
            codebook_bytes,
            stream_bytes,
            self.raw_bytes(),
        );
        Ok(CurvePoint {
            size,
            distortion: mse,
            mse,
            quality: Quality::Records {
                snr_db: snr_db(self.variance, mse),
                max_abs_error: meter.finish().overall.max_abs_error,
            },
            rate,
            holdout,
        })
    }
}
