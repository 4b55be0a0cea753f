//! Loading images: decodes PNG, JPEG, BMP, TIFF and WebP bytes into one
//! plain form, [`RgbaImage`] (8 bits per channel, straight alpha), after
//! checking the size against [`ImageLimits`].
//!
//! It never opens files (the caller hands over the bytes and a name for
//! messages), never changes colours beyond the bit-depth conversion that
//! [`read_image`] documents, and never prints.

use std::io::Cursor;

use ::image::error::ImageError;
use ::image::{DynamicImage, ImageDecoder, ImageFormat, ImageReader};

use rayon::prelude::*;

use super::colours::CHUNK_PIXELS;
use crate::error::{Error, ErrorKind, Position, Result};

const STAGE: &str = "reading image";

/// The formats accepted, for messages.
const ACCEPTED: &str = "a PNG, JPEG, BMP, TIFF or WebP image";

/// Bytes the decoder may allocate per pixel: the widest pixel the `image`
/// crate decodes to is four 32-bit floats.
const DECODE_BYTES_PER_PIXEL: u64 = 16;

/// Extra decoder allocation allowed beyond the pixels (tables, row buffers).
const DECODE_HEADROOM: u64 = 64 << 20;

/// Limits that protect memory while reading images.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ImageLimits {
    /// The most pixels (width × height) an image may have; checked from the
    /// header before any pixel data is decoded. Default 100 000 000.
    pub max_pixels: u64,
}

impl ImageLimits {
    /// The default for [`ImageLimits::max_pixels`]: 100 million pixels
    /// (400 MB as RGBA).
    pub const DEFAULT_MAX_PIXELS: u64 = crate::limits::Limits::DEFAULT_MAX_PIXELS;
}

impl Default for ImageLimits {
    fn default() -> Self {
        ImageLimits {
            max_pixels: Self::DEFAULT_MAX_PIXELS,
        }
    }
}

/// A decoded image: 8 bits per channel, straight (not premultiplied) alpha,
/// rows top to bottom, pixels left to right.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RgbaImage {
    /// Width in pixels (at least 1).
    pub width: u32,
    /// Height in pixels (at least 1).
    pub height: u32,
    /// `width × height` pixels as `[r, g, b, a]`, row by row.
    pub pixels: Vec<[u8; 4]>,
}

fn error(kind: ErrorKind, source_name: &str) -> Error {
    Error::new(STAGE, kind).at(Position::file(source_name))
}

fn format_error(message: String, source_name: &str) -> Error {
    error(ErrorKind::Format(message), source_name)
}

/// Turns an error of the `image` crate into ours, naming the file.
fn decode_error(e: ImageError, source_name: &str) -> Error {
    match e {
        ImageError::Limits(e) => error(
            ErrorKind::Limit(format!(
                "the decoder needs more memory than allowed ({e}); raise the limit with --max-pixels"
            )),
            source_name,
        ),
        ImageError::Unsupported(e) => {
            format_error(format!("this image uses a feature that is not supported: {e}"), source_name)
        }
        ImageError::IoError(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
            format_error("the image is truncated or corrupted: it ends too early".into(), source_name)
        }
        other => format_error(
            format!("the image is truncated or corrupted: {other}"),
            source_name,
        ),
    }
}

/// The width and height in a PNG file's IHDR chunk, which must come right
/// after the 8-byte signature (PNG specification, second edition, sections
/// 5.2, 5.6 and 11.2.2): 4 bytes of length, "IHDR", then width and height
/// as big-endian `u32`. `None` when the bytes are not laid out so; the
/// decoder checks everything else, CRC included.
fn png_header_size(bytes: &[u8]) -> Option<(u32, u32)> {
    const SIGNATURE: &[u8] = b"\x89PNG\r\n\x1a\n";
    if bytes.len() < 24 || !bytes.starts_with(SIGNATURE) || &bytes[12..16] != b"IHDR" {
        return None;
    }
    let word =
        |at: usize| u32::from_be_bytes([bytes[at], bytes[at + 1], bytes[at + 2], bytes[at + 3]]);
    Some((word(16), word(20)))
}

