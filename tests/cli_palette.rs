//! End-to-end runs of the real `vqforge` binary on images: `palette`, the
//! image side of `train`, `encode`, `decode` and `info`, and bad image
//! input. Each test works in a fresh temporary folder.
//!
//! The reports are checked against figures recomputed here from the files
//! the binary wrote, decoded with the `png` crate without transformations.
//! The photo crops come from tests/data/images/chelsea.png (see
//! tests/fixtures/README.md); small crops keep the runs short.

use std::collections::HashSet;
use std::io::Cursor;
use std::path::Path;
use std::process::Command;

use serde_json::Value;

mod common;
use common::{assert_close, data, fails, int, json, num, ok, FAILURE, USAGE};
use tempfile::TempDir;

use vqforge::colour::DisplayFormat;

/// `#rrggbb` → RGB.
fn parse_hex(s: &str) -> [u8; 3] {
    let d = s.strip_prefix('#').expect("a # colour");
    assert_eq!(d.len(), 6, "{s}");
    let v = u32::from_str_radix(d, 16).unwrap();
    [(v >> 16) as u8, (v >> 8) as u8, v as u8]
}

fn palette_of(v: &Value) -> Vec<[u8; 3]> {
    v["palette"]
        .as_array()
        .unwrap_or_else(|| panic!("no palette in {v}"))
        .iter()
        .map(|c| parse_hex(c.as_str().unwrap()))
        .collect()
}

// ---- PNG files, read and written with the png crate ------------------------

/// A decoded PNG exactly as stored.
struct Png {
    width: u32,
    height: u32,
    color: png::ColorType,
    depth: u8,
    /// PLTE as RGB triples (empty without one).
    plte: Vec<[u8; 3]>,
    trns: Option<Vec<u8>>,
    /// Rows as stored after unfiltering: packed at `depth`, each row padded
    /// to a whole byte.
    rows: Vec<u8>,
    line_size: usize,
}

fn read_png(path: &Path) -> Png {
    let bytes = std::fs::read(path).unwrap();
    let mut decoder = png::Decoder::new(Cursor::new(bytes));
    decoder.set_transformations(png::Transformations::IDENTITY);
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let frame = reader.next_frame(&mut buf).unwrap();
    buf.truncate(frame.buffer_size());
    let info = reader.info();
    Png {
        width: info.width,
        height: info.height,
        color: info.color_type,
        depth: info.bit_depth as u8,
        plte: info
            .palette
            .as_ref()
            .map(|p| p.chunks_exact(3).map(|c| [c[0], c[1], c[2]]).collect())
            .unwrap_or_default(),
        trns: info.trns.as_ref().map(|t| t.to_vec()),
        rows: buf,
        line_size: frame.line_size,
    }
}

impl Png {
    /// Palette indices of an indexed PNG. PNG specification (second
    /// edition) section 7.2: pixels below 8 bits are packed leftmost pixel
    /// in the high-order bits, each row starting on a byte boundary.
    fn indices(&self) -> Vec<usize> {
        assert_eq!(self.color, png::ColorType::Indexed);
        let bits = self.depth as usize;
        let mut out = Vec::new();
        for row in self.rows.chunks_exact(self.line_size) {
            for x in 0..self.width as usize {
                let bit = x * bits;
                let byte = row[bit / 8];
                let shift = 8 - bits - bit % 8;
                out.push(((byte >> shift) as usize) & ((1 << bits) - 1));
            }
        }
        out
    }

    /// Pixels of an 8-bit RGB PNG.
    fn rgb(&self) -> Vec<[u8; 3]> {
        assert_eq!((self.color, self.depth), (png::ColorType::Rgb, 8));
        self.rows
            .chunks_exact(3)
            .map(|c| [c[0], c[1], c[2]])
            .collect()
    }
}

