//! Progress bars on stderr (indicatif). Hidden when stderr is not a
//! terminal, so logs and pipes stay clean.

use std::io::IsTerminal;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar counting `total` units of work labelled `what`, or a hidden one.
pub fn bar(total: u64, what: &str) -> ProgressBar {
    if !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr_with_hz(8));
    pb.set_style(
        ProgressStyle::with_template("{prefix:>9} [{bar:30}] {pos}/{len} {msg} (eta {eta})")
            .expect("valid template")
            .progress_chars("=> "),
    );
    pb.set_prefix(what.to_string());
    pb.enable_steady_tick(Duration::from_millis(250));
    pb
}

/// A spinner with a message, for work of unknown length, or a hidden one.
pub fn spinner(what: &str) -> ProgressBar {
    if !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::with_draw_target(None, ProgressDrawTarget::stderr_with_hz(8));
    pb.set_style(
        ProgressStyle::with_template("{spinner} {prefix} {msg} [{elapsed}]")
            .expect("valid template"),
    );
    pb.set_prefix(what.to_string());
    pb.enable_steady_tick(Duration::from_millis(120));
    pb
}
