//! The conductor library: a few typical overhead lines and XLPE cables for 11–33 kV feeders.
//!
//! Values are typical values of common practice, taken from `shared/reference/trade-facts.md` §3:
//!
//! - overhead (§3.3): R at 75 °C; X1 at the typical phase spacing of the voltage level
//!   (GMD ≈ 1.0 m at 11 kV, 1.25 m at 20/22 kV, 1.6 m at 33 kV); rough summer ratings. The AAAC
//!   reactances at 1.0 m and 1.6 m are shifted from the 1.25 m column by 0.0628·ln(GMD/1.25 m)
//!   (calc). X/R of these lines is about 0.5–1.4.
//! - cable (§3.2): single-core aluminium XLPE in trefoil, R at 90 °C, X1 of the voltage column,
//!   the middle of the indicative buried rating range. R/X is about 1.4–3.6.
//!
//! Each kind has three tiers (light, medium, heavy) and two families that differ in the medium
//! and heavy sizes; the generator picks a family per line and a tier per section.

/// How a conductor is laid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ConductorKind {
    /// Bare overhead line on poles (X/R about 0.5–2).
    Overhead,
    /// Underground XLPE cable (R/X about 1–4).
    Cable,
}

/// One line or cable type, as written to conductors.csv.
#[derive(Debug, Clone, PartialEq)]
pub struct Conductor {
    /// Type name used by branches.csv.
    pub name: String,
    /// Overhead or cable.
    pub kind: ConductorKind,
    /// Positive-sequence series resistance, ohm per km.
    pub r_ohm_per_km: f64,
    /// Positive-sequence series reactance, ohm per km.
    pub x_ohm_per_km: f64,
    /// Continuous current rating, A.
    pub rating_a: f64,
}

/// One row of the built-in table; `x_ohm_per_km` per voltage column (11, 20/22, 30/33 kV).
struct Row {
    name: &'static str,
    kind: ConductorKind,
    r_ohm_per_km: f64,
    x_ohm_per_km: [f64; 3],
    rating_a: f64,
}

const TABLE: [Row; 10] = [
    // Overhead, trade-facts §3.3.
    Row {
        name: "ACSR-50",
        kind: ConductorKind::Overhead,
        r_ohm_per_km: 0.663,
        x_ohm_per_km: [0.349, 0.363, 0.379],
        rating_a: 200.0,
    },
    Row {
        name: "ACSR-100",
        kind: ConductorKind::Overhead,
        r_ohm_per_km: 0.334,
        x_ohm_per_km: [0.328, 0.342, 0.357],
        rating_a: 300.0,
    },
    Row {
        name: "AAAC-100",
        kind: ConductorKind::Overhead,
        r_ohm_per_km: 0.40,
        x_ohm_per_km: [0.336, 0.350, 0.366],
        rating_a: 300.0,
    },
    Row {
        name: "ACSR-150",
        kind: ConductorKind::Overhead,
        r_ohm_per_km: 0.223,
        x_ohm_per_km: [0.312, 0.326, 0.341],
        rating_a: 400.0,
    },
    Row {
        name: "AAAC-150",
        kind: ConductorKind::Overhead,
        r_ohm_per_km: 0.27,
        x_ohm_per_km: [0.323, 0.337, 0.353],
        rating_a: 400.0,
    },
    // Cable, trade-facts §3.2.
    Row {
        name: "XLPE-AL-95",
        kind: ConductorKind::Cable,
        r_ohm_per_km: 0.411,
        x_ohm_per_km: [0.114, 0.123, 0.132],
        rating_a: 230.0,
    },
    Row {
        name: "XLPE-AL-150",
        kind: ConductorKind::Cable,
        r_ohm_per_km: 0.265,
        x_ohm_per_km: [0.106, 0.114, 0.123],
        rating_a: 290.0,
    },
    Row {
        name: "XLPE-AL-185",
        kind: ConductorKind::Cable,
        r_ohm_per_km: 0.211,
        x_ohm_per_km: [0.102, 0.110, 0.118],
        rating_a: 330.0,
    },
    Row {
        name: "XLPE-AL-240",
        kind: ConductorKind::Cable,
        r_ohm_per_km: 0.161,
        x_ohm_per_km: [0.098, 0.105, 0.113],
        rating_a: 380.0,
    },
    Row {
        name: "XLPE-AL-300",
        kind: ConductorKind::Cable,
        r_ohm_per_km: 0.129,
        x_ohm_per_km: [0.095, 0.102, 0.109],
        rating_a: 425.0,
    },
];

/// Positions in [`TABLE`] (and in [`conductor_library`]) of each family's light, medium and
/// heavy type, indexed `[kind][family][tier]`.
const FAMILIES: [[[usize; 3]; 2]; 2] = [
    // Overhead: all-ACSR, or ACSR light with AAAC medium and heavy.
    [[0, 1, 3], [0, 2, 4]],
    // Cable: 95/150/240 or 95/185/300 mm².
    [[5, 6, 8], [5, 7, 9]],
];

/// Number of conductor tiers (light, medium, heavy).
pub(crate) const N_TIERS: usize = 3;

/// The library for a feeder of `nominal_kv` (the reactances follow the voltage level's spacing
/// and insulation: the 11 kV column below 15 kV, the 20/22 kV column below 27 kV, else 30/33 kV).
/// Always the same ten types in the same order.
pub fn conductor_library(nominal_kv: f64) -> Vec<Conductor> {
    let column = voltage_column(nominal_kv);
    TABLE
        .iter()
        .map(|row| Conductor {
            name: row.name.to_string(),
            kind: row.kind,
            r_ohm_per_km: row.r_ohm_per_km,
            x_ohm_per_km: row.x_ohm_per_km[column],
            rating_a: row.rating_a,
        })
        .collect()
}

fn voltage_column(nominal_kv: f64) -> usize {
    if nominal_kv < 15.0 {
        0
    } else if nominal_kv < 27.0 {
        1
    } else {
        2
    }
}

/// Position in the library of the type of `kind`, `family` (0 or 1) and `tier` (0 light .. 2
/// heavy).
pub(crate) fn library_position(kind: ConductorKind, family: usize, tier: usize) -> usize {
    let kind_idx = match kind {
        ConductorKind::Overhead => 0,
        ConductorKind::Cable => 1,
    };
    FAMILIES[kind_idx][family][tier]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ratios_stay_in_the_typical_bands() {
        for kv in [11.0, 22.0, 33.0] {
            for conductor in conductor_library(kv) {
                let x_over_r = conductor.x_ohm_per_km / conductor.r_ohm_per_km;
                match conductor.kind {
                    ConductorKind::Overhead => {
                        assert!((0.5..=2.0).contains(&x_over_r), "{conductor:?}")
                    }
                    ConductorKind::Cable => {
                        assert!((1.0..=4.0).contains(&(1.0 / x_over_r)), "{conductor:?}")
                    }
                }
            }
        }
    }

    #[test]
    fn tiers_get_heavier() {
        let library = conductor_library(11.0);
        for kind in [ConductorKind::Overhead, ConductorKind::Cable] {
            for family in 0..2 {
                let tiers: Vec<&Conductor> = (0..N_TIERS)
                    .map(|tier| &library[library_position(kind, family, tier)])
                    .collect();
                for pair in tiers.windows(2) {
                    assert!(pair[0].rating_a < pair[1].rating_a);
                    assert!(pair[0].r_ohm_per_km > pair[1].r_ohm_per_km);
                }
                assert!(tiers.iter().all(|c| c.kind == kind));
            }
        }
    }
}
