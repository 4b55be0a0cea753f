//! Printing reports: one JSON object on stdout with `--json`, otherwise a
//! short aligned table. Notices go to stderr.

use std::io::Write;

use anyhow::Result;
use serde_json::Value;

/// Prints `value` as one JSON object and a newline.
pub fn print_json(value: &Value) -> Result<()> {
    let mut out = std::io::stdout().lock();
    serde_json::to_writer_pretty(&mut out, value)?;
    writeln!(out)?;
    Ok(())
}

/// Prints rows of cells with every column padded to its widest cell;
/// columns after the first are right-aligned (numbers).
pub fn print_table(rows: &[Vec<String>]) -> Result<()> {
    let mut out = std::io::stdout().lock();
    let cols = rows.iter().map(|r| r.len()).max().unwrap_or(0);
    let mut width = vec![0; cols];
    for r in rows {
        for (i, c) in r.iter().enumerate() {
            width[i] = width[i].max(c.chars().count());
        }
    }
    for r in rows {
        let mut line = String::new();
        for (i, c) in r.iter().enumerate() {
            let pad = width[i] - c.chars().count();
            if i == 0 {
                line.push_str(c);
                line.push_str(&" ".repeat(pad));
            } else {
                line.push_str("  ");
                line.push_str(&" ".repeat(pad));
                line.push_str(c);
            }
        }
        writeln!(out, "{}", line.trim_end())?;
    }
    Ok(())
}

/// Key/value lines, keys padded.
pub fn print_pairs(pairs: &[(&str, String)]) -> Result<()> {
    let rows: Vec<Vec<String>> = pairs
        .iter()
        .map(|(k, v)| vec![format!("{k}:"), v.clone()])
        .collect();
    let mut out = std::io::stdout().lock();
    let w = rows.iter().map(|r| r[0].chars().count()).max().unwrap_or(0);
    for r in rows {
        writeln!(out, "{:<w$} {}", r[0], r[1])?;
    }
    Ok(())
}

/// Prints notices to stderr, one per line.
pub fn notices(list: &[String]) {
    for n in list {
        eprintln!("note: {n}");
    }
}

/// A number with about 6 significant digits, plain notation where readable.
pub fn num(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    if !x.is_finite() {
        return x.to_string();
    }
    let a = x.abs();
    if (1e-4..1e7).contains(&a) {
        let decimals = (5 - a.log10().floor() as i32).clamp(0, 9) as usize;
        let s = format!("{x:.decimals$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    } else {
        format!("{x:.5e}")
    }
}

/// dB value or "∞" when undefined because the error is zero.
pub fn db(x: Option<f64>) -> String {
    x.map_or_else(|| "inf".to_string(), |v| format!("{v:.2} dB"))
}

/// JSON number, or null for None / non-finite values.
pub fn jnum(x: Option<f64>) -> Value {
    match x {
        Some(v) if v.is_finite() => serde_json::json!(v),
        _ => Value::Null,
    }
}

/// Seconds, rounded for display.
pub fn secs(s: f64) -> String {
    format!("{s:.3} s")
}
