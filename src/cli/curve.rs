//! `vqforge curve`: distortion against codebook size and rate for CSV
//! records or images, the knee, and the size that meets a target.

use std::path::Path;
use std::sync::OnceLock;
use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::{json, Value};

use vqforge::atomic::write_all_atomic;
use vqforge::curve::{
    measure_curve, Curve, CurveConfig, CurveEvent, CurvePoint, CurveSource, Fit, Growth,
    ImageSource, InputKind, Quality, RecordSource, Sizes, Target, Verdict, MEMORISING_RATIO,
};
use vqforge::export::{curve_svg, write_curve_csv};
use vqforge::kmeans::{Effort, TrainConfig};

use super::args::{CurveArgs, TargetArgs};
use super::output::{db, jnum, notices, num, print_json, print_table, secs};
use super::palette::{is_image, load_image, palette_config, refuse_image_name_without_image};
use super::train::{csv_options, read_tables, train_config};
use super::{progress, same_file, usage};

fn target_of(t: &TargetArgs) -> Option<Target> {
    t.target_mse
        .map(Target::Mse)
        .or(t.target_psnr.map(Target::PsnrDb))
        .or(t.target_snr.map(Target::SnrDb))
        .or(t.target_de.map(Target::DeltaE2000))
        .or(t.max_bytes.map(Target::MaxBytes))
}

/// The cautions every curve report carries.
pub(super) fn cautions(kind: InputKind) -> Vec<String> {
    let mut c = vec![
        "these figures measure the data given here (and its held-out part), not future data; check the encode report of each new file".to_string(),
    ];
    if kind == InputKind::Records {
        c.insert(
            0,
            "lossy: a rebuilt log is an approximation; each value may be off by up to the max |error| of its size (your units). Check it against your requirements before using rebuilt records for safety, billing or compliance".into(),
        );
    }
    c
}

pub fn run(a: CurveArgs) -> Result<()> {
    let started = Instant::now();
    for (flag, out) in [("--table", &a.table), ("--plot", &a.plot)] {
        let Some(out) = out else { continue };
        if a.inputs.iter().any(|i| same_file(i, out)) {
            return usage(format!(
                "{flag} {} is also an input; choose another file",
                out.display()
            ));
        }
    }
    if let (Some(t), Some(p)) = (&a.table, &a.plot) {
        if same_file(t, p) {
            return usage("--table and --plot name the same file; give each its own");
        }
    }
    for input in &a.inputs {
        refuse_image_name_without_image(input)?;
    }
    let images = a.inputs.iter().filter(|p| is_image(p)).count();
    let kind = match images {
        0 => InputKind::Records,
        n if n == a.inputs.len() => InputKind::Images,
        _ => {
            return usage(
                "the inputs mix images and CSV files; measure a palette curve and a record curve separately",
            )
        }
    };
    let target = target_of(&a.target);
    if let Some(t) = &target {
        t.check_kind(kind)?;
    }
    let mut config =
        CurveConfig::new(train_config(1, &a.kmeans, Effort::Thorough)?).growth(if a.independent {
            Growth::Independent
        } else {
            Growth::Split
        });
    if let Some(s) = &a.sizes {
        config = config.sizes(Sizes::parse(s).context("--sizes")?);
    }
    if let Some(f) = a.holdout {
        config = config.holdout(f);
    }
    if let Some(t) = target {
        config = config.target(t);
    }
    let config = config.check()?;
    let limits = super::limits(&a.limits, a.colour.max_pixels)?;
    if let Some(sizes) = &config.get().sizes {
        super::check_size("--sizes", sizes.largest(), &limits)?;
    }
    let source = match kind {
        InputKind::Records => {
            if a.colour.any() {
                return usage("palette options (--space, --display, --keep, --alpha, --background, --order, --max-pixels) apply to images, not CSV records");
            }
            let opts = csv_options(&a.read, Some(&a.shape), &limits)?;
            let tables = read_tables(&a.inputs, &opts)?;
            CurveSource::Records(RecordSource::new(&tables, &opts, &config)?)
        }
        InputKind::Images => {
            if a.shape.columns.is_some() || a.shape.frame != 1 {
                return usage("--columns and --frame apply to CSV records, not images");
            }
            let largest = config.get().sizes.as_ref().map_or(256, |s| s.largest());
            let palette = palette_config(largest, &a.colour)?;
            let mut list = Vec::new();
            for p in &a.inputs {
                list.push(load_image(p, a.colour.max_pixels)?);
            }
            CurveSource::Images(ImageSource::new(&list, &palette, &config)?)
        }
    };

    let curve = measure_with_progress(&source, &config)?;
    if let Verdict::Unreached { best_size, .. } = curve.recommendation.verdict {
        let example = match target {
            Some(Target::MaxBytes(_)) => String::new(),
            _ => format!(
                " (e.g. --sizes {best_size}..{})",
                best_size.saturating_mul(4)
            ),
        };
        anyhow::bail!("curve: {}{example}", curve.recommendation.reason);
    }
    write_outputs(
        &curve,
        &plot_title(&a.inputs, &curve),
        a.table.as_deref(),
        a.plot.as_deref(),
    )?;
    let seconds = started.elapsed().as_secs_f64();
    notices(&curve.notices);
    let cautions = cautions(kind);
    if a.json {
        print_json(&report_json(
            &a,
            &config.get().train,
            &curve,
            &cautions,
            seconds,
        ))?;
    } else {
        print_report(&a, &curve, seconds)?;
    }
    for c in &cautions {
        eprintln!("caution: {c}");
    }
    Ok(())
}

