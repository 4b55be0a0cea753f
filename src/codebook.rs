//! The in-memory [`Codebook`]: codewords plus everything needed to use them
//! (what the components mean, how they were scaled, how they were trained).
//! Its file format lives in [`crate::format`](mod@crate::format).

use serde::{Deserialize, Serialize};

use crate::error::{Error, ErrorKind, Result};
use crate::kmeans::{Seeding, StopReason};

/// Per-column scaling rule chosen by the user.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Scaling {
    /// Values are used as they are.
    None,
    /// (x − mean) / population standard deviation.
    ZScore,
    /// (x − min) / (max − min), into [0, 1].
    MinMax,
}

/// How one column was scaled: `scaled = (value − offset) / factor`.
/// A constant column has `factor = 1` (left unscaled apart from the offset).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ColumnScale {
    /// Subtracted first (mean for z-score, minimum for min-max, 0 for none).
    pub offset: f64,
    /// Divided by second (standard deviation, range, or 1).
    pub factor: f64,
}

impl ColumnScale {
    /// No change.
    pub const IDENTITY: ColumnScale = ColumnScale {
        offset: 0.0,
        factor: 1.0,
    };

    /// User units → training space.
    pub fn apply(&self, value: f64) -> f64 {
        (value - self.offset) / self.factor
    }

    /// Training space → user units.
    pub fn undo(&self, scaled: f64) -> f64 {
        scaled * self.factor + self.offset
    }
}

/// How a time column's text is written, so decode can write it back the same way.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum TimeFormat {
    /// A plain number (e.g. seconds or minutes), written with this many decimals.
    Number { decimals: u32 },
    /// A calendar date `YYYY-MM-DD` (`YYYY/MM/DD` when `slashes`).
    Date { slashes: bool },
    /// A date and time `YYYY-MM-DDTHH:MM[:SS]` (a space for `T` unless
    /// `t_separator`; slashes in the date when `slashes`).
    DateTime {
        t_separator: bool,
        seconds: bool,
        slashes: bool,
    },
}

/// A regularly spaced time column: row `i` is at `start + i × step`.
/// For dates and date-times the unit is seconds since 1970-01-01T00:00:00 (no
/// time zone is interpreted; the text is written back as it was read).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TimeAxis {
    /// Value of the first row.
    pub start: f64,
    /// Difference between consecutive rows.
    pub step: f64,
    /// How to write the values.
    pub format: TimeFormat,
}

/// What the components of a record codeword mean.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RecordLayout {
    /// The value columns, in vector order within one row.
    pub columns: Vec<String>,
    /// Consecutive rows joined into one vector (1 = one row per vector).
    /// The vector is row 0's columns, then row 1's, …
    pub frame: usize,
    /// The scaling rule the user chose.
    pub scaling: Scaling,
    /// One entry per column (shared by every row of a frame).
    pub scales: Vec<ColumnScale>,
    /// Name of the time column, if the input had one that encode/decode carry.
    pub time_column: Option<String>,
}

impl RecordLayout {
    /// Components per vector: columns × frame.
    pub fn dimension(&self) -> usize {
        self.columns.len() * self.frame
    }

    /// Scale of vector component `c`.
    pub fn scale_of_component(&self, c: usize) -> ColumnScale {
        self.scales[c % self.columns.len()]
    }
}

/// What the codewords represent.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Meaning {
    /// Rows (or frames of rows) of a numeric table.
    Records(RecordLayout),
    /// Plain vectors with no further meaning (library use).
    Plain,
    /// Colours of a palette for a display.
    Pixels(crate::palette::PixelLayout),
}

/// Facts about the training run, kept for `info` and reproducibility.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrainingFacts {
    /// The master seed every restart's seed derives from.
    pub seed: u64,
    /// Restarts run; the best was kept.
    pub restarts: u32,
    /// How the initial codewords were chosen.
    pub seeding: Seeding,
    /// Lloyd iterations of the kept restart.
    pub iterations: u32,
    /// Which rule stopped the kept restart.
    pub stopped_by: StopReason,
    /// Training vectors (weights summed).
    pub vectors: u64,
    /// Distinct training vectors.
    pub distinct_vectors: u64,
    /// Mean squared error per component, in the training (scaled) space.
    pub mse_scaled: f64,
}

