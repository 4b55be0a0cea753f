//! `vqforge demo`: the whole job on the bundled (invented) sample inputs.
//! Records: train codebooks of several sizes on the sample log, encode,
//! decode, and show what each size costs and loses. Images: fit 16-colour
//! RGB565 palettes to the sample splash screen and icons (see
//! [`super::demo_images`]) and write them as indexed PNGs and C source.
//! Curves: distortion against size for the log and the splash, with plots
//! (see [`super::demo_curves`]).

use std::time::Instant;

use anyhow::{Context, Result};
use serde_json::json;

use vqforge::atomic::AtomicFile;
use vqforge::codebook::Scaling;
use vqforge::format;
use vqforge::kmeans::TrainConfig;
use vqforge::load::{read_table, CsvOptions};
use vqforge::metrics;
use vqforge::records::{decode_to_writer, encode_reader, train_tables};

use super::args::DemoArgs;
use super::output::{notices, num, print_json, print_table};
use super::progress;

/// The sample log, and the rows joined into one vector.
pub(super) const LOG: &str = "greenhouse.csv";
pub(super) const FRAME: usize = 3;
const SIZES: [usize; 4] = [16, 64, 256, 1024];

pub fn run(a: DemoArgs) -> Result<()> {
    let started = Instant::now();
    let mut report = records(&a)?;
    let images = super::demo_images::run(&a)?;
    let curves = super::demo_curves::run(&a)?;
    let seconds = started.elapsed().as_secs_f64();
    if a.json {
        report["images"] = json!(images);
        report["curves"] = curves;
        report["out_dir"] = json!(a.out_dir.display().to_string());
        report["seconds"] = json!(seconds);
        return print_json(&report);
    }
    println!(
        "\nAll outputs are in {}/ ({seconds:.1} s in all).",
        a.out_dir.display()
    );
    Ok(())
}

/// The record part: prints its table (unless `--json`) and returns its JSON
/// fields.
fn records(a: &DemoArgs) -> Result<serde_json::Value> {
    let started = Instant::now();
    let input = a.inputs.join(LOG);
    let name = input.display().to_string();
    let text = std::fs::read(&input).with_context(|| {
        format!("reading sample input {name} (run the demo from the project folder, or pass --inputs DIR)")
    })?;
    std::fs::create_dir_all(&a.out_dir)
        .with_context(|| format!("creating {}", a.out_dir.display()))?;
    let opts = CsvOptions::new().frame(FRAME).scaling(Scaling::ZScore);
    let table = read_table(&text[..], &name, &opts)?;
    if !a.json {
        println!(
            "Sample log {name} (invented: a made-up greenhouse monitor, 4 channels every 5 minutes for 6 weeks)"
        );
        println!(
            "{} rows; columns {}; {} rows per vector, z-scored\n",
            table.rows(),
            table.columns.join(", "),
            FRAME
        );
    }
    let bar = progress::bar(SIZES.len() as u64, "sizes");
    let mut points = Vec::new();
    let mut rows = vec![vec![
        "size".to_string(),
        "bits/index".to_string(),
        "stream bytes".to_string(),
        "ratio".to_string(),
        "mse (scaled)".to_string(),
        "max |error| air_temp_c".to_string(),
        "snr".to_string(),
    ]];
    for &k in &SIZES {
        bar.set_message(format!("k = {k}"));
        let config = TrainConfig::new(k).check()?;
        let t = train_tables(std::slice::from_ref(&table), &opts, &config, &|_| {})?;
        let book_path = a.out_dir.join(format!("greenhouse-{k}.vqb"));
        let stream_path = a.out_dir.join(format!("greenhouse-{k}.vqs"));
        let csv_path = a.out_dir.join(format!("greenhouse-{k}-decoded.csv"));
        format::write_codebook(&book_path, &t.codebook)?;
        let enc = encode_reader(&text[..], &name, &t.codebook, &opts, &|_| {})?;
        format::write_stream(&stream_path, &enc.header, &enc.indices)?;
        let mut file = AtomicFile::create(&csv_path)?;
        decode_to_writer(&enc.header, &enc.indices, &t.codebook, &mut file)?;
        file.commit()?;
        let stream_bytes = std::fs::metadata(&stream_path)?.len();
        let book_bytes = std::fs::metadata(&book_path)?.len();
        let raw = enc.error.rows * table.columns.len() as u64 * 4;
        let ratio = raw as f64 / (stream_bytes + book_bytes) as f64;
        let entropy =
            metrics::index_entropy_bits(&metrics::index_counts(&enc.indices, t.codebook.size()));
        let temp = &enc.error.per_column[0];
        rows.push(vec![
            k.to_string(),
            enc.header.bits.to_string(),
            stream_bytes.to_string(),
            format!("{ratio:.1}×"),
            num(enc.error.mse_scaled),
            num(temp.max_abs_error),
            super::output::db(enc.error.overall.snr_db),
        ]);
        points.push(json!({
            "size": t.codebook.size(),
            "bits_per_index": enc.header.bits,
            "index_entropy_bits": entropy,
            "stream_bytes": stream_bytes,
            "codebook_bytes": book_bytes,
            "compression_ratio_with_codebook": ratio,
            "mse": enc.error.overall.mse,
            "mse_scaled": enc.error.mse_scaled,
            "max_abs_error": enc.error.overall.max_abs_error,
            "columns": super::train::columns_json(&enc.error),
            "codebook": book_path.display().to_string(),
            "stream": stream_path.display().to_string(),
            "decoded": csv_path.display().to_string(),
        }));
        if !a.json {
            notices(&t.notices);
        }
        bar.inc(1);
    }
    bar.finish_and_clear();
    let seconds = started.elapsed().as_secs_f64();
    let report = json!({
        "input": name,
        "rows": table.rows(),
        "frame": FRAME,
        "points": points,
        "records_seconds": seconds,
    });
    if a.json {
        return Ok(report);
    }
    print_table(&rows)?;
    println!("\nratio: raw 32-bit values against stream + codebook bytes ({seconds:.1} s).");
    println!(
        "Caution: the rebuilt log is an approximation. A short event (the invented heater trip on day 23) can be smoothed away; \
         check the max |error| against your requirements before relying on rebuilt records for safety, billing or compliance."
    );
    Ok(report)
}
