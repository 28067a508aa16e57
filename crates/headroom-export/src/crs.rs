//! Coordinate reference systems for the GeoParquet `crs` field, and our PROJJSON generator.
//!
//! Accepted codes ([`Crs::from_code`]), case-insensitive:
//!
//! | code | meaning | written as |
//! |---|---|---|
//! | `OGC:CRS84` | WGS 84, x = longitude, y = latitude, degrees | `crs` key omitted (the GeoParquet default) |
//! | `EPSG:4326` | same datum; **treated as `OGC:CRS84`** | `crs` key omitted |
//! | `EPSG:32601`–`EPSG:32660` | WGS 84 / UTM zone 1N–60N | full PROJJSON `ProjectedCRS` |
//! | `EPSG:32701`–`EPSG:32760` | WGS 84 / UTM zone 1S–60S | full PROJJSON `ProjectedCRS` |
//!
//! `EPSG:4326` officially orders its axes latitude, longitude. Feeder coordinates are always
//! `x` = longitude, `y` = latitude, which is exactly `OGC:CRS84`; so a feeder that says
//! `EPSG:4326` is written as CRS84 (the `crs` key is left out, and readers assume CRS84).
//!
//! Any other CRS is given as a PROJJSON file ([`Crs::from_projjson_file`]) and written as is.
//! A feeder without `crs` gets [`Crs::Unknown`], written `"crs": null`. Nothing is guessed.
//!
//! The UTM objects are generated here from the zone's parameters (PROJJSON schema v0.7):
//! central meridian `zone × 6 − 183` degrees, scale factor 0.9996, false easting 500 000 m,
//! false northing 0 m (north) or 10 000 000 m (south), on the WGS 84 ellipsoid
//! (a = 6 378 137 m, 1/f = 298.257223563).

use std::fmt;
use std::path::{Path, PathBuf};

use serde_json::{Value, json};

/// The PROJJSON schema our generated objects follow.
const PROJJSON_SCHEMA_URL: &str = "https://proj.org/schemas/v0.7/projjson.schema.json";
/// WGS 84 semi-major axis, metres.
const WGS84_SEMI_MAJOR_AXIS_M: f64 = 6_378_137.0;
/// WGS 84 inverse flattening.
const WGS84_INVERSE_FLATTENING: f64 = 298.257_223_563;
/// UTM scale factor on the central meridian.
const UTM_SCALE_FACTOR: f64 = 0.9996;
/// UTM false easting, metres.
const UTM_FALSE_EASTING_M: f64 = 500_000.0;
/// UTM false northing in the southern hemisphere, metres.
const UTM_SOUTH_FALSE_NORTHING_M: f64 = 10_000_000.0;
/// What [`Crs::from_code`] accepts, for error messages.
const ACCEPTED_CODES: &str = "OGC:CRS84, EPSG:4326 (written as OGC:CRS84), \
    EPSG:32601-32660 (WGS 84 / UTM north) and EPSG:32701-32760 (WGS 84 / UTM south); \
    give any other CRS as a PROJJSON file";

/// Hemisphere of a UTM zone.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Hemisphere {
    /// Northern hemisphere (EPSG:326NN, false northing 0 m).
    North,
    /// Southern hemisphere (EPSG:327NN, false northing 10 000 000 m).
    South,
}

/// The CRS of a table's geometry columns.
#[derive(Debug, Clone, PartialEq)]
pub enum Crs {
    /// WGS 84 with x = longitude, y = latitude (OGC:CRS84): the `crs` key is omitted.
    LonLatWgs84,
    /// A full PROJJSON object, written as the `crs` value.
    Projjson(Value),
    /// The coordinates' CRS is not known: written as `"crs": null`.
    Unknown,
}

/// A CRS that cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum CrsError {
    /// A code outside the accepted list.
    #[error("unsupported CRS code `{code}`: accepted are {ACCEPTED_CODES}")]
    UnsupportedCode {
        /// The code as given.
        code: String,
    },
    /// A UTM zone outside 1..=60.
    #[error("UTM zone {zone} does not exist: zones run from 1 to 60")]
    UtmZoneOutOfRange {
        /// The zone asked for.
        zone: u32,
    },
    /// A PROJJSON file could not be read.
    #[error("{}: cannot read PROJJSON file: {error}", path.display())]
    ReadProjjsonFile {
        /// The file.
        path: PathBuf,
        /// The cause.
        error: std::io::Error,
    },
    /// A PROJJSON file is not a PROJJSON object.
    #[error("{}: not a PROJJSON CRS: {reason}", path.display())]
    InvalidProjjsonFile {
        /// The file.
        path: PathBuf,
        /// What is wrong.
        reason: String,
    },
    /// A PROJJSON value is not a PROJJSON object.
    #[error("not a PROJJSON CRS: {reason}")]
    InvalidProjjson {
        /// What is wrong.
        reason: String,
    },
}

