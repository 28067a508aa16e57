//! Problems found in the input, each naming file, line, column and value.

use std::fmt;
use std::path::{Path, PathBuf};

/// Most errors reported for one run; past this the list ends with a count of the rest.
pub const MAX_REPORTED: usize = 50;

/// How serious a [`Diagnostic`] is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Severity {
    /// The run cannot go on; nothing is written.
    Error,
    /// Worth telling (for example an unknown column); the run goes on.
    Warning,
}

/// One problem in one place of one input file.
#[derive(Debug, Clone, PartialEq)]
pub struct Diagnostic {
    /// Error or warning.
    pub severity: Severity,
    /// The file the problem is in.
    pub file: PathBuf,
    /// 1-based line in that file, where one applies (the header is line 1 of a CSV file).
    pub line: Option<usize>,
    /// Column (CSV) or key (TOML) name, where one applies.
    pub column: Option<String>,
    /// The offending value as written, where one applies.
    pub value: Option<String>,
    /// What is wrong, in plain words.
    pub message: String,
}

impl Diagnostic {
    /// An error in `file` with a message; add place and value with the `at_*` methods.
    pub fn error(file: impl AsRef<Path>, message: impl Into<String>) -> Diagnostic {
        Diagnostic {
            severity: Severity::Error,
            file: file.as_ref().to_path_buf(),
            line: None,
            column: None,
            value: None,
            message: message.into(),
        }
    }

    /// A warning in `file` with a message.
    pub fn warning(file: impl AsRef<Path>, message: impl Into<String>) -> Diagnostic {
        Diagnostic {
            severity: Severity::Warning,
            ..Diagnostic::error(file, message)
        }
    }

    /// Sets the 1-based line (0 means "not from a file" and is left out).
    pub fn at_line(mut self, line: usize) -> Diagnostic {
        self.line = (line > 0).then_some(line);
        self
    }

    /// Sets the column or key name.
    pub fn at_column(mut self, column: impl Into<String>) -> Diagnostic {
        self.column = Some(column.into());
        self
    }

    /// Sets the offending value as written.
    pub fn with_value(mut self, value: impl Into<String>) -> Diagnostic {
        self.value = Some(value.into());
        self
    }

    /// True for [`Severity::Error`].
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}

impl fmt::Display for Diagnostic {
    /// `feeders/a/branches.csv: line 42: column length_km: value "-3": must be greater than 0`
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, ": line {line}")?;
        }
        if let Some(column) = &self.column {
            write!(f, ": column {column}")?;
        }
        if let Some(value) = &self.value {
            write!(f, ": value {value:?}")?;
        }
        write!(f, ": {}", self.message)
    }
}

/// Every error found in one reading of the input (at least one).
#[derive(Debug, Clone, PartialEq)]
pub struct ModelErrors {
    /// The errors, in the order found (files in reading order, lines ascending).
    pub errors: Vec<Diagnostic>,
}

impl ModelErrors {
    /// Wraps a list of diagnostics, keeping only the errors.
    pub fn new(diagnostics: Vec<Diagnostic>) -> ModelErrors {
        ModelErrors {
            errors: diagnostics
                .into_iter()
                .filter(Diagnostic::is_error)
                .collect(),
        }
    }

    /// One error.
    pub fn single(diagnostic: Diagnostic) -> ModelErrors {
        ModelErrors {
            errors: vec![diagnostic],
        }
    }
}

impl fmt::Display for ModelErrors {
    /// One line per error, at most [`MAX_REPORTED`], then a count of the rest.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, error) in self.errors.iter().take(MAX_REPORTED).enumerate() {
            if i > 0 {
                writeln!(f)?;
            }
            write!(f, "error: {error}")?;
        }
        if self.errors.len() > MAX_REPORTED {
            write!(
                f,
                "\n... and {} more errors",
                self.errors.len() - MAX_REPORTED
            )?;
        }
        Ok(())
    }
}

impl std::error::Error for ModelErrors {}
