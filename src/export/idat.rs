//! The image data of an indexed PNG: the zlib stream that the IDAT chunks
//! carry, compressed in pieces on several threads ([`zlib_pieces`]).
//!
//! Owns the scanline layout (filter type 0 before each packed row) and the
//! zlib wrapper; never writes chunks or files and never chooses indices.
//!
//! # How the pieces make one stream
//!
//! The scanlines are cut into pieces of whole rows and each piece is
//! compressed on its own as raw DEFLATE (RFC 1951), with no history from
//! the pieces before it. Every piece but the last ends with a sync flush:
//! an empty stored block, which is not final and leaves the output on a
//! byte boundary (RFC 1951, sections 3.2.3 and 3.2.4), so the next piece's
//! first block header follows directly. The last piece ends with a final
//! block. Before the first piece goes the zlib header and after the last
//! the Adler-32 of all the uncompressed bytes (RFC 1950, sections 2.2 and
//! 9). A decoder sees one ordinary zlib stream whose DEFLATE blocks never
//! refer back past the start of their piece.
//!
//! Piece boundaries depend only on the image's size and the piece size,
//! never on the number of threads, so the bytes are the same on any
//! machine.

use flate2::{Compress, Compression, FlushCompress, Status};
use rayon::prelude::*;

use super::firmware::{pack_row, packed_row_bytes};
use crate::error::{Error, ErrorKind, Result};

/// Uncompressed bytes per piece, roughly: pieces are whole rows, as equal
/// as rows allow. Small enough that a two-megapixel image at 8 bits gives
/// each of two threads two pieces; large enough that starting each piece
/// with an empty history costs about 0.4 % of the file (a table in
/// `benches/png_write.rs` gives sizes by piece size and level).
pub(super) const PIECE_BYTES: usize = 512 * 1024;

/// DEFLATE level of every piece, on zlib's scale 1 (fastest) to 9
/// (smallest), as flate2's zlib-rs backend reads it. Chosen by measurement
/// on a photo with a 256-colour palette (see `benches/png_write.rs`).
const LEVEL: u32 = 5;

/// The zlib header (RFC 1950, section 2.2): CMF 0x78 is method 8 (DEFLATE)
/// with a 32 KiB window (CINFO 7), the window raw DEFLATE uses; FLG 0x5E is
/// FLEVEL 1 ("fast", information only), no preset dictionary and the
/// FCHECK that makes CMF × 256 + FLG a multiple of 31.
const ZLIB_HEADER: [u8; 2] = [0x78, 0x5E];

const STAGE: &str = "writing image";

/// Rows per piece: `height` rows of `line` bytes cut into the fewest
/// pieces of at most about `piece_bytes` (at least one row each), with as
/// many rows in each as possible.
fn rows_per_piece(line: usize, height: usize, piece_bytes: usize) -> usize {
    let total = line.saturating_mul(height);
    let pieces = total.div_ceil(piece_bytes.max(1)).clamp(1, height);
    height.div_ceil(pieces)
}

/// The zlib stream (RFC 1950) of an indexed image's scanlines, in pieces
/// that concatenated make the whole stream; write each as one or more IDAT
/// chunks, in order. The uncompressed bytes are, for each row, filter type
/// 0 (None; PNG specification section 9.2) and then the row's indices
/// packed at `bits` bits per pixel (section 7.2).
///
/// `indices` holds whole rows of `width` indices, each below 2^`bits`;
/// `bits` is 1, 2, 4 or 8. Rows are cut into pieces of about
/// `piece_bytes` uncompressed bytes ([`PIECE_BYTES`] outside tests).
///
/// # Errors
///
/// [`ErrorKind::Format`] if the compressor reports an error.
pub(super) fn zlib_pieces(
    indices: &[u32],
    width: u32,
    bits: u8,
    piece_bytes: usize,
) -> Result<Vec<Vec<u8>>> {
    let width = width as usize;
    let line = 1 + packed_row_bytes(width as u32, bits) as usize;
    let height = indices.len() / width;
    let rows = rows_per_piece(line, height, piece_bytes);
    let count = height.div_ceil(rows);
    // Zeroed, so every filter-type byte is already 0.
    let mut scanlines = vec![0u8; line * height];
    let mut pieces = scanlines
        .par_chunks_mut(line * rows)
        .zip(indices.par_chunks(width * rows))
        .enumerate()
        .map(|(i, (bytes, indices))| {
            for (scanline, row) in bytes
                .chunks_exact_mut(line)
                .zip(indices.chunks_exact(width))
            {
                pack_row(row, bits, &mut scanline[1..]);
            }
            let mut out = Vec::with_capacity(bytes.len() / 4 + 1024);
            if i == 0 {
                out.extend_from_slice(&ZLIB_HEADER);
            }
            deflate(bytes, i + 1 == count, out)
        })
        .collect::<Result<Vec<_>>>()?;
    let adler = simd_adler32::adler32(&scanlines.as_slice());
    if let Some(last) = pieces.last_mut() {
        last.extend_from_slice(&adler.to_be_bytes());
    }
    Ok(pieces)
}

