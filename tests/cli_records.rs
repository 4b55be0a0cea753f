//! End-to-end runs of the real `vqforge` binary on CSV records: train,
//! encode, decode and info, each test in a fresh temporary folder.
//!
//! The reports are checked against numbers recomputed here from the files
//! the binary wrote (decoded CSV against the original, file sizes), and the
//! training quality against scikit-learn's best k-means result.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use serde_json::Value;

mod common;
use common::{assert_close, data, int, json, num, ok, ok_env};

const WINE_COLUMNS: [&str; 13] = [
    "alcohol",
    "malic_acid",
    "ash",
    "alcalinity_of_ash",
    "magnesium",
    "total_phenols",
    "flavanoids",
    "nonflavanoid_phenols",
    "proanthocyanins",
    "color_intensity",
    "hue",
    "od280_od315_of_diluted_wines",
    "proline",
];
const WEATHER_COLUMNS: [&str; 4] = ["precipitation", "temp_max", "temp_min", "wind"];
const WEATHER_ROWS: usize = 1461;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures")
        .join(name)
}

/// The keys every train report must have, with their JSON types.
const TRAIN_NUMBERS: [&str; 9] = [
    "size",
    "dimension",
    "vectors",
    "distinct_vectors",
    "mse",
    "mse_scaled",
    "iterations",
    "restarts",
    "seed",
];

/// The keys every encode report must have.
const ENCODE_NUMBERS: [&str; 11] = [
    "size",
    "dimension",
    "vectors",
    "mse",
    "mse_scaled",
    "max_abs_error",
    "snr_db",
    "bits_per_index",
    "index_entropy_bits",
    "stream_bytes",
    "compression_ratio",
];

fn check_train_keys(t: &Value) {
    for key in TRAIN_NUMBERS {
        assert!(t[key].is_number(), "train report lacks {key:?}: {t}");
    }
    assert!(t["stopped_by"].is_string(), "train report: {t}");
    assert!(num(t, "seconds") >= 0.0);
}

fn check_encode_keys(e: &Value, columns: &[&str]) {
    for key in ENCODE_NUMBERS {
        assert!(e[key].is_number(), "encode report lacks {key:?}: {e}");
    }
    assert!(num(e, "seconds") >= 0.0);
    let cols = e["columns"].as_array().expect("columns is an array");
    let names: Vec<&str> = cols.iter().map(|c| c["column"].as_str().unwrap()).collect();
    assert_eq!(names, columns);
    for c in cols {
        for key in ["mse", "max_abs_error", "snr_db"] {
            assert!(c[key].is_number(), "column entry lacks {key:?}: {c}");
        }
    }
}

/// A CSV file read as text cells: header and rows.
struct Table {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
}

impl Table {
    fn read(path: &Path) -> Table {
        let mut r = csv::Reader::from_path(path).unwrap();
        let header = r.headers().unwrap().iter().map(String::from).collect();
        let rows = r
            .records()
            .map(|rec| rec.unwrap().iter().map(String::from).collect())
            .collect();
        Table { header, rows }
    }

    fn column_index(&self, name: &str) -> usize {
        self.header
            .iter()
            .position(|h| h == name)
            .unwrap_or_else(|| panic!("no column {name:?} in {:?}", self.header))
    }

    /// The named columns as numbers, row by row.
    fn values(&self, columns: &[&str]) -> Vec<Vec<f64>> {
        let idx: Vec<usize> = columns.iter().map(|c| self.column_index(c)).collect();
        self.rows
            .iter()
            .map(|r| idx.iter().map(|&i| r[i].parse::<f64>().unwrap()).collect())
            .collect()
    }

    fn column(&self, name: &str) -> Vec<String> {
        let i = self.column_index(name);
        self.rows.iter().map(|r| r[i].clone()).collect()
    }
}

/// Error statistics recomputed from two tables of numbers.
struct Measured {
    mse: f64,
    max_abs_error: f64,
    per_column: Vec<(f64, f64, f64)>, // (mse, max |error|, snr dB)
}