/// Measures the curve with a progress bar over the listed sizes (weighted
/// by size, as training costs) on stderr, hidden when it is not a terminal.
pub(super) fn measure_with_progress(
    source: &CurveSource,
    config: &vqforge::curve::CheckedCurveConfig,
) -> Result<Curve> {
    let bar: OnceLock<indicatif::ProgressBar> = OnceLock::new();
    let observe = |e: CurveEvent| match e {
        CurveEvent::Listed {
            size,
            index,
            of,
            done,
            total,
        } => {
            let b = bar.get_or_init(|| progress::bar(total, "sizes"));
            b.set_position(done);
            b.set_message(format!("size {size} ({} of {of})", index + 1));
        }
        CurveEvent::Searching { size } => {
            if let Some(b) = bar.get() {
                b.set_message(format!("searching: size {size}"));
            }
        }
    };
    let curve = measure_curve(source, config, &observe)?;
    if let Some(b) = bar.get() {
        b.finish_and_clear();
    }
    Ok(curve)
}

/// Writes the CSV table and the SVG plot of `curve` (those asked for),
/// both made in memory first so a failure leaves neither half-done.
pub(super) fn write_outputs(
    curve: &Curve,
    title: &str,
    table: Option<&Path>,
    plot: Option<&Path>,
) -> Result<()> {
    let mut made: Vec<(&Path, Vec<u8>)> = Vec::new();
    if let Some(path) = table {
        let mut bytes = Vec::new();
        write_curve_csv(&mut bytes, curve)?;
        made.push((path, bytes));
    }
    if let Some(path) = plot {
        made.push((path, curve_svg(curve, title)?.into_bytes()));
    }
    let files: Vec<(&Path, &[u8])> = made.iter().map(|(p, b)| (*p, b.as_slice())).collect();
    write_all_atomic(&files).context("writing the curve")?;
    Ok(())
}

pub(super) fn plot_title(inputs: &[std::path::PathBuf], curve: &Curve) -> String {
    let names: Vec<String> = inputs
        .iter()
        .map(|p| {
            Path::new(p)
                .file_name()
                .map_or_else(|| p.display().to_string(), |n| n.to_string_lossy().into())
        })
        .collect();
    let growth = match curve.growth {
        Growth::Split => "grown by splitting",
        Growth::Independent => "each size trained from scratch",
    };
    format!("{} — {growth}", names.join(", "))
}

pub(super) fn point_json(p: &CurvePoint) -> Value {
    let mut v = json!({
        "size": p.size,
        "mse": p.mse,
        "distortion": p.distortion,
        "bits_per_index": p.rate.bits_per_index,
        "index_entropy_bits": p.rate.index_entropy_bits,
        "codebook_bytes": p.rate.codebook_bytes,
        "stream_bytes": p.rate.stream_bytes,
        "total_bytes": p.rate.total_bytes,
        "compression_ratio": p.rate.compression_ratio,
    });
    let o = v.as_object_mut().expect("an object");
    match p.quality {
        Quality::Records {
            snr_db,
            max_abs_error,
        } => {
            o.insert("snr_db".into(), jnum(snr_db));
            o.insert("max_abs_error".into(), json!(max_abs_error));
        }
        Quality::Images {
            psnr_db,
            delta_e2000_mean,
        } => {
            o.insert("psnr_db".into(), jnum(psnr_db));
            o.insert("delta_e2000_mean".into(), json!(delta_e2000_mean));
        }
    }
    if let Some(h) = &p.holdout {
        o.insert("holdout_mse".into(), json!(h.mse));
        o.insert("holdout_ratio".into(), jnum(Some(h.ratio)));
        o.insert("memorising".into(), json!(h.fit == Fit::Memorises));
    }
    v
}

fn target_json(t: &Target) -> Value {
    let (kind, value) = match *t {
        Target::Mse(x) => ("mse", json!(x)),
        Target::PsnrDb(x) => ("psnr_db", json!(x)),
        Target::SnrDb(x) => ("snr_db", json!(x)),
        Target::DeltaE2000(x) => ("delta_e2000_mean", json!(x)),
        Target::MaxBytes(n) => ("max_bytes", json!(n)),
    };
    json!({ "kind": kind, "value": value })
}

