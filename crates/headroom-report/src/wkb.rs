//! The two ends of a WKB LineString (OGC Simple Features, 2D), for branch geometries.

/// First and last point `(x, y)` of a 2D WKB LineString in either byte order; `None` when the
/// bytes are not one (another geometry type, Z/M coordinates, fewer than two points, truncated).
pub fn line_string_ends(bytes: &[u8]) -> Option<((f64, f64), (f64, f64))> {
    let little = match *bytes.first()? {
        0 => false,
        1 => true,
        _ => return None,
    };
    let u32_at = |at: usize| -> Option<u32> {
        let b: [u8; 4] = bytes.get(at..at + 4)?.try_into().ok()?;
        Some(if little {
            u32::from_le_bytes(b)
        } else {
            u32::from_be_bytes(b)
        })
    };
    let f64_at = |at: usize| -> Option<f64> {
        let b: [u8; 8] = bytes.get(at..at + 8)?.try_into().ok()?;
        Some(if little {
            f64::from_le_bytes(b)
        } else {
            f64::from_be_bytes(b)
        })
    };
    if u32_at(1)? != 2 {
        return None;
    }
    let n_points = u32_at(5)? as usize;
    if n_points < 2 || bytes.len() != 9 + 16 * n_points {
        return None;
    }
    let last = 9 + 16 * (n_points - 1);
    Some((
        (f64_at(9)?, f64_at(17)?),
        (f64_at(last)?, f64_at(last + 8)?),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(little: bool, points: &[(f64, f64)]) -> Vec<u8> {
        let mut out = vec![u8::from(little)];
        let word = |v: u32| {
            if little {
                v.to_le_bytes()
            } else {
                v.to_be_bytes()
            }
        };
        let float = |v: f64| {
            if little {
                v.to_le_bytes()
            } else {
                v.to_be_bytes()
            }
        };
        out.extend(word(2));
        out.extend(word(points.len() as u32));
        for &(x, y) in points {
            out.extend(float(x));
            out.extend(float(y));
        }
        out
    }

    #[test]
    fn reads_both_byte_orders_and_takes_the_ends() {
        let points = [(1.5, -2.0), (3.0, 4.0), (480_000.25, 5_800_000.5)];
        for little in [true, false] {
            assert_eq!(
                line_string_ends(&line(little, &points)),
                Some(((1.5, -2.0), (480_000.25, 5_800_000.5)))
            );
        }
    }

    #[test]
    fn matches_the_exporters_encoding() {
        let bytes = headroom_export::line_string_wkb(&[
            headroom_export::Coord::new(10.0, 20.0),
            headroom_export::Coord::new(30.0, 40.0),
        ])
        .unwrap();
        assert_eq!(line_string_ends(&bytes), Some(((10.0, 20.0), (30.0, 40.0))));
    }

    #[test]
    fn refuses_other_geometries_and_truncated_bytes() {
        let good = line(true, &[(0.0, 0.0), (1.0, 1.0)]);
        assert_eq!(line_string_ends(&good[..good.len() - 1]), None);
        assert_eq!(line_string_ends(&line(true, &[(0.0, 0.0)])), None);
        let mut point = good.clone();
        point[1] = 1; // type 1 = Point
        assert_eq!(line_string_ends(&point), None);
        assert_eq!(line_string_ends(&[]), None);
        assert_eq!(line_string_ends(&[7, 2, 0, 0, 0]), None);
    }
}