fn measure(original: &[Vec<f64>], decoded: &[Vec<f64>]) -> Measured {
    assert_eq!(original.len(), decoded.len());
    let w = original[0].len();
    let n = original.len() as f64;
    let mut per_column = Vec::new();
    let (mut sum_sq, mut max_abs) = (0.0f64, 0.0f64);
    for c in 0..w {
        let mean = original.iter().map(|r| r[c]).sum::<f64>() / n;
        let variance = original.iter().map(|r| (r[c] - mean).powi(2)).sum::<f64>() / n;
        let (mut col_sq, mut col_max) = (0.0f64, 0.0f64);
        for (o, d) in original.iter().zip(decoded) {
            let e = o[c] - d[c];
            col_sq += e * e;
            col_max = col_max.max(e.abs());
        }
        sum_sq += col_sq;
        max_abs = max_abs.max(col_max);
        let mse = col_sq / n;
        per_column.push((mse, col_max, 10.0 * (variance / mse).log10()));
    }
    Measured {
        mse: sum_sq / (n * w as f64),
        max_abs_error: max_abs,
        per_column,
    }
}

/// Reports and files of one train → encode → decode run.
struct RoundTrip {
    train: Value,
    encode: Value,
    original: Table,
    decoded: Table,
}

/// Trains at `k` on `input` (with extra train flags), encodes the same file,
/// decodes the stream and checks everything that must hold whatever the data.
fn round_trip(
    dir: &Path,
    input: &Path,
    columns: &[&str],
    k: usize,
    frame: usize,
    extra: &[&str],
) -> RoundTrip {
    let input = input.to_str().unwrap();
    let (book, stream, out) = (
        format!("k{k}-f{frame}.vqb"),
        format!("k{k}-f{frame}.vqs"),
        format!("k{k}-f{frame}.csv"),
    );
    let (ks, fs) = (k.to_string(), frame.to_string());
    let mut args = vec![
        "train", input, "--size", &ks, "--frame", &fs, "--out", &book, "--json",
    ];
    args.extend_from_slice(extra);
    let train = json(dir, &args);
    let encode = json(
        dir,
        &["encode", input, "--book", &book, "--out", &stream, "--json"],
    );
    ok(dir, &["decode", &stream, "--book", &book, "--out", &out]);
    check_train_keys(&train);
    check_encode_keys(&encode, columns);

    let original = Table::read(Path::new(input));
    let decoded = Table::read(&dir.join(&out));
    let rows = original.rows.len();
    let vectors = rows.div_ceil(frame) as u64;
    let dimension = (columns.len() * frame) as u64;

    // The same number of rows, the same value columns after the row/time column.
    assert_eq!(decoded.rows.len(), rows);
    assert_eq!(&decoded.header[1..], columns);
    for (report, name) in [(&train, "train"), (&encode, "encode")] {
        assert_eq!(int(report, "size"), k as u64, "{name}");
        assert_eq!(int(report, "dimension"), dimension, "{name}");
        assert_eq!(int(report, "vectors"), vectors, "{name}");
    }
    assert_eq!(int(&train, "seed"), 1, "the default master seed");

    // The reported error is the error of the CSV that decode writes.
    let m = measure(&original.values(columns), &decoded.values(columns));
    assert_close("mse", num(&encode, "mse"), m.mse, 1e-6);
    assert_close(
        "max_abs_error",
        num(&encode, "max_abs_error"),
        m.max_abs_error,
        1e-6,
    );
    for (c, (mse, max, snr)) in encode["columns"]
        .as_array()
        .unwrap()
        .iter()
        .zip(&m.per_column)
    {
        let name = c["column"].as_str().unwrap();
        assert_close(&format!("{name} mse"), num(c, "mse"), *mse, 1e-6);
        assert_close(&format!("{name} max"), num(c, "max_abs_error"), *max, 1e-6);
        assert_close(&format!("{name} snr"), num(c, "snr_db"), *snr, 1e-6);
    }
    // Training measured its own rows with the final codebook: the same numbers.
    assert_close("train mse", num(&train, "mse"), num(&encode, "mse"), 1e-9);
    assert_close(
        "train mse_scaled",
        num(&train, "mse_scaled"),
        num(&encode, "mse_scaled"),
        1e-9,
    );

    // Rate: ⌈log2 k⌉ bits per index, and the stream file is what was reported.
    let bits = (k as f64).log2().ceil() as u64;
    assert_eq!(int(&encode, "bits_per_index"), bits);
    let entropy = num(&encode, "index_entropy_bits");
    assert!((0.0..=bits as f64 + 1e-9).contains(&entropy), "{entropy}");
    let stream_bytes = std::fs::metadata(dir.join(&stream)).unwrap().len();
    assert_eq!(int(&encode, "stream_bytes"), stream_bytes);
    let raw = (rows * columns.len() * 4) as f64;
    assert_close(
        "compression_ratio",
        num(&encode, "compression_ratio"),
        raw / stream_bytes as f64,
        1e-12,
    );

    // Every decoded frame is one of at most k codewords.
    let flat = decoded.values(columns);
    let frames: BTreeSet<String> = flat
        .chunks(frame)
        .filter(|f| f.len() == frame)
        .map(|f| format!("{f:?}"))
        .collect();
    assert!(
        frames.len() <= k,
        "{} distinct frames for k = {k}",
        frames.len()
    );

    RoundTrip {
        train,
        encode,
        original,
        decoded,
    }
}

