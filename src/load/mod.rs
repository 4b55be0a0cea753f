//! Loading: turns input files into vectors. It owns images: decoding PNG,
//! JPEG, BMP, TIFF and WebP bytes into 8-bit RGBA ([`read_image`]) within
//! [`ImageLimits`], and counting distinct colours ([`colour_histogram`],
//! [`ColourIndex`]).
//! And it owns CSV records: reading a table of numbers ([`read_table`]),
//! choosing columns, the time column, missing values, scaling
//! ([`fit_scales`]), joining rows into framing windows ([`to_vectors`]) and
//! reading large files in bounded memory ([`RecordStream`]).
//!
//! It never trains, encodes or writes files, and never prints: anything the
//! user should hear about (skipped columns, dropped rows, constant columns,
//! an irregular time axis) comes back as notice strings for the caller.
//!
//! # Example
//!
//! ```
//! use vqforge::load::{fit_layout, read_table, to_vectors, CsvOptions};
//! use vqforge::codebook::Scaling;
//!
//! let csv = "time,temp,humidity\n0,20.5,40\n60,21.0,42\n120,21.5,44\n";
//! let opts = CsvOptions::new().frame(2).scaling(Scaling::MinMax);
//! let table = read_table(csv.as_bytes(), "log.csv", &opts)?;
//! assert_eq!(table.columns, ["temp", "humidity"]);
//! assert_eq!(table.rows(), 3);
//!
//! let fitted = fit_layout(&table, &opts)?;
//! let vectors = to_vectors(&table, &fitted.layout)?;
//! // Two windows of two rows; the second repeats the last row as padding.
//! assert_eq!(vectors.len(), 2);
//! assert_eq!(vectors.row(1), &[1.0, 1.0, 1.0, 1.0]);
//!
//! // A cell that is not a number is reported with its line and column.
//! let bad = "temp\n20.5\nn/a\n";
//! let err = read_table(bad.as_bytes(), "log.csv", &CsvOptions::new()).unwrap_err();
//! assert_eq!(
//!     err.to_string(),
//!     "reading records: log.csv, line 3, column \"temp\": \"n/a\" is not a number"
//! );
//! # Ok::<(), vqforge::Error>(())
//! ```

mod cells;
mod colours;
mod frame;
mod image;
mod options;
mod scale;
mod stream;
mod table;
mod time;

pub use self::image::{read_image, ImageLimits, RgbaImage};
pub(crate) use colours::spread_opaque;
pub use colours::{colour_histogram, ColourIndex};
pub use frame::{check_columns, frames_of, to_vectors};
pub use options::{CsvOptions, Missing, TimeChoice};
pub use scale::{fit_layout, fit_scales, FittedLayout, ScaleFit};
pub use stream::{RecordChunk, RecordStream, DEFAULT_CHUNK_VECTORS};
pub use table::{read_table, RecordTable, TimeColumn};
pub use time::{
    civil_from_days, days_from_civil, format_time, parse_time, time_axis, CivilDate, ParsedTime,
    TimeInfo,
};

/// The stage named in errors raised while reading records.
const STAGE: &str = "reading records";

/// A photo stored in tests/data/images (byte copies of scikit-image's, see
/// tests/fixtures/README.md), read as `read_image` reads any PNG; for unit
/// tests.
#[cfg(test)]
pub(crate) fn test_photo(name: &str) -> RgbaImage {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/images")
        .join(format!("{name}.png"));
    let bytes = std::fs::read(&path).unwrap();
    read_image(&bytes, name, &ImageLimits::default()).unwrap()
}
