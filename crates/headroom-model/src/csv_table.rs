//! One CSV table read for checking: header mapped to known columns, trimmed cells with their
//! line numbers, and typed cell reading that reports a bad cell once and hands back a marker.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use csv::{ReaderBuilder, Trim};

use crate::diagnostic::Diagnostic;
use crate::source::{ReadFailure, closest, decode_utf8, line_of, read_bytes};

/// What a table needs below its header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Rows {
    /// At least one data row (nodes.csv, branches.csv).
    AtLeastOne,
    /// Any number, none included (conductors.csv).
    Any,
}

/// What a table file is, for reading it.
pub(crate) struct TableSpec {
    /// Every column the program reads; others draw a warning.
    pub(crate) known: &'static [&'static str],
    /// Columns that must be in the header.
    pub(crate) required: &'static [&'static str],
    /// Whether the table may have no data rows.
    pub(crate) rows: Rows,
}

/// A CSV file read into trimmed text cells.
pub(crate) struct Table {
    /// The file, as named in diagnostics.
    pub(crate) file: PathBuf,
    /// Line of the header row (1 unless blank lines come first).
    pub(crate) header_line: usize,
    /// Position of each known column in the rows.
    column_of: HashMap<&'static str, usize>,
    /// Data rows in file order (rows whose cells are all empty are left out).
    pub(crate) rows: Vec<Row>,
    /// True when a required column is missing; the rows are then not worth reading.
    pub(crate) incomplete: bool,
    /// True when the file is not valid UTF-8 (reported once, with its line): cells holding a
    /// replaced byte are then not reported again.
    replaced_bytes: bool,
}

/// One data row.
pub(crate) struct Row {
    /// 1-based line where the row starts.
    pub(crate) line: usize,
    cells: Vec<String>,
    /// True when the row has fewer cells than the header (already reported): the cells it
    /// lacks read as absent and draw no "required" errors of their own.
    pub(crate) short: bool,
}

/// The text of one cell.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Cell<'a> {
    /// The column is not in the file, or the row is short and ends before it.
    Absent,
    /// The cell is there and empty: the column's default.
    Empty,
    /// The trimmed text of a non-empty cell.
    Text(&'a str),
}

impl<'a> Cell<'a> {
    /// The text, `None` when absent or empty.
    pub(crate) fn text(self) -> Option<&'a str> {
        match self {
            Cell::Text(text) => Some(text),
            Cell::Absent | Cell::Empty => None,
        }
    }
}

/// A number read from a cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Num {
    /// Absent or empty: the column's default applies.
    Missing,
    /// A finite number in range.
    Value(f64),
    /// A bad value, already reported; the caller puts in a neutral value.
    Bad,
}

impl Num {
    /// The value, or `default` when missing, or `neutral` when bad.
    pub(crate) fn or(self, default: f64, neutral: f64) -> f64 {
        match self {
            Num::Missing => default,
            Num::Value(v) => v,
            Num::Bad => neutral,
        }
    }

    /// True unless missing.
    pub(crate) fn is_given(self) -> bool {
        self != Num::Missing
    }
}

/// The allowed range of a number.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Range {
    /// Any finite number.
    Finite,
    /// Finite and ≥ 0.
    NonNegative,
    /// Finite and > 0.
    Positive,
}

/// Parses a number as written and checks its range; the error is the message to report.
pub(crate) fn parse_number(text: &str, range: Range) -> Result<f64, &'static str> {
    let value: f64 = text.parse().map_err(|_| "not a number")?;
    if !value.is_finite() {
        return Err("must be a finite number");
    }
    match range {
        Range::NonNegative if value < 0.0 => Err("must be 0 or more"),
        Range::Positive if value <= 0.0 => Err("must be greater than 0"),
        _ => Ok(value),
    }
}

/// The line of a record starting at byte `start`. The reader skips blank lines before a record
/// and counts its start from before them, so they are stepped over here.
fn line_at(text: &str, start: u64) -> usize {
    LineCounter::default().line_at(text, start)
}

/// Line numbers of increasing byte offsets, counting each newline once (records arrive in file
/// order, so a whole file costs one pass instead of one pass per row).
#[derive(Default)]
struct LineCounter {
    offset: usize,
    newlines: usize,
}

impl LineCounter {
    fn line_at(&mut self, text: &str, start: u64) -> usize {
        let bytes = text.as_bytes();
        let mut at = usize::try_from(start)
            .unwrap_or(usize::MAX)
            .min(bytes.len());
        while at < bytes.len() && (bytes[at] == b'\n' || bytes[at] == b'\r') {
            at += 1;
        }
        if at < self.offset {
            return line_of(bytes, at);
        }
        self.newlines += bytes[self.offset..at]
            .iter()
            .filter(|&&b| b == b'\n')
            .count();
        self.offset = at;
        self.newlines + 1
    }
}

