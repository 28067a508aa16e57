//! A small feeder tree written into a temporary folder, and diagnostics as comparable text.

use std::path::PathBuf;

use headroom_model::{Diagnostic, Feeder, ModelErrors};

/// Shared conductor library of the good fixture.
pub const SHARED_CONDUCTORS: &str = "\
type,r_ohm_per_km,x_ohm_per_km,rating_a
ACSR50,0.6,0.35,200
CU95,0.2,0.1,300
";

/// Feeder f1's own conductor library: overrides CU95.
pub const OWN_CONDUCTORS: &str = "\
type,r_ohm_per_km,x_ohm_per_km,rating_a
CU95,0.19,0.09,320
";

pub const FEEDER_TOML: &str = "\
name = \"Feeder one\"
nominal_kv = 11
head = \"sub\"
substation = \"North\"
crs = \"EPSG:32630\"
";

/// Columns out of order, spaces around cells, a node without coordinates.
pub const NODES: &str = "\
load_kw, id ,x,y,load_kvar
0,sub,0,0,0
100,a,1,0,30
 50 , b ,2,0,10
20,c,,,
";

/// b1 and b2 from the library (b2 with a rating override), b3 given directly, b4 open.
pub const BRANCHES: &str = "\
id,from,to,type,length_km,r_ohm,x_ohm,rating_a,closed
b1,sub,a,ACSR50,2,,,,
b2,a,b,CU95,0.5,,,250,TRUE
b3,c,a,,,0.3,0.2,150,1
b4,b,c,,,0.1,0.1,100,False
";

/// A temporary `feeders/` folder holding the good feeder `f1`.
pub struct Fixture {
    dir: tempfile::TempDir,
}

impl Fixture {
    /// `feeders/conductors.csv` and `feeders/f1/` with every file of the good feeder.
    pub fn good() -> Fixture {
        let fixture = Fixture {
            dir: tempfile::tempdir().unwrap(),
        };
        fixture.write("feeders/conductors.csv", SHARED_CONDUCTORS);
        fixture.write_feeder("f1");
        fixture.write("feeders/f1/conductors.csv", OWN_CONDUCTORS);
        fixture
    }

    /// Writes the good feeder files (without an own conductors.csv) into `feeders/<id>/`.
    pub fn write_feeder(&self, id: &str) {
        self.write(&format!("feeders/{id}/feeder.toml"), FEEDER_TOML);
        self.write(&format!("feeders/{id}/nodes.csv"), NODES);
        self.write(&format!("feeders/{id}/branches.csv"), BRANCHES);
    }

    /// Writes (or overwrites) a file below the root.
    pub fn write(&self, relative: &str, content: impl AsRef<[u8]>) {
        let path = self.path(relative);
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(path, content).unwrap();
    }

    /// Removes a file below the root.
    pub fn remove(&self, relative: &str) {
        std::fs::remove_file(self.path(relative)).unwrap();
    }

    /// A path below the root.
    pub fn path(&self, relative: &str) -> PathBuf {
        self.dir.path().join(relative)
    }

    /// Loads `feeders/f1`, which must load.
    pub fn feeder(&self) -> Feeder {
        match headroom_model::load_feeder(&self.path("feeders/f1")) {
            Ok(feeder) => feeder,
            Err(errors) => panic!(
                "f1 should load, got:\n{}",
                self.lines(&errors.errors).join("\n")
            ),
        }
    }

    /// The errors of loading `feeders/f1`, as text relative to the root.
    pub fn errors(&self) -> Vec<String> {
        self.errors_of(headroom_model::load_feeder(&self.path("feeders/f1")).map(|_| ()))
    }

    /// The errors of a load, as text relative to the root; the load must fail.
    pub fn errors_of<T>(&self, result: Result<T, ModelErrors>) -> Vec<String> {
        match result {
            Ok(_) => panic!("expected errors, the input loaded"),
            Err(errors) => self.lines(&errors.errors),
        }
    }

    /// Diagnostics as their Display text with the root left out.
    pub fn lines(&self, diagnostics: &[Diagnostic]) -> Vec<String> {
        diagnostics
            .iter()
            .map(|d| self.relative(&d.to_string()))
            .collect()
    }

    fn relative(&self, text: &str) -> String {
        let root = format!("{}{}", self.dir.path().display(), std::path::MAIN_SEPARATOR);
        text.replace(&root, "")
    }
}