/// scikit-learn's best mean squared error per component for a table and k.
fn sklearn_best(table: &str, k: u64) -> f64 {
    let text = std::fs::read_to_string(fixture("best_kmeans.json")).unwrap();
    let v: Value = serde_json::from_str(&text).unwrap();
    let case = v["cases"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["table"] == table && c["k"] == k)
        .unwrap_or_else(|| panic!("no fixture for {table} at k = {k}"));
    assert_eq!(case["scaling"], "zscore_population");
    num(case, "mse_per_component")
}

#[test]
fn wine_round_trip_matches_reports_and_sklearn() {
    let dir = tempfile::tempdir().unwrap();
    for k in [4, 16] {
        // Default settings: 3 restarts, each polished by single-vector moves,
        // against scikit-learn's best of 100 restarts.
        let r = round_trip(dir.path(), &data("wine.csv"), &WINE_COLUMNS, k, 1, &[]);
        // No time column in wine: decode numbers the rows.
        assert_eq!(r.decoded.header[0], "row");
        let numbers: Vec<String> = (0..r.original.rows.len()).map(|i| i.to_string()).collect();
        assert_eq!(r.decoded.column("row"), numbers);
        assert_eq!(int(&r.train, "distinct_vectors"), 178);
        assert_eq!(int(&r.train, "restarts"), 3);

        // Source: scikit-learn 1.9.1 KMeans(n_init=100, algorithm="lloyd",
        // random_state=0, max_iter=500, tol=0) on wine z-scored with the
        // population std; best inertia_/(n·d), stored in
        // tests/fixtures/best_kmeans.json by scripts/make_fixtures.py.
        let best = sklearn_best("wine.csv", k as u64);
        let ours = num(&r.encode, "mse_scaled");
        assert!(
            ours <= 1.02 * best,
            "wine k = {k}: mse_scaled {ours}, scikit-learn's best {best}"
        );
    }
}

#[test]
fn seattle_weather_round_trip_rows_and_frames() {
    let dir = tempfile::tempdir().unwrap();
    let input = data("seattle-weather.csv");
    let columns = ["--columns", "precipitation,temp_max,temp_min,wind"];
    let r = round_trip(dir.path(), &input, &WEATHER_COLUMNS, 16, 1, &columns);
    assert_eq!(r.original.rows.len(), WEATHER_ROWS);
    // Source: scikit-learn 1.9.1 best k-means (tests/fixtures/best_kmeans.json,
    // same settings as for wine) on these four columns z-scored. Default
    // 3 restarts here: 1461 vectors in 4-D have fewer poor local minima.
    let best = sklearn_best("seattle-weather.csv", 16);
    let ours = num(&r.encode, "mse_scaled");
    assert!(
        (ours - best).abs() <= 0.02 * best,
        "seattle k = 16: mse_scaled {ours}, scikit-learn's best {best}"
    );

    // Weekly frames: 1461 = 208·7 + 5, so the last frame is padded, and
    // decode must stop at the last real row.
    let r = round_trip(dir.path(), &input, &WEATHER_COLUMNS, 16, 7, &columns);
    assert_eq!(r.decoded.rows.len(), WEATHER_ROWS);
    assert_eq!(int(&r.encode, "vectors"), 209);
    assert_eq!(int(&r.encode, "dimension"), 28);
}

