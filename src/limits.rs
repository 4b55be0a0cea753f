//! Limits that protect memory: how many pixels, vectors and codewords an
//! input may hold, checked from headers and counts before anything large is
//! allocated, and reserving memory so that a request the computer cannot
//! meet is a clear error rather than an abort.
//!
//! Owns the numbers and their messages. Never reads files and never decides
//! what a count means (the readers say which count they checked). Every
//! limit message names the command-line flag that raises it.
//!
//! ```
//! use vqforge::limits::Limits;
//!
//! let limits = Limits { max_vectors: 1000, ..Limits::default() };
//! assert!(limits.check_vectors("reading stream", "the stream", 1000).is_ok());
//! let e = limits.check_vectors("reading stream", "the stream", 1001).unwrap_err();
//! assert_eq!(
//!     e.to_string(),
//!     "reading stream: the stream has 1001 vectors, above the limit of 1000; \
//!      raise it with --max-vectors"
//! );
//! ```

use crate::error::{Error, ErrorKind, Result};

/// How much input a command accepts before refusing it.
///
/// The defaults are generous for real use (a 100-megapixel photo, a log of
/// 100 million records, a codebook of 16.7 million codewords) and small
/// enough that a corrupted or hostile count is refused before the memory it
/// claims is asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    /// The most pixels (width × height) one image may have.
    /// Default [`Limits::DEFAULT_MAX_PIXELS`]; flag `--max-pixels`.
    pub max_pixels: u64,
    /// The most vectors (CSV frames, stream indices) one input may hold.
    /// Default [`Limits::DEFAULT_MAX_VECTORS`]; flag `--max-vectors`.
    pub max_vectors: u64,
    /// The most codewords a codebook may hold, read or trained.
    /// Default [`Limits::DEFAULT_MAX_CODEWORDS`]; flag `--max-codewords`.
    pub max_codewords: u64,
}

impl Limits {
    /// 100 million pixels: 400 MB as 8-bit RGBA.
    pub const DEFAULT_MAX_PIXELS: u64 = 100_000_000;
    /// 100 million vectors: 400 MB of indices, the same count as the pixel limit.
    pub const DEFAULT_MAX_VECTORS: u64 = 100_000_000;
    /// 2²⁴ codewords: 64 MB per component of the codewords as `f32`.
    pub const DEFAULT_MAX_CODEWORDS: u64 = 1 << 24;

    /// Fails with [`ErrorKind::Limit`] when `what` holds more than
    /// [`Limits::max_vectors`] vectors.
    pub fn check_vectors(&self, stage: &'static str, what: &str, vectors: u64) -> Result<()> {
        over(
            stage,
            what,
            vectors,
            self.max_vectors,
            "vectors",
            "--max-vectors",
        )
    }

    /// Fails with [`ErrorKind::Limit`] when `what` holds more than
    /// [`Limits::max_codewords`] codewords.
    pub fn check_codewords(&self, stage: &'static str, what: &str, codewords: u64) -> Result<()> {
        over(
            stage,
            what,
            codewords,
            self.max_codewords,
            "codewords",
            "--max-codewords",
        )
    }

    /// Fails with [`ErrorKind::Limit`] when `what` has more than
    /// [`Limits::max_pixels`] pixels.
    pub fn check_pixels(&self, stage: &'static str, what: &str, pixels: u64) -> Result<()> {
        over(
            stage,
            what,
            pixels,
            self.max_pixels,
            "pixels",
            "--max-pixels",
        )
    }

    /// Fails with [`ErrorKind::InvalidParameter`] (a usage error) when a
    /// limit is 0, which would refuse every input.
    pub fn check(&self) -> Result<()> {
        for (value, flag) in [
            (self.max_pixels, "--max-pixels"),
            (self.max_vectors, "--max-vectors"),
            (self.max_codewords, "--max-codewords"),
        ] {
            if value == 0 {
                return Err(Error::new(
                    "checking limits",
                    ErrorKind::InvalidParameter(format!(
                        "{flag} must be at least 1, got 0 (it would refuse every input)"
                    )),
                ));
            }
        }
        Ok(())
    }
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            max_pixels: Self::DEFAULT_MAX_PIXELS,
            max_vectors: Self::DEFAULT_MAX_VECTORS,
            max_codewords: Self::DEFAULT_MAX_CODEWORDS,
        }
    }
}

