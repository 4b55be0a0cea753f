//! `vqforge train`: learn a codebook from CSV records.

use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::codebook::Scaling;
use vqforge::format;
use vqforge::kmeans::{Effort, Sampling, Seeding, TrainConfig, TrainEvent};
use vqforge::limits::Limits;
use vqforge::load::{frames_of, read_table, CsvOptions, Missing, RecordTable, TimeChoice};
use vqforge::records::{train_tables, RecordError};

use super::args::{
    EffortArg, KmeansArgs, MissingArg, ReadArgs, SamplingArg, ScaleArg, SeedingArg, ShapeArgs,
    TrainArgs,
};
use super::output::{db, jnum, notices, num, print_json, print_pairs, print_table, secs};
use super::{check_size, progress, same_file, usage};

/// CSV reading options from the flags.
pub fn csv_options(
    read: &ReadArgs,
    shape: Option<&ShapeArgs>,
    limits: &Limits,
) -> Result<CsvOptions> {
    let delimiter = match read.delimiter.as_str() {
        "tab" | "\\t" => b'\t',
        s if s.len() == 1 && s.is_ascii() => s.as_bytes()[0],
        s => {
            return usage(format!(
                "--delimiter must be one ASCII character or 'tab', got {s:?}"
            ))
        }
    };
    let mut o = CsvOptions::new()
        .delimiter(delimiter)
        .max_vectors(limits.max_vectors)
        .missing(match read.missing {
            MissingArg::Error => Missing::Error,
            MissingArg::Skip => Missing::Skip,
        })
        .time(match (&read.time, read.no_time) {
            (_, true) => TimeChoice::Off,
            (Some(c), false) => TimeChoice::Named(c.clone()),
            (None, false) => TimeChoice::Auto,
        });
    if let Some(s) = shape {
        if let Some(cols) = &s.columns {
            o = o.columns(cols.iter().map(|c| c.trim().to_string()));
        }
        o = o.frame(s.frame).scaling(match s.scale {
            ScaleArg::None => Scaling::None,
            ScaleArg::Zscore => Scaling::ZScore,
            ScaleArg::Minmax => Scaling::MinMax,
        });
    }
    o.check()?;
    Ok(o)
}

/// Reads every input as one CSV table; all of them together may give at
/// most `opts.max_vectors` vectors.
pub fn read_tables(inputs: &[std::path::PathBuf], opts: &CsvOptions) -> Result<Vec<RecordTable>> {
    let mut tables = Vec::new();
    let mut vectors = 0u64;
    for input in inputs {
        let name = input.display().to_string();
        let file = std::fs::File::open(input).with_context(|| format!("opening input {name}"))?;
        let table = read_table(std::io::BufReader::new(file), &name, opts)?;
        vectors += frames_of(table.rows(), opts.frame) as u64;
        tables.push(table);
    }
    if tables.len() > 1 {
        let limits = Limits {
            max_vectors: opts.max_vectors,
            ..Limits::default()
        };
        limits.check_vectors("reading records", "the training set", vectors)?;
    }
    Ok(tables)
}

/// k-means configuration from the flags.
///
/// `effort` is the command's default when `--effort` is not given; the
/// default number of restarts follows the effort.
pub fn train_config(size: usize, k: &KmeansArgs, effort: Effort) -> Result<TrainConfig> {
    let effort = match k.effort {
        Some(EffortArg::Quick) => Effort::Quick,
        Some(EffortArg::Thorough) => Effort::Thorough,
        None => effort,
    };
    let restarts = k.restarts.unwrap_or(match effort {
        Effort::Quick => 1,
        Effort::Thorough => 3,
    });
    Ok(TrainConfig::new(size)
        .effort(effort)
        .seeding(match k.seeding {
            SeedingArg::KMeansPlusPlus => Seeding::KMeansPlusPlus,
            SeedingArg::Split => Seeding::Split,
            SeedingArg::Random => Seeding::Random,
        })
        .restarts(restarts)
        .max_iterations(k.max_iter)
        .tolerance(k.tolerance)
        .seed(k.seed)
        .sampling(match k.sampling {
            SamplingArg::Auto => Sampling::Auto,
            SamplingArg::Never => Sampling::Never,
        }))
}

/// Per-column error as JSON.
pub fn columns_json(e: &RecordError) -> serde_json::Value {
    json!(e
        .columns
        .iter()
        .zip(&e.per_column)
        .map(|(name, c)| json!({
            "column": name,
            "mse": c.mse,
            "max_abs_error": c.max_abs_error,
            "snr_db": jnum(c.snr_db),
        }))
        .collect::<Vec<_>>())
}

