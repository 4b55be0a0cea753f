//! Tests of row packing and C source. The packing oracle follows PNG's
//! scanline layout (PNG specification, second edition, section 7.2); the
//! C source is checked by compiling it with gcc when gcc is installed.

use std::process::Command;

use super::*;
use crate::rng::SeededRng;

/// Slow, obviously right packing: each row as a string of bits, most
/// significant first, padded with '0' to whole bytes.
fn oracle(indices: &[u32], width: usize, bits: usize) -> Vec<u8> {
    let mut out = Vec::new();
    for row in indices.chunks(width) {
        let mut text = String::new();
        for &i in row {
            text.push_str(&format!("{i:0bits$b}"));
        }
        while text.len() % 8 != 0 {
            text.push('0');
        }
        for byte in text.as_bytes().chunks(8) {
            out.push(u8::from_str_radix(std::str::from_utf8(byte).unwrap(), 2).unwrap());
        }
    }
    out
}

fn random_indices(rng: &mut SeededRng, n: usize, below: u32) -> Vec<u32> {
    (0..n).map(|_| rng.below(u64::from(below)) as u32).collect()
}

#[test]
fn packing_matches_the_oracle() {
    let mut rng = SeededRng::new(11);
    for bits in [1u8, 2, 4, 8] {
        for width in 1..=17u32 {
            for height in 1..=3u32 {
                let n = (width * height) as usize;
                let indices = random_indices(&mut rng, n, 1 << bits);
                let packed = pack_rows(&indices, width, height, bits).unwrap();
                assert_eq!(
                    packed,
                    oracle(&indices, width as usize, usize::from(bits)),
                    "{width} × {height} at {bits} bits"
                );
                assert_eq!(
                    packed.len() as u64,
                    packed_row_bytes(width, bits) * u64::from(height)
                );
            }
        }
    }
}

#[test]
fn rows_start_on_byte_boundaries() {
    // 9 pixels at 1 bit: 2 bytes per row, the second holding one pixel in
    // its top bit and seven zero padding bits.
    let row = [1, 0, 1, 1, 0, 0, 0, 1, 1];
    let indices: Vec<u32> = row.iter().chain(&row).copied().collect();
    let packed = pack_rows(&indices, 9, 2, 1).unwrap();
    assert_eq!(packed, [0b1011_0001, 0b1000_0000, 0b1011_0001, 0b1000_0000]);
    assert_eq!(pack_rows(&[0xA, 0x5, 0xF], 3, 1, 4).unwrap(), [0xA5, 0xF0]);
    assert_eq!(pack_rows(&[200, 7], 1, 2, 8).unwrap(), [200, 7]);
}

#[test]
fn packing_errors() {
    let e = pack_rows(&[0; 4], 2, 2, 3).unwrap_err();
    assert_eq!(
        e.to_string(),
        "packing pixels: pixels must be 1, 2, 4 or 8 bits wide, got 3"
    );
    let e = pack_rows(&[0, 1, 2, 1], 2, 2, 1).unwrap_err();
    assert_eq!(
        e.to_string(),
        "packing pixels: record 2: index 2 does not fit in 1 bits"
    );
    let e = pack_rows(&[0; 5], 2, 2, 8).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Shape(_)), "{e}");
    assert!(pack_rows(&[0, 256], 2, 1, 8).is_err());
    assert_eq!(pack_rows(&[], 0, 5, 4).unwrap(), Vec::<u8>::new());
}

#[test]
fn identifiers_from_file_names() {
    assert_eq!(c_identifier("logo.png"), "logo");
    assert_eq!(c_identifier("/tmp/icons/Logo 64x64.png"), "logo_64x64");
    assert_eq!(c_identifier("__weird--name__.tar.gz"), "weird_name_tar");
    assert_eq!(c_identifier("8-ball.png"), "image_8_ball");
    assert_eq!(c_identifier(".png"), "png");
    assert_eq!(c_identifier(""), "image");
    assert_eq!(c_identifier("---.bmp"), "image");
    assert_eq!(c_identifier("größe.png"), "gr_e");
    assert_eq!(c_identifier("size.png"), "size_image");
    assert_eq!(c_identifier("UINT16.png"), "uint16_image");
    for name in [
        "logo.png",
        "8-ball.png",
        "",
        "size.png",
        "int_fast8.jpg",
        "a b c",
    ] {
        assert!(check_symbol(&c_identifier(name)).is_ok(), "{name}");
    }
}

