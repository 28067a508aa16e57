//! Reading feeder folders and study.toml from disk.
//!
//! Every problem of a feeder is reported in one go: a cell that does not parse is reported with
//! file, line, column and value and then read as a neutral value (1 for impedances, lengths and
//! ratings, 0 for loads), so that the tree checks of [`Feeder::from_records_at`] still run and
//! report loops, islands and unknown nodes, without reporting the same cell twice.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::rc::Rc;

use crate::conductors::{Library, LibraryFile};
use crate::csv_table::{Num, Range, RowReader, Rows, Table, TableSpec};
use crate::diagnostic::{Diagnostic, ModelErrors};
use crate::feeder::{BranchRecord, Feeder, FeederHeader, NodeRecord};
use crate::source::{closest, io_words};
use crate::study::Study;
use crate::toml_doc::{TomlText, entries};

/// Name of a feeder's header file.
pub const FEEDER_FILE: &str = "feeder.toml";
/// Name of a feeder's node table.
pub const NODES_FILE: &str = "nodes.csv";
/// Name of a feeder's branch table.
pub const BRANCHES_FILE: &str = "branches.csv";
/// Name of a conductor library (in the feeders' parent folder, and optionally in a feeder).
pub const CONDUCTORS_FILE: &str = "conductors.csv";

const NODES: TableSpec = TableSpec {
    known: &["id", "x", "y", "load_kw", "load_kvar", "gen_kw", "gen_kvar"],
    required: &["id"],
    rows: Rows::AtLeastOne,
};

const BRANCHES: TableSpec = TableSpec {
    known: &[
        "id",
        "from",
        "to",
        "type",
        "length_km",
        "r_ohm",
        "x_ohm",
        "rating_a",
        "closed",
    ],
    required: &["id", "from", "to"],
    rows: Rows::AtLeastOne,
};

const HEADER_KEYS: &[&str] = &[
    "name",
    "nominal_kv",
    "head",
    "head_voltage_pu",
    "substation",
    "region",
    "crs",
];

/// The feeder folders under `path`: `path` itself when it holds a feeder.toml, otherwise every
/// sub-folder holding one, sorted by name.
pub fn discover_feeders(path: &Path) -> Result<Vec<PathBuf>, ModelErrors> {
    let fail = |message: String| Err(ModelErrors::single(Diagnostic::error(path, message)));
    let metadata = match std::fs::metadata(path) {
        Ok(metadata) => metadata,
        Err(error) if error.kind() == std::io::ErrorKind::NotFound => {
            return fail("no such folder".to_string());
        }
        Err(error) => return fail(format!("cannot read the folder: {}", io_words(&error))),
    };
    if !metadata.is_dir() {
        return fail(
            "this is a file; give a feeder folder (holding feeder.toml) or a folder of feeder \
             folders"
                .to_string(),
        );
    }
    if path.join(FEEDER_FILE).is_file() {
        return Ok(vec![path.to_path_buf()]);
    }
    let listing = match std::fs::read_dir(path) {
        Ok(listing) => listing,
        Err(error) => return fail(format!("cannot list the folder: {}", io_words(&error))),
    };
    let mut folders = Vec::new();
    for entry in listing {
        let entry = match entry {
            Ok(entry) => entry,
            Err(error) => return fail(format!("cannot list the folder: {}", io_words(&error))),
        };
        let folder = path.join(entry.file_name());
        if folder.is_dir() && folder.join(FEEDER_FILE).is_file() {
            folders.push(folder);
        }
    }
    if folders.is_empty() {
        return fail(
            "no feeder here: neither this folder nor any of its sub-folders holds a feeder.toml"
                .to_string(),
        );
    }
    folders.sort_by(|a, b| a.file_name().cmp(&b.file_name()));
    Ok(folders)
}

