//! What the user typed: clap structs only. Conversion into library configs
//! happens in each subcommand's module.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand, ValueEnum};

/// Vector quantisation: learn a codebook with k-means, encode every record to
/// its nearest codeword, rebuild approximations and measure what was lost.
#[derive(Debug, Parser)]
#[command(name = "vqforge", version, propagate_version = true)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Learn a codebook from CSV records.
    Train(TrainArgs),
    /// Replace every record (or frame of records) by its nearest codeword's index.
    Encode(EncodeArgs),
    /// Rebuild records (CSV) from an index stream and its codebook.
    Decode(DecodeArgs),
    /// Show what a codebook or stream file holds.
    Info(InfoArgs),
    /// Run the whole job on the bundled sample inputs.
    Demo(DemoArgs),
}

/// Per-column scaling before training.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ScaleArg {
    /// Use values as they are (distances in the columns' own units).
    None,
    /// (x − mean) / population standard deviation.
    Zscore,
    /// (x − min) / (max − min).
    Minmax,
}

/// What to do with a missing or non-numeric cell.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum MissingArg {
    /// Stop with an error naming the line and column.
    Error,
    /// Drop the row and report how many were dropped.
    Skip,
}

/// How the initial codewords are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SeedingArg {
    /// Greedy k-means++.
    #[value(name = "kmeans++")]
    KMeansPlusPlus,
    /// LBG splitting from the mean.
    Split,
    /// Random input vectors.
    Random,
}

/// Reading CSV records.
#[derive(Debug, Clone, Args)]
pub struct ReadArgs {
    /// Field delimiter (one character, e.g. ';' or 'tab').
    #[arg(long, value_name = "CHAR", default_value = ",")]
    pub delimiter: String,

    /// Missing or non-numeric cells: stop with an error, or drop the row.
    #[arg(long, value_enum, value_name = "RULE", default_value = "error")]
    pub missing: MissingArg,

    /// The time column (default: a column named time/timestamp/date/datetime,
    /// or a first column holding dates).
    #[arg(long, value_name = "COLUMN", conflicts_with = "no_time")]
    pub time: Option<String>,

    /// Treat no column as time.
    #[arg(long)]
    pub no_time: bool,
}

/// Shaping CSV records into vectors (training only; encode takes these from the codebook).
#[derive(Debug, Clone, Args)]
pub struct ShapeArgs {
    /// Value columns by header name, comma-separated (default: every numeric column).
    #[arg(long, value_name = "A,B,…", value_delimiter = ',')]
    pub columns: Option<Vec<String>>,

    /// Join N consecutive rows into one vector.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub frame: usize,

    /// Per-column scaling, stored in the codebook and undone on decode.
    #[arg(long, value_enum, value_name = "RULE", default_value = "zscore")]
    pub scale: ScaleArg,
}

/// k-means settings.
#[derive(Debug, Clone, Args)]
pub struct KmeansArgs {
    /// Master seed; every restart's seed derives from it.
    #[arg(long, default_value_t = vqforge::kmeans::DEFAULT_SEED)]
    pub seed: u64,

    /// Independent runs; the lowest distortion is kept.
    #[arg(long, value_name = "N", default_value_t = 3)]
    pub restarts: u32,

    /// Lloyd iteration cap per run.
    #[arg(long, value_name = "N", default_value_t = 300)]
    pub max_iter: u32,

    /// Stop when the relative improvement falls below this (0: until no vector moves).
    #[arg(long, value_name = "X", default_value_t = 1e-6)]
    pub tolerance: f64,

    /// How the initial codewords are chosen.
    #[arg(long, value_enum, value_name = "METHOD", default_value = "kmeans++")]
    pub seeding: SeedingArg,
}

#[derive(Debug, Args)]
pub struct TrainArgs {
    /// CSV files with a header row (several files are read as one table).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,

    /// Number of codewords (k ≥ 1).
    #[arg(long, short = 'k', value_name = "K")]
    pub size: usize,

    /// Where to write the codebook.
    #[arg(long, short, value_name = "BOOK")]
    pub out: PathBuf,

    #[command(flatten)]
    pub read: ReadArgs,

    #[command(flatten)]
    pub shape: ShapeArgs,

    #[command(flatten)]
    pub kmeans: KmeansArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct EncodeArgs {
    /// CSV file with the codebook's columns (read as a stream).
    #[arg(value_name = "INPUT")]
    pub input: PathBuf,

    /// The codebook to encode with.
    #[arg(long, short, value_name = "BOOK")]
    pub book: PathBuf,

    /// Where to write the index stream.
    #[arg(long, short, value_name = "STREAM")]
    pub out: PathBuf,

    #[command(flatten)]
    pub read: ReadArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct DecodeArgs {
    /// The index stream.
    #[arg(value_name = "STREAM")]
    pub stream: PathBuf,

    /// The codebook the stream was made with.
    #[arg(long, short, value_name = "BOOK")]
    pub book: PathBuf,

    /// Where to write the rebuilt records (CSV).
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct InfoArgs {
    /// A codebook or stream file.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Folder for the demo's outputs (created if missing).
    #[arg(long, value_name = "DIR", default_value = "demo-out")]
    pub out_dir: PathBuf,

    /// Folder holding the sample inputs.
    #[arg(long, value_name = "DIR", default_value = "sample-inputs")]
    pub inputs: PathBuf,

    /// Print one JSON object instead of tables.
    #[arg(long)]
    pub json: bool,
}