#[test]
fn symbols_are_checked() {
    for good in ["logo", "Logo2", "int", "intx", "int_least", "uint8x", "a_b"] {
        assert!(check_symbol(good).is_ok(), "{good}");
    }
    for bad in [
        "",
        "_x",
        "9a",
        "a-b",
        "a b",
        "é",
        "size",
        "SIZE",
        "uint8",
        "int64",
        "int_least16",
        "uint_fast32",
        "intptr",
        "wchar",
    ] {
        assert!(check_symbol(bad).is_err(), "{bad}");
    }
    let e = check_symbol("a-b").unwrap_err();
    assert_eq!(
        e.to_string(),
        "writing C source: \"a-b\" cannot name a C array: \
         only ASCII letters, digits and underscores are allowed"
    );
}

fn image<'a>(
    symbol: &'a str,
    palette: &'a [u32],
    entry_bits: u32,
    pixels: &'a [u8],
    comment: &'a [String],
) -> CImage<'a> {
    CImage {
        symbol,
        width: 3,
        height: 2,
        bits_per_pixel: 2,
        palette,
        palette_entry_bits: entry_bits,
        pixels,
        comment_lines: comment,
    }
}

#[test]
fn c_source_layout() {
    let pixels = pack_rows(&[0, 1, 2, 2, 1, 0], 3, 2, 2).unwrap();
    let comment = [
        "palette: RGB565".to_string(),
        String::new(),
        "made */ here".into(),
    ];
    let text = c_source(&image(
        "icon",
        &[0x0000, 0xF800, 0x07E0],
        16,
        &pixels,
        &comment,
    ))
    .unwrap();
    let expected = "\
/*
 * icon: 3 x 2 pixels, 2 bits per pixel, 3 palette entries.
 * palette: RGB565
 *
 * made * / here
 *
 * icon_palette: 16-bit entries, indexed by pixel value.
 * icon_pixels: rows top to bottom, ICON_ROW_BYTES bytes per row.
 * Each row starts on a byte boundary; the unused low bits of its last
 * byte are zero. Within a byte the leftmost pixel is in the most
 * significant bits (the order of PNG's packed rows).
 */
#ifndef ICON_H
#define ICON_H

#include <stdint.h>

#define ICON_WIDTH 3u
#define ICON_HEIGHT 2u
#define ICON_BITS_PER_PIXEL 2u
#define ICON_PALETTE_SIZE 3u
#define ICON_ROW_BYTES 1u

static const uint16_t icon_palette[ICON_PALETTE_SIZE] = {
    0x0000, 0xF800, 0x07E0,
};

static const uint8_t icon_pixels[ICON_HEIGHT * ICON_ROW_BYTES] = {
    0x18, 0x90,
};

#endif /* ICON_H */
";
    assert_eq!(text, expected);
}

#[test]
fn twelve_values_a_line_and_entry_types() {
    let pixels: Vec<u8> = (0..30).collect();
    let palette: Vec<u32> = (0..16).collect();
    let c = c_source(&CImage {
        width: 20,
        height: 3,
        bits_per_pixel: 4,
        ..image("x", &palette, 4, &pixels, &[])
    })
    .unwrap();
    assert!(c.contains("static const uint8_t x_palette[X_PALETTE_SIZE] = {\n"));
    assert!(c.contains("    0x00, 0x01, 0x02, 0x03, 0x04, 0x05, 0x06, 0x07, 0x08, 0x09, 0x0A, 0x0B,\n    0x0C, 0x0D, 0x0E, 0x0F,\n};"));
    let body: Vec<&str> = c
        .split("x_pixels[X_HEIGHT * X_ROW_BYTES] = {\n")
        .nth(1)
        .unwrap()
        .lines()
        .take_while(|l| *l != "};")
        .collect();
    assert_eq!(
        body.iter()
            .map(|l| l.split(", ").count())
            .collect::<Vec<_>>(),
        [12, 12, 6]
    );
    assert!(body[2].ends_with("0x1D,"));

    let c = c_source(&image("y", &[0xFFFFFF, 1], 24, &[0, 0], &[])).unwrap();
    assert!(c.contains(
        "static const uint32_t y_palette[Y_PALETTE_SIZE] = {\n    0x00FFFFFF, 0x00000001,\n};"
    ));
}

#[test]
fn c_source_errors() {
    let pixels = [0u8, 0];
    let palette = [1u32, 2, 3];
    let ok = image("ok", &palette, 16, &pixels, &[]);
    assert!(c_source(&ok).is_ok());
    let cases: [(CImage, &str); 8] = [
        (
            CImage {
                symbol: "9lives",
                ..ok
            },
            "must start with a letter",
        ),
        (CImage { width: 0, ..ok }, "0 × 2 pixels"),
        (
            CImage {
                bits_per_pixel: 3,
                ..ok
            },
            "1, 2, 4 or 8 bits",
        ),
        (
            CImage {
                palette_entry_bits: 0,
                ..ok
            },
            "1 to 32 bits wide, got 0",
        ),
        (CImage { palette: &[], ..ok }, "palette of 0 entries"),
        (
            CImage {
                palette: &[0; 5],
                ..ok
            },
            "palette of 5 entries does not suit 2 bits",
        ),
        (
            CImage {
                palette_entry_bits: 1,
                ..ok
            },
            "palette entry 1 is 0x2, wider than 1 bits",
        ),
        (
            CImage {
                pixels: &[0; 3],
                ..ok
            },
            "3 bytes of pixels for 3 × 2 pixels",
        ),
    ];
    for (case, expected) in cases {
        let e = c_source(&case).unwrap_err();
        assert!(e.to_string().starts_with("writing C source: "), "{e}");
        assert!(e.to_string().contains(expected), "{e} / {expected}");
    }
}

/// The checksum the C program computes: h = h × 31 + v (mod 2^32) over the
/// palette entries, then over the pixel bytes.
fn checksum(palette: &[u32], pixels: &[u8]) -> u32 {
    palette
        .iter()
        .copied()
        .chain(pixels.iter().map(|&b| u32::from(b)))
        .fold(0u32, |h, v| h.wrapping_mul(31).wrapping_add(v))
}

#[test]
fn c_source_compiles_and_holds_the_data() {
    if Command::new("gcc").arg("--version").output().is_err() {
        eprintln!("note: gcc not found; skipping the C compile check");
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let mut rng = SeededRng::new(5);
    // (symbol, width, height, bits, palette entries, entry bits)
    let specs = [
        ("mono", 9u32, 3u32, 1u8, 2usize, 1u32),
        ("rgb565_logo", 13, 7, 4, 16, 16),
        ("photo", 5, 4, 8, 256, 24),
        ("quad", 1, 1, 2, 3, 8),
    ];
    let mut main = String::from("#include <stdio.h>\n");
    let mut expected = String::new();
    let mut body = String::new();
    for (symbol, width, height, bits, entries, entry_bits) in specs {
        let palette: Vec<u32> = (0..entries)
            .map(|_| (rng.next_u64() as u32) >> (32 - entry_bits))
            .collect();
        let indices = random_indices(&mut rng, (width * height) as usize, entries as u32);
        let pixels = pack_rows(&indices, width, height, bits).unwrap();
        let c = c_source(&CImage {
            symbol,
            width,
            height,
            bits_per_pixel: bits,
            palette: &palette,
            palette_entry_bits: entry_bits,
            pixels: &pixels,
            comment_lines: &["test".to_string()],
        })
        .unwrap();
        std::fs::write(dir.path().join(format!("{symbol}.h")), c).unwrap();
        let upper = symbol.to_ascii_uppercase();
        main.push_str(&format!(
            "#include \"{symbol}.h\"\n#include \"{symbol}.h\"\n"
        ));
        body.push_str(&format!(
            "    h = 0;\n\
             \x20   for (i = 0; i < {upper}_PALETTE_SIZE; i++) h = h * 31u + (uint32_t){symbol}_palette[i];\n\
             \x20   for (i = 0; i < sizeof {symbol}_pixels; i++) h = h * 31u + {symbol}_pixels[i];\n\
             \x20   printf(\"%u %u %u %u %u %u %u\\n\", {upper}_WIDTH, {upper}_HEIGHT, \
             {upper}_BITS_PER_PIXEL, {upper}_PALETTE_SIZE, {upper}_ROW_BYTES, \
             (unsigned)sizeof {symbol}_palette[0], (unsigned)h);\n"
        ));
        expected.push_str(&format!(
            "{width} {height} {bits} {entries} {} {} {}\n",
            packed_row_bytes(width, bits),
            entry_bits.div_ceil(8).next_power_of_two(),
            checksum(&palette, &pixels)
        ));
    }
    main.push_str("int main(void) {\n    uint32_t h;\n    size_t i;\n");
    main.push_str(&body);
    main.push_str("    return 0;\n}\n");
    std::fs::write(dir.path().join("main.c"), main).unwrap();
    let exe = dir.path().join("check");
    let compiled = Command::new("gcc")
        .args(["-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror", "-o"])
        .arg(&exe)
        .arg(dir.path().join("main.c"))
        .output()
        .unwrap();
    assert!(
        compiled.status.success(),
        "gcc failed:\n{}",
        String::from_utf8_lossy(&compiled.stderr)
    );
    let run = Command::new(&exe).output().unwrap();
    assert!(run.status.success());
    assert_eq!(String::from_utf8(run.stdout).unwrap(), expected);
}