/// Reads one feeder folder (with the shared conductors.csv of its parent folder and its own
/// overrides) and validates it.
///
/// The feeder id is the folder name. Every error of the feeder is reported, ordered by file
/// (shared conductors.csv, feeder.toml, own conductors.csv, nodes.csv, branches.csv) and line.
/// Warnings (unknown columns and keys) are kept in [`Feeder::warnings`].
pub fn load_feeder(folder: &Path) -> Result<Feeder, ModelErrors> {
    load_one(folder, &mut SharedLibraries::default())
}

/// Reads every feeder under `path` (see [`discover_feeders`]); errors of all feeders are reported
/// together.
///
/// Errors come feeder by feeder in folder-name order, each feeder's as in [`load_feeder`]. A
/// shared conductors.csv is read once: its errors are reported once and its warnings are kept on
/// the first feeder that uses it.
pub fn load_feeders(path: &Path) -> Result<Vec<Feeder>, ModelErrors> {
    let folders = discover_feeders(path)?;
    let mut shared = SharedLibraries::default();
    let mut feeders = Vec::with_capacity(folders.len());
    let mut errors = Vec::new();
    for folder in &folders {
        match load_one(folder, &mut shared) {
            Ok(feeder) => feeders.push(feeder),
            Err(found) => errors.extend(found.errors),
        }
    }
    if errors.is_empty() {
        Ok(feeders)
    } else {
        Err(ModelErrors::new(errors))
    }
}

pub(crate) fn read_study(path: &Path) -> Result<Study, ModelErrors> {
    crate::study_file::read_study(path)
}

/// Shared conductor libraries already read, by file, so each is read and reported once.
#[derive(Default)]
struct SharedLibraries {
    by_file: HashMap<PathBuf, Rc<LibraryFile>>,
}

impl SharedLibraries {
    /// The library in `file`, and whether this is its first use.
    fn get(&mut self, file: &Path) -> (Rc<LibraryFile>, bool) {
        if let Some(library) = self.by_file.get(file) {
            return (Rc::clone(library), false);
        }
        let library = Rc::new(LibraryFile::read(file));
        self.by_file.insert(file.to_path_buf(), Rc::clone(&library));
        (library, true)
    }
}

/// The feeder id: the folder's name (resolved for `.` and the like).
fn feeder_id(folder: &Path) -> String {
    let name = match folder.file_name() {
        Some(name) => Some(name.to_os_string()),
        None => std::fs::canonicalize(folder)
            .ok()
            .and_then(|full| full.file_name().map(|name| name.to_os_string())),
    };
    name.map_or_else(
        || "feeder".to_string(),
        |name| name.to_string_lossy().into_owned(),
    )
}

/// The shared conductors.csv: the one in the folder's parent.
fn shared_library_file(folder: &Path) -> PathBuf {
    if folder.file_name().is_some() {
        let parent = folder.parent().unwrap_or(Path::new(""));
        return parent.join(CONDUCTORS_FILE);
    }
    match std::fs::canonicalize(folder) {
        Ok(full) => full.parent().unwrap_or(Path::new("")).join(CONDUCTORS_FILE),
        Err(_) => folder.join("..").join(CONDUCTORS_FILE),
    }
}

