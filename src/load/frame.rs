//! Framing: rows of a record table become vectors of a [`RecordLayout`]
//! ([`to_vectors`]), and an input's columns are matched to a codebook's
//! ([`check_columns`]). Never reads files and never fits scales.

use crate::codebook::RecordLayout;
use crate::error::{Error, ErrorKind, Position, Result};
use crate::vectors::VectorSet;

use super::cells::{plural, quoted_list};
use super::table::RecordTable;

/// Number of vectors `rows` rows make with `frame` rows per vector: the
/// last, short window counts (it is padded). 0 when `frame` is 0.
pub fn frames_of(rows: usize, frame: usize) -> usize {
    if frame == 0 {
        0
    } else {
        rows.div_ceil(frame)
    }
}

/// Where each of the layout's columns is among `available` (a header or a
/// table's columns). The order of `available` does not matter and extra
/// columns are fine.
///
/// # Errors
///
/// At stage "matching the codebook": [`ErrorKind::Mismatch`] naming the
/// layout's columns that `available` lacks and listing both sets;
/// [`ErrorKind::ZeroFrame`] for a frame of 0; [`ErrorKind::Format`] for a
/// layout without columns or with a scale count that differs from its
/// column count.
pub fn check_columns(available: &[String], layout: &RecordLayout) -> Result<Vec<usize>> {
    const STAGE: &str = "matching the codebook";
    if layout.frame == 0 {
        return Err(Error::new(STAGE, ErrorKind::ZeroFrame));
    }
    if layout.columns.is_empty() {
        return Err(Error::new(
            STAGE,
            ErrorKind::Format("the record layout has no columns".into()),
        ));
    }
    if layout.scales.len() != layout.columns.len() {
        return Err(Error::new(
            STAGE,
            ErrorKind::Format(format!(
                "the record layout has {} but {}",
                plural(layout.columns.len() as u64, "column"),
                plural(layout.scales.len() as u64, "column scale")
            )),
        ));
    }
    let found: Vec<Option<usize>> = layout
        .columns
        .iter()
        .map(|c| available.iter().position(|a| a == c))
        .collect();
    if found.iter().all(Option::is_some) {
        return Ok(found.into_iter().flatten().collect());
    }
    let missing: Vec<String> = layout
        .columns
        .iter()
        .zip(&found)
        .filter(|(_, f)| f.is_none())
        .map(|(c, _)| c.clone())
        .collect();
    let noun = if missing.len() == 1 {
        "column"
    } else {
        "columns"
    };
    Err(Error::new(
        STAGE,
        ErrorKind::Mismatch(format!(
            "the input has no {noun} {}; the codebook was trained on the columns {} \
             and the input has {}",
            quoted_list(&missing),
            quoted_list(&layout.columns),
            quoted_list(available)
        )),
    ))
}

/// Joins the table's rows into vectors of `layout`: each vector holds
/// `layout.frame` consecutive rows (row 0's columns in layout order, then
/// row 1's …), every value scaled by its column's scale and stored as
/// `f32`. A short final window is padded by repeating the last row;
/// decode keeps only the table's [`rows`](RecordTable::rows).
///
/// # Errors
///
/// Those of [`check_columns`]; [`ErrorKind::EmptyInput`] for a table
/// without rows; [`ErrorKind::Parse`] for a value that scales beyond the
/// range of `f32` (stage "scaling records", with the column and the 0-based
/// row as the record).
pub fn to_vectors(table: &RecordTable, layout: &RecordLayout) -> Result<VectorSet> {
    let map = check_columns(&table.columns, layout)?;
    let rows = table.rows();
    if rows == 0 {
        return Err(Error::new("framing records", ErrorKind::EmptyInput));
    }
    frame_vectors(&table.values, table.columns.len(), rows, &map, layout, 0)
}

