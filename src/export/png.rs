//! PNG output: indexed images with a palette (PLTE) and, when some entry
//! is not opaque, its alpha values (tRNS) at the smallest bit depth that
//! holds the palette ([`write_indexed_png`]); and true-colour images
//! ([`write_rgb_png`], [`write_rgba_png`]).
//!
//! Owns the PNG encoding through the `png` crate; never chooses palettes or
//! indices, never opens files (it writes to the writer it is given; make
//! that an [`crate::atomic::AtomicFile`] for files).
//!
//! Indexed rows are packed in the bit order of [`crate::export::pack_rows`],
//! which is PNG's (specification section 7.2), and written without
//! filtering, which the PNG specification (section 12.8) recommends for
//! palette images. Their image data is compressed in pieces on several
//! threads (`idat.rs`); the `png` crate writes the chunks around it.

use std::io::Write;

use ::png::{chunk, BitDepth, ColorType, Encoder, EncodingError};

use super::idat::{zlib_pieces, PIECE_BYTES};
use crate::error::{Error, ErrorKind, Result};

const STAGE: &str = "writing image";

/// The largest width or height PNG allows: 2^31 − 1 (PNG specification,
/// section 11.2.2).
const MAX_SIDE: u32 = (1 << 31) - 1;

/// The most palette entries PNG allows (PNG specification, section 11.2.3).
pub const MAX_PALETTE: usize = 256;

/// How an indexed image's data is cut: compressed in pieces of about
/// `piece_bytes` uncompressed bytes, written in IDAT chunks of at most
/// `max_chunk` bytes. Tests use small values to get several of each.
#[derive(Debug, Clone, Copy)]
struct IdatLayout {
    piece_bytes: usize,
    max_chunk: usize,
}

/// The layout of every file: one IDAT chunk per piece, since no piece comes
/// near the longest chunk data PNG allows, 2^31 − 1 bytes (PNG
/// specification, section 5.3), unless a single row does.
const IDAT_LAYOUT: IdatLayout = IdatLayout {
    piece_bytes: PIECE_BYTES,
    max_chunk: (1 << 31) - 1,
};

/// The smallest PNG bit depth whose indices reach every entry of a palette
/// of `palette_len` colours: 1 for up to 2, 2 for up to 4, 4 for up to 16,
/// otherwise 8. (A palette of more than 256 entries still gets 8, and
/// [`write_indexed_png`] refuses it.)
///
/// ```
/// use vqforge::export::bit_depth_for;
///
/// assert_eq!([2, 3, 4, 5, 16, 17, 256].map(bit_depth_for), [1, 2, 2, 4, 4, 8, 8]);
/// ```
pub fn bit_depth_for(palette_len: usize) -> u8 {
    match palette_len {
        0..=2 => 1,
        3..=4 => 2,
        5..=16 => 4,
        _ => 8,
    }
}

fn invalid(message: String) -> Error {
    Error::new(STAGE, ErrorKind::InvalidParameter(message))
}

fn encoding_error(e: EncodingError) -> Error {
    match e {
        EncodingError::IoError(e) => Error::new(STAGE, ErrorKind::Io(e)),
        other => Error::new(STAGE, ErrorKind::Format(other.to_string())),
    }
}

fn check_size(width: u32, height: u32, pixels: usize) -> Result<()> {
    if width == 0 || height == 0 || width > MAX_SIDE || height > MAX_SIDE {
        return Err(invalid(format!(
            "a PNG image is 1 to {MAX_SIDE} pixels on each side, got {width} × {height}"
        )));
    }
    let expected = u64::from(width) * u64::from(height);
    if pixels as u64 != expected {
        return Err(Error::new(
            STAGE,
            ErrorKind::Shape(format!(
                "{pixels} pixels for an image of {width} × {height} = {expected}"
            )),
        ));
    }
    Ok(())
}

fn encode<W: Write>(encoder: Encoder<'_, W>, data: &[u8]) -> Result<()> {
    let mut writer = encoder.write_header().map_err(encoding_error)?;
    writer.write_image_data(data).map_err(encoding_error)?;
    writer.finish().map_err(encoding_error)
}