fn load_one(folder: &Path, shared: &mut SharedLibraries) -> Result<Feeder, ModelErrors> {
    if !folder.is_dir() {
        let message = if folder.exists() {
            "this is a file, not a feeder folder"
        } else {
            "no such folder"
        };
        return Err(ModelErrors::single(Diagnostic::error(folder, message)));
    }
    let id = feeder_id(folder);
    let shared_file = shared_library_file(folder);
    let header_file = folder.join(FEEDER_FILE);
    let own_file = folder.join(CONDUCTORS_FILE);
    let nodes_file = folder.join(NODES_FILE);
    let branches_file = folder.join(BRANCHES_FILE);
    let mut errors = Vec::new();
    let mut warnings = Vec::new();

    let (shared_library, first_use) = shared.get(&shared_file);
    if first_use {
        errors.extend(shared_library.errors.iter().cloned());
        warnings.extend(shared_library.warnings.iter().cloned());
    }
    let header_read = read_header(&header_file, &id, &mut errors, &mut warnings);
    let own_library = LibraryFile::read(&own_file);
    errors.extend(own_library.errors.iter().cloned());
    warnings.extend(own_library.warnings.iter().cloned());
    let library = Library::merge(&shared_library, &shared_file, &own_library, &own_file);
    let nodes = read_nodes(&nodes_file, &mut errors, &mut warnings);
    let branches = read_branches(&branches_file, &library, &mut errors, &mut warnings);

    let file_order = [
        shared_file.as_path(),
        header_file.as_path(),
        own_file.as_path(),
        nodes_file.as_path(),
        branches_file.as_path(),
    ];
    sort_diagnostics(&mut warnings, &file_order);
    if let (Some(header), Some(nodes), Some(branches)) = (header_read.header, nodes, branches) {
        match Feeder::from_records_at(folder, &id, header, nodes, branches, warnings) {
            Ok(feeder) if errors.is_empty() => return Ok(feeder),
            Ok(_) => {}
            Err(tree) => {
                for mut error in tree.errors {
                    // Header problems found by the tree checks get the line of their key.
                    if error.file == header_file
                        && error.line.is_none()
                        && let Some(line) = error
                            .column
                            .as_ref()
                            .and_then(|k| header_read.key_lines.get(k))
                    {
                        error.line = Some(*line);
                    }
                    errors.push(error);
                }
            }
        }
    }
    if errors.is_empty() {
        // Unreachable in practice: a part that could not be read has reported why.
        errors.push(Diagnostic::error(folder, "the feeder could not be read"));
    }
    sort_diagnostics(&mut errors, &file_order);
    Err(ModelErrors::new(errors))
}

/// Orders diagnostics by file (in `file_order`, others after) and line, keeping the order found
/// within a line.
fn sort_diagnostics(diagnostics: &mut [Diagnostic], file_order: &[&Path]) {
    diagnostics.sort_by_key(|d| {
        let rank = file_order
            .iter()
            .position(|file| *file == d.file)
            .unwrap_or(file_order.len());
        (rank, d.line.unwrap_or(0))
    });
}

/// feeder.toml as read: the header when it is usable for the tree checks, and the line of each
/// key.
struct HeaderRead {
    header: Option<FeederHeader>,
    key_lines: HashMap<String, usize>,
}

fn read_header(
    file: &Path,
    id: &str,
    errors: &mut Vec<Diagnostic>,
    warnings: &mut Vec<Diagnostic>,
) -> HeaderRead {
    let mut read = HeaderRead {
        header: None,
        key_lines: HashMap::new(),
    };
    let text = match TomlText::read(file) {
        Ok(text) => text,
        Err(error) => {
            errors.push(error);
            return read;
        }
    };
    let document = match text.parse() {
        Ok(document) => document,
        Err(error) => {
            errors.push(error);
            return read;
        }
    };
    let mut header = FeederHeader::new(id, 1.0, "");
    let mut head = None;
    let mut nominal_kv = None;
    for entry in entries(document.get_ref()) {
        let line = text.line(entry.key_start);
        read.key_lines.insert(entry.key.to_string(), line);
        let value = entry.value;
        let key = entry.key;
        let result = match key {
            "name" => text.string(key, value).map(|v| header.name = v),
            "head" => text.string(key, value).map(|v| head = Some(v)),
            "substation" => text.string(key, value).map(|v| header.substation = Some(v)),
            "region" => text.string(key, value).map(|v| header.region = Some(v)),
            "crs" => text.string(key, value).map(|v| header.crs = Some(v)),
            "nominal_kv" => {
                // A bad value is reported here and read as 1 kV, so it is not reported again.
                nominal_kv = Some(1.0);
                text.number(key, value).and_then(|v| {
                    if v.is_finite() && v > 0.0 {
                        nominal_kv = Some(v);
                        Ok(())
                    } else {
                        Err(text.error_at(key, value, "must be a finite number greater than 0"))
                    }
                })
            }
            "head_voltage_pu" => text.number(key, value).and_then(|v| {
                // Same band as the tree checks; checked here to report the line.
                if v.is_finite() && (0.5..=1.5).contains(&v) {
                    header.head_voltage_pu = v;
                    Ok(())
                } else {
                    Err(text.error_at(key, value, "must be a per-unit value between 0.5 and 1.5"))
                }
            }),
            _ => {
                let hint = closest(key, HEADER_KEYS)
                    .map(|near| format!(" (did you mean {near}?)"))
                    .unwrap_or_default();
                warnings.push(
                    Diagnostic::warning(file, format!("unknown key, ignored{hint}"))
                        .at_line(line)
                        .at_column(key),
                );
                Ok(())
            }
        };
        if let Err(error) = result {
            errors.push(error);
        }
    }
    header.nominal_kv = nominal_kv.unwrap_or_else(|| {
        errors.push(Diagnostic::error(file, "missing required key").at_column("nominal_kv"));
        1.0
    });
    match head {
        Some(head) => {
            header.head = head;
            read.header = Some(header);
        }
        None => {
            if !read.key_lines.contains_key("head") {
                errors.push(Diagnostic::error(file, "missing required key").at_column("head"));
            }
        }
    }
    read
}

