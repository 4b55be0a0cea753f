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
    /// Learn a codebook from CSV records, or a shared palette from images.
    Train(TrainArgs),
    /// Replace every record (or frame of records) by its nearest codeword's index.
    Encode(EncodeArgs),
    /// Rebuild records (CSV) or an image (PNG) from an index stream and its codebook.
    Decode(DecodeArgs),
    /// One step for a display: fit a palette to an image and write it as an indexed PNG.
    Palette(PaletteArgs),
    /// Distortion against codebook size and rate over a range of sizes; recommends a size.
    Curve(CurveArgs),
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

/// Working colour space for palettes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SpaceArg {
    /// sRGB code values (0..255).
    Srgb,
    /// Linear-light RGB (0..255).
    Linear,
    /// CIELAB (D65).
    Lab,
    /// Oklab.
    Oklab,
}

/// What a display can show.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum DisplayArg {
    Rgb888,
    Rgb666,
    Rgb565,
    Rgb555,
    Rgb444,
    Rgb332,
    Gray8,
    Gray4,
    Gray2,
    Gray1,
}

/// Partly transparent pixels.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum AlphaArg {
    /// Composite over --background, then fit opaque colours.
    Composite,
    /// Fit RGBA colours (alpha is part of each entry).
    Keep,
}

/// Dithering while mapping pixels to the palette.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum DitherArg {
    /// Nearest entry for every pixel.
    None,
    /// Error diffusion (Floyd–Steinberg, serpentine).
    FloydSteinberg,
    /// Ordered, 4×4 Bayer matrix.
    Bayer4,
    /// Ordered, 8×8 Bayer matrix.
    Bayer8,
}

/// Order of palette entries.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum OrderArg {
    /// Most used first.
    Frequency,
    /// Darkest first.
    Lightness,
}

/// Palette options (images only).
#[derive(Debug, Clone, Args)]
pub struct ColourArgs {
    /// Colour space the palette is fitted in [default: lab].
    #[arg(long, value_enum, value_name = "SPACE")]
    pub space: Option<SpaceArg>,

    /// Pixel format of the display; every palette entry is exactly showable on it [default: rgb888].
    #[arg(long, value_enum, value_name = "FORMAT")]
    pub display: Option<DisplayArg>,

    /// Colours that must be in the palette, e.g. '#000000,#ffffff'.
    #[arg(long, value_name = "COLOURS", value_delimiter = ',')]
    pub keep: Option<Vec<String>>,

    /// Partly transparent pixels: composite over the background, or keep alpha [default: composite].
    #[arg(long, value_enum, value_name = "MODE")]
    pub alpha: Option<AlphaArg>,

    /// Background for compositing partly transparent pixels [default: #ffffff].
    #[arg(long, value_name = "COLOUR")]
    pub background: Option<String>,

    /// Order of the palette entries [default: frequency].
    #[arg(long, value_enum, value_name = "ORDER")]
    pub order: Option<OrderArg>,

    /// Refuse images with more pixels than this [default: 100000000].
    #[arg(long, value_name = "N")]
    pub max_pixels: Option<u64>,
}

impl ColourArgs {
    /// True when any palette option was given.
    pub fn any(&self) -> bool {
        self.space.is_some()
            || self.display.is_some()
            || self.keep.is_some()
            || self.alpha.is_some()
            || self.background.is_some()
            || self.order.is_some()
            || self.max_pixels.is_some()
    }
}

/// Limits that protect memory; inputs above them are refused before they are loaded.
#[derive(Debug, Clone, Args)]
pub struct LimitArgs {
    /// Refuse a CSV table or index stream of more vectors than this [default: 100000000].
    #[arg(long, value_name = "N")]
    pub max_vectors: Option<u64>,

    /// Refuse a codebook of more codewords than this, read or asked for with --size [default: 16777216].
    #[arg(long, value_name = "N")]
    pub max_codewords: Option<u64>,
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

    /// How far training goes: quick (restarts on a coarse stand-in, a few
    /// passes over all data) or thorough (every restart to convergence on
    /// all data, then single-vector moves). Default: quick for images in
    /// `palette` and `train`, thorough otherwise.
    #[arg(long, value_enum, value_name = "LEVEL")]
    pub effort: Option<EffortArg>,

    /// Independent runs; the lowest distortion is kept. Default: 1 with
    /// --effort quick, 3 with thorough.
    #[arg(long, value_name = "N")]
    pub restarts: Option<u32>,

    /// Lloyd iteration cap per run.
    #[arg(long, value_name = "N", default_value_t = 300)]
    pub max_iter: u32,

    /// Stop when the relative improvement falls below this (0: until no vector moves).
    #[arg(long, value_name = "X", default_value_t = 1e-6)]
    pub tolerance: f64,

    /// How the initial codewords are chosen.
    #[arg(long, value_enum, value_name = "METHOD", default_value = "kmeans++")]
    pub seeding: SeedingArg,

    /// Large inputs (over 1024 distinct vectors per codeword): run the restarts on a
    /// seeded sample of 256 per codeword, then refine the best on all (auto), or
    /// always use all vectors (never).
    #[arg(long, value_enum, value_name = "WHEN", default_value = "auto")]
    pub sampling: SamplingArg,
}

