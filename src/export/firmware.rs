//! Indexed images for firmware: packing colour indices into rows of 1, 2, 4
//! or 8 bits per pixel ([`pack_rows`]) and writing them with their palette
//! as C source ([`c_source`]), with a helper that turns a file name into a
//! C identifier ([`c_identifier`]).
//!
//! Owns the row-aligned bit order shared with PNG's packed rows; never
//! chooses the palette or converts colours (palette entries arrive already
//! packed in the display's format, e.g. RGB565) and never opens files.
//!
//! The bit order is documented on [`pack_rows`].

use std::fmt::Write as _;
use std::path::Path;

use crate::error::{Error, ErrorKind, Position, Result};

const PACK: &str = "packing pixels";
const C_SOURCE: &str = "writing C source";

/// Hex values per line in the generated arrays.
const VALUES_PER_LINE: usize = 12;

fn invalid(stage: &'static str, message: String) -> Error {
    Error::new(stage, ErrorKind::InvalidParameter(message))
}

fn check_bits_per_pixel(stage: &'static str, bits: u8) -> Result<()> {
    if matches!(bits, 1 | 2 | 4 | 8) {
        Ok(())
    } else {
        Err(invalid(
            stage,
            format!("pixels must be 1, 2, 4 or 8 bits wide, got {bits}"),
        ))
    }
}

/// Bytes in one packed row: ⌈width × bits / 8⌉.
pub fn packed_row_bytes(width: u32, bits: u8) -> u64 {
    (u64::from(width) * u64::from(bits)).div_ceil(8)
}

/// Packs `width × height` colour indices (row by row) at `bits` bits per
/// pixel.
///
/// # Bit order
///
/// Rows run top to bottom. Each row starts on a byte boundary: a row of
/// `width` pixels takes ⌈width × bits / 8⌉ bytes and its last byte is padded
/// with zero bits. Within a byte the first (leftmost) pixel sits in the most
/// significant bits. This is the order of PNG's packed scanlines (PNG
/// specification, second edition, section 7.2 "Scanlines"), so the same
/// bytes serve both.
/// Unlike [`crate::pack`], which packs index streams back to back, rows
/// never share a byte.
///
/// # Errors
///
/// At stage "packing pixels": [`ErrorKind::InvalidParameter`] when `bits`
/// is not 1, 2, 4 or 8 or an index does not fit in `bits` bits (the
/// position's record is the pixel number); [`ErrorKind::Shape`] when there
/// are not `width × height` indices.
///
/// # Example
///
/// ```
/// use vqforge::export::pack_rows;
///
/// // 3 × 2 pixels at 2 bits: each row is 6 bits, padded to one byte.
/// let packed = pack_rows(&[1, 2, 3, 3, 0, 1], 3, 2, 2)?;
/// assert_eq!(packed, [0b01_10_11_00, 0b11_00_01_00]);
/// // 4 does not fit in 2 bits:
/// assert!(pack_rows(&[4, 0, 0, 0, 0, 0], 3, 2, 2).is_err());
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn pack_rows(indices: &[u32], width: u32, height: u32, bits: u8) -> Result<Vec<u8>> {
    check_bits_per_pixel(PACK, bits)?;
    let pixels = u64::from(width) * u64::from(height);
    if indices.len() as u64 != pixels {
        return Err(Error::new(
            PACK,
            ErrorKind::Shape(format!(
                "{} indices for an image of {width} × {height} = {pixels} pixels",
                indices.len()
            )),
        ));
    }
    let max = (1u32 << bits) - 1;
    if let Some(at) = indices.iter().position(|&i| i > max) {
        return Err(invalid(
            PACK,
            format!("index {} does not fit in {bits} bits", indices[at]),
        )
        .at(Position {
            record: Some(at as u64),
            ..Position::default()
        }));
    }
    if pixels == 0 {
        return Ok(Vec::new());
    }
    // Whole rows fit: the indices are already in memory and a packed row is
    // never larger than its indices.
    let row_bytes = packed_row_bytes(width, bits) as usize;
    let mut out = vec![0u8; row_bytes * height as usize];
    for (row, out_row) in indices
        .chunks_exact(width as usize)
        .zip(out.chunks_exact_mut(row_bytes))
    {
        pack_row(row, bits, out_row);
    }
    Ok(out)
}

