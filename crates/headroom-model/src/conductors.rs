//! The conductor library: conductors.csv of the feeders' parent folder, overridden by type name by
//! the feeder's own conductors.csv.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use crate::csv_table::{Num, Range, Rows, Table, TableSpec};
use crate::diagnostic::Diagnostic;

const SPEC: TableSpec = TableSpec {
    known: &["type", "r_ohm_per_km", "x_ohm_per_km", "rating_a"],
    required: &["type", "r_ohm_per_km", "x_ohm_per_km", "rating_a"],
    rows: Rows::Any,
};

/// One line or cable type.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Conductor {
    /// Series resistance, ohm per km.
    pub(crate) r_ohm_per_km: f64,
    /// Series reactance, ohm per km.
    pub(crate) x_ohm_per_km: f64,
    /// Continuous rating, A.
    pub(crate) rating_a: f64,
}

/// One conductors.csv as read, with what was wrong in it.
#[derive(Debug, Clone, Default)]
pub(crate) struct LibraryFile {
    /// Types by name. A type with bad values is kept with neutral values (the bad cells are
    /// reported already) so that branches using it draw no second error.
    pub(crate) types: HashMap<String, Conductor>,
    /// False when the file is there but could not be read as a whole (already reported).
    pub(crate) usable: bool,
    /// True when the file exists.
    pub(crate) present: bool,
    /// Errors found in the file.
    pub(crate) errors: Vec<Diagnostic>,
    /// Warnings found in the file.
    pub(crate) warnings: Vec<Diagnostic>,
}

impl LibraryFile {
    /// Reads an optional conductors.csv.
    pub(crate) fn read(file: &Path) -> LibraryFile {
        let mut library = LibraryFile {
            usable: true,
            ..LibraryFile::default()
        };
        library.present = file.exists();
        let Some(table) = Table::read(
            file,
            &SPEC,
            true,
            &mut library.errors,
            &mut library.warnings,
        ) else {
            library.usable = !library.present;
            return library;
        };
        if table.incomplete {
            library.usable = false;
            return library;
        }
        let mut first_line: HashMap<String, usize> = HashMap::new();
        for row in &table.rows {
            let mut cells = table.row(row, &mut library.errors);
            let name = cells.text("type");
            if name.is_empty() {
                cells.required("type", "conductor type name is empty");
                continue;
            }
            let r = cells.number("r_ohm_per_km", Range::NonNegative);
            let x = cells.number("x_ohm_per_km", Range::NonNegative);
            let rating = cells.number("rating_a", Range::Positive);
            for (column, value) in [
                ("r_ohm_per_km", r),
                ("x_ohm_per_km", x),
                ("rating_a", rating),
            ] {
                if value == Num::Missing {
                    cells.required(column, "required");
                }
            }
            let mut r_ohm_per_km = r.or(1.0, 1.0);
            let x_ohm_per_km = x.or(1.0, 1.0);
            if r_ohm_per_km == 0.0 && x_ohm_per_km == 0.0 {
                cells.error(
                    "r_ohm_per_km",
                    Some("0"),
                    "r_ohm_per_km and x_ohm_per_km are both zero (a conductor needs an impedance)",
                );
                r_ohm_per_km = 1.0;
            }
            let line = cells.line();
            if let Some(&first) = first_line.get(&name) {
                library.errors.push(
                    Diagnostic::error(
                        file,
                        format!("duplicate conductor type (first defined on line {first})"),
                    )
                    .at_line(line)
                    .at_column("type")
                    .with_value(&name),
                );
                continue;
            }
            first_line.insert(name.clone(), line);
            library.types.insert(
                name,
                Conductor {
                    r_ohm_per_km,
                    x_ohm_per_km,
                    rating_a: rating.or(1.0, 1.0),
                },
            );
        }
        library
    }
}

/// The conductor types one feeder sees: shared library, then its own overrides.
#[derive(Debug, Clone, Default)]
pub(crate) struct Library {
    types: HashMap<String, Conductor>,
    /// False when some conductors.csv could not be read: unknown types are then not reported
    /// (the broken file is).
    pub(crate) complete: bool,
    /// The files that were looked in, for messages.
    pub(crate) files: Vec<PathBuf>,
}

impl Library {
    /// The shared library overridden by `own`, type by type.
    pub(crate) fn merge(
        shared: &LibraryFile,
        shared_file: &Path,
        own: &LibraryFile,
        own_file: &Path,
    ) -> Library {
        let mut types = shared.types.clone();
        types.extend(own.types.iter().map(|(k, v)| (k.clone(), v.clone())));
        let files = [(shared, shared_file), (own, own_file)]
            .into_iter()
            .filter(|(library, _)| library.present)
            .map(|(_, file)| file.to_path_buf())
            .collect();
        Library {
            types,
            complete: shared.usable && own.usable,
            files,
        }
    }

    /// The conductor of this type.
    pub(crate) fn get(&self, name: &str) -> Option<&Conductor> {
        self.types.get(name)
    }

    /// Type names, sorted (for hints).
    pub(crate) fn names(&self) -> Vec<&str> {
        let mut names: Vec<&str> = self.types.keys().map(String::as_str).collect();
        names.sort_unstable();
        names
    }
}
