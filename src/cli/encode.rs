//! `vqforge encode`: indices of the nearest codewords, streamed from CSV.

use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::format;
use vqforge::metrics;
use vqforge::records::{encode_reader, layout_of};

use super::args::EncodeArgs;
use super::output::{db, jnum, notices, num, print_json, print_pairs, print_table, secs};
use super::train::{columns_json, columns_table, csv_options};
use super::{progress, same_file, usage};

pub fn run(a: EncodeArgs) -> Result<()> {
    let started = Instant::now();
    if same_file(&a.input, &a.out) || same_file(&a.book, &a.out) {
        return usage(format!(
            "--out {} would overwrite an input; choose another file for the stream",
            a.out.display()
        ));
    }
    let limits = super::limits(&a.limits, a.max_pixels)?;
    let opts = csv_options(&a.read, None, &limits)?;
    let book_name = a.book.display().to_string();
    let book = format::read_codebook_with(&a.book, &limits)
        .with_context(|| format!("codebook {book_name}"))?;
    if matches!(book.meaning, vqforge::codebook::Meaning::Pixels(_)) {
        return super::palette::encode_image(&a, &book);
    }
    if a.dither.is_some() || a.max_pixels.is_some() {
        return usage("--dither and --max-pixels apply to images encoded with a palette");
    }
    if super::palette::is_image(&a.input) {
        anyhow::bail!(
            "codebook {book_name} was trained on CSV records, but {} is an image; encode images with a palette codebook (vqforge train IMAGE… --size K --out BOOK)",
            a.input.display()
        );
    }
    let layout = layout_of(&book).with_context(|| format!("codebook {book_name}"))?;
    let name = a.input.display().to_string();
    let file = std::fs::File::open(&a.input).with_context(|| format!("opening input {name}"))?;
    let input_bytes = file.metadata().map(|m| m.len()).unwrap_or(0);
    let bar = progress::spinner("encoding");
    let enc = encode_reader(
        std::io::BufReader::with_capacity(1 << 20, file),
        &name,
        &book,
        &opts,
        &|rows| bar.set_message(format!("{rows} rows")),
    )?;
    bar.finish_and_clear();
    format::write_stream(&a.out, &enc.header, &enc.indices)
        .with_context(|| format!("writing stream {}", a.out.display()))?;
    let stream_bytes = std::fs::metadata(&a.out)?.len();
    // The codebook as stored: its file, not a second serialisation.
    let codebook_bytes = std::fs::metadata(&a.book)?.len();
    let counts = metrics::index_counts(&enc.indices, book.size());
    let entropy = metrics::index_entropy_bits(&counts);
    let rows = enc.error.rows;
    // Raw size: every value as a 32-bit float, the time column excluded.
    let raw_bytes = rows * layout.columns.len() as u64 * 4;
    let ratio = raw_bytes as f64 / stream_bytes as f64;
    let ratio_with_book = raw_bytes as f64 / (stream_bytes + codebook_bytes) as f64;
    let seconds = started.elapsed().as_secs_f64();
    notices(&enc.notices);
    let e = &enc.error;
    if a.json {
        return print_json(&json!({
            "size": book.size(),
            "dimension": book.dimension,
            "vectors": enc.indices.len(),
            "rows": rows,
            "mse": e.overall.mse,
            "mse_scaled": e.mse_scaled,
            "max_abs_error": e.overall.max_abs_error,
            "snr_db": jnum(e.overall.snr_db),
            "bits_per_index": enc.header.bits,
            "index_entropy_bits": entropy,
            "stream_bytes": stream_bytes,
            "codebook_bytes": codebook_bytes,
            "input_bytes": input_bytes,
            "raw_bytes": raw_bytes,
            "compression_ratio": ratio,
            "compression_ratio_with_codebook": ratio_with_book,
            "columns": columns_json(e),
            "out": a.out.display().to_string(),
            "seconds": seconds,
            "notices": enc.notices,
        }));
    }
    print_pairs(&[
        (
            "stream",
            format!(
                "{} ({} vectors, {} rows)",
                a.out.display(),
                enc.indices.len(),
                rows
            ),
        ),
        (
            "rate",
            format!(
                "{} bits/index (entropy {} bits)",
                enc.header.bits,
                num(entropy)
            ),
        ),
        (
            "size",
            format!(
                "{stream_bytes} bytes stream + {codebook_bytes} bytes codebook; raw 32-bit values {raw_bytes} bytes"
            ),
        ),
        (
            "compression",
            format!(
                "{}× (stream only), {}× (with codebook)",
                num(ratio),
                num(ratio_with_book)
            ),
        ),
        ("mse", num(e.overall.mse)),
        ("mse (scaled)", num(e.mse_scaled)),
        ("max |error|", num(e.overall.max_abs_error)),
        ("snr", db(e.overall.snr_db)),
        ("time", secs(seconds)),
    ])?;
    println!();
    print_table(&columns_table(e))?;
    eprintln!(
        "caution: lossy; each value may be off by up to the max |error| above. Check it against your requirements before using rebuilt records for safety, billing or compliance"
    );
    Ok(())
}