/// Writes an 8-bit RGB PNG.
fn write_rgb(path: &Path, width: u32, height: u32, pixels: &[[u8; 3]]) {
    let mut bytes = Vec::new();
    let mut encoder = png::Encoder::new(&mut bytes, width, height);
    encoder.set_color(png::ColorType::Rgb);
    encoder.set_depth(png::BitDepth::Eight);
    let mut writer = encoder.write_header().unwrap();
    writer.write_image_data(pixels.as_flattened()).unwrap();
    writer.finish().unwrap();
    std::fs::write(path, bytes).unwrap();
}

/// A `w × h` crop of chelsea at (`x0`, `y0`), written to `dir/name`;
/// returns its pixels.
fn chelsea_crop(dir: &Path, name: &str, x0: u32, y0: u32, w: u32, h: u32) -> Vec<[u8; 3]> {
    let full = read_png(&data("images/chelsea.png"));
    let all = full.rgb();
    let mut pixels = Vec::with_capacity((w * h) as usize);
    for y in y0..y0 + h {
        for x in x0..x0 + w {
            pixels.push(all[(y * full.width + x) as usize]);
        }
    }
    write_rgb(&dir.join(name), w, h, &pixels);
    pixels
}

/// Mean squared error per channel in 8-bit values.
fn mse(original: &[[u8; 3]], shown: &[[u8; 3]]) -> f64 {
    assert_eq!(original.len(), shown.len());
    let sum: f64 = original
        .iter()
        .zip(shown)
        .flat_map(|(a, b)| (0..3).map(move |c| (a[c] as f64 - b[c] as f64).powi(2)))
        .sum();
    sum / (original.len() as f64 * 3.0)
}

// ---- palette ---------------------------------------------------------------

/// The keys `palette --json` must report, all numbers.
const PALETTE_NUMBERS: [&str; 12] = [
    "size",
    "width",
    "height",
    "pixels",
    "distinct_colours",
    "mse",
    "psnr_db",
    "delta_e2000_mean",
    "delta_e2000_p95",
    "bits_per_pixel",
    "output_bytes",
    "seconds",
];

#[test]
fn palette_png_matches_the_report() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (w, h) = (120u32, 80u32);
    let original = chelsea_crop(d, "crop.png", 150, 60, w, h);
    let distinct: HashSet<[u8; 3]> = original.iter().copied().collect();
    assert!(distinct.len() > 256, "the crop needs more than 256 colours");

    // PNG specification, section 11.2.2: colour type 3 allows bit depths
    // 1, 2, 4 and 8; the smallest that indexes the palette is expected.
    for (size, depth) in [(2u64, 1u8), (4, 2), (16, 4), (256, 8)] {
        let out = format!("p{size}.png");
        let ks = size.to_string();
        let r = json(
            d,
            &[
                "palette", "crop.png", "--size", &ks, "--out", &out, "--json",
            ],
        );
        for key in PALETTE_NUMBERS {
            assert!(r[key].is_number(), "palette report lacks {key:?}: {r}");
        }
        assert_eq!(int(&r, "size"), size);
        assert_eq!(int(&r, "width"), w as u64);
        assert_eq!(int(&r, "height"), h as u64);
        assert_eq!(int(&r, "pixels"), (w * h) as u64);
        assert_eq!(int(&r, "distinct_colours"), distinct.len() as u64);
        assert_eq!(int(&r, "bits_per_pixel"), depth as u64);
        assert!(num(&r, "seconds") >= 0.0);
        assert!(num(&r, "delta_e2000_mean") > 0.0);
        assert!(num(&r, "delta_e2000_p95") > 0.0);
        let path = d.join(&out);
        assert_eq!(
            int(&r, "output_bytes"),
            std::fs::metadata(&path).unwrap().len()
        );

        let png = read_png(&path);
        assert_eq!((png.width, png.height), (w, h));
        assert_eq!(png.color, png::ColorType::Indexed, "size {size}");
        assert_eq!(png.depth, depth, "size {size}");
        assert!(png.trns.is_none(), "an opaque image needs no tRNS");
        let palette = palette_of(&r);
        assert_eq!(png.plte, palette, "size {size}: PLTE and the report differ");

        let indices = png.indices();
        assert!(indices.iter().all(|&i| i < palette.len()));
        let shown: Vec<[u8; 3]> = indices.iter().map(|&i| palette[i]).collect();
        let recomputed = mse(&original, &shown);
        assert_close("mse", num(&r, "mse"), recomputed, 1e-9);
        // PSNR for 8-bit samples: 10·log10(255² / MSE) (common practice).
        assert_close(
            "psnr_db",
            num(&r, "psnr_db"),
            10.0 * (255.0f64 * 255.0 / recomputed).log10(),
            1e-9,
        );
    }
}