fn over(
    stage: &'static str,
    what: &str,
    count: u64,
    limit: u64,
    unit: &str,
    flag: &str,
) -> Result<()> {
    if count <= limit {
        return Ok(());
    }
    Err(Error::new(
        stage,
        ErrorKind::Limit(format!(
            "{what} has {count} {unit}, above the limit of {limit}; raise it with {flag}"
        )),
    ))
}

/// Bytes as a short human figure: `512 bytes`, `3.2 MB`, `17.2 GB` (powers of 1000).
pub fn human_bytes(bytes: u128) -> String {
    const UNITS: [&str; 5] = ["kB", "MB", "GB", "TB", "PB"];
    if bytes < 1000 {
        return format!("{bytes} bytes");
    }
    let mut value = bytes as f64 / 1000.0;
    let mut unit = 0;
    while value >= 1000.0 && unit + 1 < UNITS.len() {
        value /= 1000.0;
        unit += 1;
    }
    format!("{value:.1} {}", UNITS[unit])
}

/// Makes room for `additional` more items in `v`, or fails with
/// [`ErrorKind::Limit`] saying how much memory `what` needed, instead of
/// aborting the process when the allocation cannot be made.
pub fn reserve<T>(
    v: &mut Vec<T>,
    additional: usize,
    stage: &'static str,
    what: &str,
) -> Result<()> {
    let items = v.len() as u128 + additional as u128;
    v.try_reserve(additional)
        .map_err(|_| out_of_memory::<T>(items, stage, what))
}

/// An empty vector with room for exactly `capacity` items, or the error of
/// [`reserve`].
pub fn vec_with_capacity<T>(capacity: usize, stage: &'static str, what: &str) -> Result<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(capacity)
        .map_err(|_| out_of_memory::<T>(capacity as u128, stage, what))?;
    Ok(v)
}

/// The error of an allocation of `items` values of `T` that could not be made.
fn out_of_memory<T>(items: u128, stage: &'static str, what: &str) -> Error {
    let bytes = items * std::mem::size_of::<T>() as u128;
    Error::new(
        stage,
        ErrorKind::Limit(format!(
            "{what} needs about {} of memory, more than could be allocated",
            human_bytes(bytes)
        )),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_are_inclusive_and_name_their_flag() {
        let l = Limits {
            max_pixels: 10,
            max_vectors: 20,
            max_codewords: 30,
        };
        assert!(l.check_pixels("s", "the image", 10).is_ok());
        assert!(l.check_vectors("s", "the table", 20).is_ok());
        assert!(l.check_codewords("s", "the codebook", 30).is_ok());
        for (e, flag) in [
            (l.check_pixels("s", "the image", 11), "--max-pixels"),
            (l.check_vectors("s", "the table", 21), "--max-vectors"),
            (
                l.check_codewords("s", "the codebook", 31),
                "--max-codewords",
            ),
        ] {
            let e = e.unwrap_err();
            assert!(matches!(e.kind(), ErrorKind::Limit(_)), "{e}");
            assert!(!e.is_usage());
            assert!(
                e.to_string().ends_with(&format!("raise it with {flag}")),
                "{e}"
            );
        }
    }

    #[test]
    fn zero_limits_are_usage_errors() {
        let e = Limits {
            max_vectors: 0,
            ..Limits::default()
        }
        .check()
        .unwrap_err();
        assert!(e.is_usage());
        assert!(
            e.to_string().contains("--max-vectors must be at least 1"),
            "{e}"
        );
        assert!(Limits::default().check().is_ok());
    }

    #[test]
    fn impossible_allocations_are_errors_not_aborts() {
        // isize::MAX bytes is the most any Rust allocation may ask for
        // (std::alloc::Layout), so this request fails before reaching the
        // allocator on every platform.
        let e = vec_with_capacity::<u64>(usize::MAX / 4, "reading", "the test").unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Limit(_)));
        assert!(
            e.to_string().contains("more than could be allocated"),
            "{e}"
        );
        let mut v = vec![1u8; 4];
        let e = reserve(&mut v, usize::MAX - 2, "reading", "the test").unwrap_err();
        assert!(e.to_string().contains("the test needs about"), "{e}");
        assert_eq!(v, [1, 1, 1, 1]);
        assert!(reserve(&mut v, 100, "reading", "the test").is_ok());
    }

    #[test]
    fn human_bytes_reads_well() {
        assert_eq!(human_bytes(512), "512 bytes");
        assert_eq!(human_bytes(3_200_000), "3.2 MB");
        assert_eq!(human_bytes(16_000_000_000), "16.0 GB");
    }
}
