//! A distortion curve as a CSV table ([`write_curve_csv`]): one row per
//! measured size, the listed sizes and those tried in the target search,
//! in increasing size; the columns carry the names of the JSON report's
//! keys. Never measures.

use std::io::Write;

use crate::curve::{Curve, CurvePoint, Fit, InputKind, Quality};
use crate::error::{Error, ErrorKind, Result};

/// The header row for a curve of `kind`.
pub fn curve_columns(kind: InputKind, holdout: bool) -> Vec<&'static str> {
    let mut c = vec!["size", "role", "mse"];
    match kind {
        InputKind::Records => c.extend(["snr_db", "max_abs_error"]),
        InputKind::Images => c.extend(["psnr_db", "delta_e2000_mean"]),
    }
    c.extend([
        "distortion",
        "bits_per_index",
        "index_entropy_bits",
        "codebook_bytes",
        "stream_bytes",
        "total_bytes",
        "compression_ratio",
    ]);
    if holdout {
        c.extend(["holdout_mse", "holdout_ratio", "holdout_fit"]);
    }
    c.extend(["knee", "recommended"]);
    c
}

fn number(x: Option<f64>) -> String {
    match x {
        Some(v) if v.is_finite() => v.to_string(),
        Some(v) if v > 0.0 => "inf".into(),
        _ => String::new(),
    }
}

/// The cells of one point, in the order of [`curve_columns`].
fn cells(curve: &Curve, p: &CurvePoint, role: &str, holdout: bool) -> Vec<String> {
    let mut row = vec![p.size.to_string(), role.to_string(), number(Some(p.mse))];
    match p.quality {
        Quality::Records {
            snr_db,
            max_abs_error,
        } => {
            row.push(number(Some(snr_db.unwrap_or(f64::INFINITY))));
            row.push(number(Some(max_abs_error)));
        }
        Quality::Images {
            psnr_db,
            delta_e2000_mean,
        } => {
            row.push(number(Some(psnr_db.unwrap_or(f64::INFINITY))));
            row.push(number(Some(delta_e2000_mean)));
        }
    }
    let r = &p.rate;
    row.extend([
        number(Some(p.distortion)),
        r.bits_per_index.to_string(),
        number(Some(r.index_entropy_bits)),
        r.codebook_bytes.to_string(),
        r.stream_bytes.to_string(),
        r.total_bytes.to_string(),
        number(Some(r.compression_ratio)),
    ]);
    if holdout {
        match &p.holdout {
            Some(h) => row.extend([
                number(Some(h.mse)),
                number(Some(h.ratio)),
                match h.fit {
                    Fit::Generalises => "generalises".into(),
                    Fit::Memorises => "memorises".into(),
                },
            ]),
            None => row.extend([String::new(), String::new(), String::new()]),
        }
    }
    let flag = |b: bool| if b { "yes" } else { "" }.to_string();
    row.push(flag(curve.knee == Some(p.size) && role == "listed"));
    row.push(flag(curve.recommendation.size() == Some(p.size)));
    row
}

/// Writes `curve` as CSV: a header (see [`curve_columns`]), then one row
/// per size, `role` telling a listed size from one tried by the target
/// search. Missing figures are empty cells; an infinite SNR or PSNR (no
/// error at all) is `inf`.
pub fn write_curve_csv<W: Write>(writer: W, curve: &Curve) -> Result<()> {
    let io = |e: csv::Error| Error::new("writing curve table", ErrorKind::Io(e.into()));
    let holdout = curve.points.iter().any(|p| p.holdout.is_some());
    let mut w = csv::Writer::from_writer(writer);
    w.write_record(curve_columns(curve.kind, holdout))
        .map_err(io)?;
    let mut rows: Vec<(&CurvePoint, &str)> = curve
        .points
        .iter()
        .map(|p| (p, "listed"))
        .chain(curve.searched.iter().map(|p| (p, "searched")))
        .collect();
    rows.sort_by_key(|(p, role)| (p.size, *role));
    for (p, role) in rows {
        w.write_record(cells(curve, p, role, holdout)).map_err(io)?;
    }
    w.flush()
        .map_err(|e| Error::new("writing curve table", ErrorKind::Io(e)))?;
    Ok(())
}
