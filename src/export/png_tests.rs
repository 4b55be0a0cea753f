//! Tests of PNG output, decoded with the `png` crate's decoder with no
//! transformations so the stored bit depth, PLTE, tRNS and packed rows are
//! seen as written. Section numbers are of the PNG specification, second
//! edition (W3C 2003).

use std::io::Cursor;

use ::png::{Decoder, Transformations};

use super::*;
use crate::load::{read_image, ImageLimits};

/// The chunks of a PNG file as (type, data), after checking the signature
/// (section 5.2) and every CRC (section 5.3).
fn chunks(bytes: &[u8]) -> Vec<([u8; 4], Vec<u8>)> {
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n");
    let mut out = Vec::new();
    let mut at = 8;
    while at < bytes.len() {
        let len = u32::from_be_bytes(bytes[at..at + 4].try_into().unwrap()) as usize;
        let kind: [u8; 4] = bytes[at + 4..at + 8].try_into().unwrap();
        let data = &bytes[at + 8..at + 8 + len];
        let crc = u32::from_be_bytes(bytes[at + 8 + len..at + 12 + len].try_into().unwrap());
        assert_eq!(crc32fast::hash(&bytes[at + 4..at + 8 + len]), crc);
        out.push((kind, data.to_vec()));
        at += 12 + len;
    }
    out
}

/// Index `x` of a packed row at `bits` bits, most significant bits first
/// (section 7.2).
fn index_at(row: &[u8], x: usize, bits: usize) -> u32 {
    let bit = x * bits;
    u32::from((row[bit / 8] >> (8 - bits - bit % 8)) & ((1u16 << bits) - 1) as u8)
}

struct Decoded {
    bit_depth: u8,
    palette: Vec<u8>,
    trns: Option<Vec<u8>>,
    indices: Vec<u32>,
}

fn decode_indexed(bytes: &[u8]) -> Decoded {
    let mut decoder = Decoder::new(Cursor::new(bytes));
    decoder.set_transformations(Transformations::IDENTITY);
    let mut reader = decoder.read_info().unwrap();
    let info = reader.info();
    assert_eq!(info.color_type, ::png::ColorType::Indexed);
    let (width, bit_depth) = (info.width as usize, info.bit_depth as u8);
    let palette = info.palette.as_ref().unwrap().to_vec();
    let trns = info.trns.as_ref().map(|t| t.to_vec());
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let frame = reader.next_frame(&mut buf).unwrap();
    assert_eq!(frame.bit_depth as u8, bit_depth);
    let indices = buf[..frame.buffer_size()]
        .chunks(frame.line_size)
        .flat_map(|row| (0..width).map(move |x| index_at(row, x, usize::from(bit_depth))))
        .collect();
    Decoded {
        bit_depth,
        palette,
        trns,
        indices,
    }
}

/// Alpha values given to the writer, and the tRNS chunk expected back.
type AlphaCase<'a> = (Option<&'a [u8]>, Option<&'a [u8]>);

fn palette_of(n: usize) -> Vec<[u8; 3]> {
    (0..n)
        .map(|i| [i as u8, (i * 7 % 256) as u8, (255 - i % 256) as u8])
        .collect()
}

#[test]
fn indexed_png_round_trips_at_the_smallest_depth() {
    let (width, height) = (13u32, 5u32);
    for n in [2usize, 3, 4, 5, 16, 17, 256] {
        let palette = palette_of(n);
        // Every entry used when it fits; rows of 13 leave padding bits at
        // every depth below 8.
        let indices: Vec<u32> = (0..width * height)
            .map(|i| (i * 7 + i / width) % n as u32)
            .collect();
        let some_clear: Vec<u8> = (0..n)
            .map(|i| match i {
                0 => 0,
                i if i < n / 2 => 128,
                _ => 255,
            })
            .collect();
        let last_clear: Vec<u8> = (0..n).map(|i| if i + 1 == n { 10 } else { 255 }).collect();
        let opaque = vec![255u8; n];
        // (alpha given, tRNS expected): trailing 255s are dropped and an
        // all-opaque palette gets no tRNS (section 11.3.2.1).
        let cases: [AlphaCase; 4] = [
            (None, None),
            (Some(&opaque), None),
            (Some(&some_clear), Some(&some_clear[..n / 2])),
            (Some(&last_clear), Some(&last_clear)),
        ];
        for (alpha, trns) in cases {
            let mut bytes = Vec::new();
            write_indexed_png(&mut bytes, width, height, &palette, alpha, &indices).unwrap();
            let what = format!("{n} entries, alpha {alpha:?}");

            // IHDR (section 11.2.2): width, height, bit depth, colour type 3
            // = indexed colour with depths 1, 2, 4, 8 (table 11.1).
            let chunks = chunks(&bytes);
            let (kind, ihdr) = &chunks[0];
            assert_eq!(kind, b"IHDR");
            assert_eq!(ihdr[..8], [0, 0, 0, 13, 0, 0, 0, 5]);
            assert_eq!(ihdr[8], bit_depth_for(n), "{what}");
            assert_eq!(ihdr[9], 3);
            // PLTE, then tRNS, before the image data (section 5.6).
            let kinds: Vec<&[u8; 4]> = chunks.iter().map(|(k, _)| k).collect();
            let plte = kinds.iter().position(|k| *k == b"PLTE").unwrap();
            let idat = kinds.iter().position(|k| *k == b"IDAT").unwrap();
            match kinds.iter().position(|k| *k == b"tRNS") {
                Some(t) => assert!(plte < t && t < idat, "{what}"),
                None => assert!(plte < idat),
            }

            let decoded = decode_indexed(&bytes);
            let expected_depth = match n {
                2 => 1,
                3 | 4 => 2,
                5 | 16 => 4,
                _ => 8,
            };
            assert_eq!(decoded.bit_depth, expected_depth, "{what}");
            assert_eq!(decoded.palette, palette.as_flattened(), "{what}");
            assert_eq!(decoded.trns.as_deref(), trns, "{what}");
            assert_eq!(decoded.indices, indices, "{what}");

            // Read back through the image loader: palette and alpha expanded.
            let image = read_image(&bytes, "back.png", &ImageLimits::default()).unwrap();
            for (p, &i) in image.pixels.iter().zip(&indices) {
                let [r, g, b] = palette[i as usize];
                let a = alpha.map_or(255, |a| a[i as usize]);
                assert_eq!(*p, [r, g, b, a], "{what}");
            }
        }
    }
}

