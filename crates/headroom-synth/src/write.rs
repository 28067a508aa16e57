//! Writing generated feeders as feeder folders (feeder.toml, nodes.csv, branches.csv) and the
//! conductor library (conductors.csv), in the v1 feeder format. Each file is written whole: to a
//! temporary file in the same folder, then renamed over the target.

use std::fmt::Write as _;
use std::fs;
use std::path::{Path, PathBuf};

use headroom_model::FeederHeader;

use crate::conductors::Conductor;
use crate::generate::SyntheticFeeder;

/// A file could not be written, or a record cannot be written in the typed form.
#[derive(Debug, thiserror::Error)]
pub enum SynthError {
    /// Creating a folder or writing or renaming a file failed.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// A branch has no conductor type or no length (records changed after generation).
    #[error("branch {id:?} has no conductor type and length; branches.csv is written typed")]
    UntypedBranch {
        /// The branch id.
        id: String,
    },
}

impl SyntheticFeeder {
    /// Writes `dir/feeder.toml`, `dir/nodes.csv` and `dir/branches.csv`, creating `dir`.
    ///
    /// Branches refer to conductor types: write the library too, with
    /// [`write_conductors`](SyntheticFeeder::write_conductors) to `dir/conductors.csv` or to the
    /// shared `conductors.csv` in the parent folder.
    pub fn write(&self, dir: &Path) -> Result<(), SynthError> {
        let branches_csv = self.branches_csv()?;
        fs::create_dir_all(dir).map_err(|source| SynthError::Io {
            path: dir.to_path_buf(),
            source,
        })?;
        write_whole(&dir.join("feeder.toml"), &self.feeder_toml())?;
        write_whole(&dir.join("nodes.csv"), &self.nodes_csv())?;
        write_whole(&dir.join("branches.csv"), &branches_csv)
    }

    /// Writes the conductor library as conductors.csv at `path` (the folder must exist).
    pub fn write_conductors(&self, path: &Path) -> Result<(), SynthError> {
        write_whole(path, &conductors_csv(&self.conductors))
    }

    /// The text of feeder.toml.
    pub fn feeder_toml(&self) -> String {
        feeder_toml(&self.header)
    }

    /// The text of nodes.csv: `id,x,y,load_kw,load_kvar,gen_kw,gen_kvar`.
    pub fn nodes_csv(&self) -> String {
        let mut text = String::from("id,x,y,load_kw,load_kvar,gen_kw,gen_kvar\n");
        for node in &self.nodes {
            let _ = writeln!(
                text,
                "{},{},{},{},{},{},{}",
                csv_field(&node.id),
                optional(node.x),
                optional(node.y),
                node.load_kw,
                node.load_kvar,
                node.gen_kw,
                node.gen_kvar
            );
        }
        text
    }

    /// The text of branches.csv: `id,from,to,type,length_km,closed`. Fails if a branch has no
    /// conductor type or length.
    pub fn branches_csv(&self) -> Result<String, SynthError> {
        let mut text = String::from("id,from,to,type,length_km,closed\n");
        for branch in &self.branches {
            let (Some(conductor), Some(length_km)) = (&branch.conductor, branch.length_km) else {
                return Err(SynthError::UntypedBranch {
                    id: branch.id.clone(),
                });
            };
            let _ = writeln!(
                text,
                "{},{},{},{},{},{}",
                csv_field(&branch.id),
                csv_field(&branch.from),
                csv_field(&branch.to),
                csv_field(conductor),
                length_km,
                branch.closed
            );
        }
        Ok(text)
    }

    /// The text of conductors.csv: `type,r_ohm_per_km,x_ohm_per_km,rating_a`.
    pub fn conductors_csv(&self) -> String {
        conductors_csv(&self.conductors)
    }
}

/// Writes a region: one folder `dir/<id>` per feeder and the shared library as
/// `dir/conductors.csv` (from the first feeder; feeders of one region share a voltage level).
pub fn write_region(dir: &Path, feeders: &[(String, SyntheticFeeder)]) -> Result<(), SynthError> {
    fs::create_dir_all(dir).map_err(|source| SynthError::Io {
        path: dir.to_path_buf(),
        source,
    })?;
    if let Some((_, first)) = feeders.first() {
        first.write_conductors(&dir.join("conductors.csv"))?;
    }
    for (id, feeder) in feeders {
        feeder.write(&dir.join(id))?;
    }
    Ok(())
}

fn feeder_toml(header: &FeederHeader) -> String {
    let mut text = String::new();
    let _ = writeln!(text, "name = {}", toml_string(&header.name));
    let _ = writeln!(text, "nominal_kv = {}", toml_float(header.nominal_kv));
    let _ = writeln!(text, "head = {}", toml_string(&header.head));
    let _ = writeln!(
        text,
        "head_voltage_pu = {}",
        toml_float(header.head_voltage_pu)
    );
    for (key, value) in [
        ("substation", &header.substation),
        ("region", &header.region),
        ("crs", &header.crs),
    ] {
        if let Some(value) = value {
            let _ = writeln!(text, "{key} = {}", toml_string(value));
        }
    }
    text
}

fn conductors_csv(conductors: &[Conductor]) -> String {
    let mut text = String::from("type,r_ohm_per_km,x_ohm_per_km,rating_a\n");
    for conductor in conductors {
        let _ = writeln!(
            text,
            "{},{},{},{}",
            csv_field(&conductor.name),
            conductor.r_ohm_per_km,
            conductor.x_ohm_per_km,
            conductor.rating_a
        );
    }
    text
}

/// Writes `contents` to a temporary file beside `path`, then renames it into place.
fn write_whole(path: &Path, contents: &str) -> Result<(), SynthError> {
    let file_name = path
        .file_name()
        .map(|name| name.to_string_lossy().into_owned())
        .unwrap_or_default();
    let temporary = path.with_file_name(format!(".{file_name}.partial"));
    let io_error = |source| SynthError::Io {
        path: path.to_path_buf(),
        source,
    };
    fs::write(&temporary, contents).map_err(io_error)?;
    fs::rename(&temporary, path).map_err(|source| {
        let _ = fs::remove_file(&temporary);
        io_error(source)
    })
}

/// A float cell; `f64`'s `Display` is the shortest text that reads back to the same value and
/// never uses an exponent, on every platform.
fn optional(value: Option<f64>) -> String {
    value.map(|v| v.to_string()).unwrap_or_default()
}

/// A CSV cell, quoted when it holds a separator, a quote, a line break or outer spaces.
fn csv_field(text: &str) -> String {
    let needs_quotes = text.contains([',', '"', '\n', '\r']) || text.trim() != text;
    if needs_quotes {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

/// A TOML basic string.
fn toml_string(text: &str) -> String {
    let mut quoted = String::with_capacity(text.len() + 2);
    quoted.push('"');
    for c in text.chars() {
        match c {
            '"' => quoted.push_str("\\\""),
            '\\' => quoted.push_str("\\\\"),
            '\n' => quoted.push_str("\\n"),
            '\r' => quoted.push_str("\\r"),
            '\t' => quoted.push_str("\\t"),
            c if c.is_control() => {
                let _ = write!(quoted, "\\u{:04X}", c as u32);
            }
            c => quoted.push(c),
        }
    }
    quoted.push('"');
    quoted
}

/// A TOML float: always with a decimal point, so that `11.0` is not read as an integer.
fn toml_float(value: f64) -> String {
    if value.is_nan() {
        return "nan".to_string();
    }
    let text = value.to_string();
    if text.contains('.') || value.is_infinite() {
        text
    } else {
        format!("{text}.0")
    }
}