/// The packed RGB565 palette entries of a generated C header, in order.
fn c_palette(text: &str, symbol: &str) -> Vec<u32> {
    let start = format!("static const uint16_t {symbol}_palette[");
    let at = text
        .find(&start)
        .unwrap_or_else(|| panic!("no {start} in:\n{text}"));
    let body = &text[at..];
    let open = body.find('{').unwrap();
    let close = body.find("};").unwrap();
    body[open + 1..close]
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| u32::from_str_radix(s.trim_start_matches("0x"), 16).unwrap())
        .collect()
}

/// The pixel bytes of a generated C header.
fn c_pixels(text: &str, symbol: &str) -> Vec<u8> {
    let start = format!("static const uint8_t {symbol}_pixels[");
    let at = text.find(&start).unwrap();
    let body = &text[at..];
    let open = body.find('{').unwrap();
    let close = body.find("};").unwrap();
    body[open + 1..close]
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| u8::from_str_radix(s.trim_start_matches("0x"), 16).unwrap())
        .collect()
}

#[test]
fn c_source_compiles_and_holds_rgb565_entries() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    chelsea_crop(d, "crop.png", 200, 100, 50, 30);
    let r = json(
        d,
        &[
            "palette",
            "crop.png",
            "--size",
            "16",
            "--display",
            "rgb565",
            "--out",
            "icon.png",
            "--c-source",
            "icon.h",
            "--json",
        ],
    );
    assert_eq!(r["display"], "rgb565");
    let palette = palette_of(&r);
    let text = std::fs::read_to_string(d.join("icon.h")).unwrap();

    // Every entry is a colour the display shows, packed as the library's
    // RGB565 layout says.
    let want: Vec<u32> = palette
        .iter()
        .map(|c| {
            assert_eq!(DisplayFormat::Rgb565.snap(*c), *c, "{c:?} is not RGB565");
            DisplayFormat::Rgb565.pack(*c)
        })
        .collect();
    assert_eq!(c_palette(&text, "icon"), want);
    // The pixel array holds the PNG's rows as stored (same packing).
    let png = read_png(&d.join("icon.png"));
    assert_eq!(c_pixels(&text, "icon"), png.rows);

    let Ok(version) = Command::new("gcc").arg("--version").output() else {
        eprintln!("note: gcc is not installed; the C header was not compiled");
        return;
    };
    assert!(version.status.success());
    // Use every array so unused-variable warnings cannot hide a problem.
    std::fs::write(
        d.join("use.c"),
        "#include \"icon.h\"\n\
         unsigned first(void) {\n\
             return icon_palette[0] + icon_pixels[0] + ICON_WIDTH + ICON_HEIGHT\n\
                 + ICON_BITS_PER_PIXEL + ICON_PALETTE_SIZE + ICON_ROW_BYTES;\n\
         }\n",
    )
    .unwrap();
    let out = Command::new("gcc")
        .current_dir(d)
        .args(["-std=c99", "-Wall", "-Werror", "-fsyntax-only", "use.c"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "gcc refused the header: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

// ---- train, encode, decode, info -------------------------------------------

#[test]
fn train_on_two_images_then_encode_and_decode_each() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = chelsea_crop(d, "a.png", 40, 40, 64, 48);
    let b = chelsea_crop(d, "b.png", 300, 180, 48, 64);
    let t = json(
        d,
        &[
            "train", "a.png", "b.png", "--size", "16", "--out", "pal.vqb", "--json",
        ],
    );
    assert_eq!(int(&t, "images"), 2);
    assert_eq!(int(&t, "vectors"), (a.len() + b.len()) as u64);
    assert_eq!(int(&t, "size"), 16);
    let palette = palette_of(&t);
    let book = vqforge::format::read_codebook(d.join("pal.vqb")).unwrap();

    for (name, original, (w, h)) in [("a", &a, (64u32, 48u32)), ("b", &b, (48, 64))] {
        let (input, stream, out) = (
            format!("{name}.png"),
            format!("{name}.vqs"),
            format!("{name}-out.png"),
        );
        let e = json(
            d,
            &[
                "encode", &input, "--book", "pal.vqb", "--out", &stream, "--json",
            ],
        );
        assert_eq!(int(&e, "width"), w as u64);
        assert_eq!(int(&e, "height"), h as u64);
        assert_eq!(int(&e, "bits_per_index"), 4);
        ok(d, &["decode", &stream, "--book", "pal.vqb", "--out", &out]);

        let (header, indices) = vqforge::format::read_stream(d.join(&stream)).unwrap();
        vqforge::format::check_stream_matches(&header, &book).unwrap();
        assert_eq!(indices.len(), original.len());
        let decoded = read_png(&d.join(&out));
        assert_eq!((decoded.width, decoded.height), (w, h));
        let pixels = decoded.rgb();
        let want: Vec<[u8; 3]> = indices.iter().map(|&i| palette[i as usize]).collect();
        assert_eq!(
            pixels, want,
            "{name}: decoded pixels are not palette[indices]"
        );
        assert_close("encode mse", num(&e, "mse"), mse(original, &pixels), 1e-9);
    }

    let info = json(d, &["info", "pal.vqb", "--json"]);
    assert_eq!(info["file"], "codebook");
    assert_eq!(int(&info, "size"), 16);
    assert_eq!(int(&info, "dimension"), 3);
    assert_eq!(int(&info, "bits_per_index"), 4);
    assert_eq!(info["meaning"]["kind"], "palette");
    assert_eq!(info["meaning"]["display"], "rgb888");
    assert_eq!(info["meaning"]["transparent_entry"], false);
    assert_eq!(palette_of(&info["meaning"]), palette);
    assert_eq!(
        int(&info["training"], "vectors"),
        (a.len() + b.len()) as u64
    );
    let fingerprint = info["fingerprint"].as_str().unwrap().to_string();

    let s = json(d, &["info", "a.vqs", "--json"]);
    assert_eq!(s["file"], "stream");
    assert_eq!(int(&s, "vectors"), a.len() as u64);
    assert_eq!(int(&s, "size"), 16);
    assert_eq!(int(&s["image"], "width"), 64);
    assert_eq!(int(&s["image"], "height"), 48);
    assert!(s["records"].is_null());
    assert_eq!(s["codebook_fingerprint"], fingerprint.as_str());
    assert_eq!(
        int(&s, "file_bytes"),
        std::fs::metadata(d.join("a.vqs")).unwrap().len()
    );

    let text = String::from_utf8_lossy(&ok(d, &["info", "a.vqs"]).stdout).to_string();
    assert!(text.contains("64×48 pixels"), "{text}");
    let text = String::from_utf8_lossy(&ok(d, &["info", "pal.vqb"]).stdout).to_string();
    let hex = palette
        .iter()
        .map(|c| format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]))
        .collect::<Vec<_>>()
        .join(" ");
    assert!(text.contains(&hex), "{text}");
}

