//! The queue file: one application per row of a CSV file. Every bad cell is reported with file,
//! line, column and value before anything is computed.

use std::collections::HashMap;
use std::path::Path;

use csv::{ReaderBuilder, Trim};

use headroom_model::{BusIdx, Diagnostic, Feeder, GenerationSettings, ModelErrors};

use super::application::{Application, ApplicationDate};
use super::queue::QueuedApplication;

/// Columns read from a queue file; `id`, `node` and `kw` are required.
pub const QUEUE_COLUMNS: [&str; 7] = [
    "id",
    "node",
    "kw",
    "power_factor",
    "absorbing",
    "date",
    "feeder",
];

const REQUIRED: [&str; 3] = ["id", "node", "kw"];

/// A queue file read and checked.
#[derive(Debug, Clone, PartialEq)]
pub struct ParsedQueue {
    /// The applications in processing order: file order, or by date (stable) when every row
    /// has one.
    pub applications: Vec<QueuedApplication>,
    /// True when ordered by date.
    pub by_date: bool,
    /// Problems that do not stop the run (unknown columns, which are ignored).
    pub warnings: Vec<Diagnostic>,
}

/// Reads a queue file's bytes (`file` names it in messages).
///
/// Columns, in any order, names as in [`QUEUE_COLUMNS`]: `id` (unique), `node` (a node id of
/// the feeder; not the head), `kw` (export, > 0), `power_factor` (in (0, 1]; empty: the
/// `default_generation`'s), `absorbing` (`true`/`false`/`1`/`0`, any case; empty: the
/// default's), `date` (`YYYY-MM-DD`) and `feeder` (a feeder id; needed only when `feeders` holds
/// several feeders with the node id). Cells are trimmed; rows whose cells are all empty are
/// skipped.
///
/// Order: when the `date` column is filled on every row, the applications are sorted by date,
/// keeping file order within a date; when it is absent or empty on every row, file order. A
/// date on some rows but not others is an error on each row without one: a queue is either
/// dated or not.
///
/// Every problem is reported, each naming the file, line, column and value.
pub fn parse_queue(
    file: &Path,
    bytes: &[u8],
    feeders: &[Feeder],
    default_generation: &GenerationSettings,
) -> Result<ParsedQueue, ModelErrors> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let mut errors = Vec::new();
    let mut warnings = Vec::new();
    let mut reader = ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .trim(Trim::All)
        .from_reader(bytes);
    let header = match reader.headers() {
        Ok(header) if !header.iter().all(str::is_empty) => header.clone(),
        Ok(_) => {
            return Err(ModelErrors::single(
                Diagnostic::error(
                    file,
                    format!(
                        "the file is empty: expected a header row such as {}",
                        QUEUE_COLUMNS[..3].join(",")
                    ),
                )
                .at_line(1),
            ));
        }
        Err(e) => {
            return Err(ModelErrors::single(
                Diagnostic::error(file, format!("cannot read the header row: {e}")).at_line(1),
            ));
        }
    };
    let mut column_of: HashMap<&str, usize> = HashMap::new();
    for (i, name) in header.iter().enumerate() {
        match QUEUE_COLUMNS.iter().find(|&&c| c == name) {
            Some(&known) => {
                if column_of.insert(known, i).is_some() {
                    errors.push(
                        Diagnostic::error(file, "this column appears twice")
                            .at_line(1)
                            .at_column(name),
                    );
                }
            }
            None => warnings.push(
                Diagnostic::warning(
                    file,
                    format!(
                        "unknown column, ignored (known: {})",
                        QUEUE_COLUMNS.join(", ")
                    ),
                )
                .at_line(1)
                .at_column(name),
            ),
        }
    }
    for required in REQUIRED {
        if !column_of.contains_key(required) {
            errors.push(
                Diagnostic::error(
                    file,
                    format!(
                        "the column {required} is missing (required: {})",
                        REQUIRED.join(", ")
                    ),
                )
                .at_line(1),
            );
        }
    }
    if !errors.is_empty() {
        return Err(ModelErrors { errors });
    }

    let mut applications = Vec::new();
    let mut first_line_of: HashMap<String, usize> = HashMap::new();
    // Lines of rows with and without a date, for the all-or-none rule.
    let (mut dated, mut undated) = (Vec::new(), Vec::new());
    for record in reader.records() {
        let record = match record {
            Ok(record) => record,
            Err(e) => {
                let line = e.position().map_or(0, |p| p.line() as usize);
                errors.push(
                    Diagnostic::error(file, format!("cannot read this row: {e}")).at_line(line),
                );
                continue;
            }
        };
        if record.iter().all(str::is_empty) {
            continue;
        }
        let line = record.position().map_or(0, |p| p.line() as usize);
        if record.len() > header.len() {
            errors.push(
                Diagnostic::error(
                    file,
                    format!(
                        "{} cells, but the header has {} columns",
                        record.len(),
                        header.len()
                    ),
                )
                .at_line(line),
            );
        }
        let cell = |column: &str| -> &str {
            column_of
                .get(column)
                .and_then(|&i| record.get(i))
                .unwrap_or("")
        };
        let mut error = |column: &str, value: &str, message: String| {
            errors.push(
                Diagnostic::error(file, message)
                    .at_line(line)
                    .at_column(column)
                    .with_value(value),
            );
        };

        let id = cell("id");
        if id.is_empty() {
            error("id", id, "empty: every application needs an id".to_string());
        } else if let Some(first) = first_line_of.get(id) {
            error("id", id, format!("duplicate id (first on line {first})"));
        } else {
            first_line_of.insert(id.to_string(), line);
        }

        let feeder_text = cell("feeder");
        let named_feeder = if feeder_text.is_empty() {
            None
        } else {
            match feeders.iter().position(|f| f.id() == feeder_text) {
                Some(f) => Some(f),
                None => {
                    error(
                        "feeder",
                        feeder_text,
                        format!(
                            "no feeder with this id (there are: {})",
                            feeder_list(feeders)
                        ),
                    );
                    None
                }
            }
        };
        let node = cell("node");
        let mut found: Option<(usize, BusIdx)> = None;
        if node.is_empty() {
            error(
                "node",
                node,
                "empty: give the node where the plant connects".to_string(),
            );
        } else if feeder_text.is_empty() || named_feeder.is_some() {
            let candidates: Vec<usize> = match named_feeder {
                Some(f) => vec![f],
                None => (0..feeders.len()).collect(),
            };
            let matches: Vec<(usize, BusIdx)> = candidates
                .iter()
                .filter_map(|&f| feeders[f].node_by_id(node).map(|bus| (f, bus)))
                .collect();
            let like = || Feeder::did_you_mean(candidates.iter().map(|&f| &feeders[f]), node);
            match matches.as_slice() {
                [] => error(
                    "node",
                    node,
                    match candidates.as_slice() {
                        [f] => format!(
                            "no node with this id in feeder {}{}",
                            feeders[*f].id(),
                            like()
                        ),
                        _ => format!(
                            "no node with this id in any feeder ({}){}",
                            feeder_list(feeders),
                            like()
                        ),
                    },
                ),
                [(f, bus)] if *bus == BusIdx::HEAD => error(
                    "node",
                    node,
                    format!(
                        "the head of feeder {} (the substation busbar): a plant connects to \
                         another node",
                        feeders[*f].id()
                    ),
                ),
                [one] => found = Some(*one),
                several => error(
                    "node",
                    node,
                    format!(
                        "this node id is in several feeders ({}): add a feeder column",
                        several
                            .iter()
                            .map(|(f, _)| feeders[*f].id())
                            .collect::<Vec<_>>()
                            .join(", ")
                    ),
                ),
            }
        }

        let kw_text = cell("kw");
        let mut p_kw = None;
        if kw_text.is_empty() {
            error("kw", kw_text, "empty: give the export in kW".to_string());
        } else {
            match kw_text.parse::<f64>() {
                Err(_) => error(
                    "kw",
                    kw_text,
                    "not a number: give the export in kW, e.g. 250".to_string(),
                ),
                Ok(v) if !(v.is_finite() && v > 0.0) => error(
                    "kw",
                    kw_text,
                    "must be a number greater than 0 (the export in kW)".to_string(),
                ),
                Ok(v) => p_kw = Some(v),
            }
        }

        let mut generation = default_generation.clone();
        let pf_text = cell("power_factor");
        if !pf_text.is_empty() {
            match pf_text.parse::<f64>() {
                Err(_) => error(
                    "power_factor",
                    pf_text,
                    "not a number: give a power factor in (0, 1], e.g. 0.95".to_string(),
                ),
                Ok(v) if !(v > 0.0 && v <= 1.0) => error(
                    "power_factor",
                    pf_text,
                    "must be in (0, 1]: 1 is unity, 0.95 a common setting".to_string(),
                ),
                Ok(v) => generation.power_factor = v,
            }
        }
        let absorbing_text = cell("absorbing");
        if !absorbing_text.is_empty() {
            match absorbing_text.to_ascii_lowercase().as_str() {
                "true" | "1" => generation.absorbing = true,
                "false" | "0" => generation.absorbing = false,
                _ => error(
                    "absorbing",
                    absorbing_text,
                    "must be true or false (or 1 or 0)".to_string(),
                ),
            }
        }

        let date_text = cell("date");
        let mut date = None;
        if date_text.is_empty() {
            undated.push(line);
        } else {
            dated.push(line);
            match ApplicationDate::parse(date_text) {
                Some(d) => date = Some(d),
                None => error(
                    "date",
                    date_text,
                    "not a date of the form YYYY-MM-DD (ISO 8601)".to_string(),
                ),
            }
        }

        if let (Some((feeder, bus)), Some(p_kw)) = (found, p_kw) {
            applications.push(QueuedApplication {
                feeder,
                application: Application::new(id, bus, p_kw, generation),
                date,
                line,
            });
        }
    }
    if !dated.is_empty() {
        for &line in &undated {
            errors.push(
                Diagnostic::error(
                    file,
                    format!(
                        "empty while {} other row(s) have a date: give every application a \
                         date, or none",
                        dated.len()
                    ),
                )
                .at_line(line)
                .at_column("date")
                .with_value(""),
            );
        }
    }
    if errors.is_empty() && applications.is_empty() {
        errors.push(Diagnostic::error(
            file,
            "no applications: the file has a header but no rows",
        ));
    }
    if !errors.is_empty() {
        errors.sort_by_key(|d| d.line);
        return Err(ModelErrors { errors });
    }
    let by_date = !dated.is_empty();
    if by_date {
        // Stable: applications of the same date keep their file order.
        applications.sort_by_key(|a| a.date);
    }
    Ok(ParsedQueue {
        applications,
        by_date,
        warnings,
    })
}

fn feeder_list(feeders: &[Feeder]) -> String {
    let mut ids: Vec<&str> = feeders.iter().take(5).map(Feeder::id).collect();
    if feeders.len() > 5 {
        ids.push("...");
    }
    ids.join(", ")
}
