//! The `headroom` command: parse the arguments, call the libraries, print, and map failures to
//! exit codes (0 success, 1 invalid model or settings, 2 bad usage, 3 could not write output).

/// `println!` for the command's report on standard output, through [`say`].
macro_rules! say {
    ($($arg:tt)*) => {
        $crate::say(format_args!($($arg)*))
    };
}

mod args;
mod cmd_check;
mod cmd_flow;
mod cmd_map;
mod cmd_report;
mod cmd_synth;
mod cmd_validate;
mod merge;
mod output;
mod progress;
mod tables;
mod workdir;

use std::process::ExitCode;

use clap::Parser;

use args::{Cli, Command};

/// Printed with every result: the numbers feed decisions about energised equipment.
pub const CAUTION: &str = "Caution: planning estimates only. Confirm under local codes and by \
licensed engineers before any connection decision.";

/// Writes one line of the report on standard output. When the reader has gone away
/// (`headroom map … | head -1`), the rest of the report is dropped quietly and the command
/// carries on: its results are in its files, and the lines are a summary of them. Any other
/// failure to write is said once on standard error.
#[allow(clippy::print_stderr)]
pub fn say(line: std::fmt::Arguments<'_>) {
    use std::io::Write;
    use std::sync::atomic::{AtomicBool, Ordering};
    static CLOSED: AtomicBool = AtomicBool::new(false);
    if CLOSED.load(Ordering::Relaxed) {
        return;
    }
    let mut out = std::io::stdout().lock();
    let written = out
        .write_fmt(line)
        .and_then(|()| out.write_all(b"\n"))
        .and_then(|()| out.flush());
    if let Err(error) = written {
        CLOSED.store(true, Ordering::Relaxed);
        if error.kind() != std::io::ErrorKind::BrokenPipe {
            eprintln!("warning: could not write to standard output: {error}");
        }
    }
}

/// A failure with its exit code.
#[derive(Debug)]
pub enum Failure {
    /// The model or settings are invalid (exit 1); the message names file, line and value.
    Invalid(String),
    /// Bad command-line usage not caught by the parser (exit 2).
    Usage(String),
    /// Output could not be written (exit 3).
    Output(String),
}

impl From<headroom_model::ModelErrors> for Failure {
    fn from(errors: headroom_model::ModelErrors) -> Failure {
        let n = errors.errors.len();
        Failure::Invalid(format!(
            "{errors}\n{n} error{} found; nothing was written.",
            if n == 1 { "" } else { "s" }
        ))
    }
}

#[allow(clippy::print_stderr)]
fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match &cli.command {
        Command::Validate(a) => cmd_validate::run(a),
        Command::Flow(a) => cmd_flow::run(a),
        Command::Map(a) => cmd_map::run(a),
        Command::Synth(a) => cmd_synth::run(a),
        Command::Check(a) => cmd_check::run(a),
        Command::Report(a) => cmd_report::run(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(Failure::Invalid(message)) => {
            eprintln!("{message}");
            ExitCode::from(1)
        }
        Err(Failure::Usage(message)) => {
            eprintln!("error: {message}");
            ExitCode::from(2)
        }
        Err(Failure::Output(message)) => {
            eprintln!("error: {message}");
            ExitCode::from(3)
        }
    }
}
