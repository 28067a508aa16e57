//! A TOML file read for checking: syntax errors with their line, and typed values that report
//! the key, line and value as written.

use std::path::{Path, PathBuf};

use toml::Spanned;
use toml::de::{DeTable, DeValue};

use crate::diagnostic::Diagnostic;
use crate::source::{ReadFailure, decode_utf8, line_of, read_bytes};

/// The text of a TOML file, for parsing and for pointing into.
pub(crate) struct TomlText {
    /// The file, as named in diagnostics.
    pub(crate) file: PathBuf,
    /// Its text.
    pub(crate) text: String,
}

/// A value with its span in the text.
pub(crate) type Value<'i> = Spanned<DeValue<'i>>;

impl TomlText {
    /// Reads the file; a missing file, a read error or non-UTF-8 text is an error.
    pub(crate) fn read(file: &Path) -> Result<TomlText, Diagnostic> {
        let bytes = match read_bytes(file) {
            Ok(bytes) => bytes,
            Err(ReadFailure::NotFound) => return Err(Diagnostic::error(file, "file not found")),
            Err(ReadFailure::Failed(diagnostic)) => return Err(diagnostic),
        };
        match decode_utf8(file, &bytes) {
            (_, Some(error)) => Err(error),
            (text, None) => Ok(TomlText {
                file: file.to_path_buf(),
                text,
            }),
        }
    }

    /// Parses the document; a syntax error names its line.
    pub(crate) fn parse(&self) -> Result<Spanned<DeTable<'_>>, Diagnostic> {
        DeTable::parse(&self.text).map_err(|error| {
            let mut diagnostic = Diagnostic::error(
                &self.file,
                format!("TOML syntax error: {}", error.message().trim()),
            );
            if let Some(span) = error.span() {
                diagnostic = diagnostic.at_line(self.line(span.start));
            }
            diagnostic
        })
    }

    /// 1-based line of a byte offset.
    pub(crate) fn line(&self, offset: usize) -> usize {
        line_of(self.text.as_bytes(), offset)
    }

    /// The value as written (shortened when long).
    pub(crate) fn raw(&self, value: &Value<'_>) -> String {
        let raw = self.text.get(value.span()).unwrap_or("").trim();
        if raw.chars().count() > 60 {
            let short: String = raw.chars().take(57).collect();
            format!("{short}...")
        } else {
            raw.to_string()
        }
    }

    /// An error at the line of `value`, naming `key` and the value as written.
    pub(crate) fn error_at(&self, key: &str, value: &Value<'_>, message: &str) -> Diagnostic {
        Diagnostic::error(&self.file, message)
            .at_line(self.line(value.span().start))
            .at_column(key)
            .with_value(self.raw(value))
    }

    /// A number (integer or float).
    pub(crate) fn number(&self, key: &str, value: &Value<'_>) -> Result<f64, Diagnostic> {
        let number = match value.get_ref() {
            DeValue::Float(float) => float.as_str().parse::<f64>().ok(),
            DeValue::Integer(integer) if integer.radix() == 10 => {
                integer.as_str().parse::<f64>().ok()
            }
            DeValue::Integer(integer) => i64::from_str_radix(integer.as_str(), integer.radix())
                .ok()
                .map(|i| i as f64),
            _ => return Err(self.error_at(key, value, "must be a number")),
        };
        number.ok_or_else(|| self.error_at(key, value, "not a number"))
    }

    /// A string.
    pub(crate) fn string(&self, key: &str, value: &Value<'_>) -> Result<String, Diagnostic> {
        match value.get_ref() {
            DeValue::String(text) => Ok(text.to_string()),
            _ => Err(self.error_at(key, value, "must be a string (in double quotes)")),
        }
    }

    /// A boolean.
    pub(crate) fn boolean(&self, key: &str, value: &Value<'_>) -> Result<bool, Diagnostic> {
        match value.get_ref() {
            DeValue::Boolean(flag) => Ok(*flag),
            _ => Err(self.error_at(key, value, "must be true or false")),
        }
    }
}

/// One key of a table with its value.
pub(crate) struct Entry<'a, 'i> {
    /// The key.
    pub(crate) key: &'a str,
    /// Byte offset of the key in the text.
    pub(crate) key_start: usize,
    /// The value.
    pub(crate) value: &'a Value<'i>,
}

/// The entries of a table in file order (the parser keeps them sorted by key).
pub(crate) fn entries<'a, 'i>(table: &'a DeTable<'i>) -> Vec<Entry<'a, 'i>> {
    let mut entries: Vec<Entry<'a, 'i>> = table
        .iter()
        .map(|(key, value)| Entry {
            key: key.get_ref().as_ref(),
            key_start: key.span().start,
            value,
        })
        .collect();
    entries.sort_by_key(|entry| entry.key_start);
    entries
}