fn report_json(
    a: &CurveArgs,
    train: &TrainConfig,
    curve: &Curve,
    cautions: &[String],
    seconds: f64,
) -> Value {
    json!({
        "points": curve.points.iter().map(point_json).collect::<Vec<_>>(),
        "searched": curve.searched.iter().map(point_json).collect::<Vec<_>>(),
        "knee": curve.knee,
        "recommended": curve.recommendation.size(),
        "reason": curve.recommendation.reason,
        "target": curve.target.as_ref().map(target_json),
        "input": match curve.kind { InputKind::Records => "records", InputKind::Images => "images" },
        "growth": match curve.growth { Growth::Split => "split", Growth::Independent => "independent" },
        "dimension": curve.dimension,
        "vectors": curve.vectors,
        "holdout": a.holdout,
        "held_out": curve.held_out,
        "memorising_ratio": MEMORISING_RATIO,
        "raw_bytes": curve.raw_bytes,
        "seed": a.kmeans.seed,
        "restarts": train.restarts,
        "table": a.table.as_ref().map(|p| p.display().to_string()),
        "plot": a.plot.as_ref().map(|p| p.display().to_string()),
        "notices": curve.notices,
        "cautions": cautions,
        "seconds": seconds,
    })
}

fn print_report(a: &CurveArgs, curve: &Curve, seconds: f64) -> Result<()> {
    let records = curve.kind == InputKind::Records;
    let holdout = curve.held_out > 0;
    let mut header = vec![
        "size",
        if records {
            "mse (scaled)"
        } else {
            "mse (8-bit)"
        },
        if records { "snr" } else { "psnr" },
        if records {
            "max |error|"
        } else {
            "mean ΔE2000"
        },
        "bits/index",
        "entropy",
        "total bytes",
        "ratio",
    ];
    if holdout {
        header.extend(["held-out mse", "held/train"]);
    }
    header.push("");
    let mut rows = vec![header.iter().map(|s| s.to_string()).collect::<Vec<_>>()];
    let mut all: Vec<(&CurvePoint, bool)> = curve
        .points
        .iter()
        .map(|p| (p, false))
        .chain(curve.searched.iter().map(|p| (p, true)))
        .collect();
    all.sort_by_key(|(p, searched)| (p.size, *searched));
    for (p, searched) in all {
        let third = match p.quality {
            Quality::Records { max_abs_error, .. } => num(max_abs_error),
            Quality::Images {
                delta_e2000_mean, ..
            } => num(delta_e2000_mean),
        };
        let mut row = vec![
            p.size.to_string(),
            num(p.mse),
            db(p.db()),
            third,
            p.rate.bits_per_index.to_string(),
            format!("{:.2}", p.rate.index_entropy_bits),
            p.rate.total_bytes.to_string(),
            format!("{:.1}×", p.rate.compression_ratio),
        ];
        if holdout {
            match &p.holdout {
                Some(h) => {
                    let flag = if h.fit == Fit::Memorises { " !" } else { "" };
                    row.push(num(h.mse));
                    row.push(format!("{:.2}{flag}", h.ratio));
                }
                None => row.extend([String::new(), String::new()]),
            }
        }
        let mut marks = Vec::new();
        if searched {
            marks.push("searched");
        }
        if curve.knee == Some(p.size) && !searched {
            marks.push("knee");
        }
        if curve.recommendation.size() == Some(p.size) {
            marks.push("recommended");
        }
        row.push(marks.join(", "));
        rows.push(row);
    }
    print_table(&rows)?;
    println!();
    let raw = if records {
        "every value as a 32-bit float"
    } else {
        "3 bytes per pixel"
    };
    println!(
        "{} {} of dimension {}{}; ratio: raw ({raw}, {} bytes) against stream + codebook bytes.",
        curve.vectors,
        if records { "vectors" } else { "pixels" },
        curve.dimension,
        if holdout {
            format!(
                ", {} held out ({}); '!' marks a held-out mse above {MEMORISING_RATIO} × the training mse",
                curve.held_out,
                if records {
                    "contiguous blocks"
                } else {
                    "square tiles"
                }
            )
        } else {
            String::new()
        },
        curve.raw_bytes
    );
    match curve.knee {
        Some(k) => println!("knee: {k}"),
        None => println!("knee: none found"),
    }
    match curve.recommendation.size() {
        Some(k) => println!("recommended: {k} ({})", curve.recommendation.reason),
        None => println!("recommended: none ({})", curve.recommendation.reason),
    }
    for (what, path) in [("table", &a.table), ("plot", &a.plot)] {
        if let Some(p) = path {
            println!("{what}: {}", p.display());
        }
    }
    println!("time: {}", secs(seconds));
    Ok(())
}
