//! Shared steps of the commands: reading inputs (all errors together), preparing the output
//! folder, writing tables, and summary helpers.

use std::path::{Path, PathBuf};

use headroom_export::{Table, write_parquet};
use headroom_model::{Feeder, ModelErrors, Study, load_feeders};

use crate::Failure;

/// Reads every feeder under `path` and the study settings, reporting the errors of both
/// together. Warnings go to stderr.
#[allow(clippy::print_stderr)]
pub fn load_inputs(path: &Path, study: Option<&Path>) -> Result<(Vec<Feeder>, Study), Failure> {
    let feeders = load_feeders(path);
    let study = Study::load(study);
    let (feeders, study) = match (feeders, study) {
        (Ok(f), Ok(s)) => (f, s),
        (f, s) => {
            let mut errors = Vec::new();
            if let Err(e) = f {
                errors.extend(e.errors);
            }
            if let Err(e) = s {
                errors.extend(e.errors);
            }
            return Err(ModelErrors { errors }.into());
        }
    };
    for feeder in &feeders {
        for warning in feeder.warnings() {
            eprintln!("warning: {warning}");
        }
    }
    Ok((feeders, study))
}

/// Creates the output folder (and its parents); an existing file of that name is refused by
/// name rather than with the system's "File exists".
pub fn prepare_out_dir(dir: &Path) -> Result<(), Failure> {
    if dir.exists() && !dir.is_dir() {
        return Err(Failure::Output(format!(
            "cannot write into {}: it is a file, not a folder",
            dir.display()
        )));
    }
    std::fs::create_dir_all(dir).map_err(|e| {
        Failure::Output(format!(
            "cannot create output folder {}: {e}",
            dir.display()
        ))
    })
}

/// Writes one table as Parquet (atomically).
pub fn write_table(dir: &Path, name: &str, table: &Table) -> Result<PathBuf, Failure> {
    let path = dir.join(name);
    write_parquet(&path, table)
        .map_err(|e| Failure::Output(format!("cannot write {}: {e}", path.display())))?;
    Ok(path)
}

/// Writes a text file atomically (temporary name in the same folder, synced, then renamed).
pub fn write_text(path: &Path, text: &str) -> Result<(), Failure> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("out");
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let write = || -> std::io::Result<()> {
        let mut file = std::fs::File::create(&tmp)?;
        std::io::Write::write_all(&mut file, text.as_bytes())?;
        file.sync_all()
    };
    write()
        .and_then(|()| std::fs::rename(&tmp, path))
        .map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            Failure::Output(format!("cannot write {}: {e}", path.display()))
        })
}

/// Lowest, median and highest of a list (NaN-free), or `None` when empty.
pub fn low_median_high(values: &[f64]) -> Option<(f64, f64, f64)> {
    if values.is_empty() {
        return None;
    }
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    let median = if n % 2 == 1 {
        sorted[n / 2]
    } else {
        (sorted[n / 2 - 1] + sorted[n / 2]) / 2.0
    };
    Some((sorted[0], median, sorted[n - 1]))
}
