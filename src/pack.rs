//! Bit packing of codeword indices at a fixed width of 1 to 32 bits each.
//!
//! Owns the bit order used by index streams and raw index exports; never
//! decides the width (that is ⌈log2 k⌉, see [`crate::codebook::bits_for_size`])
//! and never opens files.
//!
//! # Bit order
//!
//! Indices are written back to back with no padding between them (no row or
//! frame alignment). Each index is written most significant bit first, and
//! bytes are filled from their most significant bit (bit 7) down to bit 0.
//! The last byte is padded with zero bits, so `count` indices of `bits` bits
//! take exactly ⌈count × bits / 8⌉ bytes. Example: indices `[1, 0, 3, 2]` at
//! 2 bits are `01 00 11 10`, the single byte `0b0100_1110`.
//!
//! ```
//! use vqforge::pack::{pack_indices, unpack_indices};
//!
//! let bytes = pack_indices(&[1, 0, 3, 2], 2).unwrap();
//! assert_eq!(bytes, [0b0100_1110]);
//! assert_eq!(unpack_indices(&bytes, 4, 2).unwrap(), [1, 0, 3, 2]);
//! // One byte too many for 4 indices of 2 bits:
//! assert!(unpack_indices(&[0b0100_1110, 0], 4, 2).is_err());
//! ```

use std::io::Write;

use crate::error::{Error, ErrorKind, Position, Result};

/// The widest index, in bits.
pub const MAX_BITS: u32 = 32;

fn check_bits(stage: &'static str, bits: u32) -> Result<()> {
    if (1..=MAX_BITS).contains(&bits) {
        Ok(())
    } else {
        Err(Error::new(
            stage,
            ErrorKind::InvalidParameter(format!(
                "indices must be 1 to {MAX_BITS} bits wide, got {bits}"
            )),
        ))
    }
}

/// The low `n` bits set (n ≤ 64).
fn low_mask(n: u32) -> u64 {
    if n >= 64 {
        u64::MAX
    } else {
        (1u64 << n) - 1
    }
}

/// Bytes taken by `count` indices of `bits` bits: ⌈count × bits / 8⌉, or
/// `None` if that does not fit in a `u64`.
pub fn packed_len(count: u64, bits: u32) -> Option<u64> {
    let total_bits = count.checked_mul(u64::from(bits))?;
    Some(total_bits / 8 + u64::from(total_bits % 8 != 0))
}

/// Packs `indices` at `bits` bits each (see the module doc for the bit order).
///
/// Fails if `bits` is outside 1..=32 or an index does not fit in `bits` bits.
pub fn pack_indices(indices: &[u32], bits: u32) -> Result<Vec<u8>> {
    check_bits("packing indices", bits)?;
    let len = packed_len(indices.len() as u64, bits).unwrap_or(0);
    let mut packer = BitPacker::new(Vec::with_capacity(len as usize), bits)?;
    for &index in indices {
        packer.push(index)?;
    }
    packer.finish()
}

/// Unpacks `count` indices of `bits` bits from `bytes`.
///
/// Fails if `bits` is outside 1..=32, if `bytes` is not exactly
/// ⌈count × bits / 8⌉ bytes long (checked before anything is allocated), or
/// if the padding bits of the last byte are not zero.
pub fn unpack_indices(bytes: &[u8], count: usize, bits: u32) -> Result<Vec<u32>> {
    const STAGE: &str = "unpacking indices";
    check_bits(STAGE, bits)?;
    let expected = packed_len(count as u64, bits);
    if expected != Some(bytes.len() as u64) {
        let wanted = expected.map_or_else(|| "more than 2^64".to_string(), |n| n.to_string());
        return Err(Error::new(
            STAGE,
            ErrorKind::Format(format!(
                "{count} indices of {bits} bits take {wanted} bytes, found {}",
                bytes.len()
            )),
        ));
    }
    // The length check bounds `count` by 8 × bytes.len(), so this allocation
    // is no larger than the input justifies; a shortage is still an error.
    let mut out = crate::limits::vec_with_capacity(count, STAGE, "the indices")?;
    let mask = low_mask(bits);
    let mut acc: u64 = 0;
    let mut filled: u32 = 0;
    for &byte in bytes {
        acc = (acc << 8) | u64::from(byte);
        filled += 8;
        while filled >= bits && out.len() < count {
            filled -= bits;
            out.push(((acc >> filled) & mask) as u32);
        }
        acc &= low_mask(filled);
    }
    if acc != 0 {
        return Err(Error::new(
            STAGE,
            ErrorKind::Format(format!(
                "the {filled} padding bits after the last index are not zero"
            )),
        ));
    }
    Ok(out)
}