/// The indexed PNG as the `png` crate's own encoder writes it from the rows
/// of [`crate::export::pack_rows`] (one zlib stream, no filtering): the
/// reference our pieces must decode to.
fn png_crate_indexed(
    width: u32,
    height: u32,
    palette: &[[u8; 3]],
    trns: Option<&[u8]>,
    indices: &[u32],
) -> Vec<u8> {
    let bits = bit_depth_for(palette.len());
    let packed = crate::export::pack_rows(indices, width, height, bits).unwrap();
    let mut bytes = Vec::new();
    let mut encoder = Encoder::new(&mut bytes, width, height);
    encoder.set_color(ColorType::Indexed);
    encoder.set_depth(BitDepth::from_u8(bits).unwrap());
    encoder.set_filter(::png::Filter::NoFilter);
    encoder.set_palette(palette.as_flattened().to_vec());
    if let Some(trns) = trns {
        encoder.set_trns(trns.to_vec());
    }
    let mut writer = encoder.write_header().unwrap();
    writer.write_image_data(&packed).unwrap();
    writer.finish().unwrap();
    bytes
}

#[test]
fn pieces_decode_as_the_png_crate_encoder_does() {
    // Small pieces and chunks force the several-piece, several-chunk paths
    // on small images; the default layout writes them in one piece.
    let layouts = [
        IDAT_LAYOUT,
        IdatLayout {
            piece_bytes: 1,
            max_chunk: 1 << 20,
        },
        IdatLayout {
            piece_bytes: 40,
            max_chunk: 7,
        },
        IdatLayout {
            piece_bytes: 300,
            max_chunk: 1 << 20,
        },
    ];
    // Widths that leave padding bits at 1, 2 and 4 bits (section 7.2).
    for (width, height) in [(1u32, 1u32), (1, 9), (9, 1), (13, 17), (67, 31)] {
        for n in [1usize, 2, 3, 4, 7, 16, 17, 200, 256] {
            let palette = palette_of(n);
            let indices: Vec<u32> = (0..width * height)
                .map(|i| (i * i / 3 + i / width) % n as u32)
                .collect();
            let alpha: Vec<u8> = (0..n).map(|i| if i % 3 == 1 { 40 } else { 255 }).collect();
            let kept = alpha.iter().rposition(|&a| a != 255).map(|i| &alpha[..=i]);
            for (alpha, trns) in [(None, None), (Some(&alpha[..]), kept)] {
                let reference = png_crate_indexed(width, height, &palette, trns, &indices);
                let want = decode_indexed(&reference);
                let from_image = read_image(&reference, "ref.png", &ImageLimits::default())
                    .unwrap()
                    .pixels;
                for layout in layouts {
                    let what = format!("{width} × {height}, {n} entries, {trns:?}, {layout:?}");
                    let mut bytes = Vec::new();
                    write_indexed_png_as(
                        &mut bytes, width, height, &palette, alpha, &indices, layout,
                    )
                    .unwrap();
                    // Decoded by the png crate: same depth, palette, tRNS and
                    // indices as the png crate's own encoding.
                    let got = decode_indexed(&bytes);
                    assert_eq!(got.bit_depth, want.bit_depth, "{what}");
                    assert_eq!(got.palette, want.palette, "{what}");
                    assert_eq!(got.trns, want.trns, "{what}");
                    assert_eq!(got.indices, want.indices, "{what}");
                    assert_eq!(got.indices, indices, "{what}");
                    // Decoded by the image crate: the same RGBA pixels.
                    let image = read_image(&bytes, "ours.png", &ImageLimits::default()).unwrap();
                    assert_eq!(image.pixels, from_image, "{what}");
                    // Every chunk's CRC is right (checked by `chunks`), and
                    // the IDAT chunks follow each other (section 5.6), none
                    // longer than the layout allows.
                    let chunks = chunks(&bytes);
                    let idat: Vec<usize> = (0..chunks.len())
                        .filter(|&i| &chunks[i].0 == b"IDAT")
                        .collect();
                    assert_eq!(idat.len(), idat[idat.len() - 1] - idat[0] + 1, "{what}");
                    assert!(idat.iter().all(|&i| chunks[i].1.len() <= layout.max_chunk));
                    assert_eq!(&chunks[chunks.len() - 1].0, b"IEND");
                }
            }
        }
    }
}