fn read_nodes(
    file: &Path,
    errors: &mut Vec<Diagnostic>,
    warnings: &mut Vec<Diagnostic>,
) -> Option<Vec<NodeRecord>> {
    let table = Table::read(file, &NODES, false, errors, warnings)?;
    // Without its rows (reported) the tree checks would only repeat the problem.
    if table.incomplete || table.rows.is_empty() {
        return None;
    }
    let mut nodes = Vec::with_capacity(table.rows.len());
    for row in &table.rows {
        let mut cells = table.row(row, errors);
        let mut node = NodeRecord::new(cells.text("id"));
        node.line = cells.line();
        let x = cells.number("x", Range::Finite);
        let y = cells.number("y", Range::Finite);
        // A bad coordinate drops the point, so that "give both x and y" is not reported too;
        // so does a short row (reported) that ends between them.
        let half_missing = (x == Num::Missing) != (y == Num::Missing);
        if let (Num::Value(_) | Num::Missing, Num::Value(_) | Num::Missing) = (x, y)
            && !(half_missing && cells.is_short())
        {
            node.x = if let Num::Value(v) = x { Some(v) } else { None };
            node.y = if let Num::Value(v) = y { Some(v) } else { None };
        }
        node.load_kw = cells.number("load_kw", Range::Finite).or(0.0, 0.0);
        node.load_kvar = cells.number("load_kvar", Range::Finite).or(0.0, 0.0);
        node.gen_kw = cells.number("gen_kw", Range::Finite).or(0.0, 0.0);
        node.gen_kvar = cells.number("gen_kvar", Range::Finite).or(0.0, 0.0);
        nodes.push(node);
    }
    Some(nodes)
}

/// Columns that some rows need but the file lacks, reported once each at the header.
#[derive(Default)]
struct AbsentColumns {
    /// (column, why, first line needing it), in order first needed.
    needed: Vec<(&'static str, &'static str, usize)>,
}

impl AbsentColumns {
    /// Reports `column` as needed by this row: as an empty cell when the file has the column,
    /// otherwise once for the whole file.
    fn require(&mut self, cells: &mut RowReader<'_>, column: &'static str, why: &'static str) {
        if cells.column_present(column) {
            cells.required(column, why);
        } else if !cells.is_short() && !self.needed.iter().any(|(c, _, _)| *c == column) {
            self.needed.push((column, why, cells.line()));
        }
    }

    fn report(self, table: &Table, errors: &mut Vec<Diagnostic>) {
        for (column, why, first_line) in self.needed {
            errors.push(
                Diagnostic::error(
                    &table.file,
                    format!("missing column ({why}; first needed on line {first_line})"),
                )
                .at_line(table.header_line)
                .at_column(column),
            );
        }
    }
}

