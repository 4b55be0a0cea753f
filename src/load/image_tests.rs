//! Tests of image reading. Every input is made here, with the `png` crate
//! or the `image` crate's encoders, or by hand from the PNG specification
//! (second edition, W3C 2003); no image files are stored.

use std::io::Cursor;

use ::image::{DynamicImage, ImageBuffer, ImageFormat};

use super::*;
use crate::rng::SeededRng;

fn read(bytes: &[u8]) -> Result<RgbaImage> {
    read_image(bytes, "in.img", &ImageLimits::default())
}

/// A PNG made by the `png` crate.
fn png_bytes(
    width: u32,
    height: u32,
    colour: ::png::ColorType,
    depth: ::png::BitDepth,
    data: &[u8],
) -> Vec<u8> {
    let mut out = Vec::new();
    let mut encoder = ::png::Encoder::new(&mut out, width, height);
    encoder.set_color(colour);
    encoder.set_depth(depth);
    let mut writer = encoder.write_header().unwrap();
    writer.write_image_data(data).unwrap();
    writer.finish().unwrap();
    out
}

/// A chunk: length, type, data, CRC-32 over type and data (PNG
/// specification, section 5.3).
fn chunk(kind: &[u8; 4], data: &[u8]) -> Vec<u8> {
    let mut out = (data.len() as u32).to_be_bytes().to_vec();
    out.extend_from_slice(kind);
    out.extend_from_slice(data);
    let mut crc = crc32fast::Hasher::new();
    crc.update(kind);
    crc.update(data);
    out.extend_from_slice(&crc.finalize().to_be_bytes());
    out
}

/// A PNG of signature, IHDR (8-bit RGB) and IEND only: a header claiming
/// `width × height` pixels with no pixel data behind it (PNG specification,
/// sections 5.2 and 11.2.2).
fn header_only_png(width: u32, height: u32) -> Vec<u8> {
    let mut ihdr = Vec::new();
    ihdr.extend_from_slice(&width.to_be_bytes());
    ihdr.extend_from_slice(&height.to_be_bytes());
    ihdr.extend_from_slice(&[8, 2, 0, 0, 0]);
    let mut out = b"\x89PNG\r\n\x1a\n".to_vec();
    out.extend(chunk(b"IHDR", &ihdr));
    out.extend(chunk(b"IEND", &[]));
    out
}

fn random_bytes(seed: u64, n: usize) -> Vec<u8> {
    let mut rng = SeededRng::new(seed);
    (0..n).map(|_| rng.next_u64() as u8).collect()
}

fn encode_with_image_crate(image: &DynamicImage, format: ImageFormat) -> Vec<u8> {
    let mut out = Cursor::new(Vec::new());
    image.write_to(&mut out, format).unwrap();
    out.into_inner()
}

fn message(bytes: &[u8], name: &str) -> String {
    read_image(bytes, name, &ImageLimits::default())
        .unwrap_err()
        .to_string()
}

#[test]
fn reads_8_bit_rgb_and_rgba_png() {
    let rgb = png_bytes(
        2,
        2,
        ::png::ColorType::Rgb,
        ::png::BitDepth::Eight,
        &[1, 2, 3, 4, 5, 6, 7, 8, 9, 250, 251, 252],
    );
    let image = read(&rgb).unwrap();
    assert_eq!((image.width, image.height), (2, 2));
    assert_eq!(
        image.pixels,
        [
            [1, 2, 3, 255],
            [4, 5, 6, 255],
            [7, 8, 9, 255],
            [250, 251, 252, 255]
        ]
    );

    // Straight alpha: a fully transparent pixel keeps its colour.
    let rgba = png_bytes(
        2,
        1,
        ::png::ColorType::Rgba,
        ::png::BitDepth::Eight,
        &[200, 100, 50, 0, 10, 20, 30, 128],
    );
    let image = read(&rgba).unwrap();
    assert_eq!(image.pixels, [[200, 100, 50, 0], [10, 20, 30, 128]]);
}