impl Table {
    /// Reads `file`. Problems of the file itself (missing, empty, not UTF-8, no data rows, ragged
    /// rows, missing or repeated columns) go to `errors`, unknown columns to `warnings`. `None`
    /// when nothing could be read (or the file is not there and `optional`).
    pub(crate) fn read(
        file: &Path,
        spec: &TableSpec,
        optional: bool,
        errors: &mut Vec<Diagnostic>,
        warnings: &mut Vec<Diagnostic>,
    ) -> Option<Table> {
        let bytes = match read_bytes(file) {
            Ok(bytes) => bytes,
            Err(ReadFailure::NotFound) => {
                if !optional {
                    errors.push(Diagnostic::error(file, "file not found"));
                }
                return None;
            }
            Err(ReadFailure::Failed(diagnostic)) => {
                errors.push(diagnostic);
                return None;
            }
        };
        let (text, utf8_error) = decode_utf8(file, &bytes);
        let replaced_bytes = utf8_error.is_some();
        errors.extend(utf8_error);
        if text.trim().is_empty() {
            errors.push(Diagnostic::error(
                file,
                format!(
                    "the file is empty; it needs a header row naming its columns ({})",
                    spec.required.join(", ")
                ),
            ));
            return None;
        }

        let mut reader = ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(Trim::All)
            .from_reader(text.as_bytes());
        let mut records = Vec::new();
        let mut lines = LineCounter::default();
        for result in reader.records() {
            match result {
                Ok(record) => {
                    let line = record
                        .position()
                        .map_or(0, |p| lines.line_at(&text, p.byte()));
                    let cells: Vec<String> = record.iter().map(|c| c.trim().to_string()).collect();
                    records.push((line, cells));
                }
                Err(error) => {
                    // The text is valid UTF-8 and rows may be ragged, so this is rare.
                    let line = error.position().map_or(0, |p| line_at(&text, p.byte()));
                    errors.push(
                        Diagnostic::error(file, format!("cannot read the CSV: {error}"))
                            .at_line(line),
                    );
                    return None;
                }
            }
        }
        let mut records = records
            .into_iter()
            .filter(|(_, cells)| cells.iter().any(|c| !c.is_empty()));
        let Some((header_line, header)) = records.next() else {
            errors.push(Diagnostic::error(file, "the file has no header row"));
            return None;
        };

        let mut column_of = HashMap::new();
        let mut first_at: HashMap<&str, usize> = HashMap::new();
        for (position, name) in header.iter().enumerate() {
            if name.is_empty() {
                warnings.push(
                    Diagnostic::warning(file, "column without a name in the header, ignored")
                        .at_line(header_line)
                        .at_column(format!("#{}", position + 1)),
                );
                continue;
            }
            if first_at.insert(name.as_str(), position).is_some() {
                errors.push(
                    Diagnostic::error(file, "column appears twice in the header")
                        .at_line(header_line)
                        .at_column(name.as_str()),
                );
                continue;
            }
            match spec.known.iter().find(|&&known| known == name) {
                Some(&known) => {
                    column_of.insert(known, position);
                }
                None => {
                    let hint = match closest(name, spec.known) {
                        Some(near) => format!(" (did you mean {near}?)"),
                        None => format!(" (known columns: {})", spec.known.join(", ")),
                    };
                    warnings.push(
                        Diagnostic::warning(file, format!("unknown column, ignored{hint}"))
                            .at_line(header_line)
                            .at_column(name.as_str()),
                    );
                }
            }
        }
        let mut incomplete = false;
        // One column whose name holds another separator: the file is not comma-separated.
        let separator_hint = match header.as_slice() {
            [only] if only.contains(';') => " (the cells seem to be separated by ';': use commas)",
            [only] if only.contains('\t') => {
                " (the cells seem to be separated by tabs: use commas)"
            }
            _ => "",
        };
        for &required in spec.required {
            if !column_of.contains_key(required) {
                incomplete = true;
                errors.push(
                    Diagnostic::error(file, format!("missing required column{separator_hint}"))
                        .at_line(header_line)
                        .at_column(required),
                );
            }
        }

        let n_columns = header.len();
        let mut rows = Vec::new();
        for (line, mut cells) in records {
            let mut short = false;
            if cells.len() < n_columns {
                short = true;
                errors.push(
                    Diagnostic::error(
                        file,
                        format!(
                            "the row has {} cells but the header has {n_columns} columns",
                            cells.len()
                        ),
                    )
                    .at_line(line),
                );
            } else if cells[n_columns..].iter().any(|c| !c.is_empty()) {
                errors.push(
                    Diagnostic::error(
                        file,
                        format!(
                            "the row has {} cells but the header has {n_columns} columns \
                             (a comma inside a value needs quotes)",
                            cells.len()
                        ),
                    )
                    .at_line(line),
                );
                cells.truncate(n_columns);
            }
            rows.push(Row { line, cells, short });
        }
        if rows.is_empty() && spec.rows == Rows::AtLeastOne {
            errors.push(
                Diagnostic::error(file, "the file has a header but no data rows")
                    .at_line(header_line),
            );
        }
        Some(Table {
            file: file.to_path_buf(),
            header_line,
            column_of,
            rows,
            incomplete,
            replaced_bytes,
        })
    }

