//! Writing results for the user, in the formats users expect:
//!
//! * decoded records as CSV, with scaling undone ([`undo_scaling`],
//!   [`RecordCsvWriter`], [`write_records_csv`]);
//! * images as PNG: indexed with a palette at 1, 2, 4 or 8 bits per pixel
//!   ([`write_indexed_png`], [`bit_depth_for`]) or true colour
//!   ([`write_rgb_png`], [`write_rgba_png`]);
//! * distortion curves: an SVG plot ([`curve_svg`]) and a CSV table
//!   ([`write_curve_csv`]);
//! * indexed images for firmware: rows packed at 1, 2, 4 or 8 bits per
//!   pixel ([`pack_rows`]) and C source holding them with their palette
//!   ([`c_source`], [`CImage`], [`c_identifier`]).
//!
//! Everything here writes to a writer (or returns text) the caller gives;
//! it never decodes, trains, measures, or chooses colours.
//!
//! References to "the PNG specification" in this module are to its second
//! edition (W3C Recommendation, 2003; ISO/IEC 15948).

mod curve_table;
mod firmware;
mod idat;
mod plot;
mod png;
mod records;

pub use self::curve_table::{curve_columns, write_curve_csv};
pub use self::firmware::{c_identifier, c_source, pack_rows, packed_row_bytes, CImage};
pub use self::plot::{curve_svg, PLOT_SIZE};
pub use self::png::{bit_depth_for, write_indexed_png, write_rgb_png, write_rgba_png, MAX_PALETTE};
pub use self::records::{undo_scaling, write_records_csv, RecordCsvWriter, TimeOut};