#[test]
fn grey_becomes_equal_channels() {
    let grey = png_bytes(
        3,
        1,
        ::png::ColorType::Grayscale,
        ::png::BitDepth::Eight,
        &[0, 77, 255],
    );
    assert_eq!(
        read(&grey).unwrap().pixels,
        [[0, 0, 0, 255], [77, 77, 77, 255], [255, 255, 255, 255]]
    );
    let grey_alpha = png_bytes(
        2,
        1,
        ::png::ColorType::GrayscaleAlpha,
        ::png::BitDepth::Eight,
        &[9, 0, 99, 200],
    );
    assert_eq!(
        read(&grey_alpha).unwrap().pixels,
        [[9, 9, 9, 0], [99, 99, 99, 200]]
    );
}

#[test]
fn sixteen_bit_samples_round_to_eight_bits() {
    // Every 16-bit value once: 256 × 256 grey pixels, big-endian samples
    // (PNG specification, section 7.1).
    let data: Vec<u8> = (0..=u16::MAX).flat_map(u16::to_be_bytes).collect();
    let png = png_bytes(
        256,
        256,
        ::png::ColorType::Grayscale,
        ::png::BitDepth::Sixteen,
        &data,
    );
    let image = read(&png).unwrap();
    for (v, p) in (0..=u16::MAX).zip(&image.pixels) {
        let expected = (f64::from(v) * 255.0 / 65535.0).round() as u8;
        assert_eq!(*p, [expected, expected, expected, 255], "sample {v}");
    }

    let rgba16: Vec<u8> = [
        0x0000u16, 0x8000, 0xFFFF, 0x0080, 0x7F7F, 0x8080, 0x1234, 0xFF7F,
    ]
    .iter()
    .flat_map(|v| v.to_be_bytes())
    .collect();
    let png = png_bytes(
        2,
        1,
        ::png::ColorType::Rgba,
        ::png::BitDepth::Sixteen,
        &rgba16,
    );
    // 0x8000 = 32768 → 127.5019… → 128; 0x0080 = 128 → 0.498… → 0;
    // 0x7F7F = 32639 → 127.0; 0x8080 = 32896 → 128.0; 0x1234 = 4660 →
    // 18.13… → 18; 0xFF7F = 65407 → 254.50… → 255.
    assert_eq!(
        read(&png).unwrap().pixels,
        [[0, 128, 255, 0], [127, 128, 18, 255]]
    );
}

#[test]
fn palette_png_is_expanded_with_its_transparency() {
    let mut out = Vec::new();
    let mut encoder = ::png::Encoder::new(&mut out, 3, 1);
    encoder.set_color(::png::ColorType::Indexed);
    encoder.set_depth(::png::BitDepth::Two);
    encoder.set_palette(vec![10, 20, 30, 40, 50, 60, 70, 80, 90]);
    encoder.set_trns(vec![0]);
    let mut writer = encoder.write_header().unwrap();
    writer.write_image_data(&[0b10_01_00_00]).unwrap();
    writer.finish().unwrap();
    assert_eq!(
        read(&out).unwrap().pixels,
        [[70, 80, 90, 255], [40, 50, 60, 255], [10, 20, 30, 0]]
    );
}

#[test]
fn exif_orientation_is_not_applied() {
    // A minimal big-endian EXIF block with Orientation (tag 0x0112) = 6,
    // "rotate 90° clockwise to display" (EXIF 2.32, section 4.6.4 A).
    let exif: &[u8] = &[
        b'M', b'M', 0, 42, 0, 0, 0, 8, // TIFF header, first IFD at 8
        0, 1, // one entry
        0x01, 0x12, 0, 3, 0, 0, 0, 1, 0, 6, 0, 0, // SHORT 6
        0, 0, 0, 0, // no next IFD
    ];
    let mut out = Vec::new();
    let mut encoder = ::png::Encoder::new(&mut out, 2, 1);
    encoder.set_color(::png::ColorType::Rgb);
    let mut writer = encoder.write_header().unwrap();
    writer
        .write_chunk(::png::chunk::ChunkType(*b"eXIf"), exif)
        .unwrap();
    writer.write_image_data(&[255, 0, 0, 0, 0, 255]).unwrap();
    writer.finish().unwrap();
    let image = read(&out).unwrap();
    assert_eq!((image.width, image.height), (2, 1));
    assert_eq!(image.pixels, [[255, 0, 0, 255], [0, 0, 255, 255]]);
}