    /// True when the header has this column.
    pub(crate) fn has_column(&self, column: &str) -> bool {
        self.column_of.contains_key(column)
    }

    /// The cell of `row` in `column`.
    pub(crate) fn cell<'t>(&'t self, row: &'t Row, column: &str) -> Cell<'t> {
        match self.column_of.get(column).and_then(|&i| row.cells.get(i)) {
            None => Cell::Absent,
            Some(text) if text.is_empty() => Cell::Empty,
            Some(text) => Cell::Text(text),
        }
    }

    /// A reader of one row that reports bad cells into `errors`.
    pub(crate) fn row<'t>(
        &'t self,
        row: &'t Row,
        errors: &'t mut Vec<Diagnostic>,
    ) -> RowReader<'t> {
        RowReader {
            table: self,
            row,
            errors,
        }
    }
}

/// Reads the cells of one row, reporting each bad cell once with file, line, column and value.
pub(crate) struct RowReader<'t> {
    table: &'t Table,
    row: &'t Row,
    errors: &'t mut Vec<Diagnostic>,
}

impl<'t> RowReader<'t> {
    /// 1-based line of the row.
    pub(crate) fn line(&self) -> usize {
        self.row.line
    }

    /// True when the row is short (reported already).
    pub(crate) fn is_short(&self) -> bool {
        self.row.short
    }

    /// The trimmed text, empty when absent or empty.
    pub(crate) fn text(&self, column: &str) -> String {
        self.cell(column).text().unwrap_or_default().to_string()
    }

    /// The cell.
    pub(crate) fn cell(&self, column: &str) -> Cell<'t> {
        self.table.cell(self.row, column)
    }

    /// A number in `range`; a bad one is reported and read as [`Num::Bad`].
    pub(crate) fn number(&mut self, column: &str, range: Range) -> Num {
        let Some(text) = self.cell(column).text() else {
            return Num::Missing;
        };
        match parse_number(text, range) {
            Ok(value) => Num::Value(value),
            Err(message) => {
                self.error(column, Some(text), message);
                Num::Bad
            }
        }
    }

    /// A yes/no value: `true`/`false` in any case, or `1`/`0`; `default` when missing or bad.
    pub(crate) fn flag(&mut self, column: &str, default: bool) -> bool {
        let Some(text) = self.cell(column).text() else {
            return default;
        };
        if text == "1" || text.eq_ignore_ascii_case("true") {
            true
        } else if text == "0" || text.eq_ignore_ascii_case("false") {
            false
        } else {
            self.error(column, Some(text), "must be true or false (or 1 or 0)");
            default
        }
    }

    /// Reports that a cell the row needs is empty (nothing when the row is short: that is
    /// reported already). When the whole column is absent from the file, the caller reports it
    /// once instead (see [`RowReader::column_present`]).
    pub(crate) fn required(&mut self, column: &str, message: &str) {
        if !self.row.short && self.table.has_column(column) {
            self.error(column, None, message);
        }
    }

    /// True when the file has this column.
    pub(crate) fn column_present(&self, column: &str) -> bool {
        self.table.has_column(column)
    }

    /// Reports an error on a cell of this row — unless the cell holds a byte that was not
    /// UTF-8, which the file's own error names already.
    pub(crate) fn error(&mut self, column: &str, value: Option<&str>, message: &str) {
        if self.table.replaced_bytes && value.is_some_and(|v| v.contains('\u{FFFD}')) {
            return;
        }
        let mut diagnostic = Diagnostic::error(&self.table.file, message)
            .at_line(self.row.line)
            .at_column(column);
        if let Some(value) = value {
            diagnostic = diagnostic.with_value(value);
        }
        self.errors.push(diagnostic);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_number_checks_finiteness_and_range() {
        assert_eq!(parse_number("1.5", Range::Positive), Ok(1.5));
        assert_eq!(parse_number("-2e3", Range::Finite), Ok(-2000.0));
        assert_eq!(parse_number("0", Range::NonNegative), Ok(0.0));
        assert_eq!(
            parse_number("0", Range::Positive),
            Err("must be greater than 0")
        );
        assert_eq!(
            parse_number("-3", Range::Positive),
            Err("must be greater than 0")
        );
        assert_eq!(
            parse_number("-0.1", Range::NonNegative),
            Err("must be 0 or more")
        );
        assert_eq!(
            parse_number("NaN", Range::Finite),
            Err("must be a finite number")
        );
        assert_eq!(
            parse_number("inf", Range::Finite),
            Err("must be a finite number")
        );
        assert_eq!(
            parse_number("-Infinity", Range::Finite),
            Err("must be a finite number")
        );
        assert_eq!(parse_number("1,5", Range::Finite), Err("not a number"));
        assert_eq!(parse_number("abc", Range::Finite), Err("not a number"));
    }
}
