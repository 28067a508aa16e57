//! Multi-feeder regions for large benchmarks: a fictional region with a few substations, each
//! feeding up to four feeders that leave it in different directions.
//!
//! Region and substation names come from our own list of invented place names.

use crate::generate::{Compass, SynthSettings, SyntheticFeeder, generate};
use crate::rng::{Rng, derive_seed};

/// Invented region names.
const REGION_NAMES: [&str; 8] = [
    "Veldmark Coast",
    "Tarrowin Uplands",
    "Caldrith Basin",
    "Morvenloe Vale",
    "Quensly Plain",
    "Harthallow Downs",
    "Ostrevan Fens",
    "Brimcaster Wolds",
];

/// Invented substation names.
const SUBSTATION_NAMES: [&str; 24] = [
    "Amberlode",
    "Brackwater Fold",
    "Corvasey",
    "Drummelow",
    "Eskerwyn",
    "Fennimoor Cross",
    "Glaswent",
    "Hollin Quay",
    "Ivendral",
    "Jasperholt",
    "Kellowmere",
    "Lindrath",
    "Mossgarrow",
    "Nettlebrack",
    "Orrinford",
    "Pellowick",
    "Quillanby",
    "Rookhallow",
    "Saltrenny",
    "Thistlecarr",
    "Umberlow",
    "Vantreth",
    "Wrenmoss",
    "Yarrowdine",
];

/// Feeders per substation.
const FEEDERS_PER_SUBSTATION: usize = 4;
/// Distance between neighbouring substations, m.
const SUBSTATION_SPACING_M: f64 = 15_000.0;
const STREAM_REGION: u64 = 10;

/// `n_feeders` feeders of `n_nodes` nodes each (11 kV defaults), with ids such as
/// `amberlode-01`; see [`generate_region_with`].
pub fn generate_region(
    n_feeders: usize,
    n_nodes: usize,
    seed: u64,
) -> Vec<(String, SyntheticFeeder)> {
    generate_region_with(n_feeders, &SynthSettings::new(n_nodes, seed))
}

/// `n_feeders` feeders made from `template` (its node count, voltage, load budget, cable share,
/// CRS and head position as the region's corner). Each feeder gets its own seed derived from
/// `template.seed`, a substation (four feeders each, on a 15 km grid), a region name, a display
/// name and a trunk heading; the id is the substation's name in lower case with the feeder's
/// number, unique within the region. Returned sorted by id. Deterministic, like [`generate`].
pub fn generate_region_with(
    n_feeders: usize,
    template: &SynthSettings,
) -> Vec<(String, SyntheticFeeder)> {
    let mut rng = Rng::for_stream(template.seed, STREAM_REGION);
    let region = REGION_NAMES[rng.index(REGION_NAMES.len())];
    let mut names: Vec<&str> = SUBSTATION_NAMES.to_vec();
    for i in (1..names.len()).rev() {
        names.swap(i, rng.index(i + 1));
    }
    let n_substations = n_feeders.div_ceil(FEEDERS_PER_SUBSTATION);
    let mut n_columns = 1;
    while n_columns * n_columns < n_substations {
        n_columns += 1;
    }

    let mut feeders = Vec::with_capacity(n_feeders);
    for substation_idx in 0..n_substations {
        let base = names[substation_idx % names.len()];
        let round = substation_idx / names.len();
        let substation = if round == 0 {
            base.to_string()
        } else {
            format!("{base} {}", round + 1)
        };
        let slug = slug(&substation);
        let column = (substation_idx % n_columns) as f64;
        let row = (substation_idx / n_columns) as f64;
        let easting_m = template.head_easting_m
            + column * SUBSTATION_SPACING_M
            + (rng.uniform(-2000.0, 2000.0) * 10.0).round() / 10.0;
        let northing_m = template.head_northing_m
            + row * SUBSTATION_SPACING_M
            + (rng.uniform(-2000.0, 2000.0) * 10.0).round() / 10.0;
        let first_heading = rng.index(Compass::ALL.len());
        let first_feeder = substation_idx * FEEDERS_PER_SUBSTATION;
        let last_feeder = (first_feeder + FEEDERS_PER_SUBSTATION).min(n_feeders);
        for feeder_idx in first_feeder..last_feeder {
            let number = feeder_idx - first_feeder;
            let mut settings = template.clone();
            settings.seed = derive_seed(template.seed, 1000 + feeder_idx as u64);
            settings.name = Some(format!("{substation} feeder {}", number + 1));
            settings.substation = Some(substation.clone());
            settings.region = Some(region.to_string());
            settings.head_easting_m = easting_m;
            settings.head_northing_m = northing_m;
            // Four feeders leave a quarter turn apart.
            settings.trunk_heading =
                Compass::ALL[(first_heading + 2 * number) % Compass::ALL.len()];
            let id = format!("{slug}-{:02}", number + 1);
            feeders.push((id, generate(&settings)));
        }
    }
    // In id order, the order in which a folder of feeders is listed.
    feeders.sort_by(|a, b| a.0.cmp(&b.0));
    feeders
}

/// Lower case, spaces to hyphens: a folder name.
fn slug(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect()
}