/// Packs indices one at a time into a writer, so an encoder can pack as it
/// goes instead of holding every index first. Call [`BitPacker::finish`] to
/// write the zero-padded last byte; dropping the packer without it loses the
/// final partial byte.
///
/// Writes go straight to `out` a byte at a time; give it a `Vec<u8>` or a
/// buffered writer.
///
/// ```
/// use vqforge::pack::BitPacker;
///
/// let mut packer = BitPacker::new(Vec::new(), 3).unwrap();
/// for index in [5, 1, 7] {
///     packer.push(index).unwrap();
/// }
/// // 101 001 111 + 7 padding zeros
/// assert_eq!(packer.finish().unwrap(), [0b1010_0111, 0b1000_0000]);
/// // 8 does not fit in 3 bits:
/// assert!(BitPacker::new(Vec::new(), 3).unwrap().push(8).is_err());
/// ```
#[derive(Debug)]
pub struct BitPacker<W: Write> {
    out: W,
    bits: u32,
    /// Pending bits, right-aligned; fewer than 8 between calls.
    acc: u64,
    filled: u32,
    pushed: u64,
}

impl<W: Write> BitPacker<W> {
    const STAGE: &'static str = "packing indices";

    /// A packer writing `bits`-bit indices (1..=32) to `out`.
    pub fn new(out: W, bits: u32) -> Result<Self> {
        check_bits(Self::STAGE, bits)?;
        Ok(BitPacker {
            out,
            bits,
            acc: 0,
            filled: 0,
            pushed: 0,
        })
    }

    /// Bits per index.
    pub fn bits(&self) -> u32 {
        self.bits
    }

    /// Indices pushed so far.
    pub fn count(&self) -> u64 {
        self.pushed
    }

    /// Appends one index. Fails if it does not fit in the width, or if the
    /// writer fails.
    pub fn push(&mut self, index: u32) -> Result<()> {
        if u64::from(index) > low_mask(self.bits) {
            return Err(Error::new(
                Self::STAGE,
                ErrorKind::InvalidParameter(format!(
                    "index {index} does not fit in {} bits",
                    self.bits
                )),
            )
            .at(Position {
                record: Some(self.pushed),
                ..Position::default()
            }));
        }
        self.acc = (self.acc << self.bits) | u64::from(index);
        self.filled += self.bits;
        let mut ready = [0u8; 5];
        let mut n = 0;
        while self.filled >= 8 {
            self.filled -= 8;
            ready[n] = (self.acc >> self.filled) as u8;
            n += 1;
        }
        self.acc &= low_mask(self.filled);
        self.out
            .write_all(&ready[..n])
            .map_err(|e| Error::new(Self::STAGE, ErrorKind::Io(e)))?;
        self.pushed += 1;
        Ok(())
    }