/// True for the magic bytes of a GIF file ("GIF87a" or "GIF89a").
fn is_gif(bytes: &[u8]) -> bool {
    bytes.starts_with(b"GIF87a") || bytes.starts_with(b"GIF89a")
}

/// Decodes an image held in memory.
///
/// The format is guessed from the content, not from `source_name`, which
/// only names the input in messages. GIF input is refused (it is detected
/// by its magic bytes): convert it to PNG first.
///
/// # What the pixels are
///
/// * 16-bit (and floating-point) samples become 8-bit through the `image`
///   crate's own conversion, which for 16-bit samples is
///   `round(v × 255 / 65535)` (checked for all 65 536 values in the tests).
/// * Greyscale becomes R = G = B; images without alpha get A = 255.
/// * Orientation is as stored: an EXIF orientation tag is not applied.
/// * No colour management: embedded ICC profiles and gamma chunks are
///   ignored, samples are taken as they are in the file.
/// * Only the first frame of an animated file is read.
///
/// # Errors
///
/// All at stage "reading image", with `source_name` as the file:
/// * [`ErrorKind::Format`] for GIF input, bytes that are not
///   a PNG, JPEG, BMP, TIFF or WebP image, and truncated or corrupted files
///   (also when the header is fine but the pixel data is not);
/// * [`ErrorKind::Shape`] for an image of 0 pixels;
/// * [`ErrorKind::Limit`] for an image with more pixels than
///   `limits.max_pixels` (the message names `--max-pixels`) or than a
///   32-bit address space holds. The size is read from the header, so this
///   is refused before pixel memory is allocated.
///
/// # Example
///
/// ```
/// use vqforge::load::{colour_histogram, read_image, ImageLimits};
///
/// // A 2 × 1 greyscale PNG made with the `png` crate.
/// let mut bytes = Vec::new();
/// let mut encoder = png::Encoder::new(&mut bytes, 2, 1);
/// encoder.set_color(png::ColorType::Grayscale);
/// let mut writer = encoder.write_header().unwrap();
/// writer.write_image_data(&[10, 200]).unwrap();
/// writer.finish().unwrap();
///
/// let image = read_image(&bytes, "tiny.png", &ImageLimits::default())?;
/// assert_eq!((image.width, image.height), (2, 1));
/// assert_eq!(image.pixels, [[10, 10, 10, 255], [200, 200, 200, 255]]);
/// assert_eq!(colour_histogram(&image).len(), 2);
///
/// let err = read_image(b"GIF89a...", "anim.gif", &ImageLimits::default()).unwrap_err();
/// assert_eq!(
///     err.to_string(),
///     "reading image: anim.gif: GIF input is not supported; convert it to PNG first"
/// );
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn read_image(bytes: &[u8], source_name: &str, limits: &ImageLimits) -> Result<RgbaImage> {
    if is_gif(bytes) {
        return Err(format_error(
            "GIF input is not supported; convert it to PNG first".into(),
            source_name,
        ));
    }
    let reader = |bytes| {
        ImageReader::new(Cursor::new(bytes))
            .with_guessed_format()
            .map_err(|e| error(ErrorKind::Io(e), source_name))
    };
    let probe = reader(bytes)?;
    match probe.format() {
        Some(ImageFormat::Png | ImageFormat::Jpeg | ImageFormat::Bmp)
        | Some(ImageFormat::Tiff | ImageFormat::WebP) => {}
        Some(other) => {
            return Err(format_error(
                format!("not {ACCEPTED} (it looks like {other:?}, which is not supported)"),
                source_name,
            ))
        }
        None => return Err(format_error(format!("not {ACCEPTED}"), source_name)),
    }

    // PNG's decoder reads every chunk up to the pixel data before it tells
    // the size, and refuses 0 × 0 as corrupt; the IHDR says it first.
    let (width, height) = match png_header_size(bytes) {
        Some(size) => size,
        None => probe
            .into_dimensions()
            .map_err(|e| decode_error(e, source_name))?,
    };
    let pixels = u64::from(width) * u64::from(height);
    if pixels == 0 {
        return Err(error(
            ErrorKind::Shape(format!(
                "the image is {width} × {height} pixels; it has no pixels to work on"
            )),
            source_name,
        ));
    }
    if pixels > limits.max_pixels {
        return Err(error(
            ErrorKind::Limit(format!(
                "the image is {width} × {height} = {pixels} pixels, more than the limit of {}; \
                 raise it with --max-pixels",
                limits.max_pixels
            )),
            source_name,
        ));
    }
    let decode_bytes = pixels
        .saturating_mul(DECODE_BYTES_PER_PIXEL)
        .saturating_add(DECODE_HEADROOM);
    if usize::try_from(decode_bytes).is_err() {
        return Err(error(
            ErrorKind::Limit(format!(
                "the image is {width} × {height} pixels, more than this computer can address"
            )),
            source_name,
        ));
    }

    let mut reader = reader(bytes)?;
    let mut image_limits = ::image::Limits::default();
    image_limits.max_image_width = Some(width);
    image_limits.max_image_height = Some(height);
    image_limits.max_alloc = Some(decode_bytes);
    reader.limits(image_limits);
    let decoder = reader
        .into_decoder()
        .map_err(|e| decode_error(e, source_name))?;
    // For 8-bit RGB (most photos), the pixel list's fresh pages are faulted
    // in on another thread while this one decodes: the kernel's work for
    // them is a good part of a large image's load time.
    let rgb8 = decoder.color_type() == ::image::ColorType::Rgb8;
    let pixel_count = usize::try_from(pixels).unwrap_or(usize::MAX);
    let mut list = None;
    let decoded = rayon::in_place_scope(|s| {
        if rgb8 {
            s.spawn(|_| list = Some(opaque_list(pixel_count)));
        }
        DynamicImage::from_decoder(decoder).map_err(|e| decode_error(e, source_name))
    })?;
    if (decoded.width(), decoded.height()) != (width, height) {
        return Err(format_error(
            format!(
                "the image is truncated or corrupted: its header says {width} × {height} pixels \
                 but {} × {} were decoded",
                decoded.width(),
                decoded.height()
            ),
            source_name,
        ));
    }
    Ok(RgbaImage {
        width,
        height,
        pixels: rgba_pixels(decoded, list).map_err(|e| e.in_file(source_name))?,
    })
}