#[test]
fn bit_depths_by_palette_length() {
    let depths: Vec<u8> = [1, 2, 3, 4, 5, 16, 17, 255, 256, 257]
        .into_iter()
        .map(bit_depth_for)
        .collect();
    assert_eq!(depths, [1, 1, 2, 2, 4, 4, 8, 8, 8, 8]);
}

#[test]
fn indexed_png_errors() {
    let p2 = palette_of(2);
    let write = |palette: &[[u8; 3]], alpha: Option<&[u8]>, w: u32, h: u32, idx: &[u32]| {
        write_indexed_png(Vec::new(), w, h, palette, alpha, idx)
            .unwrap_err()
            .to_string()
    };
    assert_eq!(
        write(&[], None, 1, 1, &[0]),
        "writing image: a PNG palette has 1 to 256 entries, got 0"
    );
    assert!(write(&palette_of(257), None, 1, 1, &[0]).contains("got 257"));
    assert_eq!(
        write(&p2, Some(&[0]), 1, 1, &[0]),
        "writing image: 1 alpha values for a palette of 2 entries"
    );
    assert_eq!(
        write(&p2, None, 2, 1, &[0, 2]),
        "writing image: pixel 1 has index 2, past the end of the palette of 2 entries"
    );
    assert_eq!(
        write(&p2, None, 2, 2, &[0, 1, 0]),
        "writing image: 3 pixels for an image of 2 × 2 = 4"
    );
    assert!(write(&p2, None, 0, 1, &[]).contains("got 0 × 1"));
    assert!(write(&p2, None, 1 << 31, 1, &[]).contains("1 to 2147483647 pixels"));
}

#[test]
fn one_entry_palette_is_one_bit() {
    let mut bytes = Vec::new();
    write_indexed_png(&mut bytes, 3, 1, &[[9, 8, 7]], Some(&[0]), &[0; 3]).unwrap();
    let decoded = decode_indexed(&bytes);
    assert_eq!(decoded.bit_depth, 1);
    assert_eq!(decoded.trns.as_deref(), Some(&[0u8][..]));
    assert_eq!(decoded.indices, [0, 0, 0]);
}

#[test]
fn true_colour_round_trips() {
    let rgb: Vec<[u8; 3]> = (0..6u8).map(|i| [i, i * 40, 255 - i]).collect();
    let mut bytes = Vec::new();
    write_rgb_png(&mut bytes, 3, 2, &rgb).unwrap();
    assert_eq!(chunks(&bytes)[0].1[8..10], [8, 2]); // 8-bit truecolour
    let back = read_image(&bytes, "rgb.png", &ImageLimits::default()).unwrap();
    let want: Vec<[u8; 4]> = rgb.iter().map(|&[r, g, b]| [r, g, b, 255]).collect();
    assert_eq!(back.pixels, want);

    let rgba: Vec<[u8; 4]> = (0..6u8).map(|i| [i, 2 * i, 3 * i, i * 50]).collect();
    let mut bytes = Vec::new();
    write_rgba_png(&mut bytes, 2, 3, &rgba).unwrap();
    assert_eq!(chunks(&bytes)[0].1[8..10], [8, 6]); // 8-bit truecolour with alpha
    let back = read_image(&bytes, "rgba.png", &ImageLimits::default()).unwrap();
    assert_eq!((back.width, back.height), (2, 3));
    assert_eq!(back.pixels, rgba);

    assert!(write_rgb_png(Vec::new(), 3, 3, &rgb).is_err());
    assert!(write_rgba_png(Vec::new(), 0, 3, &[]).is_err());
}

#[test]
fn write_failures_are_io_errors() {
    struct Broken;
    impl std::io::Write for Broken {
        fn write(&mut self, _: &[u8]) -> std::io::Result<usize> {
            Err(std::io::Error::other("disk full"))
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }
    let e = write_indexed_png(Broken, 1, 1, &[[0, 0, 0]], None, &[0]).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::Io(_)), "{e}");
    assert_eq!(e.to_string(), "writing image: disk full");
}