impl Crs {
    /// The CRS named by a code such as `EPSG:32630` (see the module table for what is
    /// accepted). Anything else is an error naming the code and the accepted list.
    pub fn from_code(code: &str) -> Result<Crs, CrsError> {
        let unsupported = || CrsError::UnsupportedCode {
            code: code.to_owned(),
        };
        let (authority, number) = code.trim().split_once(':').ok_or_else(unsupported)?;
        let authority = authority.trim();
        let number = number.trim();
        if authority.eq_ignore_ascii_case("OGC") && number.eq_ignore_ascii_case("CRS84") {
            return Ok(Crs::LonLatWgs84);
        }
        if !authority.eq_ignore_ascii_case("EPSG")
            || number.is_empty()
            || !number.bytes().all(|byte| byte.is_ascii_digit())
        {
            return Err(unsupported());
        }
        let epsg_code: u32 = number.parse().map_err(|_| unsupported())?;
        match epsg_code {
            4326 => Ok(Crs::LonLatWgs84),
            32601..=32660 => Crs::utm_wgs84(epsg_code - 32600, Hemisphere::North),
            32701..=32760 => Crs::utm_wgs84(epsg_code - 32700, Hemisphere::South),
            _ => Err(unsupported()),
        }
    }

    /// A feeder's `crs` entry (feeder.toml): `None` gives [`Crs::Unknown`], a code goes to
    /// [`Crs::from_code`]. Call it as `Crs::from_optional_code(header.crs.as_deref())`.
    pub fn from_optional_code(code: Option<&str>) -> Result<Crs, CrsError> {
        code.map_or(Ok(Crs::Unknown), Crs::from_code)
    }

    /// WGS 84 / UTM `zone` in `hemisphere`, as a full PROJJSON `ProjectedCRS`.
    pub fn utm_wgs84(zone: u32, hemisphere: Hemisphere) -> Result<Crs, CrsError> {
        if !(1..=60).contains(&zone) {
            return Err(CrsError::UtmZoneOutOfRange { zone });
        }
        Ok(Crs::Projjson(utm_projjson(zone, hemisphere)))
    }

    /// A PROJJSON object read from a file, kept as written. The file must hold a JSON object
    /// with a string `type` (e.g. `ProjectedCRS`).
    pub fn from_projjson_file(path: &Path) -> Result<Crs, CrsError> {
        let text = std::fs::read_to_string(path).map_err(|error| CrsError::ReadProjjsonFile {
            path: path.to_owned(),
            error,
        })?;
        let value: Value =
            serde_json::from_str(&text).map_err(|error| CrsError::InvalidProjjsonFile {
                path: path.to_owned(),
                reason: error.to_string(),
            })?;
        Crs::from_projjson(value).map_err(|error| match error {
            CrsError::InvalidProjjson { reason } => CrsError::InvalidProjjsonFile {
                path: path.to_owned(),
                reason,
            },
            other => other,
        })
    }

    /// A PROJJSON object given as a value: must be a JSON object with a string `type`.
    pub fn from_projjson(value: Value) -> Result<Crs, CrsError> {
        let Some(object) = value.as_object() else {
            return Err(CrsError::InvalidProjjson {
                reason: "expected a JSON object".to_owned(),
            });
        };
        match object.get("type") {
            Some(Value::String(_)) => Ok(Crs::Projjson(value)),
            Some(_) => Err(CrsError::InvalidProjjson {
                reason: "`type` must be a string such as \"ProjectedCRS\"".to_owned(),
            }),
            None => Err(CrsError::InvalidProjjson {
                reason: "missing `type` (e.g. \"ProjectedCRS\")".to_owned(),
            }),
        }
    }

