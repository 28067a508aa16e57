//! Progress on stderr: a bar on a terminal, a line every little while in a log (batch jobs),
//! nothing with --quiet.

use std::io::IsTerminal;
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Least time between two progress lines in a log.
const LOG_EVERY: Duration = Duration::from_secs(10);

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

/// Progress of a map run: feeders and node answers done, and an estimate of the time left
/// (from this process's pace over the answers still to do).
pub struct MapProgress {
    bar: ProgressBar,
    log: bool,
    feeders_total: u64,
    feeders_done: AtomicU64,
    answers_total: u64,
    answers_done: AtomicU64,
    started: Instant,
    last_line: Mutex<Instant>,
}

impl MapProgress {
    /// `feeders_done` were finished by an earlier run; `answers_total` node answers are to do.
    pub fn new(feeders_total: u64, feeders_done: u64, answers_total: u64, quiet: bool) -> Self {
        let terminal = std::io::stderr().is_terminal();
        let bar = bar(answers_total, quiet);
        let progress = MapProgress {
            bar,
            log: !quiet && !terminal,
            feeders_total,
            feeders_done: AtomicU64::new(feeders_done),
            answers_total,
            answers_done: AtomicU64::new(0),
            started: Instant::now(),
            last_line: Mutex::new(Instant::now()),
        };
        progress.bar.set_message(progress.feeders_text());
        progress
    }

    fn feeders_text(&self) -> String {
        format!(
            "{}/{} feeders",
            self.feeders_done.load(Ordering::Relaxed),
            self.feeders_total
        )
    }

    /// `n` more node answers.
    pub fn answers(&self, n: u64) {
        self.answers_done.fetch_add(n, Ordering::Relaxed);
        self.bar.inc(n);
    }

    /// One more feeder written.
    #[allow(clippy::print_stderr)]
    pub fn feeder_done(&self) {
        self.feeders_done.fetch_add(1, Ordering::Relaxed);
        self.bar.set_message(self.feeders_text());
        if !self.log {
            return;
        }
        let mut last = self.last_line.lock().unwrap_or_else(|p| p.into_inner());
        let all_done = self.feeders_done.load(Ordering::Relaxed) == self.feeders_total;
        if last.elapsed() < LOG_EVERY && !all_done {
            return;
        }
        *last = Instant::now();
        let elapsed_s = self.started.elapsed().as_secs_f64();
        let done = self.answers_done.load(Ordering::Relaxed);
        let left = if done == 0 {
            "time left unknown".to_string()
        } else {
            let left_s = elapsed_s * (self.answers_total.saturating_sub(done)) as f64 / done as f64;
            format!("about {} left", words(left_s))
        };
        eprintln!(
            "progress: {}, {done}/{} node answers, {} so far, {left}",
            self.feeders_text(),
            self.answers_total,
            words(elapsed_s)
        );
    }

    pub fn finish(&self) {
        self.bar.finish_and_clear();
    }
}

/// A duration in words: `42 s`, `7 min 05 s`, `2 h 03 min`.
fn words(seconds: f64) -> String {
    let s = seconds.max(0.0).round() as u64;
    if s < 60 {
        format!("{s} s")
    } else if s < 3600 {
        format!("{} min {:02} s", s / 60, s % 60)
    } else {
        format!("{} h {:02} min", s / 3600, s % 3600 / 60)
    }
}