// ---- bad input ---------------------------------------------------------------

/// A fresh folder holding chelsea as `c.png`, a small crop as `small.png`
/// and the wine table as `wine.csv`.
fn sandbox() -> TempDir {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(data("images/chelsea.png"), dir.path().join("c.png")).unwrap();
    std::fs::copy(data("wine.csv"), dir.path().join("wine.csv")).unwrap();
    chelsea_crop(dir.path(), "small.png", 100, 100, 40, 30);
    dir
}

/// A PNG chunk: length, type, data, CRC-32 over type and data (PNG
/// specification, second edition, section 5.3).
fn chunk(kind: &[u8; 4], body: &[u8]) -> Vec<u8> {
    let mut out = (body.len() as u32).to_be_bytes().to_vec();
    out.extend_from_slice(kind);
    out.extend_from_slice(body);
    let mut crc = crc32fast::Hasher::new();
    crc.update(kind);
    crc.update(body);
    out.extend_from_slice(&crc.finalize().to_be_bytes());
    out
}

/// A PNG whose IHDR says 0 × 0 (8-bit RGB), with correct CRCs, an IDAT
/// holding an empty zlib stream and IEND. PNG specification section 11.2.2
/// forbids a zero width or height, so no encoder writes one.
fn zero_by_zero_png() -> Vec<u8> {
    let mut ihdr = Vec::new();
    ihdr.extend_from_slice(&0u32.to_be_bytes());
    ihdr.extend_from_slice(&0u32.to_be_bytes());
    ihdr.extend_from_slice(&[8, 2, 0, 0, 0]);
    // zlib header 78 01, one final stored block of length 0, Adler-32 of
    // nothing (= 1), per RFC 1950/1951.
    let empty_zlib = [0x78, 0x01, 0x01, 0x00, 0x00, 0xFF, 0xFF, 0, 0, 0, 1];
    let mut png = b"\x89PNG\r\n\x1a\n".to_vec();
    png.extend(chunk(b"IHDR", &ihdr));
    png.extend(chunk(b"IDAT", &empty_zlib));
    png.extend(chunk(b"IEND", &[]));
    png
}

