//! Which codebook sizes a curve measures: parsing a list or range the user
//! wrote, the defaults, and clipping to what the input can hold. Never
//! trains anything.

use crate::error::{Error, ErrorKind, Result};

const STAGE: &str = "reading sizes";

/// Most sizes one curve may list: every size costs a training.
pub const MAX_SIZES: usize = 1024;

/// Codebook sizes, strictly increasing, each at least 1.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Sizes(Vec<usize>);

fn bad(message: String) -> Error {
    Error::new(STAGE, ErrorKind::InvalidParameter(message))
}

impl Sizes {
    /// Sizes from a list; fails unless it is non-empty, strictly increasing
    /// and every size is at least 1.
    pub fn new(list: Vec<usize>) -> Result<Sizes> {
        if list.is_empty() {
            return Err(bad("no sizes given".into()));
        }
        if list[0] == 0 {
            return Err(Error::new(STAGE, ErrorKind::ZeroSize));
        }
        if let Some(w) = list.windows(2).find(|w| w[1] <= w[0]) {
            return Err(bad(format!(
                "sizes must increase: {} comes after {}",
                w[1], w[0]
            )));
        }
        if list.len() > MAX_SIZES {
            return Err(bad(format!(
                "{} sizes is more than the {MAX_SIZES} one curve may train; list fewer, e.g. powers of two",
                list.len()
            )));
        }
        Ok(Sizes(list))
    }

    /// Parses comma-separated items, each a size `N` or an inclusive range
    /// `A..B` (every size from A to B).
    ///
    /// ```
    /// use vqforge::curve::Sizes;
    ///
    /// assert_eq!(Sizes::parse("2..5").unwrap().as_slice(), &[2, 3, 4, 5]);
    /// assert_eq!(Sizes::parse("2,4,8..10").unwrap().as_slice(), &[2, 4, 8, 9, 10]);
    /// assert!(Sizes::parse("8,4").is_err()); // not increasing
    /// assert!(Sizes::parse("0..4").is_err()); // below 1
    /// ```
    pub fn parse(text: &str) -> Result<Sizes> {
        let number = |t: &str| -> Result<usize> {
            t.trim().parse::<usize>().map_err(|_| {
                bad(format!(
                    "\"{}\" is not a size; write sizes as 2..64 or 2,4,8,16",
                    t.trim()
                ))
            })
        };
        let mut list = Vec::new();
        for item in text.split(',') {
            match item.split_once("..") {
                Some((a, b)) => {
                    let (a, b) = (number(a)?, number(b)?);
                    if b < a {
                        return Err(bad(format!(
                            "the range {a}..{b} runs backwards; write the smaller size first"
                        )));
                    }
                    if b - a >= MAX_SIZES {
                        return Err(bad(format!(
                            "the range {a}..{b} holds more than the {MAX_SIZES} sizes one curve may train"
                        )));
                    }
                    list.extend(a..=b);
                }
                None => list.push(number(item)?),
            }
        }
        Self::new(list)
    }

    /// Powers of two from 2 up to `largest` (just `[1]` when `largest` < 2).
    pub fn powers_of_two(largest: usize) -> Sizes {
        let mut list = Vec::new();
        let mut k = 2usize;
        while k <= largest {
            list.push(k);
            k = k.saturating_mul(2);
        }
        if list.is_empty() {
            list.push(1);
        }
        Sizes(list)
    }

    /// Sizes above `largest` replaced by `largest` (once), with a notice
    /// when anything changed.
    pub fn clip(self, largest: usize, what: &str) -> (Sizes, Option<String>) {
        let largest = largest.max(1);
        let above: Vec<usize> = self.0.iter().copied().filter(|&k| k > largest).collect();
        if above.is_empty() {
            return (self, None);
        }
        let mut list: Vec<usize> = self.0.into_iter().filter(|&k| k < largest).collect();
        list.push(largest);
        let shown: Vec<String> = above.iter().take(5).map(|k| k.to_string()).collect();
        let more = if above.len() > 5 { ", …" } else { "" };
        let notice = format!(
            "the input has only {largest} {what}: sizes above it ({}{more}) were replaced by {largest}",
            shown.join(", ")
        );
        (Sizes(list), Some(notice))
    }

    /// The sizes, increasing.
    pub fn as_slice(&self) -> &[usize] {
        &self.0
    }

    /// The largest size.
    pub fn largest(&self) -> usize {
        *self.0.last().expect("never empty")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_and_refuse() {
        assert_eq!(Sizes::parse("1,2").unwrap().as_slice(), &[1, 2]);
        assert_eq!(Sizes::parse(" 3 .. 4 ").unwrap().as_slice(), &[3, 4]);
        for bad in ["", "4,4", "5..3", "x", "2..", "1..5000", "-2"] {
            assert!(Sizes::parse(bad).is_err(), "{bad:?}");
        }
        assert!(matches!(
            Sizes::parse("0,1").unwrap_err().kind(),
            ErrorKind::ZeroSize
        ));
    }

    #[test]
    fn defaults_and_clipping() {
        assert_eq!(Sizes::powers_of_two(256).as_slice().len(), 8);
        assert_eq!(Sizes::powers_of_two(300).largest(), 256);
        assert_eq!(Sizes::powers_of_two(1).as_slice(), &[1]);
        let (s, note) = Sizes::parse("2,64,512").unwrap().clip(178, "vectors");
        assert_eq!(s.as_slice(), &[2, 64, 178]);
        assert!(note.unwrap().contains("512"));
        let (s, note) = Sizes::parse("2..4").unwrap().clip(178, "vectors");
        assert_eq!(s.as_slice(), &[2, 3, 4]);
        assert!(note.is_none());
        let (s, _) = Sizes::parse("2..4").unwrap().clip(4, "vectors");
        assert_eq!(s.as_slice(), &[2, 3, 4]);
    }
}
