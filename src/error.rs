//! The one error type of the library: a boxed kind plus the stage and the
//! position (file, line, column, record) where it happened.
//!
//! Messages read stage → where → why, lowercase, no trailing full stop, e.g.
//! `reading records: line 1204, column "humidity": "n/a" is not a number`.

use std::fmt;

/// Where in the input an error happened. Every part is optional.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Position {
    /// File name or path, as the user gave it.
    pub file: Option<String>,
    /// 1-based line number in a text file (the header is line 1).
    pub line: Option<u64>,
    /// Column name (or 1-based number) in a table.
    pub column: Option<String>,
    /// 0-based record, vector or byte offset, as the kind says.
    pub record: Option<u64>,
}

impl Position {
    /// A position that names only a file.
    pub fn file(name: impl Into<String>) -> Self {
        Position {
            file: Some(name.into()),
            ..Position::default()
        }
    }

    fn is_empty(&self) -> bool {
        self.file.is_none() && self.line.is_none() && self.column.is_none() && self.record.is_none()
    }
}

impl fmt::Display for Position {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut parts: Vec<String> = Vec::new();
        if let Some(file) = &self.file {
            parts.push(file.clone());
        }
        if let Some(line) = self.line {
            parts.push(format!("line {line}"));
        }
        if let Some(column) = &self.column {
            parts.push(format!("column \"{column}\""));
        }
        if let Some(record) = self.record {
            parts.push(format!("record {record}"));
        }
        write!(f, "{}", parts.join(", "))
    }
}

/// What went wrong. Each broken rule is its own variant.
#[derive(Debug)]
#[non_exhaustive]
pub enum ErrorKind {
    /// The codebook size k was 0.
    ZeroSize,
    /// A frame (window) length of 0 rows.
    ZeroFrame,
    /// No vectors to work on.
    EmptyInput,
    /// A value that is NaN or infinite.
    NonFinite { value: f64 },
    /// Vectors and codebook (or two inputs) disagree in dimension.
    DimensionMismatch { expected: usize, found: usize },
    /// A parameter outside its allowed range; the message says which and why.
    InvalidParameter(String),
    /// A table cell or other text that could not be parsed.
    Parse(String),
    /// An input table or image whose shape is wrong (ragged rows, no header …).
    Shape(String),
    /// A codebook or stream file that is malformed, truncated or corrupted.
    Format(String),
    /// A codebook or stream that does not belong with the other input.
    Mismatch(String),
    /// A limit that protects memory was reached; the message names the setting that lifts it.
    Limit(String),
    /// An operating-system I/O error.
    Io(std::io::Error),
}

impl ErrorKind {
    /// True when the error is the user's choice of parameters (exit code 2),
    /// not a failure while working on the data (exit code 1).
    pub fn is_usage(&self) -> bool {
        matches!(
            self,
            ErrorKind::ZeroSize | ErrorKind::ZeroFrame | ErrorKind::InvalidParameter(_)
        )
    }
}

impl fmt::Display for ErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ErrorKind::ZeroSize => write!(f, "the codebook size must be at least 1, got 0"),
            ErrorKind::ZeroFrame => write!(f, "the frame length must be at least 1 row, got 0"),
            ErrorKind::EmptyInput => write!(f, "there are no vectors to work on"),
            ErrorKind::NonFinite { value } => write!(f, "{value} is not a finite number"),
            ErrorKind::DimensionMismatch { expected, found } => write!(
                f,
                "dimension mismatch: expected {expected} components per vector, found {found}"
            ),
            ErrorKind::InvalidParameter(m)
            | ErrorKind::Parse(m)
            | ErrorKind::Shape(m)
            | ErrorKind::Format(m)
            | ErrorKind::Mismatch(m)
            | ErrorKind::Limit(m) => write!(f, "{m}"),
            ErrorKind::Io(e) => write!(f, "{e}"),
        }
    }
}

#[derive(Debug)]
struct Inner {
    stage: &'static str,
    position: Position,
    kind: ErrorKind,
}

/// The library's error: what stage failed, where, and why.
#[derive(Debug)]
pub struct Error(Box<Inner>);

/// Shorthand for results of this library.
pub type Result<T> = std::result::Result<T, Error>;

impl Error {
    /// An error of `kind` during `stage` (e.g. "reading records").
    pub fn new(stage: &'static str, kind: ErrorKind) -> Self {
        Error(Box::new(Inner {
            stage,
            position: Position::default(),
            kind,
        }))
    }

    /// The same error with a position attached.
    pub fn at(mut self, position: Position) -> Self {
        self.0.position = position;
        self
    }

    /// The same error with the file named (keeps any line/column already set).
    pub fn in_file(mut self, file: impl Into<String>) -> Self {
        self.0.position.file = Some(file.into());
        self
    }

    /// What went wrong.
    pub fn kind(&self) -> &ErrorKind {
        &self.0.kind
    }

    /// The stage that failed, e.g. "reading records".
    pub fn stage(&self) -> &'static str {
        self.0.stage
    }

    /// Where it happened.
    pub fn position(&self) -> &Position {
        &self.0.position
    }

    /// True for errors in the user's parameters (see [`ErrorKind::is_usage`]).
    pub fn is_usage(&self) -> bool {
        self.0.kind.is_usage()
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0.stage)?;
        if !self.0.position.is_empty() {
            write!(f, ": {}", self.0.position)?;
        }
        write!(f, ": {}", self.0.kind)
    }
}

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match &self.0.kind {
            ErrorKind::Io(e) => Some(e),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn message_reads_stage_where_why() {
        let e = Error::new(
            "reading records",
            ErrorKind::Parse("\"n/a\" is not a number".into()),
        )
        .at(Position {
            file: None,
            line: Some(1204),
            column: Some("humidity".into()),
            record: None,
        });
        assert_eq!(
            e.to_string(),
            "reading records: line 1204, column \"humidity\": \"n/a\" is not a number"
        );
    }
}