#[test]
fn files_that_are_not_usable_images() {
    let dir = sandbox();
    let p = |name: &str| dir.path().join(name);
    std::fs::copy(p("wine.csv"), p("table.png")).unwrap();
    let chelsea = std::fs::read(p("c.png")).unwrap();
    std::fs::write(p("cut.png"), &chelsea[..chelsea.len() / 3]).unwrap();
    std::fs::write(p("anim.gif"), b"GIF89a\x01\x00\x01\x00\x00\x00\x00;").unwrap();
    std::fs::write(p("zero.png"), zero_by_zero_png()).unwrap();
    // The CRC is right, so the refusal is about the size, not corruption.
    let zero = zero_by_zero_png();
    assert_eq!(&zero[12..16], b"IHDR");

    let cases: &[(&[&str], &[&str])] = &[
        (
            &["palette", "table.png", "-k", "4", "-o", "o.png"],
            &["table.png", "not a PNG, JPEG, BMP, TIFF or WebP image"],
        ),
        // Regression: a table renamed .png was trained as CSV records
        // (or, with binary content, refused with a CSV encoding error).
        (
            &["train", "table.png", "-k", "4", "-o", "b.vqb"],
            &["table.png", "not a PNG", ".csv name"],
        ),
        (
            &["palette", "cut.png", "-k", "4", "-o", "o.png"],
            &["cut.png", "truncated or corrupted"],
        ),
        (
            &["palette", "anim.gif", "-k", "4", "-o", "o.png"],
            &[
                "anim.gif",
                "GIF input is not supported",
                "convert it to PNG",
            ],
        ),
        (
            &["train", "anim.gif", "-k", "4", "-o", "b.vqb"],
            &["anim.gif", "GIF input is not supported"],
        ),
        (
            &["palette", "zero.png", "-k", "4", "-o", "o.png"],
            &["zero.png", "0 × 0", "no pixels"],
        ),
        (
            &[
                "palette",
                "c.png",
                "-k",
                "4",
                "-o",
                "o.png",
                "--max-pixels",
                "100",
            ],
            &["c.png", "135300 pixels", "limit of 100", "--max-pixels"],
        ),
        (
            &[
                "train",
                "c.png",
                "-k",
                "4",
                "-o",
                "b.vqb",
                "--max-pixels",
                "100",
            ],
            &["c.png", "limit of 100", "--max-pixels"],
        ),
    ];
    for (args, phrases) in cases {
        fails(&dir, args, FAILURE, phrases);
    }
}