/// A 5 × 3 image of distinct colours.
fn test_rgba8() -> ::image::RgbaImage {
    ImageBuffer::from_fn(5, 3, |x, y| {
        ::image::Rgba([
            (x * 50) as u8,
            (y * 100) as u8,
            (x * 7 + y * 13) as u8,
            (255 - x * 40) as u8,
        ])
    })
}

#[test]
fn lossless_formats_round_trip_exactly() {
    let rgba = test_rgba8();
    let rgb = DynamicImage::ImageRgba8(rgba.clone()).to_rgb8();
    let want_rgba: Vec<[u8; 4]> = rgba.pixels().map(|p| p.0).collect();
    let want_rgb: Vec<[u8; 4]> = rgb.pixels().map(|p| [p[0], p[1], p[2], 255]).collect();
    let cases = [
        (
            ImageFormat::Bmp,
            DynamicImage::ImageRgb8(rgb.clone()),
            &want_rgb,
        ),
        (
            ImageFormat::Bmp,
            DynamicImage::ImageRgba8(rgba.clone()),
            &want_rgba,
        ),
        (
            ImageFormat::Tiff,
            DynamicImage::ImageRgb8(rgb.clone()),
            &want_rgb,
        ),
        (
            ImageFormat::Tiff,
            DynamicImage::ImageRgba8(rgba.clone()),
            &want_rgba,
        ),
        (
            ImageFormat::WebP,
            DynamicImage::ImageRgb8(rgb.clone()),
            &want_rgb,
        ),
        (
            ImageFormat::WebP,
            DynamicImage::ImageRgba8(rgba.clone()),
            &want_rgba,
        ),
    ];
    for (format, image, want) in cases {
        let bytes = encode_with_image_crate(&image, format);
        let back = read(&bytes).unwrap_or_else(|e| panic!("{format:?}: {e}"));
        assert_eq!((back.width, back.height), (5, 3), "{format:?}");
        assert_eq!(&back.pixels, want, "{format:?} {:?}", image.color());
    }
}

#[test]
fn sixteen_bit_tiff_uses_the_same_rounding() {
    let values = [0u16, 128, 129, 32768, 65407, 65535];
    let image: ImageBuffer<::image::Rgb<u16>, Vec<u16>> = ImageBuffer::from_fn(2, 1, |x, _| {
        let i = x as usize * 3;
        ::image::Rgb([values[i], values[i + 1], values[i + 2]])
    });
    let bytes = encode_with_image_crate(&DynamicImage::ImageRgb16(image), ImageFormat::Tiff);
    // round(v × 255 / 65535): 0, 0.498 → 0, 0.502 → 1, 127.50 → 128, 254.50 → 255, 255
    assert_eq!(
        read(&bytes).unwrap().pixels,
        [[0, 0, 1, 255], [128, 255, 255, 255]]
    );
}

#[test]
fn jpeg_round_trip_is_close() {
    // JPEG is lossy: a flat colour at quality 100 comes back within a few
    // levels (common practice: the YCbCr round trip alone costs ±1–2).
    let flat = ImageBuffer::from_pixel(16, 16, ::image::Rgb([90u8, 160, 220]));
    let mut bytes = Vec::new();
    ::image::codecs::jpeg::JpegEncoder::new_with_quality(&mut bytes, 100)
        .encode_image(&flat)
        .unwrap();
    let back = read(&bytes).unwrap();
    assert_eq!((back.width, back.height), (16, 16));
    for p in &back.pixels {
        for (got, want) in p.iter().zip([90, 160, 220, 255]) {
            assert!(got.abs_diff(want) <= 3, "{p:?}");
        }
    }

    let grey = ImageBuffer::from_fn(8, 8, |x, y| ::image::Luma([(x * 30 + y) as u8]));
    let bytes = encode_with_image_crate(&DynamicImage::ImageLuma8(grey), ImageFormat::Jpeg);
    let back = read(&bytes).unwrap();
    assert!(back
        .pixels
        .iter()
        .all(|p| p[0] == p[1] && p[1] == p[2] && p[3] == 255));
}