/// Writes an indexed-colour PNG (colour type 3): `indices` (row by row,
/// `width × height` of them) point into `palette`; `alpha`, if given, holds
/// one opacity per palette entry (0 transparent, 255 opaque).
///
/// The bit depth is [`bit_depth_for`] the palette's length. The palette is
/// written as PLTE. A tRNS chunk is written only when some alpha is below
/// 255, and without the trailing entries that are 255 (the PNG
/// specification, section 11.3.2.1, lets tRNS be shorter than PLTE, the
/// missing entries being opaque).
///
/// # Errors
///
/// At stage "writing image": [`ErrorKind::InvalidParameter`] for a width or
/// height of 0 or over 2^31 − 1, an empty palette or one of more than 256
/// entries, an `alpha` whose length is not the palette's, or an index not
/// below the palette length; [`ErrorKind::Shape`] when there are not
/// `width × height` indices; [`ErrorKind::Io`] when writing fails.
///
/// # Example
///
/// ```
/// use vqforge::export::write_indexed_png;
///
/// let palette = [[0, 0, 0], [255, 255, 255], [255, 0, 0]];
/// let alpha = [0, 255, 255];
/// let mut png = Vec::new();
/// write_indexed_png(&mut png, 2, 2, &palette, Some(&alpha), &[0, 1, 2, 1])?;
/// assert_eq!(png[24..26], [2, 3]); // IHDR: bit depth 2, colour type 3
///
/// // Index 3 is past the end of the palette:
/// assert!(write_indexed_png(Vec::new(), 2, 2, &palette, None, &[0, 1, 2, 3]).is_err());
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn write_indexed_png(
    w: impl Write,
    width: u32,
    height: u32,
    palette: &[[u8; 3]],
    alpha: Option<&[u8]>,
    indices: &[u32],
) -> Result<()> {
    write_indexed_png_as(w, width, height, palette, alpha, indices, IDAT_LAYOUT)
}

/// [`write_indexed_png`] with the image data cut as `layout` says.
fn write_indexed_png_as(
    w: impl Write,
    width: u32,
    height: u32,
    palette: &[[u8; 3]],
    alpha: Option<&[u8]>,
    indices: &[u32],
    layout: IdatLayout,
) -> Result<()> {
    if palette.is_empty() || palette.len() > MAX_PALETTE {
        return Err(invalid(format!(
            "a PNG palette has 1 to {MAX_PALETTE} entries, got {}",
            palette.len()
        )));
    }
    if let Some(alpha) = alpha {
        if alpha.len() != palette.len() {
            return Err(invalid(format!(
                "{} alpha values for a palette of {} entries",
                alpha.len(),
                palette.len()
            )));
        }
    }
    check_size(width, height, indices.len())?;
    if let Some(at) = indices.iter().position(|&i| i as usize >= palette.len()) {
        return Err(invalid(format!(
            "pixel {at} has index {}, past the end of the palette of {} entries",
            indices[at],
            palette.len()
        )));
    }
    let bits = bit_depth_for(palette.len());
    let pieces = zlib_pieces(indices, width, bits, layout.piece_bytes)?;

    let mut encoder = Encoder::new(w, width, height);
    encoder.set_color(ColorType::Indexed);
    // `bits` is 1, 2, 4 or 8, all valid PNG depths.
    encoder.set_depth(BitDepth::from_u8(bits).unwrap_or(BitDepth::Eight));
    encoder.set_palette(palette.as_flattened().to_vec());
    if let Some(alpha) = alpha {
        let kept = alpha.iter().rposition(|&a| a != 255).map_or(0, |i| i + 1);
        if kept > 0 {
            encoder.set_trns(alpha[..kept].to_vec());
        }
    }
    // IHDR, PLTE and tRNS, then our IDAT chunks, which together hold one
    // zlib stream however it is divided (section 10.2), then IEND.
    let mut writer = encoder.write_header().map_err(encoding_error)?;
    for data in pieces
        .iter()
        .flat_map(|piece| piece.chunks(layout.max_chunk))
    {
        writer
            .write_chunk(chunk::IDAT, data)
            .map_err(encoding_error)?;
    }
    writer.finish().map_err(encoding_error)
}

/// Writes a true-colour PNG (colour type 2, 8 bits per channel) of
/// `width × height` pixels, row by row.
///
/// # Errors
///
/// As [`write_indexed_png`] for the size, the pixel count and writing.
pub fn write_rgb_png(w: impl Write, width: u32, height: u32, pixels: &[[u8; 3]]) -> Result<()> {
    check_size(width, height, pixels.len())?;
    let mut encoder = Encoder::new(w, width, height);
    encoder.set_color(ColorType::Rgb);
    encoder.set_depth(BitDepth::Eight);
    encode(encoder, pixels.as_flattened())
}

/// Writes a true-colour PNG with alpha (colour type 6, 8 bits per channel,
/// straight alpha) of `width × height` pixels, row by row.
///
/// # Errors
///
/// As [`write_indexed_png`] for the size, the pixel count and writing.
pub fn write_rgba_png(w: impl Write, width: u32, height: u32, pixels: &[[u8; 4]]) -> Result<()> {
    check_size(width, height, pixels.len())?;
    let mut encoder = Encoder::new(w, width, height);
    encoder.set_color(ColorType::Rgba);
    encoder.set_depth(BitDepth::Eight);
    encode(encoder, pixels.as_flattened())
}

#[cfg(test)]
#[path = "png_tests.rs"]
mod tests;