fn read_branches(
    file: &Path,
    library: &Library,
    errors: &mut Vec<Diagnostic>,
    warnings: &mut Vec<Diagnostic>,
) -> Option<Vec<BranchRecord>> {
    let table = Table::read(file, &BRANCHES, false, errors, warnings)?;
    if table.incomplete || table.rows.is_empty() {
        return None;
    }
    if !["type", "r_ohm", "x_ohm"]
        .iter()
        .any(|c| table.has_column(c))
    {
        errors.push(
            Diagnostic::error(
                file,
                "missing columns: give a type column (with length_km), or r_ohm, x_ohm and \
                 rating_a columns",
            )
            .at_line(table.header_line)
            .at_column("type"),
        );
        return None;
    }
    let mut absent = AbsentColumns::default();
    let mut branches = Vec::with_capacity(table.rows.len());
    for row in &table.rows {
        let mut cells = table.row(row, errors);
        let conductor = cells.cell("type").text().map(str::to_string);
        let length = cells.number("length_km", Range::Positive);
        let r = cells.number("r_ohm", Range::NonNegative);
        let x = cells.number("x_ohm", Range::NonNegative);
        let rating = cells.number("rating_a", Range::Positive);
        let mut branch = BranchRecord::new(
            cells.text("id"),
            cells.text("from"),
            cells.text("to"),
            1.0,
            1.0,
            1.0,
        );
        branch.line = cells.line();
        branch.closed = cells.flag("closed", true);
        match &conductor {
            Some(name) => {
                if r.is_given() || x.is_given() {
                    cells.error(
                        "type",
                        Some(name),
                        "give either a conductor type or r_ohm and x_ohm, not both",
                    );
                }
                if length == Num::Missing {
                    absent.require(&mut cells, "length_km", "required with type");
                }
                let length_km = length.or(1.0, 1.0);
                branch.length_km = Some(length_km);
                match library.get(name) {
                    Some(found) => {
                        branch.r_ohm = found.r_ohm_per_km * length_km;
                        branch.x_ohm = found.x_ohm_per_km * length_km;
                        branch.rating_a = rating.or(found.rating_a, 1.0);
                    }
                    None => {
                        if library.complete {
                            let message = unknown_type_message(library, name);
                            cells.error("type", Some(name), &message);
                        }
                        branch.rating_a = rating.or(1.0, 1.0);
                    }
                }
                branch.conductor = conductor;
            }
            None => {
                if let Num::Value(length_km) = length {
                    branch.length_km = Some(length_km);
                }
                match (r, x) {
                    (Num::Missing, Num::Missing) => {
                        if !cells.is_short() {
                            cells.error(
                                "type",
                                None,
                                "give a conductor type (with length_km), or r_ohm and x_ohm",
                            );
                        }
                    }
                    _ => {
                        if r == Num::Missing {
                            absent.require(&mut cells, "r_ohm", "required without type");
                        }
                        if x == Num::Missing {
                            absent.require(&mut cells, "x_ohm", "required without type");
                        }
                        if rating == Num::Missing {
                            absent.require(&mut cells, "rating_a", "required without type");
                        }
                    }
                }
                branch.r_ohm = r.or(1.0, 1.0);
                branch.x_ohm = x.or(1.0, 1.0);
                branch.rating_a = rating.or(1.0, 1.0);
            }
        }
        branches.push(branch);
    }
    absent.report(&table, errors);
    Some(branches)
}

fn unknown_type_message(library: &Library, name: &str) -> String {
    let names = library.names();
    let hint = closest(name, &names)
        .map(|near| format!("; did you mean {near}?"))
        .unwrap_or_default();
    if library.files.is_empty() {
        format!(
            "unknown conductor type: there is no {CONDUCTORS_FILE} in the feeder folder nor its parent"
        )
    } else {
        let files: Vec<String> = library
            .files
            .iter()
            .map(|f| f.display().to_string())
            .collect();
        format!(
            "unknown conductor type (not in {}){hint}",
            files.join(" nor in ")
        )
    }
}
