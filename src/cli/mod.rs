//! Argument structs (what the user typed) and their conversion into checked
//! library configs; one small function per subcommand.

mod args;
mod curve;
mod decode;
mod demo;
mod demo_curves;
mod demo_images;
mod encode;
mod info;
mod output;
mod palette;
mod progress;
mod train;

use std::path::Path;
use std::process::ExitCode;

use anyhow::Result;
use clap::Parser;

pub use args::{Cli, Command};

/// The checked limits from the limit flags and, where the command has
/// one, `--max-pixels` (defaults for those not given).
pub fn limits(l: &args::LimitArgs, max_pixels: Option<u64>) -> Result<vqforge::limits::Limits> {
    let mut out = vqforge::limits::Limits::default();
    if let Some(n) = l.max_vectors {
        out.max_vectors = n;
    }
    if let Some(n) = l.max_codewords {
        out.max_codewords = n;
    }
    if let Some(n) = max_pixels {
        out.max_pixels = n;
    }
    out.check()?;
    Ok(out)
}

/// Refuses `--size` above `--max-codewords` (a usage error) before any
/// input is read.
/// `flag` names the flag that asked for `size` codewords.
pub fn check_size(flag: &str, size: usize, limits: &vqforge::limits::Limits) -> Result<()> {
    if size as u64 > limits.max_codewords {
        return usage(format!(
            "{flag} asks for {size} codewords, above the limit of {}; raise it with --max-codewords",
            limits.max_codewords
        ));
    }
    Ok(())
}

/// A usage error found by the command line itself (exit code 2).
#[derive(Debug)]
pub struct UsageError(pub String);

impl std::fmt::Display for UsageError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}", self.0)
    }
}

impl std::error::Error for UsageError {}

/// Returns a usage error (exit code 2) with this message.
pub fn usage<T>(message: impl Into<String>) -> Result<T> {
    Err(UsageError(message.into()).into())
}

/// Parses the arguments and runs the chosen command.
pub fn run() -> Result<ExitCode> {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            use clap::error::ErrorKind as K;
            if matches!(
                e.kind(),
                K::DisplayHelp | K::DisplayVersion | K::DisplayHelpOnMissingArgumentOrSubcommand
            ) {
                e.print()?;
                return Ok(if e.kind() == K::DisplayHelpOnMissingArgumentOrSubcommand {
                    ExitCode::from(2)
                } else {
                    ExitCode::SUCCESS
                });
            }
            // clap's message is a paragraph plus usage hints: keep the
            // paragraph, on one line.
            let text = e.to_string();
            let first: Vec<&str> = text
                .lines()
                .map(str::trim)
                .skip_while(|l| l.is_empty())
                .take_while(|l| !l.is_empty())
                .collect();
            let first = first.join(" ");
            let first = first.trim_start_matches("error: ");
            return usage(format!("{first} (see 'vqforge --help')"));
        }
    };
    match cli.command {
        Command::Train(a) => train::run(a),
        Command::Encode(a) => encode::run(a),
        Command::Decode(a) => decode::run(a),
        Command::Palette(a) => palette::run(a),
        Command::Curve(a) => curve::run(a),
        Command::Info(a) => info::run(a),
        Command::Demo(a) => demo::run(a),
    }?;
    Ok(ExitCode::SUCCESS)
}

/// True when `a` and `b` name the same file, also when spelt differently
/// (`./x.csv` and `x.csv`, or through a symbolic link), whether or not the
/// file exists yet (then their folders are compared, resolved, and their
/// names).
pub fn same_file(a: &Path, b: &Path) -> bool {
    if a == b {
        return true;
    }
    match (resolved(a), resolved(b)) {
        (Some(a), Some(b)) => a == b,
        _ => false,
    }
}

/// The canonical path of `p`, or of its folder joined with its name when
/// `p` does not exist yet.
fn resolved(p: &Path) -> Option<std::path::PathBuf> {
    if let Ok(full) = std::fs::canonicalize(p) {
        return Some(full);
    }
    let name = p.file_name()?;
    let folder = match p.parent() {
        Some(f) if !f.as_os_str().is_empty() => f,
        _ => Path::new("."),
    };
    Some(std::fs::canonicalize(folder).ok()?.join(name))
}

/// The whole error chain on one line: outer context first.
pub fn one_line(err: &anyhow::Error) -> String {
    let mut parts: Vec<String> = Vec::new();
    for cause in err.chain() {
        let s = cause.to_string().replace('\n', " ");
        if parts.last().is_some_and(|p| p.contains(&s)) {
            continue;
        }
        parts.push(s);
    }
    parts.join(": ")
}

/// 2 for usage errors, 1 for everything else.
pub fn exit_code(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if cause.downcast_ref::<UsageError>().is_some() {
            return 2;
        }
        if let Some(e) = cause.downcast_ref::<vqforge::Error>() {
            return if e.is_usage() { 2 } else { 1 };
        }
    }
    1
}

/// True when the error is a closed stdout (e.g. piped into `head`).
pub fn is_broken_pipe(err: &anyhow::Error) -> bool {
    err.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