    /// Writes the last, zero-padded byte (if any bits are pending), flushes
    /// and returns the writer.
    pub fn finish(mut self) -> Result<W> {
        let io = |e| Error::new(Self::STAGE, ErrorKind::Io(e));
        if self.filled > 0 {
            let last = (self.acc << (8 - self.filled)) as u8;
            self.out.write_all(&[last]).map_err(io)?;
        }
        self.out.flush().map_err(io)?;
        Ok(self.out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SeededRng;

    fn random_indices(rng: &mut SeededRng, n: usize, bits: u32) -> Vec<u32> {
        (0..n)
            .map(|_| (rng.next_u64() & low_mask(bits)) as u32)
            .collect()
    }

    #[test]
    fn hand_worked_example() {
        // 01 00 11 10
        assert_eq!(pack_indices(&[1, 0, 3, 2], 2).unwrap(), [0b0100_1110]);
        // 1 0 1 + five zero padding bits
        assert_eq!(pack_indices(&[1, 0, 1], 1).unwrap(), [0b1010_0000]);
        // 0x123 at 12 bits, then 0xABC: 0001 0010 0011 1010 1011 1100
        assert_eq!(
            pack_indices(&[0x123, 0xABC], 12).unwrap(),
            [0x12, 0x3A, 0xBC]
        );
        // 32-bit indices are their big-endian bytes.
        assert_eq!(
            pack_indices(&[0xDEAD_BEEF, 1], 32).unwrap(),
            [0xDE, 0xAD, 0xBE, 0xEF, 0, 0, 0, 1]
        );
        assert_eq!(
            unpack_indices(&[0x12, 0x3A, 0xBC], 2, 12).unwrap(),
            [0x123, 0xABC]
        );
    }

    #[test]
    fn round_trip_every_width() {
        let mut rng = SeededRng::new(7);
        let widths = (1..=16).chain([17, 31, 32]);
        for bits in widths {
            for n in [0, 1, 2, 3, 7, 8, 9, 100, 1001] {
                let indices = random_indices(&mut rng, n, bits);
                let bytes = pack_indices(&indices, bits).unwrap();
                assert_eq!(
                    bytes.len() as u64,
                    packed_len(n as u64, bits).unwrap(),
                    "bits {bits}, n {n}"
                );
                assert_eq!(
                    unpack_indices(&bytes, n, bits).unwrap(),
                    indices,
                    "bits {bits}, n {n}"
                );
            }
        }
    }

    #[test]
    fn streaming_matches_batch() {
        let mut rng = SeededRng::new(11);
        let indices = random_indices(&mut rng, 333, 5);
        let mut packer = BitPacker::new(Vec::new(), 5).unwrap();
        for &i in &indices {
            packer.push(i).unwrap();
        }
        assert_eq!(packer.count(), 333);
        assert_eq!(packer.finish().unwrap(), pack_indices(&indices, 5).unwrap());
    }

    #[test]
    fn wrong_lengths_are_refused() {
        let bytes = pack_indices(&[1, 2, 3, 4, 5], 3).unwrap();
        assert_eq!(bytes.len(), 2);
        assert!(unpack_indices(&bytes[..1], 5, 3).is_err());
        let mut longer = bytes.clone();
        longer.push(0);
        let e = unpack_indices(&longer, 5, 3).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Format(_)));
        assert!(e.to_string().contains("take 2 bytes, found 3"), "{e}");
        assert!(unpack_indices(&[], 1, 1).is_err());
        assert!(unpack_indices(&[], 0, 1).unwrap().is_empty());
        // A count whose size overflows is refused, not allocated.
        assert!(unpack_indices(&[0; 4], usize::MAX, 32).is_err());
    }

    #[test]
    fn non_zero_padding_is_refused() {
        // Three 1-bit indices leave five padding bits.
        assert_eq!(unpack_indices(&[0b1010_0000], 3, 1).unwrap(), [1, 0, 1]);
        let e = unpack_indices(&[0b1010_0001], 3, 1).unwrap_err();
        assert!(e.to_string().contains("padding bits"), "{e}");
    }

    #[test]
    fn bad_widths_and_values_are_refused() {
        assert!(pack_indices(&[0], 0).is_err());
        assert!(pack_indices(&[0], 33).is_err());
        assert!(unpack_indices(&[0], 1, 0).is_err());
        assert!(unpack_indices(&[0; 5], 1, 33).is_err());
        let e = pack_indices(&[3, 4], 2).unwrap_err();
        assert!(
            e.to_string().contains("index 4 does not fit in 2 bits"),
            "{e}"
        );
        assert_eq!(e.position().record, Some(1));
        assert!(pack_indices(&[u32::MAX], 32).is_ok());
    }
}