    /// The EPSG code in the PROJJSON top-level `id`, if any (e.g. 32630).
    pub fn epsg_code(&self) -> Option<u32> {
        let Crs::Projjson(value) = self else {
            return None;
        };
        let id = value.get("id")?;
        if id.get("authority")?.as_str()? != "EPSG" {
            return None;
        }
        match id.get("code")? {
            Value::Number(number) => number.as_u64().and_then(|code| u32::try_from(code).ok()),
            Value::String(text) => text.parse().ok(),
            _ => None,
        }
    }

    /// The value of the GeoParquet `crs` key: `None` means "omit the key" (CRS84),
    /// `Some(Value::Null)` means unknown.
    pub fn geoparquet_value(&self) -> Option<Value> {
        match self {
            Crs::LonLatWgs84 => None,
            Crs::Projjson(value) => Some(value.clone()),
            Crs::Unknown => Some(Value::Null),
        }
    }
}

impl fmt::Display for Crs {
    /// `OGC:CRS84`, `EPSG:<code>`, the PROJJSON `name`, or `unknown`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Crs::LonLatWgs84 => f.write_str("OGC:CRS84"),
            Crs::Unknown => f.write_str("unknown"),
            Crs::Projjson(value) => match (self.epsg_code(), value.get("name")) {
                (Some(code), _) => write!(f, "EPSG:{code}"),
                (None, Some(Value::String(name))) => write!(f, "PROJJSON `{name}`"),
                (None, _) => f.write_str("PROJJSON"),
            },
        }
    }
}

/// `{"authority": "EPSG", "code": code}`.
fn epsg_id(code: u32) -> Value {
    json!({ "authority": "EPSG", "code": code })
}

/// One map-projection parameter with its unit and EPSG parameter id.
fn parameter(name: &str, value: f64, unit: &str, epsg_parameter_code: u32) -> Value {
    json!({
        "name": name,
        "value": value,
        "unit": unit,
        "id": epsg_id(epsg_parameter_code),
    })
}

/// An axis of a coordinate system.
fn axis(name: &str, abbreviation: &str, direction: &str, unit: &str) -> Value {
    json!({
        "name": name,
        "abbreviation": abbreviation,
        "direction": direction,
        "unit": unit,
    })
}

/// WGS 84 geographic 2D CRS (EPSG:4326): the base of every WGS 84 / UTM zone.
fn wgs84_geographic_crs() -> Value {
    json!({
        "type": "GeographicCRS",
        "name": "WGS 84",
        "datum": {
            "type": "GeodeticReferenceFrame",
            "name": "World Geodetic System 1984",
            "ellipsoid": {
                "name": "WGS 84",
                "semi_major_axis": WGS84_SEMI_MAJOR_AXIS_M,
                "inverse_flattening": WGS84_INVERSE_FLATTENING,
            },
            "id": epsg_id(6326),
        },
        "coordinate_system": {
            "subtype": "ellipsoidal",
            "axis": [
                axis("Geodetic latitude", "Lat", "north", "degree"),
                axis("Geodetic longitude", "Lon", "east", "degree"),
            ],
        },
        "id": epsg_id(4326),
    })
}

/// What differs between the northern and southern UTM zones.
struct UtmHemisphere {
    /// `N` or `S` in the zone name.
    letter: char,
    /// EPSG code of zone 0 of the series (zone `z` is `base + z`): 32600 or 32700.
    epsg_crs_base: u32,
    /// EPSG code of conversion "UTM zone 0N/S" of the series: 16000 or 16100.
    epsg_conversion_base: u32,
    /// False northing, metres.
    false_northing_m: f64,
    /// Southern edge of the area of use, degrees.
    south_latitude_deg: f64,
    /// Northern edge of the area of use, degrees.
    north_latitude_deg: f64,
    /// Latitude band of the area of use, in words.
    band_text: &'static str,
}

impl Hemisphere {
    fn utm(self) -> UtmHemisphere {
        match self {
            Hemisphere::North => UtmHemisphere {
                letter: 'N',
                epsg_crs_base: 32600,
                epsg_conversion_base: 16000,
                false_northing_m: 0.0,
                south_latitude_deg: 0.0,
                north_latitude_deg: 84.0,
                band_text: "northern hemisphere between equator and 84°N",
            },
            Hemisphere::South => UtmHemisphere {
                letter: 'S',
                epsg_crs_base: 32700,
                epsg_conversion_base: 16100,
                false_northing_m: UTM_SOUTH_FALSE_NORTHING_M,
                south_latitude_deg: -80.0,
                north_latitude_deg: 0.0,
                band_text: "southern hemisphere between 80°S and equator",
            },
        }
    }
}