/// Packs one row of indices at `bits` (1, 2, 4 or 8) bits per pixel into
/// `out`, in the bit order of [`pack_rows`]. `out` holds
/// [`packed_row_bytes`] bytes, all zero, and every index fits in `bits`.
pub(super) fn pack_row(row: &[u32], bits: u8, out: &mut [u8]) {
    if bits == 8 {
        for (o, &i) in out.iter_mut().zip(row) {
            *o = i as u8;
        }
        return;
    }
    let bits = usize::from(bits);
    for (x, &i) in row.iter().enumerate() {
        let bit = x * bits;
        let shift = 8 - bits - bit % 8;
        out[bit / 8] |= (i as u8) << shift;
    }
}

/// An indexed image and its palette, ready to be written as C source by
/// [`c_source`].
#[derive(Debug, Clone, Copy)]
pub struct CImage<'a> {
    /// Prefix of every name in the file: `SYMBOL_palette`, `SYMBOL_pixels`,
    /// and (upper-cased) the macros `SYMBOL_WIDTH` … and the include guard
    /// `SYMBOL_H`. Must be a C identifier (see [`c_identifier`]).
    pub symbol: &'a str,
    /// Width in pixels (at least 1).
    pub width: u32,
    /// Height in pixels (at least 1).
    pub height: u32,
    /// Bits per pixel of `pixels`: 1, 2, 4 or 8.
    pub bits_per_pixel: u8,
    /// Palette entries, each already packed in the display's format, e.g.
    /// RGB565 in the low 16 bits. At most 2^`bits_per_pixel` entries.
    pub palette: &'a [u32],
    /// Bits of each palette entry (1..=32), which chooses the C type:
    /// `uint8_t` up to 8, `uint16_t` up to 16, `uint32_t` up to 32.
    pub palette_entry_bits: u32,
    /// The pixels as made by [`pack_rows`].
    pub pixels: &'a [u8],
    /// Lines for the comment at the top of the file (what the palette
    /// format is, how the image was made …), without comment markers.
    pub comment_lines: &'a [String],
}

/// Upper-cased names that `<stdint.h>` already uses with the suffixes of
/// our macros (C23 defines `SIZE_WIDTH`, `INT8_WIDTH` …).
fn clashes_with_stdint(symbol: &str) -> bool {
    let upper = symbol.to_ascii_uppercase();
    const NAMES: [&str; 9] = [
        "INTPTR",
        "UINTPTR",
        "INTMAX",
        "UINTMAX",
        "PTRDIFF",
        "SIG_ATOMIC",
        "SIZE",
        "WCHAR",
        "WINT",
    ];
    if NAMES.contains(&upper.as_str()) {
        return true;
    }
    let rest = upper.strip_prefix('U').unwrap_or(&upper);
    let Some(rest) = rest.strip_prefix("INT") else {
        return false;
    };
    let digits = rest
        .strip_prefix("_LEAST")
        .or_else(|| rest.strip_prefix("_FAST"))
        .unwrap_or(rest);
    !digits.is_empty() && digits.bytes().all(|b| b.is_ascii_digit())
}

/// Checks that `symbol` can prefix the names in a generated C file: ASCII
/// letters, digits and underscores, starting with a letter (names starting
/// with an underscore are reserved in C), and no clash with `<stdint.h>`.
fn check_symbol(symbol: &str) -> Result<()> {
    let why = if symbol.is_empty() {
        Some("it is empty")
    } else if !symbol
        .bytes()
        .all(|b| b.is_ascii_alphanumeric() || b == b'_')
    {
        Some("only ASCII letters, digits and underscores are allowed")
    } else if !symbol.as_bytes()[0].is_ascii_alphabetic() {
        Some("it must start with a letter")
    } else if clashes_with_stdint(symbol) {
        Some("its macros would clash with those of <stdint.h>")
    } else {
        None
    };
    match why {
        Some(why) => Err(invalid(
            C_SOURCE,
            format!("\"{symbol}\" cannot name a C array: {why}"),
        )),
        None => Ok(()),
    }
}