/// How far training goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum EffortArg {
    /// One restart on a coarse stand-in for large inputs, a few passes over all data.
    Quick,
    /// Every restart to convergence on all data, then single-vector moves.
    Thorough,
}

/// When training may use a sample.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum SamplingArg {
    /// Above 1024 distinct vectors per codeword.
    Auto,
    /// Never: every restart sees every distinct vector.
    Never,
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

    #[command(flatten)]
    pub colour: ColourArgs,

    #[command(flatten)]
    pub limits: LimitArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct PaletteArgs {
    /// The image (PNG, JPEG, BMP, TIFF or WebP).
    #[arg(value_name = "IMAGE")]
    pub image: PathBuf,

    /// Palette entries (2 to 256 for a PNG).
    #[arg(long, short = 'k', value_name = "K")]
    pub size: usize,

    /// Where to write the indexed PNG.
    #[arg(long, short, value_name = "OUT.png")]
    pub out: PathBuf,

    /// Dithering [default: none].
    #[arg(long, value_enum, value_name = "METHOD", default_value = "none")]
    pub dither: DitherArg,

    /// Also write a C header with the palette in the display format and the packed pixels.
    #[arg(long, value_name = "OUT.h")]
    pub c_source: Option<PathBuf>,

    /// Also write the packed pixels alone (same layout as in the C header).
    #[arg(long, value_name = "OUT.bin")]
    pub raw: Option<PathBuf>,

    #[command(flatten)]
    pub colour: ColourArgs,

    #[command(flatten)]
    pub kmeans: KmeansArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// What the recommended size must reach (at most one).
#[derive(Debug, Clone, Args)]
#[group(multiple = false)]
pub struct TargetArgs {
    /// Smallest size whose mse is at most X (scaled units for CSV records, 8-bit sRGB per channel for images).
    #[arg(long, value_name = "X")]
    pub target_mse: Option<f64>,

    /// Smallest size whose PSNR is at least DB (images).
    #[arg(long, value_name = "DB")]
    pub target_psnr: Option<f64>,

    /// Smallest size whose SNR is at least DB (CSV records).
    #[arg(long, value_name = "DB")]
    pub target_snr: Option<f64>,

    /// Smallest size whose mean CIEDE2000 is at most X (images).
    #[arg(long, value_name = "X")]
    pub target_de: Option<f64>,

    /// The lowest distortion whose stream and codebook together take at most N bytes.
    #[arg(long, value_name = "N")]
    pub max_bytes: Option<u64>,
}

#[derive(Debug, Args)]
pub struct CurveArgs {
    /// CSV files with a header row, or images (read together, as by train).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,

    /// Sizes to measure: 2..64 (every size in the range) or 2,4,8,16; items may mix
    /// [default: powers of two up to 256 for images, up to min(1024, vectors/4) for records].
    #[arg(long, value_name = "SIZES")]
    pub sizes: Option<String>,

    /// Train every size from scratch, as train and palette do, instead of growing each from the one before.
    #[arg(long)]
    pub independent: bool,

    /// Hold out this fraction of the input (above 0, at most 0.9) and report the error on it.
    #[arg(long, value_name = "F")]
    pub holdout: Option<f64>,

    #[command(flatten)]
    pub target: TargetArgs,

    /// Also write the curve as a CSV table.
    #[arg(long, value_name = "FILE.csv")]
    pub table: Option<PathBuf>,

    /// Also draw the curve as an SVG plot.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,

    #[command(flatten)]
    pub read: ReadArgs,

    #[command(flatten)]
    pub shape: ShapeArgs,

    #[command(flatten)]
    pub kmeans: KmeansArgs,

    #[command(flatten)]
    pub colour: ColourArgs,

    #[command(flatten)]
    pub limits: LimitArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct EncodeArgs {
    /// CSV file with the codebook's columns (read as a stream), or an image for a palette codebook.
    #[arg(value_name = "INPUT")]
    pub input: PathBuf,

    /// Dithering, for images [default: none].
    #[arg(long, value_enum, value_name = "METHOD")]
    pub dither: Option<DitherArg>,

    /// Refuse images with more pixels than this [default: 100000000].
    #[arg(long, value_name = "N")]
    pub max_pixels: Option<u64>,

    /// The codebook to encode with.
    #[arg(long, short, value_name = "BOOK")]
    pub book: PathBuf,

    /// Where to write the index stream.
    #[arg(long, short, value_name = "STREAM")]
    pub out: PathBuf,

    #[command(flatten)]
    pub read: ReadArgs,

    #[command(flatten)]
    pub limits: LimitArgs,

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

    /// Where to write the rebuilt records (CSV) or image (PNG).
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,

    /// Refuse a stream of an image with more pixels than this [default: 100000000].
    #[arg(long, value_name = "N")]
    pub max_pixels: Option<u64>,

    #[command(flatten)]
    pub limits: LimitArgs,

    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct InfoArgs {
    /// A codebook or stream file.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,

    #[command(flatten)]
    pub limits: LimitArgs,

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
