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

#[cfg(test)]
mod tests {
    use std::collections::HashMap;

    use super::*;
    use crate::generate::{SynthSettings, generate};
    use crate::region::generate_region;

    fn read_csv(path: &Path) -> (Vec<String>, Vec<csv::StringRecord>) {
        let mut reader = csv::Reader::from_path(path).unwrap();
        let headers = reader.headers().unwrap().iter().map(String::from).collect();
        let rows = reader.records().map(Result::unwrap).collect();
        (headers, rows)
    }

    fn number(text: &str) -> f64 {
        let value: f64 = text.parse().unwrap();
        assert!(value.is_finite(), "{text}");
        value
    }

    /// FNV-1a, to pin file bytes without storing them.
    fn fnv1a(bytes: &[u8]) -> u64 {
        bytes.iter().fold(0xCBF2_9CE4_8422_2325, |hash, &b| {
            (hash ^ u64::from(b)).wrapping_mul(0x0100_0000_01B3)
        })
    }

    #[test]
    fn written_files_parse_back_with_the_right_headers() {
        let synthetic = generate(&SynthSettings::new(300, 21));
        let dir = tempfile::tempdir().unwrap();
        let folder = dir.path().join("feeder-a");
        synthetic.write(&folder).unwrap();
        synthetic
            .write_conductors(&dir.path().join("conductors.csv"))
            .unwrap();

        let toml_text = fs::read_to_string(folder.join("feeder.toml")).unwrap();
        let table: toml::Table = toml_text.parse().unwrap();
        assert_eq!(table["nominal_kv"].as_float(), Some(11.0));
        assert_eq!(table["head_voltage_pu"].as_float(), Some(1.0));
        assert_eq!(table["head"].as_str(), Some("n0"));
        assert_eq!(table["crs"].as_str(), Some("EPSG:32630"));
        assert_eq!(table["name"].as_str(), Some(synthetic.header.name.as_str()));

        let (headers, rows) = read_csv(&folder.join("nodes.csv"));
        assert_eq!(
            headers,
            ["id", "x", "y", "load_kw", "load_kvar", "gen_kw", "gen_kvar"]
        );
        assert_eq!(rows.len(), 300);
        for (row, node) in rows.iter().zip(&synthetic.nodes) {
            assert_eq!(&row[0], node.id);
            assert_eq!(number(&row[1]), node.x.unwrap());
            assert_eq!(number(&row[2]), node.y.unwrap());
            assert_eq!(number(&row[3]), node.load_kw);
            assert_eq!(number(&row[4]), node.load_kvar);
            assert_eq!(number(&row[5]), node.gen_kw);
            assert_eq!(number(&row[6]), node.gen_kvar);
        }

        let (headers, rows) = read_csv(&dir.path().join("conductors.csv"));
        assert_eq!(
            headers,
            ["type", "r_ohm_per_km", "x_ohm_per_km", "rating_a"]
        );
        let library: HashMap<String, (f64, f64, f64)> = rows
            .iter()
            .map(|row| {
                let values = (number(&row[1]), number(&row[2]), number(&row[3]));
                (row[0].to_string(), values)
            })
            .collect();
        assert_eq!(library.len(), synthetic.conductors.len());

        let (headers, rows) = read_csv(&folder.join("branches.csv"));
        assert_eq!(headers, ["id", "from", "to", "type", "length_km", "closed"]);
        assert_eq!(rows.len(), synthetic.branches.len());
        let mut n_open = 0;
        for (row, branch) in rows.iter().zip(&synthetic.branches) {
            assert_eq!(
                (&row[0], &row[1], &row[2]),
                (&*branch.id, &*branch.from, &*branch.to)
            );
            // What a reader resolves from the files is exactly the in-memory record.
            let (r_ohm_per_km, x_ohm_per_km, rating_a) = library[&row[3]];
            let length_km = number(&row[4]);
            assert_eq!(r_ohm_per_km * length_km, branch.r_ohm);
            assert_eq!(x_ohm_per_km * length_km, branch.x_ohm);
            assert_eq!(rating_a, branch.rating_a);
            let closed: bool = row[5].parse().unwrap();
            assert_eq!(closed, branch.closed);
            n_open += usize::from(!closed);
        }
        assert!(n_open >= 1);

        // Written whole: no temporary files left behind.
        for entry in fs::read_dir(&folder).unwrap() {
            let name = entry.unwrap().file_name().into_string().unwrap();
            assert!(!name.starts_with('.'), "{name}");
        }
    }

    #[test]
    fn writing_twice_gives_the_same_bytes() {
        let dir = tempfile::tempdir().unwrap();
        let settings = SynthSettings::new(500, 3);
        generate(&settings).write(&dir.path().join("a")).unwrap();
        generate(&settings).write(&dir.path().join("b")).unwrap();
        // Overwriting in place works too.
        generate(&settings).write(&dir.path().join("b")).unwrap();
        for file in ["feeder.toml", "nodes.csv", "branches.csv"] {
            let a = fs::read(dir.path().join("a").join(file)).unwrap();
            let b = fs::read(dir.path().join("b").join(file)).unwrap();
            assert_eq!(a, b, "{file}");
        }
    }