#[test]
fn truncated_and_corrupted_files_are_refused() {
    let noise = random_bytes(1, 64 * 64 * 3);
    let png = png_bytes(
        64,
        64,
        ::png::ColorType::Rgb,
        ::png::BitDepth::Eight,
        &noise,
    );
    assert!(read(&png).is_ok());

    for cut in [png.len() / 2, png.len() - 13, 30, 12] {
        let e = read_image(&png[..cut], "cut.png", &ImageLimits::default()).unwrap_err();
        assert!(
            matches!(e.kind(), ErrorKind::Format(_)),
            "cut at {cut}: {e}"
        );
        let text = e.to_string();
        assert!(text.starts_with("reading image: cut.png: "), "{text}");
        assert!(
            text.contains("truncated or corrupted"),
            "cut at {cut}: {text}"
        );
    }

    // One flipped bit inside the IDAT data breaks its CRC.
    let mut bad = png.clone();
    let at = bad.len() / 2;
    bad[at] ^= 0x10;
    let text = message(&bad, "flip.png");
    assert!(text.contains("truncated or corrupted"), "{text}");
}

#[test]
fn other_bytes_are_not_an_image() {
    for bytes in [
        random_bytes(2, 1000),
        Vec::new(),
        b"time,temp\n0,1\n".to_vec(),
    ] {
        assert_eq!(
            message(&bytes, "noise.bin"),
            "reading image: noise.bin: not a PNG, JPEG, BMP, TIFF or WebP image"
        );
    }
    assert_eq!(
        message(b"qoif\0\0\0\x01\0\0\0\x01\x04\0", "x.qoi"),
        "reading image: x.qoi: not a PNG, JPEG, BMP, TIFF or WebP image \
         (it looks like Qoi, which is not supported)"
    );
}

#[test]
fn gif_is_refused_by_its_magic() {
    // GIF signatures "GIF87a" and "GIF89a" (GIF 89a specification, section 17).
    for magic in [&b"GIF87a"[..], b"GIF89a"] {
        let mut bytes = magic.to_vec();
        bytes.extend_from_slice(&[1, 0, 1, 0, 0, 0, 0, b';']);
        let e = read_image(&bytes, "anim.gif", &ImageLimits::default()).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Format(_)));
        assert_eq!(
            e.to_string(),
            "reading image: anim.gif: GIF input is not supported; convert it to PNG first"
        );
    }
}

#[test]
fn empty_image_is_refused() {
    let e = read_image(&header_only_png(0, 0), "empty.png", &ImageLimits::default()).unwrap_err();
    let text = e.to_string();
    assert!(text.starts_with("reading image: empty.png: "), "{text}");
    assert!(text.contains("0 × 0"), "{text}");
}

#[test]
fn oversized_header_is_refused_before_decoding() {
    // The file holds no pixel data at all: had the decoder run, the error
    // would be about missing data, so this one comes from the header alone.
    let e = read_image(
        &header_only_png(100_000, 100_000),
        "huge.png",
        &ImageLimits::default(),
    )
    .unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Limit(_)), "{e}");
    assert_eq!(
        e.to_string(),
        "reading image: huge.png: the image is 100000 × 100000 = 10000000000 pixels, \
         more than the limit of 100000000; raise it with --max-pixels"
    );

    // The limit is inclusive.
    let small = header_only_png(10, 10);
    let at = read_image(&small, "s.png", &ImageLimits { max_pixels: 100 }).unwrap_err();
    assert!(matches!(at.kind(), ErrorKind::Format(_)), "{at}");
    let over = read_image(&small, "s.png", &ImageLimits { max_pixels: 99 }).unwrap_err();
    assert!(matches!(over.kind(), ErrorKind::Limit(_)), "{over}");
}
