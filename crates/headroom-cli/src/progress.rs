//! A progress bar on stderr, shown only on a terminal and never with --quiet.

use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar counting node answers; hidden when stderr is not a terminal or `quiet` is set.
pub fn bar(total: u64, quiet: bool) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::hidden());
    }
    let bar = ProgressBar::new(total);
    bar.set_style(
        ProgressStyle::with_template(
            "{spinner} {msg} [{bar:30}] {pos}/{len} node answers, {per_sec}, about {eta} left",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar())
        .progress_chars("=> "),
    );
    bar.set_message("mapping");
    bar
}