impl TrainingFacts {
    /// The facts a codebook keeps from a k-means report.
    pub fn from_report(report: &crate::kmeans::TrainReport) -> Self {
        TrainingFacts {
            seed: report.seed,
            restarts: report.restart_distortions.len() as u32,
            seeding: report.seeding,
            iterations: report.iterations,
            stopped_by: report.stopped_by,
            vectors: report.total_weight.round() as u64,
            distinct_vectors: report.distinct_vectors as u64,
            mse_scaled: report.mse_per_component,
        }
    }
}

/// A trained codebook: `size` codewords of `dimension` components each, in
/// the training space (after scaling), plus what they mean.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Codebook {
    /// Components per codeword.
    pub dimension: usize,
    /// `size × dimension` values, codeword after codeword.
    pub codewords: Vec<f32>,
    /// What the components mean.
    pub meaning: Meaning,
    /// How it was trained.
    pub training: TrainingFacts,
}

impl Codebook {
    /// Checks that the parts agree (dimension, whole codewords, finite values,
    /// layout width). Readers and writers call this.
    pub fn validate(&self) -> Result<()> {
        let bad = |m: String| Err(Error::new("checking codebook", ErrorKind::Format(m)));
        if self.dimension == 0 {
            return bad("dimension is 0".into());
        }
        if self.codewords.is_empty() || self.codewords.len() % self.dimension != 0 {
            return bad(format!(
                "{} values do not make whole codewords of dimension {}",
                self.codewords.len(),
                self.dimension
            ));
        }
        if self.codewords.iter().any(|v| !v.is_finite()) {
            return bad("a codeword holds a non-finite value".into());
        }
        if let Meaning::Pixels(layout) = &self.meaning {
            if layout.dimension() != self.dimension {
                return bad(format!(
                    "a palette with dimension {} does not match its alpha mode",
                    self.dimension
                ));
            }
            if self.size() > 1 << 16 {
                return bad(format!("a palette of {} entries is too large", self.size()));
            }
        }
        if let Meaning::Records(layout) = &self.meaning {
            if layout.frame == 0 || layout.columns.is_empty() {
                return bad("the record layout has no columns or a frame of 0".into());
            }
            if layout.dimension() != self.dimension {
                return bad(format!(
                    "the record layout ({} columns × frame {}) disagrees with dimension {}",
                    layout.columns.len(),
                    layout.frame,
                    self.dimension
                ));
            }
            if layout.scales.len() != layout.columns.len() {
                return bad(format!(
                    "{} column scales for {} columns",
                    layout.scales.len(),
                    layout.columns.len()
                ));
            }
            if layout
                .scales
                .iter()
                .any(|s| !s.offset.is_finite() || !s.factor.is_finite() || s.factor == 0.0)
            {
                return bad("a column scale is zero or not finite".into());
            }
        }
        Ok(())
    }

    /// Number of codewords k.
    pub fn size(&self) -> usize {
        self.codewords.len() / self.dimension
    }

    /// Codeword `i`, in the training space.
    pub fn codeword(&self, i: usize) -> &[f32] {
        &self.codewords[i * self.dimension..(i + 1) * self.dimension]
    }

    /// Bits per index in a stream: ⌈log2 k⌉, at least 1.
    pub fn bits_per_index(&self) -> u32 {
        bits_for_size(self.size())
    }
}

/// ⌈log2 k⌉ with a minimum of 1 bit (a one-codeword stream still stores 1 bit
/// per index so the count of vectors is visible in the payload size).
pub fn bits_for_size(k: usize) -> u32 {
    if k <= 2 {
        1
    } else {
        usize::BITS - (k - 1).leading_zeros()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bits_are_ceil_log2() {
        // ⌈log2 k⌉: common practice for fixed-length index codes.
        let cases = [
            (1, 1),
            (2, 1),
            (3, 2),
            (4, 2),
            (5, 3),
            (16, 4),
            (17, 5),
            (256, 8),
            (257, 9),
            (65536, 16),
        ];
        for (k, b) in cases {
            assert_eq!(bits_for_size(k), b, "k = {k}");
        }
    }
}