    /// Pins the output for one setting: a change here changes every generated feeder, which
    /// breaks the promise that a seed gives the same feeder forever. Update only on purpose.
    #[test]
    fn output_bytes_are_pinned() {
        let synthetic = generate(&SynthSettings::new(60, 2024));
        let text = format!(
            "{}{}{}{}",
            synthetic.feeder_toml(),
            synthetic.nodes_csv(),
            synthetic.branches_csv().unwrap(),
            synthetic.conductors_csv()
        );
        assert_eq!(fnv1a(text.as_bytes()), PINNED_HASH, "{text}");
    }

    const PINNED_HASH: u64 = 12_691_683_095_908_851_296;

    #[test]
    fn region_has_one_folder_per_feeder_and_a_shared_library() {
        let feeders = generate_region(6, 120, 77);
        assert_eq!(feeders.len(), 6);
        assert_eq!(feeders, generate_region(6, 120, 77));
        let ids: std::collections::BTreeSet<&str> =
            feeders.iter().map(|(id, _)| id.as_str()).collect();
        assert_eq!(ids.len(), 6);
        let substations: std::collections::BTreeSet<_> = feeders
            .iter()
            .map(|(_, f)| f.header.substation.clone().unwrap())
            .collect();
        assert_eq!(substations.len(), 2);
        let region = feeders[0].1.header.region.clone().unwrap();
        for (id, feeder) in &feeders {
            assert_eq!(feeder.header.region.as_ref(), Some(&region));
            assert_eq!(feeder.nodes.len(), 120);
            feeder.to_feeder(id).unwrap();
        }
        assert!(feeders.windows(2).all(|pair| pair[0].0 < pair[1].0));
        // Feeders of one substation share the busbar position and leave in different directions.
        let (a, b) = (&feeders[0].1, &feeders[1].1);
        assert_eq!(a.header.substation, b.header.substation);
        assert_eq!((a.nodes[0].x, a.nodes[0].y), (b.nodes[0].x, b.nodes[0].y));
        assert_ne!((a.nodes[1].x, a.nodes[1].y), (b.nodes[1].x, b.nodes[1].y));

        let dir = tempfile::tempdir().unwrap();
        write_region(dir.path(), &feeders).unwrap();
        let (headers, rows) = read_csv(&dir.path().join("conductors.csv"));
        assert_eq!(
            headers,
            ["type", "r_ohm_per_km", "x_ohm_per_km", "rating_a"]
        );
        assert_eq!(rows.len(), 10);
        for (id, _) in &feeders {
            for file in ["feeder.toml", "nodes.csv", "branches.csv"] {
                assert!(dir.path().join(id).join(file).is_file(), "{id}/{file}");
            }
            assert!(!dir.path().join(id).join("conductors.csv").exists());
        }
    }

    #[test]
    fn large_regions_reuse_names_with_a_number() {
        let feeders = generate_region(4 * 24 + 1, 2, 5);
        let ids: std::collections::BTreeSet<&str> =
            feeders.iter().map(|(id, _)| id.as_str()).collect();
        assert_eq!(ids.len(), feeders.len());
        let renamed: Vec<&str> = ids
            .iter()
            .copied()
            .filter(|id| id.ends_with("-2-01"))
            .collect();
        assert_eq!(renamed.len(), 1, "{renamed:?}");
    }

    #[test]
    fn untyped_branches_are_refused() {
        let mut synthetic = generate(&SynthSettings::new(5, 1));
        synthetic.branches[0].conductor = None;
        let dir = tempfile::tempdir().unwrap();
        let error = synthetic.write(&dir.path().join("x")).unwrap_err();
        assert!(matches!(error, SynthError::UntypedBranch { .. }), "{error}");
    }

    #[test]
    fn text_cells_are_quoted_and_escaped() {
        assert_eq!(csv_field("n1"), "n1");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field(" x"), "\" x\"");
        assert_eq!(toml_string("a \"b\" \\ c\n"), "\"a \\\"b\\\" \\\\ c\\n\"");
        assert_eq!(toml_float(11.0), "11.0");
        assert_eq!(toml_float(1.02), "1.02");
        assert_eq!(toml_float(f64::INFINITY), "inf");
        let name = "Odd \"name\", with comma";
        let settings = SynthSettings {
            name: Some(name.to_string()),
            ..SynthSettings::new(3, 1)
        };
        let table: toml::Table = generate(&settings).feeder_toml().parse().unwrap();
        assert_eq!(table["name"].as_str(), Some(name));
    }
}
