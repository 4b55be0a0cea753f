//! `vqforge info FILE`: what a codebook or stream file holds.

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::codebook::{Codebook, Meaning, Scaling, TimeAxis};
use vqforge::format::{self, FileKind, StreamHeader};
use vqforge::load::format_time;
use vqforge::metrics;

use super::args::InfoArgs;
use super::output::{num, print_json, print_pairs};

pub fn run(a: InfoArgs) -> Result<()> {
    let name = a.file.display().to_string();
    let limits = super::limits(&a.limits, None)?;
    let kind = format::detect_file_kind(&a.file).with_context(|| format!("reading {name}"))?;
    let file_bytes = || -> Result<usize> {
        let len = std::fs::metadata(&a.file)
            .with_context(|| format!("reading {name}"))?
            .len();
        Ok(usize::try_from(len)?)
    };
    match kind {
        Some(FileKind::Codebook) => {
            let book = format::read_codebook_with(&a.file, &limits)?;
            codebook(&book, file_bytes()?, a.json)
        }
        Some(FileKind::Stream) => {
            let (header, indices) = format::read_stream_with(&a.file, &limits)?;
            stream(&header, &indices, file_bytes()?, a.json)
        }
        None => anyhow::bail!(
            "{name}: not a vqforge codebook or stream file (it does not start with either file's magic tag)"
        ),
    }
}

pub fn scaling_name(s: Scaling) -> &'static str {
    match s {
        Scaling::None => "none",
        Scaling::ZScore => "zscore",
        Scaling::MinMax => "minmax",
    }
}

fn codebook(book: &Codebook, file_bytes: usize, as_json: bool) -> Result<()> {
    let fp = format::fingerprint(book)?;
    let t = &book.training;
    let layout = match &book.meaning {
        Meaning::Records(l) => Some(l),
        Meaning::Plain | Meaning::Pixels(_) => None,
    };
    let pixels = match &book.meaning {
        Meaning::Pixels(p) => Some(p),
        _ => None,
    };
    if as_json {
        let meaning = match (layout, pixels) {
            (_, Some(p)) => {
                let palette = vqforge::palette::Palette::from_codebook(book)?;
                json!({
                    "kind": "palette",
                    "space": p.space.name(),
                    "display": p.display.name(),
                    "transparent_entry": p.transparent_entry,
                    "pinned": p.pinned.iter().map(|c| vqforge::palette::hex(*c)).collect::<Vec<_>>(),
                    "palette": palette.entries.iter().map(|e| vqforge::palette::hex([e[0], e[1], e[2]])).collect::<Vec<_>>(),
                })
            }
            (Some(l), None) => json!({
                "kind": "records",
                "columns": l.columns,
                "frame": l.frame,
                "scaling": scaling_name(l.scaling),
                "scales": l.scales.iter().map(|s| json!({"offset": s.offset, "factor": s.factor})).collect::<Vec<_>>(),
                "time_column": l.time_column,
            }),
            (None, None) => json!({"kind": "plain"}),
        };
        return print_json(&json!({
            "file": "codebook",
            "file_bytes": file_bytes,
            "fingerprint": format!("{fp:08x}"),
            "size": book.size(),
            "dimension": book.dimension,
            "bits_per_index": book.bits_per_index(),
            "meaning": meaning,
            "training": {
                "seed": t.seed,
                "restarts": t.restarts,
                "seeding": t.seeding.as_str(),
                "iterations": t.iterations,
                "stopped_by": t.stopped_by.as_str(),
                "vectors": t.vectors,
                "distinct_vectors": t.distinct_vectors,
                "mse_scaled": t.mse_scaled,
            },
        }));
    }
    let mut pairs = vec![
        ("file", "vqforge codebook".to_string()),
        ("bytes", file_bytes.to_string()),
        ("fingerprint", format!("{fp:08x}")),
        ("codewords", book.size().to_string()),
        ("dimension", book.dimension.to_string()),
        ("bits per index", book.bits_per_index().to_string()),
    ];
    if let Some(l) = layout {
        pairs.push(("columns", l.columns.join(", ")));
        pairs.push(("frame", format!("{} row(s) per vector", l.frame)));
        pairs.push(("scaling", scaling_name(l.scaling).to_string()));
        pairs.push((
            "time column",
            l.time_column.clone().unwrap_or_else(|| "none".into()),
        ));
    }
    if let Some(p) = pixels {
        let palette = vqforge::palette::Palette::from_codebook(book)?;
        pairs.push((
            "palette",
            format!(
                "for {}, fitted in {}{}",
                p.display.name(),
                p.space.name(),
                if p.transparent_entry {
                    ", entry 0 transparent"
                } else {
                    ""
                }
            ),
        ));
        pairs.push((
            "colours",
            palette
                .entries
                .iter()
                .map(|e| vqforge::palette::hex([e[0], e[1], e[2]]))
                .collect::<Vec<_>>()
                .join(" "),
        ));
    }
    pairs.push((
        "trained",
        format!(
            "seed {}, {} restart(s), {}, {} iteration(s), stopped: {}",
            t.seed,
            t.restarts,
            t.seeding.as_str(),
            t.iterations,
            t.stopped_by.as_str()
        ),
    ));
    pairs.push((
        "training vectors",
        format!("{} ({} distinct)", t.vectors, t.distinct_vectors),
    ));
    pairs.push(("mse (scaled)", num(t.mse_scaled)));
    print_pairs(&pairs)
}

fn time_text(axis: &TimeAxis) -> String {
    format!(
        "starts {}, step {}",
        format_time(axis.start, axis.format),
        num(axis.step)
    )
}

fn stream(header: &StreamHeader, indices: &[u32], file_bytes: usize, as_json: bool) -> Result<()> {
    let counts = metrics::index_counts(indices, header.size as usize);
    let entropy = metrics::index_entropy_bits(&counts);
    let used = counts.iter().filter(|&&c| c > 0).count();
    if as_json {
        let records = header.records.as_ref().map(|r| {
            json!({
                "rows": r.rows,
                "time": r.time.as_ref().map(|t| json!({
                    "start": format_time(t.start, t.format),
                    "step": t.step,
                })),
            })
        });
        return print_json(&json!({
            "file": "stream",
            "file_bytes": file_bytes,
            "size": header.size,
            "dimension": header.dimension,
            "vectors": header.vectors,
            "bits_per_index": header.bits,
            "index_entropy_bits": entropy,
            "codewords_used": used,
            "codebook_fingerprint": format!("{:08x}", header.codebook_fingerprint),
            "records": records,
            "image": header.image.map(|i| json!({"width": i.width, "height": i.height})),
        }));
    }
    let mut pairs = vec![
        ("file", "vqforge index stream".to_string()),
        ("bytes", file_bytes.to_string()),
        ("vectors", header.vectors.to_string()),
        ("codebook size", header.size.to_string()),
        ("dimension", header.dimension.to_string()),
        ("bits per index", header.bits.to_string()),
        ("index entropy", format!("{} bits", num(entropy))),
        ("codewords used", format!("{used} of {}", header.size)),
        (
            "made with codebook",
            format!("{:08x}", header.codebook_fingerprint),
        ),
    ];
    if let Some(i) = &header.image {
        pairs.push(("image", format!("{}×{} pixels", i.width, i.height)));
    }
    if let Some(r) = &header.records {
        pairs.push(("rows", r.rows.to_string()));
        pairs.push((
            "time",
            r.time
                .as_ref()
                .map_or_else(|| "row numbers".to_string(), time_text),
        ));
    }
    print_pairs(&pairs)
}