#[test]
fn bad_palette_flags() {
    let dir = sandbox();
    let cases: &[(&[&str], &[&str])] = &[
        (&["-k", "1"], &["--size 1", "--size 2 or more"]),
        (&["-k", "300"], &["--size 300", "at most 256"]),
        (&["-k", "0"], &["codebook size", "at least 1", "got 0"]),
        (
            &["--keep", "nothex"],
            &["--keep", "\"nothex\" is not a colour"],
        ),
        (
            &["--keep", "#010203", "--display", "rgb565"],
            &["#010203", "cannot be shown exactly on rgb565", "#000000"],
        ),
        (
            &["-k", "2", "--keep", "#000000,#ffffff,#ff0000"],
            &["3 pinned colours", "palette of 2"],
        ),
        (&["--keep", "#000000,#000000"], &["#000000", "given twice"]),
        (&["--display", "rgb999"], &["rgb999"]),
    ];
    for (flags, phrases) in cases {
        let mut args = vec!["palette", "small.png", "-o", "o.png"];
        if !flags.contains(&"-k") {
            args.extend(["-k", "4"]);
        }
        args.extend_from_slice(flags);
        fails(&dir, &args, USAGE, phrases);
    }
}

#[test]
fn codebook_of_the_wrong_kind() {
    let dir = sandbox();
    let d = dir.path();
    ok(d, &["train", "small.png", "-k", "4", "-o", "pal.vqb"]);
    ok(d, &["train", "wine.csv", "-k", "4", "-o", "w.vqb"]);
    fails(
        &dir,
        &["encode", "wine.csv", "-b", "pal.vqb", "-o", "s.vqs"],
        FAILURE,
        &["pal.vqb", "palette", "wine.csv", "is not an image"],
    );
    fails(
        &dir,
        &["encode", "small.png", "-b", "w.vqb", "-o", "s.vqs"],
        FAILURE,
        &[
            "w.vqb",
            "CSV records",
            "small.png",
            "is an image",
            "palette codebook",
        ],
    );
    fails(
        &dir,
        &[
            "encode",
            "wine.csv",
            "-b",
            "w.vqb",
            "-o",
            "s.vqs",
            "--dither",
            "floyd-steinberg",
        ],
        USAGE,
        &["--dither", "images"],
    );
    // Palette options on CSV training.
    fails(
        &dir,
        &[
            "train",
            "wine.csv",
            "-k",
            "4",
            "-o",
            "b.vqb",
            "--display",
            "rgb565",
        ],
        USAGE,
        &["--display", "images, not CSV"],
    );
    fails(
        &dir,
        &["train", "small.png", "wine.csv", "-k", "4", "-o", "b.vqb"],
        USAGE,
        &["mix images and CSV"],
    );
}

#[test]
fn output_equal_to_the_input_image() {
    let dir = sandbox();
    ok(
        dir.path(),
        &["train", "small.png", "-k", "4", "-o", "pal.vqb"],
    );
    let cases: &[&[&str]] = &[
        &["palette", "small.png", "-k", "4", "-o", "small.png"],
        &["palette", "small.png", "-k", "4", "-o", "./small.png"],
        // Regression: train on images wrote the codebook over the image.
        &["train", "small.png", "-k", "4", "-o", "small.png"],
        &[
            "train",
            "c.png",
            "small.png",
            "-k",
            "4",
            "-o",
            "./small.png",
        ],
        &["encode", "small.png", "-b", "pal.vqb", "-o", "small.png"],
    ];
    for args in cases {
        fails(&dir, args, USAGE, &["--out", "input"]);
    }
    fails(
        &dir,
        &[
            "palette",
            "small.png",
            "-k",
            "4",
            "-o",
            "o.png",
            "--c-source",
            "small.png",
        ],
        USAGE,
        &["--c-source", "input image"],
    );
}