/// The framing behind [`to_vectors`] and the record stream: `values` holds
/// `rows` rows of `width` values; `map[c]` is the index within a row of
/// layout column `c`; `first_row` numbers the rows in errors.
pub(super) fn frame_vectors(
    values: &[f64],
    width: usize,
    rows: usize,
    map: &[usize],
    layout: &RecordLayout,
    first_row: u64,
) -> Result<VectorSet> {
    let frames = frames_of(rows, layout.frame);
    let mut data = Vec::with_capacity(frames * layout.dimension());
    for start in (0..frames).map(|w| w * layout.frame) {
        for row in (start..start + layout.frame).map(|r| r.min(rows - 1)) {
            for (c, &j) in map.iter().enumerate() {
                let value = values[row * width + j];
                let scaled = layout.scales[c].apply(value) as f32;
                if !scaled.is_finite() {
                    return Err(Error::new(
                        "scaling records",
                        ErrorKind::Parse(format!(
                            "{value:e} scales beyond the range of 32-bit vectors (about ±3.4e38)"
                        )),
                    )
                    .at(Position {
                        column: Some(layout.columns[c].clone()),
                        record: Some(first_row + row as u64),
                        ..Position::default()
                    }));
                }
                data.push(scaled);
            }
        }
    }
    VectorSet::new(layout.dimension(), data)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codebook::{ColumnScale, Scaling};

    fn layout(columns: &[&str], frame: usize, scales: Vec<ColumnScale>) -> RecordLayout {
        RecordLayout {
            columns: columns.iter().map(|c| c.to_string()).collect(),
            frame,
            scaling: Scaling::None,
            scales,
            time_column: None,
        }
    }

    fn table(columns: &[&str], values: Vec<f64>) -> RecordTable {
        RecordTable::new(columns.iter().map(|c| c.to_string()).collect(), values)
    }

    fn names(list: &[&str]) -> Vec<String> {
        list.iter().map(|c| c.to_string()).collect()
    }

    #[test]
    fn frames_count_the_short_window() {
        assert_eq!(frames_of(7, 3), 3);
        assert_eq!(frames_of(6, 3), 2);
        assert_eq!(frames_of(1, 4), 1);
        assert_eq!(frames_of(0, 2), 0);
        assert_eq!(frames_of(5, 0), 0);
    }

    #[test]
    fn one_row_per_vector_applies_scales() {
        let t = table(&["a", "b"], vec![1.0, 10.0, 3.0, 30.0]);
        let scales = vec![
            ColumnScale {
                offset: 1.0,
                factor: 2.0,
            },
            ColumnScale {
                offset: 0.0,
                factor: 10.0,
            },
        ];
        let v = to_vectors(&t, &layout(&["a", "b"], 1, scales)).unwrap();
        assert_eq!(v.dimension(), 2);
        assert_eq!(v.as_flat(), &[0.0, 1.0, 1.0, 3.0]);
    }

    #[test]
    fn windows_join_rows_and_pad_with_the_last_row() {
        let t = table(&["a", "b"], (1..=14).map(f64::from).collect());
        let v = to_vectors(&t, &layout(&["a", "b"], 3, vec![ColumnScale::IDENTITY; 2])).unwrap();
        assert_eq!(v.len(), 3);
        assert_eq!(v.row(0), &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
        assert_eq!(v.row(1), &[7.0, 8.0, 9.0, 10.0, 11.0, 12.0]);
        assert_eq!(v.row(2), &[13.0, 14.0, 13.0, 14.0, 13.0, 14.0]);
    }

    #[test]
    fn layout_order_wins_over_table_order() {
        let t = table(&["a", "b", "c"], vec![1.0, 2.0, 3.0]);
        let v = to_vectors(&t, &layout(&["c", "a"], 1, vec![ColumnScale::IDENTITY; 2])).unwrap();
        assert_eq!(v.as_flat(), &[3.0, 1.0]);
    }

    #[test]
    fn missing_codebook_columns_are_named() {
        let l = layout(
            &["temp", "humidity", "wind"],
            1,
            vec![ColumnScale::IDENTITY; 3],
        );
        let e = check_columns(&names(&["date", "temp", "hum"]), &l).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Mismatch(_)));
        assert_eq!(
            e.to_string(),
            "matching the codebook: the input has no columns \"humidity\", \"wind\"; \
             the codebook was trained on the columns \"temp\", \"humidity\", \"wind\" \
             and the input has \"date\", \"temp\", \"hum\""
        );
        assert_eq!(
            check_columns(&names(&["wind", "x", "humidity", "temp"]), &l).unwrap(),
            [3, 2, 0]
        );
    }

    #[test]
    fn broken_layouts_are_rejected() {
        let l = layout(&["a"], 0, vec![ColumnScale::IDENTITY]);
        let e = check_columns(&names(&["a"]), &l).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::ZeroFrame));
        let l = layout(&["a", "b"], 1, vec![ColumnScale::IDENTITY]);
        let e = check_columns(&names(&["a", "b"]), &l).unwrap_err();
        assert_eq!(
            e.to_string(),
            "matching the codebook: the record layout has 2 columns but 1 column scale"
        );
    }

    #[test]
    fn empty_table_and_overflow_are_errors() {
        let l = layout(&["a"], 1, vec![ColumnScale::IDENTITY]);
        let e = to_vectors(&table(&["a"], vec![]), &l).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::EmptyInput));
        let e = to_vectors(&table(&["a"], vec![1.0, 1e300]), &l).unwrap_err();
        assert_eq!(e.position().record, Some(1));
        assert_eq!(
            e.to_string(),
            "scaling records: column \"a\", record 1: 1e300 scales beyond the range of \
             32-bit vectors (about ±3.4e38)"
        );
    }
}
