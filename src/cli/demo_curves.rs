//! The curve part of `vqforge demo`: how big the codebook of the sample
//! log and the palette of the sample splash screen should be. Each curve
//! goes into the output folder as an SVG plot and a CSV table, and a short
//! summary is printed.

use std::path::Path;

use anyhow::{Context, Result};
use serde_json::{json, Value};

use vqforge::codebook::Scaling;
use vqforge::colour::DisplayFormat;
use vqforge::curve::{CurveConfig, CurveSource, Fit, ImageSource, InputKind, RecordSource, Target};
use vqforge::kmeans::TrainConfig;
use vqforge::load::{read_table, CsvOptions};
use vqforge::palette::PaletteConfig;

use super::args::DemoArgs;
use super::curve::{cautions, measure_with_progress, point_json, write_outputs};
use super::demo::{FRAME, LOG};
use super::output::{num, print_table};
use super::palette::load_image;

/// A fifth of the log held out, to show where larger codebooks stop generalising.
const LOG_HOLDOUT: f64 = 0.2;
/// The invented display team wants the splash at 30 dB PSNR or better.
const SPLASH_PSNR_DB: f64 = 30.0;

/// One measured curve: its summary row and JSON.
fn summary(
    name: &str,
    curve: &vqforge::curve::Curve,
    plot: &Path,
    table: &Path,
) -> (Vec<String>, Value) {
    let memorising: Vec<String> = curve
        .points
        .iter()
        .filter(|p| p.holdout.as_ref().is_some_and(|h| h.fit == Fit::Memorises))
        .map(|p| p.size.to_string())
        .collect();
    let sizes: Vec<String> = curve.points.iter().map(|p| p.size.to_string()).collect();
    let recommended = curve.recommendation.size();
    let rec_point = recommended.and_then(|k| {
        curve
            .points
            .iter()
            .chain(&curve.searched)
            .find(|p| p.size == k)
    });
    let row = vec![
        name.to_string(),
        format!("{}..{}", sizes[0], sizes[sizes.len() - 1]),
        curve.knee.map_or("none".into(), |k| k.to_string()),
        recommended.map_or("none".into(), |k| k.to_string()),
        rec_point.map_or(String::new(), |p| num(p.mse)),
        rec_point.map_or(String::new(), |p| p.rate.total_bytes.to_string()),
        if memorising.is_empty() {
            "—".into()
        } else {
            memorising.join(", ")
        },
        plot.display().to_string(),
    ];
    let v = json!({
        "input": name,
        "points": curve.points.iter().map(point_json).collect::<Vec<_>>(),
        "searched": curve.searched.iter().map(point_json).collect::<Vec<_>>(),
        "knee": curve.knee,
        "recommended": recommended,
        "reason": curve.recommendation.reason,
        "dimension": curve.dimension,
        "vectors": curve.vectors,
        "held_out": curve.held_out,
        "plot": plot.display().to_string(),
        "table": table.display().to_string(),
        "cautions": cautions(curve.kind),
    });
    (row, v)
}

/// Runs both curves; prints their summary unless `--json`; returns their JSON.
pub fn run(a: &DemoArgs) -> Result<Value> {
    let log = a.inputs.join(LOG);
    let name = log.display().to_string();
    let text = std::fs::read(&log).with_context(|| format!("reading sample input {name}"))?;
    let opts = CsvOptions::new().frame(FRAME).scaling(Scaling::ZScore);
    let table = read_table(&text[..], &name, &opts)?;
    let config = CurveConfig::new(TrainConfig::new(1))
        .holdout(LOG_HOLDOUT)
        .check()?;
    let source = CurveSource::Records(RecordSource::new(&[table], &opts, &config)?);
    let curve = measure_with_progress(&source, &config)?;
    let (plot, csv) = (
        a.out_dir.join("greenhouse-curve.svg"),
        a.out_dir.join("greenhouse-curve.csv"),
    );
    write_outputs(
        &curve,
        &format!("{LOG}, frames of {FRAME} rows, {LOG_HOLDOUT} held out — grown by splitting"),
        Some(&csv),
        Some(&plot),
    )?;
    let (log_row, log_json) = summary(LOG, &curve, &plot, &csv);

    let splash = a.inputs.join("splash.png");
    let image =
        load_image(&splash, None).with_context(|| format!("sample image {}", splash.display()))?;
    let mut palette = PaletteConfig::new(256);
    palette.display = DisplayFormat::Rgb565;
    let config = CurveConfig::new(TrainConfig::new(1))
        .target(Target::PsnrDb(SPLASH_PSNR_DB))
        .check()?;
    let source = CurveSource::Images(ImageSource::new(&[image], &palette, &config)?);
    let curve = measure_with_progress(&source, &config)?;
    debug_assert_eq!(curve.kind, InputKind::Images);
    let (plot, csv) = (
        a.out_dir.join("splash-curve.svg"),
        a.out_dir.join("splash-curve.csv"),
    );
    write_outputs(
        &curve,
        &format!(
            "splash.png on an RGB565 display, target PSNR {SPLASH_PSNR_DB} dB — grown by splitting"
        ),
        Some(&csv),
        Some(&plot),
    )?;
    let (splash_row, splash_json) = summary("splash.png", &curve, &plot, &csv);

    if !a.json {
        println!(
            "\nHow big should they be? Distortion against size (curves grown by splitting; \
             the log with {LOG_HOLDOUT} of its frames held out, the splash for PSNR ≥ {SPLASH_PSNR_DB} dB on RGB565)\n"
        );
        print_table(&[
            [
                "input",
                "sizes",
                "knee",
                "recommended",
                "mse there",
                "total bytes",
                "held-out mse > 1.5 × training at",
                "plot",
            ]
            .map(String::from)
            .to_vec(),
            log_row,
            splash_row,
        ])?;
        println!(
            "\nmse: scaled units per value for the log, 8-bit sRGB per channel for the splash. \
             The curves measure these sample files, not future data; tables beside the plots (.csv)."
        );
    }
    Ok(json!({ "log": log_json, "splash": splash_json }))
}
