//! `vqforge decode`: rebuild CSV records from a stream and its codebook.

use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::atomic::AtomicFile;
use vqforge::format;
use vqforge::records::decode_to_writer;

use super::args::DecodeArgs;
use super::output::{print_json, print_pairs, secs};
use super::{same_file, usage};

pub fn run(a: DecodeArgs) -> Result<()> {
    let started = Instant::now();
    if same_file(&a.stream, &a.out) || same_file(&a.book, &a.out) {
        return usage(format!(
            "--out {} would overwrite an input; choose another file",
            a.out.display()
        ));
    }
    let book_name = a.book.display().to_string();
    let stream_name = a.stream.display().to_string();
    let limits = super::limits(&a.limits, a.max_pixels)?;
    let book = format::read_codebook_with(&a.book, &limits)
        .with_context(|| format!("codebook {book_name}"))?;
    let (header, indices) = format::read_stream_with(&a.stream, &limits)
        .with_context(|| format!("stream {stream_name}"))?;
    format::check_stream_matches(&header, &book)
        .with_context(|| format!("stream {stream_name} with codebook {book_name}"))?;
    let out_name = a.out.display().to_string();
    if let Some(info) = header.image {
        limits
            .check_pixels(
                "decoding image",
                "the image",
                u64::from(info.width) * u64::from(info.height),
            )
            .with_context(|| format!("stream {stream_name}"))?;
        let bytes = super::palette::decode_image(&header, &indices, &book, &a.out)?;
        let seconds = started.elapsed().as_secs_f64();
        if a.json {
            return print_json(&json!({
                "size": book.size(),
                "dimension": book.dimension,
                "vectors": indices.len(),
                "width": info.width,
                "height": info.height,
                "output_bytes": bytes,
                "out": out_name,
                "seconds": seconds,
            }));
        }
        return print_pairs(&[
            (
                "image",
                format!(
                    "{out_name} ({}×{} pixels, {bytes} bytes)",
                    info.width, info.height
                ),
            ),
            ("time", secs(seconds)),
        ]);
    }
    // AtomicFile buffers its writes itself.
    let mut file = AtomicFile::create(&a.out).with_context(|| format!("writing {out_name}"))?;
    let rows = decode_to_writer(&header, &indices, &book, &mut file)
        .with_context(|| format!("writing {out_name}"))?;
    file.commit()
        .with_context(|| format!("writing {out_name}"))?;
    let seconds = started.elapsed().as_secs_f64();
    if a.json {
        return print_json(&json!({
            "size": book.size(),
            "dimension": book.dimension,
            "vectors": indices.len(),
            "rows": rows,
            "out": out_name,
            "seconds": seconds,
        }));
    }
    print_pairs(&[
        ("records", format!("{out_name} ({rows} rows)")),
        (
            "from",
            format!("{} vectors of {stream_name}", indices.len()),
        ),
        ("time", secs(seconds)),
    ])
}