/// `time,a,b` rows 10 minutes apart from 2026-01-01T00:00; `late` minutes
/// are added to row 37 to break the regular spacing.
fn time_csv(rows: usize, late: u32) -> String {
    let mut s = String::from("time,a,b\n");
    for i in 0..rows {
        let minutes = i as u32 * 10 + if i == 37 { late } else { 0 };
        let (day, hour, minute) = (1 + minutes / 1440, minutes / 60 % 24, minutes % 60);
        // A few distinct levels so four codewords do not fit exactly.
        let a = (i * 7 % 13) as f64 * 0.5;
        let b = 20.0 + ((i * 5) % 11) as f64 * 0.25;
        s.push_str(&format!("2026-01-{day:02}T{hour:02}:{minute:02},{a},{b}\n"));
    }
    s
}

#[test]
fn regular_time_column_is_rebuilt_and_irregular_becomes_row_numbers() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // 200 rows span two days, so the rebuilt times cross midnight.
    std::fs::write(d.join("regular.csv"), time_csv(200, 0)).unwrap();
    std::fs::write(d.join("irregular.csv"), time_csv(200, 3)).unwrap();

    let r = round_trip(d, &d.join("regular.csv"), &["a", "b"], 4, 1, &[]);
    assert_eq!(r.decoded.header, ["time", "a", "b"]);
    assert_eq!(r.decoded.column("time"), r.original.column("time"));
    assert_eq!(r.decoded.rows[199][0], "2026-01-02T09:10");
    let info = json(d, &["info", "k4-f1.vqs", "--json"]);
    assert_eq!(info["records"]["time"]["start"], "2026-01-01T00:00");
    assert_eq!(info["records"]["time"]["step"].as_f64(), Some(600.0));
    let out = ok(
        d,
        &["encode", "regular.csv", "-b", "k4-f1.vqb", "-o", "r.vqs"],
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!stderr.contains("not regularly spaced"), "{stderr}");

    let out = ok(
        d,
        &["encode", "irregular.csv", "-b", "k4-f1.vqb", "-o", "i.vqs"],
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("note: time column \"time\" is not regularly spaced"),
        "{stderr}"
    );
    ok(d, &["decode", "i.vqs", "-b", "k4-f1.vqb", "-o", "i.csv"]);
    let decoded = Table::read(&d.join("i.csv"));
    assert_eq!(decoded.header, ["row", "a", "b"]);
    let numbers: Vec<String> = (0..200).map(|i| i.to_string()).collect();
    assert_eq!(decoded.column("row"), numbers);
    // The values do not depend on how the rows are labelled.
    assert_eq!(decoded.values(&["a", "b"]), r.decoded.values(&["a", "b"]));
}

fn bytes(dir: &Path, name: &str) -> Vec<u8> {
    std::fs::read(dir.join(name)).unwrap()
}

#[test]
fn same_seed_gives_identical_files_on_reruns() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let input = data("seattle-weather.csv");
    let input = input.to_str().unwrap();
    let cols = "precipitation,temp_max,temp_min,wind";
    for run in ["1", "2"] {
        let (book, stream) = (format!("{run}.vqb"), format!("{run}.vqs"));
        ok(
            d,
            &[
                "train",
                input,
                "-k",
                "16",
                "--columns",
                cols,
                "--seed",
                "42",
                "-o",
                &book,
            ],
        );
        ok(d, &["encode", input, "-b", &book, "-o", &stream]);
    }
    assert_eq!(bytes(d, "1.vqb"), bytes(d, "2.vqb"));
    assert_eq!(bytes(d, "1.vqs"), bytes(d, "2.vqs"));
    let info = json(d, &["info", "1.vqb", "--json"]);
    assert_eq!(int(&info["training"], "seed"), 42);
}