/// `len` opaque black pixels, every page written.
fn opaque_list(len: usize) -> Result<Vec<[u8; 4]>> {
    let mut list = crate::limits::vec_with_capacity(len, STAGE, "the image")?;
    list.resize(len, [0, 0, 0, 255]);
    Ok(list)
}

/// The decoded image as 8-bit RGBA pixels. 8-bit RGB and RGBA (nearly every
/// photo) go straight into the pixel list on all threads; other layouts go
/// through `into_rgba8` (16-bit → 8-bit by rounding, grey → R = G = B).
fn rgba_pixels(decoded: DynamicImage, list: Option<Result<Vec<[u8; 4]>>>) -> Result<Vec<[u8; 4]>> {
    let raw = match decoded {
        DynamicImage::ImageRgb8(rgb) => {
            let mut out = list.unwrap_or_else(|| opaque_list(rgb.as_raw().len() / 3))?;
            out.par_chunks_mut(CHUNK_PIXELS)
                .zip(rgb.as_raw().par_chunks(3 * CHUNK_PIXELS))
                .for_each(|(out, raw)| {
                    for (o, p) in out.iter_mut().zip(raw.chunks_exact(3)) {
                        *o = [p[0], p[1], p[2], 255];
                    }
                });
            return Ok(out);
        }
        DynamicImage::ImageRgba8(rgba) => rgba.into_raw(),
        other => other.into_rgba8().into_raw(),
    };
    // Same bytes, four to a pixel: kept in place when the allocation allows.
    Ok(
        bytemuck::allocation::try_cast_vec(raw).unwrap_or_else(|(_, raw)| {
            raw.par_chunks_exact(4)
                .map(|p| [p[0], p[1], p[2], p[3]])
                .collect()
        }),
    )
}

#[cfg(test)]
#[path = "image_tests.rs"]
mod tests;
