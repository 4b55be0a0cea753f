//! The `vqforge` command line: parses arguments, wires library parts
//! together, prints reports. All algorithms live in the library.
//!
//! Exit codes: 0 success (also when stdout is closed early, e.g. by `head`),
//! 1 a failure while working on the data or files, 2 a usage error (bad
//! flag, value or combination).

mod cli;

use std::process::ExitCode;

fn main() -> ExitCode {
    match cli::run() {
        Ok(code) => code,
        Err(err) => {
            if cli::is_broken_pipe(&err) {
                return ExitCode::SUCCESS;
            }
            eprintln!("error: {}", cli::one_line(&err));
            ExitCode::from(cli::exit_code(&err))
        }
    }
}