#[test]
fn thread_count_does_not_change_the_files() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // Six copies of the weather rows: 8766 vectors, more than two of the
    // 4096-vector chunks the parallel passes split the work into.
    let text = std::fs::read_to_string(data("seattle-weather.csv")).unwrap();
    let (header, body) = text.split_once('\n').unwrap();
    let mut big = format!("{header}\n");
    for _ in 0..6 {
        big.push_str(body.trim_end_matches('\n'));
        big.push('\n');
    }
    std::fs::write(d.join("big.csv"), big).unwrap();
    let cols = "precipitation,temp_max,temp_min,wind";
    for threads in ["1", "2"] {
        let env = [("RAYON_NUM_THREADS", threads)];
        let (book, stream) = (format!("t{threads}.vqb"), format!("t{threads}.vqs"));
        let args = [
            "train",
            "big.csv",
            "-k",
            "16",
            "--columns",
            cols,
            "-o",
            &book,
        ];
        ok_env(d, &args, &env);
        ok_env(d, &["encode", "big.csv", "-b", &book, "-o", &stream], &env);
    }
    assert_eq!(bytes(d, "t1.vqb"), bytes(d, "t2.vqb"));
    assert_eq!(bytes(d, "t1.vqs"), bytes(d, "t2.vqs"));
}

/// `key: value` lines of a text report.
fn pairs(stdout: &[u8]) -> BTreeMap<String, String> {
    String::from_utf8_lossy(stdout)
        .lines()
        .filter_map(|l| l.split_once(':'))
        .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
        .collect()
}

#[test]
fn info_describes_codebook_and_stream() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let input = data("wine.csv");
    let input = input.to_str().unwrap();
    ok(
        d,
        &["train", input, "-k", "16", "--seed", "7", "-o", "w.vqb"],
    );
    let enc = json(
        d,
        &["encode", input, "-b", "w.vqb", "-o", "w.vqs", "--json"],
    );

    let book = json(d, &["info", "w.vqb", "--json"]);
    assert_eq!(book["file"], "codebook");
    assert_eq!(int(&book, "file_bytes"), bytes(d, "w.vqb").len() as u64);
    assert_eq!(int(&book, "size"), 16);
    assert_eq!(int(&book, "dimension"), 13);
    assert_eq!(int(&book, "bits_per_index"), 4);
    assert_eq!(book["meaning"]["kind"], "records");
    assert_eq!(book["meaning"]["columns"], serde_json::json!(WINE_COLUMNS));
    assert_eq!(int(&book["meaning"], "frame"), 1);
    assert_eq!(book["meaning"]["scaling"], "zscore");
    assert_eq!(int(&book["training"], "seed"), 7);
    assert_eq!(int(&book["training"], "vectors"), 178);
    let fingerprint = book["fingerprint"].as_str().unwrap().to_string();
    assert_eq!(fingerprint.len(), 8);
    assert!(fingerprint.chars().all(|c| c.is_ascii_hexdigit()));

    let stream = json(d, &["info", "w.vqs", "--json"]);
    assert_eq!(stream["file"], "stream");
    assert_eq!(int(&stream, "file_bytes"), int(&enc, "stream_bytes"));
    assert_eq!(int(&stream, "vectors"), 178);
    assert_eq!(int(&stream, "size"), 16);
    assert_eq!(int(&stream, "dimension"), 13);
    assert_eq!(int(&stream, "bits_per_index"), 4);
    assert_eq!(int(&stream["records"], "rows"), 178);
    assert!(stream["records"]["time"].is_null());
    assert_eq!(stream["codebook_fingerprint"], fingerprint.as_str());
    assert_close(
        "entropy",
        num(&stream, "index_entropy_bits"),
        num(&enc, "index_entropy_bits"),
        1e-12,
    );
    assert!(int(&stream, "codewords_used") <= 16);

    let text = pairs(&ok(d, &["info", "w.vqb"]).stdout);
    assert_eq!(text["file"], "vqforge codebook");
    assert_eq!(text["codewords"], "16");
    assert_eq!(text["dimension"], "13");
    assert_eq!(text["fingerprint"], fingerprint);
    assert_eq!(text["columns"], WINE_COLUMNS.join(", "));
    assert!(
        text["trained"].starts_with("seed 7,"),
        "{}",
        text["trained"]
    );

    let text = pairs(&ok(d, &["info", "w.vqs"]).stdout);
    assert_eq!(text["file"], "vqforge index stream");
    assert_eq!(text["vectors"], "178");
    assert_eq!(text["rows"], "178");
    assert_eq!(text["bits per index"], "4");
    assert_eq!(text["made with codebook"], fingerprint);
    assert_eq!(text["time"], "row numbers");
}