/// The full PROJJSON `ProjectedCRS` of WGS 84 / UTM `zone` (1..=60) in `hemisphere`.
fn utm_projjson(zone: u32, hemisphere: Hemisphere) -> Value {
    let UtmHemisphere {
        letter,
        epsg_crs_base,
        epsg_conversion_base,
        false_northing_m,
        south_latitude_deg,
        north_latitude_deg,
        band_text,
    } = hemisphere.utm();
    // zone is 1..=60, so these are exact small integers.
    let zone_deg = f64::from(zone);
    let central_meridian_deg = zone_deg * 6.0 - 183.0;
    let west_deg = central_meridian_deg - 3.0;
    let east_deg = central_meridian_deg + 3.0;
    json!({
        "$schema": PROJJSON_SCHEMA_URL,
        "type": "ProjectedCRS",
        "name": format!("WGS 84 / UTM zone {zone}{letter}"),
        "base_crs": wgs84_geographic_crs(),
        "conversion": {
            "name": format!("UTM zone {zone}{letter}"),
            "method": {
                "name": "Transverse Mercator",
                "id": epsg_id(9807),
            },
            "parameters": [
                parameter("Latitude of natural origin", 0.0, "degree", 8801),
                parameter("Longitude of natural origin", central_meridian_deg, "degree", 8802),
                parameter("Scale factor at natural origin", UTM_SCALE_FACTOR, "unity", 8805),
                parameter("False easting", UTM_FALSE_EASTING_M, "metre", 8806),
                parameter("False northing", false_northing_m, "metre", 8807),
            ],
            "id": epsg_id(epsg_conversion_base + zone),
        },
        "coordinate_system": {
            "subtype": "Cartesian",
            "axis": [
                axis("Easting", "E", "east", "metre"),
                axis("Northing", "N", "north", "metre"),
            ],
        },
        "scope": "Navigation and medium accuracy spatial referencing.",
        "area": format!(
            "Between {} and {}, {band_text}.",
            longitude_text(west_deg),
            longitude_text(east_deg)
        ),
        "bbox": {
            "south_latitude": south_latitude_deg,
            "west_longitude": west_deg,
            "north_latitude": north_latitude_deg,
            "east_longitude": east_deg,
        },
        "id": epsg_id(epsg_crs_base + zone),
    })
}