/// A C identifier derived from a file name, for [`CImage::symbol`]: the
/// name without its folder and last extension, lower-cased, every run of
/// characters other than ASCII letters and digits turned into one
/// underscore, underscores trimmed from both ends. A name that would start
/// with a digit gets `image_` in front, an empty one becomes `image`, and
/// one whose macros would clash with `<stdint.h>` gets `_image` appended.
///
/// ```
/// use vqforge::export::c_identifier;
///
/// assert_eq!(c_identifier("icons/Logo 64x64.png"), "logo_64x64");
/// assert_eq!(c_identifier("8-ball.png"), "image_8_ball");
/// assert_eq!(c_identifier("größe.png"), "gr_e");
/// assert_eq!(c_identifier("size.png"), "size_image");
/// ```
pub fn c_identifier(name: &str) -> String {
    let path = Path::new(name);
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    let mut id = String::with_capacity(stem.len());
    for c in stem.chars() {
        if c.is_ascii_alphanumeric() {
            id.push(c.to_ascii_lowercase());
        } else if !id.ends_with('_') {
            id.push('_');
        }
    }
    let mut id = id.trim_matches('_').to_string();
    if id.is_empty() {
        id = "image".into();
    } else if id.as_bytes()[0].is_ascii_digit() {
        id.insert_str(0, "image_");
    }
    if clashes_with_stdint(&id) {
        id.push_str("_image");
    }
    id
}

/// Appends `values` as a C initialiser body: `digits` hex digits each,
/// [`VALUES_PER_LINE`] to a line, every value followed by a comma.
fn hex_lines(out: &mut String, values: impl Iterator<Item = u32>, digits: usize) {
    let mut on_line = 0;
    for v in values {
        out.push_str(if on_line == 0 { "    " } else { " " });
        let _ = write!(out, "0x{v:0digits$X},");
        on_line += 1;
        if on_line == VALUES_PER_LINE {
            out.push('\n');
            on_line = 0;
        }
    }
    if on_line != 0 {
        out.push('\n');
    }
}

/// Keeps comment text from ending the comment early.
fn comment_safe(line: &str) -> String {
    line.replace("*/", "* /")
}