/// Appends `input` compressed as raw DEFLATE to `out`, ending with a final
/// block if `last` and with a sync flush otherwise.
fn deflate(input: &[u8], last: bool, mut out: Vec<u8>) -> Result<Vec<u8>> {
    let mut z = Compress::new(Compression::new(LEVEL), false);
    let flush = if last {
        FlushCompress::Finish
    } else {
        FlushCompress::Sync
    };
    loop {
        let taken = z.total_in() as usize;
        let status = z
            .compress_vec(&input[taken..], &mut out, flush)
            .map_err(|e| {
                Error::new(
                    STAGE,
                    ErrorKind::Format(format!("compressing image data: {e}")),
                )
            })?;
        let done = match status {
            Status::StreamEnd => true,
            // A flush is complete once all input is taken and the
            // compressor stopped with room to spare (zlib's contract).
            Status::Ok | Status::BufError => {
                !last && z.total_in() as usize == input.len() && out.len() < out.capacity()
            }
        };
        if done {
            return Ok(out);
        }
        out.reserve(out.capacity().max(1024));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Decodes a zlib stream with flate2's decoder (zlib-rs), which checks
    /// the header and the Adler-32 (RFC 1950).
    fn inflate(stream: &[u8]) -> Vec<u8> {
        use std::io::Read;
        let mut out = Vec::new();
        flate2::read::ZlibDecoder::new(stream)
            .read_to_end(&mut out)
            .unwrap();
        out
    }

    #[test]
    fn zlib_header_is_valid() {
        // RFC 1950, section 2.2: CM = 8, CINFO ≤ 7, FDICT = 0 and
        // (CMF × 256 + FLG) a multiple of 31.
        let [cmf, flg] = ZLIB_HEADER;
        assert_eq!(cmf & 0x0F, 8);
        assert!(cmf >> 4 <= 7);
        assert_eq!(flg & 0x20, 0);
        assert_eq!((u16::from(cmf) * 256 + u16::from(flg)) % 31, 0);
    }

    /// Adler-32 as RFC 1950 defines it (section 8.2; the sample code of
    /// section 9): s1 = 1 + the sum of the bytes, s2 = the sum of the
    /// successive s1, both modulo 65521; the checksum is s2 × 65536 + s1.
    fn adler32_by_definition(bytes: &[u8]) -> u32 {
        let (mut s1, mut s2) = (1u32, 0u32);
        for &b in bytes {
            s1 = (s1 + u32::from(b)) % 65521;
            s2 = (s2 + s1) % 65521;
        }
        (s2 << 16) | s1
    }

    #[test]
    fn adler32_known_values() {
        // Adler-32 of "Wikipedia" is 0x11E60398 (the worked example in
        // Wikipedia's "Adler-32" article; also Python's zlib.adler32), and
        // of no bytes is 1 (RFC 1950, section 9: s1 starts at 1, s2 at 0).
        assert_eq!(simd_adler32::adler32(&b"Wikipedia".as_slice()), 0x11E6_0398);
        assert_eq!(simd_adler32::adler32(&b"".as_slice()), 1);
        assert_eq!(adler32_by_definition(b"Wikipedia"), 0x11E6_0398);
        // Long enough for the modulo to matter.
        let long: Vec<u8> = (0..100_000u32).map(|i| (i * 7 + i / 255) as u8).collect();
        assert_eq!(
            simd_adler32::adler32(&long.as_slice()),
            adler32_by_definition(&long)
        );
    }

    #[test]
    fn rows_are_cut_evenly_whatever_the_size() {
        // 1411 rows of 1412 bytes in pieces of 512 KiB: 4 pieces.
        assert_eq!(rows_per_piece(1412, 1411, 512 * 1024), 353);
        // Fewer bytes than one piece: one piece.
        assert_eq!(rows_per_piece(10, 3, 512 * 1024), 3);
        // A row larger than a piece: one row each.
        assert_eq!(rows_per_piece(100, 7, 10), 1);
        assert_eq!(rows_per_piece(1, 1, 0), 1);
    }

    #[test]
    fn pieces_join_into_one_stream_of_the_scanlines() {
        let (width, height) = (37u32, 23usize);
        for bits in [1u8, 2, 4, 8] {
            let indices: Vec<u32> = (0..width as usize * height)
                .map(|i| ((i * 31 + i / 7) % (1 << bits)) as u32)
                .collect();
            let line = 1 + packed_row_bytes(width, bits) as usize;
            let mut expected = Vec::new();
            for row in indices.chunks(width as usize) {
                let mut packed = vec![0; line - 1];
                pack_row(row, bits, &mut packed);
                expected.push(0);
                expected.extend(packed);
            }
            let whole = zlib_pieces(&indices, width, bits, PIECE_BYTES).unwrap();
            assert_eq!(whole.len(), 1);
            for piece_bytes in [1, line, 3 * line + 1, 100, 1000] {
                let pieces = zlib_pieces(&indices, width, bits, piece_bytes).unwrap();
                let rows = rows_per_piece(line, height, piece_bytes);
                assert_eq!(pieces.len(), height.div_ceil(rows), "{bits} bits");
                assert_eq!(pieces[0][..2], ZLIB_HEADER);
                let stream = pieces.concat();
                assert_eq!(inflate(&stream), expected, "{bits} bits, {piece_bytes}");
                // The last four bytes are the Adler-32 of all the scanlines,
                // most significant byte first (RFC 1950, section 2.2).
                let adler = adler32_by_definition(&expected).to_be_bytes();
                assert_eq!(stream[stream.len() - 4..], adler);
            }
        }
    }

    #[test]
    fn same_bytes_on_any_number_of_threads() {
        let indices: Vec<u32> = (0..200 * 50).map(|i| (i * i % 251) as u32).collect();
        let on = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| zlib_pieces(&indices, 200, 8, 1000).unwrap())
        };
        let one = on(1);
        assert!(one.len() > 4);
        assert_eq!(on(2), one);
        assert_eq!(on(3), one);
    }
}