/// `6°W`, `0°E`, `12°E`: a whole-degree longitude for the area-of-use text.
fn longitude_text(longitude_deg: f64) -> String {
    if longitude_deg < 0.0 {
        format!("{}°W", -longitude_deg)
    } else {
        format!("{longitude_deg}°E")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parameter_value(crs: &Crs, name: &str) -> f64 {
        let Crs::Projjson(value) = crs else {
            panic!("expected PROJJSON, got {crs:?}");
        };
        value["conversion"]["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|parameter| parameter["name"] == name)
            .and_then(|parameter| parameter["value"].as_f64())
            .unwrap()
    }

    #[test]
    fn zone_30_north_has_central_meridian_minus_3() {
        let crs = Crs::from_code("EPSG:32630").unwrap();
        assert_eq!(crs.epsg_code(), Some(32630));
        assert_eq!(parameter_value(&crs, "Longitude of natural origin"), -3.0);
        assert_eq!(parameter_value(&crs, "False northing"), 0.0);
        assert_eq!(parameter_value(&crs, "False easting"), 500_000.0);
        assert_eq!(
            parameter_value(&crs, "Scale factor at natural origin"),
            0.9996
        );
        assert_eq!(parameter_value(&crs, "Latitude of natural origin"), 0.0);
        let Crs::Projjson(value) = &crs else {
            unreachable!()
        };
        assert_eq!(value["type"], "ProjectedCRS");
        assert_eq!(value["name"], "WGS 84 / UTM zone 30N");
        assert_eq!(value["conversion"]["name"], "UTM zone 30N");
        assert_eq!(value["conversion"]["method"]["id"]["code"], 9807);
        assert_eq!(value["base_crs"]["id"]["code"], 4326);
        assert_eq!(
            value["base_crs"]["datum"]["ellipsoid"]["inverse_flattening"],
            298.257223563
        );
        assert_eq!(value["coordinate_system"]["axis"][0]["unit"], "metre");
        assert_eq!(crs.to_string(), "EPSG:32630");
    }

    #[test]
    fn zone_33_south_has_central_meridian_15_and_false_northing_1e7() {
        let crs = Crs::from_code("epsg:32733").unwrap();
        assert_eq!(crs.epsg_code(), Some(32733));
        assert_eq!(parameter_value(&crs, "Longitude of natural origin"), 15.0);
        assert_eq!(parameter_value(&crs, "False northing"), 10_000_000.0);
        let Crs::Projjson(value) = &crs else {
            unreachable!()
        };
        assert_eq!(value["name"], "WGS 84 / UTM zone 33S");
        assert_eq!(value["bbox"]["west_longitude"], 12.0);
        assert_eq!(value["bbox"]["east_longitude"], 18.0);
    }

    #[test]
    fn every_zone_has_its_own_meridian() {
        for zone in 1..=60 {
            let crs = Crs::utm_wgs84(zone, Hemisphere::North).unwrap();
            let expected_deg = f64::from(zone) * 6.0 - 183.0;
            assert_eq!(
                parameter_value(&crs, "Longitude of natural origin"),
                expected_deg
            );
        }
        assert!(matches!(
            Crs::utm_wgs84(61, Hemisphere::South),
            Err(CrsError::UtmZoneOutOfRange { zone: 61 })
        ));
        assert!(Crs::utm_wgs84(0, Hemisphere::North).is_err());
    }

    #[test]
    fn lon_lat_codes_mean_crs84() {
        assert_eq!(Crs::from_code("EPSG:4326").unwrap(), Crs::LonLatWgs84);
        assert_eq!(Crs::from_code(" ogc:crs84 ").unwrap(), Crs::LonLatWgs84);
        assert_eq!(Crs::LonLatWgs84.geoparquet_value(), None);
        assert_eq!(Crs::Unknown.geoparquet_value(), Some(Value::Null));
        assert_eq!(Crs::from_optional_code(None).unwrap(), Crs::Unknown);
    }

    #[test]
    fn unknown_codes_are_refused_with_the_accepted_list() {
        for code in [
            "EPSG:2154",
            "EPSG:32600",
            "EPSG:32661",
            "EPSG:",
            "32630",
            "ESRI:102100",
            "",
        ] {
            let error = Crs::from_code(code).unwrap_err();
            let message = error.to_string();
            assert!(message.contains(&format!("`{code}`")), "{message}");
            assert!(message.contains("EPSG:32601-32660"), "{message}");
            assert!(message.contains("PROJJSON file"), "{message}");
        }
    }

    #[test]
    fn projjson_values_need_a_type() {
        assert!(Crs::from_projjson(json!({"type": "ProjectedCRS", "name": "x"})).is_ok());
        assert!(Crs::from_projjson(json!({"name": "x"})).is_err());
        assert!(Crs::from_projjson(json!("EPSG:32630")).is_err());
        assert!(Crs::from_projjson(json!({"type": 3})).is_err());
    }

    #[test]
    fn projjson_files_are_read_and_checked() {
        let dir = tempfile::tempdir().unwrap();
        let good = dir.path().join("good.json");
        std::fs::write(&good, r#"{"type": "ProjectedCRS", "name": "Local grid"}"#).unwrap();
        let crs = Crs::from_projjson_file(&good).unwrap();
        assert_eq!(crs.to_string(), "PROJJSON `Local grid`");

        let bad = dir.path().join("bad.json");
        std::fs::write(&bad, "[1, 2]").unwrap();
        let message = Crs::from_projjson_file(&bad).unwrap_err().to_string();
        assert!(
            message.contains("bad.json") && message.contains("JSON object"),
            "{message}"
        );

        let broken = dir.path().join("broken.json");
        std::fs::write(&broken, "{").unwrap();
        assert!(
            Crs::from_projjson_file(&broken)
                .unwrap_err()
                .to_string()
                .contains("broken.json")
        );

        let missing = dir.path().join("missing.json");
        let message = Crs::from_projjson_file(&missing).unwrap_err().to_string();
        assert!(
            message.contains("missing.json") && message.contains("cannot read"),
            "{message}"
        );
    }
}