/// Per-column error as table rows.
pub fn columns_table(e: &RecordError) -> Vec<Vec<String>> {
    let mut rows = vec![vec![
        "column".to_string(),
        "mse".to_string(),
        "max |error|".to_string(),
        "snr".to_string(),
    ]];
    for (name, c) in e.columns.iter().zip(&e.per_column) {
        rows.push(vec![
            name.clone(),
            num(c.mse),
            num(c.max_abs_error),
            db(c.snr_db),
        ]);
    }
    rows
}

pub fn run(a: TrainArgs) -> Result<()> {
    // Before choosing images or records: an image input was once replaced
    // by the palette codebook because only the CSV path checked this.
    for input in &a.inputs {
        if same_file(input, &a.out) {
            return usage(format!(
                "--out {} is also an input; choose another file for the codebook",
                a.out.display()
            ));
        }
    }
    for input in &a.inputs {
        super::palette::refuse_image_name_without_image(input)?;
    }
    let images = a
        .inputs
        .iter()
        .filter(|p| super::palette::is_image(p))
        .count();
    if images == a.inputs.len() {
        return super::palette::train_images(a);
    }
    if images > 0 {
        return usage(
            "the inputs mix images and CSV files; train a palette and a record codebook separately",
        );
    }
    if a.colour.any() {
        return usage("palette options (--space, --display, --keep, --alpha, --background, --order, --max-pixels) apply to images, not CSV records");
    }
    let started = Instant::now();
    let limits = super::limits(&a.limits, None)?;
    check_size("--size", a.size, &limits)?;
    let opts = csv_options(&a.read, Some(&a.shape), &limits)?;
    let config = train_config(a.size, &a.kmeans, Effort::Thorough)?.check()?;
    let tables = read_tables(&a.inputs, &opts)?;
    let bar = progress::spinner("training");
    let restarts = config.get().restarts;
    let observe = |e: TrainEvent| match e {
        TrainEvent::RestartStarted { restart, of } => {
            bar.set_message(format!("restart {}/{of}", restart + 1))
        }
        TrainEvent::Iteration {
            restart,
            iteration,
            distortion,
        } => bar.set_message(format!(
            "restart {}/{restarts}, iteration {iteration}, distortion {}",
            restart + 1,
            num(distortion)
        )),
    };
    let t = train_tables(&tables, &opts, &config, &observe)?;
    bar.finish_and_clear();
    format::write_codebook(&a.out, &t.codebook)
        .with_context(|| format!("writing codebook {}", a.out.display()))?;
    let seconds = started.elapsed().as_secs_f64();
    notices(&t.notices);
    let r = &t.report;
    if a.json {
        return print_json(&json!({
            "size": r.size,
            "requested_size": r.requested_size,
            "dimension": t.codebook.dimension,
            "vectors": t.vectors,
            "rows": t.rows,
            "distinct_vectors": r.distinct_vectors,
            "mse": t.error.overall.mse,
            "mse_scaled": t.error.mse_scaled,
            "max_abs_error": t.error.overall.max_abs_error,
            "snr_db": jnum(t.error.overall.snr_db),
            "iterations": r.iterations,
            "stopped_by": r.stopped_by.as_str(),
            "restarts": r.restart_distortions.len(),
            "best_restart": r.best_restart,
            "effort": r.effort.as_str(),
            "coarse_start_cells": r.coarse_vectors,
            "sample_draws": r.sample_draws,
            "seeding": r.seeding.as_str(),
            "seed": r.seed,
            "columns": columns_json(&t.error),
            "out": a.out.display().to_string(),
            "seconds": seconds,
            "notices": t.notices,
        }));
    }
    print_pairs(&[
        (
            "codebook",
            format!(
                "{} ({} codewords × {} components)",
                a.out.display(),
                r.size,
                t.codebook.dimension
            ),
        ),
        (
            "trained on",
            format!(
                "{} rows → {} vectors ({} distinct)",
                t.rows, t.vectors, r.distinct_vectors
            ),
        ),
        (
            "k-means",
            format!(
                "{}, {} restart(s), {} effort, seed {}, best run: {} iteration(s), stopped: {}",
                r.seeding.as_str(),
                r.restart_distortions.len(),
                r.effort.as_str(),
                r.seed,
                r.iterations,
                r.stopped_by.as_str()
            ),
        ),
        ("mse (scaled)", num(t.error.mse_scaled)),
        ("time", secs(seconds)),
    ])?;
    println!();
    print_table(&columns_table(&t.error))
}