/// A header-style C file holding an indexed image: an include guard,
/// `#include <stdint.h>`, the macros `SYMBOL_WIDTH`, `SYMBOL_HEIGHT`,
/// `SYMBOL_BITS_PER_PIXEL`, `SYMBOL_PALETTE_SIZE` and `SYMBOL_ROW_BYTES`
/// (unsigned constants), a `static const` palette array whose element type
/// fits [`CImage::palette_entry_bits`] and a `static const uint8_t` pixel
/// array, 12 hex values per line. The top comment states the size, the bit
/// order and the row padding, then the caller's lines.
///
/// # Errors
///
/// At stage "writing C source", [`ErrorKind::InvalidParameter`] when the
/// symbol is not a usable C identifier, the width or height is 0,
/// `bits_per_pixel` is not 1, 2, 4 or 8, `palette_entry_bits` is not
/// 1..=32, the palette is empty, has more than 2^`bits_per_pixel` entries
/// or an entry wider than `palette_entry_bits`; [`ErrorKind::Shape`] when
/// `pixels` is not `height × ⌈width × bits / 8⌉` bytes.
///
/// # Example
///
/// ```
/// use vqforge::export::{c_source, pack_rows, CImage};
///
/// let pixels = pack_rows(&[0, 1, 1, 0], 2, 2, 1)?;
/// let image = CImage {
///     symbol: "checker",
///     width: 2,
///     height: 2,
///     bits_per_pixel: 1,
///     palette: &[0x0000, 0xFFFF],
///     palette_entry_bits: 16,
///     pixels: &pixels,
///     comment_lines: &["palette: RGB565".to_string()],
/// };
/// let c = c_source(&image)?;
/// assert!(c.contains("#define CHECKER_WIDTH 2u\n"));
/// assert!(c.contains(
///     "static const uint16_t checker_palette[CHECKER_PALETTE_SIZE] = {\n    0x0000, 0xFFFF,\n};"
/// ));
/// assert!(c.contains("    0x40, 0x80,\n"));
///
/// let bad = CImage { symbol: "2fast", ..image };
/// assert!(c_source(&bad).is_err());
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn c_source(image: &CImage<'_>) -> Result<String> {
    let CImage {
        symbol,
        width,
        height,
        bits_per_pixel: bits,
        palette,
        palette_entry_bits: entry_bits,
        pixels,
        comment_lines,
    } = *image;
    check_symbol(symbol)?;
    check_bits_per_pixel(C_SOURCE, bits)?;
    if width == 0 || height == 0 {
        return Err(invalid(
            C_SOURCE,
            format!("the image is {width} × {height} pixels; it needs at least one"),
        ));
    }
    if !(1..=32).contains(&entry_bits) {
        return Err(invalid(
            C_SOURCE,
            format!("palette entries must be 1 to 32 bits wide, got {entry_bits}"),
        ));
    }
    let max_entries = 1usize << bits;
    if palette.is_empty() || palette.len() > max_entries {
        return Err(invalid(
            C_SOURCE,
            format!(
                "a palette of {} entries does not suit {bits} bits per pixel (1 to {max_entries})",
                palette.len()
            ),
        ));
    }
    let entry_max = u32::MAX >> (32 - entry_bits);
    if let Some(at) = palette.iter().position(|&p| p > entry_max) {
        return Err(invalid(
            C_SOURCE,
            format!(
                "palette entry {at} is 0x{:X}, wider than {entry_bits} bits",
                palette[at]
            ),
        ));
    }
    let row_bytes = packed_row_bytes(width, bits);
    let expected = row_bytes * u64::from(height);
    if pixels.len() as u64 != expected {
        return Err(Error::new(
            C_SOURCE,
            ErrorKind::Shape(format!(
                "{} bytes of pixels for {width} × {height} pixels at {bits} bits per pixel, \
                 which take {expected} ({row_bytes} per row)",
                pixels.len()
            )),
        ));
    }

    let (c_type, digits) = match entry_bits {
        1..=8 => ("uint8_t", 2),
        9..=16 => ("uint16_t", 4),
        _ => ("uint32_t", 8),
    };
    let upper = symbol.to_ascii_uppercase();
    let mut out = String::with_capacity(pixels.len() * 6 + palette.len() * 12 + 1024);
    out.push_str("/*\n");
    let _ = writeln!(
        out,
        " * {symbol}: {width} x {height} pixels, {bits} bits per pixel, {} palette entries.",
        palette.len()
    );
    let lines = comment_lines
        .iter()
        .flat_map(|l| l.split('\n'))
        .map(|l| l.trim_end_matches('\r'));
    for line in lines {
        let line = comment_safe(line);
        if line.is_empty() {
            out.push_str(" *\n");
        } else {
            let _ = writeln!(out, " * {line}");
        }
    }
    let _ = write!(
        out,
        " *\n * {symbol}_palette: {entry_bits}-bit entries, indexed by pixel value.\n\
         \x20* {symbol}_pixels: rows top to bottom, {upper}_ROW_BYTES bytes per row.\n\
         \x20* Each row starts on a byte boundary; the unused low bits of its last\n\
         \x20* byte are zero. Within a byte the leftmost pixel is in the most\n\
         \x20* significant bits (the order of PNG's packed rows).\n */\n"
    );
    let _ = write!(
        out,
        "#ifndef {upper}_H\n#define {upper}_H\n\n#include <stdint.h>\n\n\
         #define {upper}_WIDTH {width}u\n\
         #define {upper}_HEIGHT {height}u\n\
         #define {upper}_BITS_PER_PIXEL {bits}u\n\
         #define {upper}_PALETTE_SIZE {}u\n\
         #define {upper}_ROW_BYTES {row_bytes}u\n\n",
        palette.len()
    );
    let _ = writeln!(
        out,
        "static const {c_type} {symbol}_palette[{upper}_PALETTE_SIZE] = {{"
    );
    hex_lines(&mut out, palette.iter().copied(), digits);
    out.push_str("};\n\n");
    let _ = writeln!(
        out,
        "static const uint8_t {symbol}_pixels[{upper}_HEIGHT * {upper}_ROW_BYTES] = {{"
    );
    hex_lines(&mut out, pixels.iter().map(|&b| u32::from(b)), 2);
    let _ = write!(out, "}};\n\n#endif /* {upper}_H */\n");
    Ok(out)
}

#[cfg(test)]
#[path = "firmware_tests.rs"]
mod tests;
