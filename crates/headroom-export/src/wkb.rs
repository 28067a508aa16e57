//! Little-endian WKB (and WKT, for CSV) encoding of points and line strings.
//!
//! WKB layout (OGC Simple Features, ISO 19125-1), little-endian throughout:
//!
//! | bytes | Point | LineString |
//! |---|---|---|
//! | 1 | byte order `0x01` | byte order `0x01` |
//! | 4 | geometry type `1` (u32) | geometry type `2` (u32) |
//! | 4 | — | number of points (u32) |
//! | 16 × n | x, y (f64 each) | x, y of every point |
//!
//! A point is 21 bytes; a line string of `n` points is `9 + 16 n` bytes.

use std::fmt::Write as _;

use crate::table::Coord;

/// WKB byte-order marker for little-endian (NDR) encoding.
const WKB_LITTLE_ENDIAN: u8 = 0x01;
/// WKB geometry type code of a 2D Point.
const WKB_TYPE_POINT: u32 = 1;
/// WKB geometry type code of a 2D LineString.
const WKB_TYPE_LINE_STRING: u32 = 2;

/// Appends the little-endian WKB encoding of a 2D point to `out` (21 bytes).
pub fn push_point_wkb(out: &mut Vec<u8>, point: Coord) {
    out.reserve(21);
    out.push(WKB_LITTLE_ENDIAN);
    out.extend_from_slice(&WKB_TYPE_POINT.to_le_bytes());
    push_coord(out, point);
}

/// Appends the little-endian WKB encoding of a 2D line string to `out` (`9 + 16 n` bytes).
///
/// Returns `None` (and appends nothing) when the line has more than `u32::MAX` points, which
/// WKB cannot express.
pub fn push_line_string_wkb(out: &mut Vec<u8>, points: &[Coord]) -> Option<()> {
    let n_points = u32::try_from(points.len()).ok()?;
    out.reserve(9 + 16 * points.len());
    out.push(WKB_LITTLE_ENDIAN);
    out.extend_from_slice(&WKB_TYPE_LINE_STRING.to_le_bytes());
    out.extend_from_slice(&n_points.to_le_bytes());
    for &point in points {
        push_coord(out, point);
    }
    Some(())
}

/// The WKB encoding of one point, as a fresh vector.
pub fn point_wkb(point: Coord) -> Vec<u8> {
    let mut out = Vec::with_capacity(21);
    push_point_wkb(&mut out, point);
    out
}

/// The WKB encoding of one line string, as a fresh vector (`None` past `u32::MAX` points).
pub fn line_string_wkb(points: &[Coord]) -> Option<Vec<u8>> {
    let mut out = Vec::new();
    push_line_string_wkb(&mut out, points)?;
    Some(out)
}

fn push_coord(out: &mut Vec<u8>, point: Coord) {
    out.extend_from_slice(&point.x.to_le_bytes());
    out.extend_from_slice(&point.y.to_le_bytes());
}

/// WKT of a point, e.g. `POINT (500000 4649776.5)`, coordinates in shortest round-trip form.
pub(crate) fn point_wkt(point: Coord) -> String {
    format!("POINT ({} {})", point.x, point.y)
}

/// WKT of a line string, e.g. `LINESTRING (0 0, 10 5)`.
pub(crate) fn line_string_wkt(points: &[Coord]) -> String {
    let mut text = String::from("LINESTRING (");
    for (point_idx, point) in points.iter().enumerate() {
        if point_idx > 0 {
            text.push_str(", ");
        }
        // Writing into a String cannot fail.
        let _ = write!(text, "{} {}", point.x, point.y);
    }
    text.push(')');
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn point_bytes_match_hand_computed_layout() {
        // x = 1.0 is 0x3FF0000000000000, y = -2.5 is 0xC004000000000000 (IEEE 754 binary64).
        let expected: Vec<u8> = vec![
            0x01, // little-endian
            0x01, 0x00, 0x00, 0x00, // type 1 = Point
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0xF0, 0x3F, // x = 1.0
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x04, 0xC0, // y = -2.5
        ];
        assert_eq!(point_wkb(Coord::new(1.0, -2.5)), expected);
    }

    #[test]
    fn line_string_bytes_match_hand_computed_layout() {
        // 0.0 is all zero bytes; 2.0 is 0x4000000000000000; 0.5 is 0x3FE0000000000000.
        let expected: Vec<u8> = vec![
            0x01, // little-endian
            0x02, 0x00, 0x00, 0x00, // type 2 = LineString
            0x02, 0x00, 0x00, 0x00, // 2 points
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // x0 = 0.0
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, // y0 = 0.0
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x40, // x1 = 2.0
            0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0xE0, 0x3F, // y1 = 0.5
        ];
        let points = [Coord::new(0.0, 0.0), Coord::new(2.0, 0.5)];
        assert_eq!(line_string_wkb(&points), Some(expected));
    }

    #[test]
    fn sizes_follow_the_closed_form() {
        let points: Vec<Coord> = (0..7).map(|i| Coord::new(f64::from(i), 1.0)).collect();
        assert_eq!(point_wkb(points[0]).len(), 21);
        assert_eq!(line_string_wkb(&points).map(|b| b.len()), Some(9 + 16 * 7));
    }

    #[test]
    fn wkt_uses_round_trip_numbers() {
        assert_eq!(point_wkt(Coord::new(500000.0, 0.1)), "POINT (500000 0.1)");
        let line = [Coord::new(0.0, 0.0), Coord::new(-1.5, 2.0)];
        assert_eq!(line_string_wkt(&line), "LINESTRING (0 0, -1.5 2)");
    }
}
