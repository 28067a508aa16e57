//! Capacity bins in kW and their colours: a sequential ramp whose lightness rises with
//! capacity, so the order reads in greyscale and with any common colour-vision deficiency.

/// Upper edges of the capacity bins, kW: the bins are `< 100`, `100–250`, …, `≥ 10 000`.
pub const BIN_EDGES_KW: [f64; 7] = [100.0, 250.0, 500.0, 1000.0, 2000.0, 5000.0, 10_000.0];

/// One colour per bin, from the lowest capacity (dark violet) to the highest (light yellow).
/// Made for this report in the OKLab colour space: lightness 0.30 to 0.93 in equal steps, hue
/// turning from violet through blue and teal to yellow (the viridis family of ramps).
pub const BIN_COLOURS: [&str; 8] = [
    "#351666", "#243c8d", "#016494", "#098698", "#05a99a", "#37cc80", "#aadf58", "#ffea6d",
];

/// Number of bins.
pub const N_BINS: usize = BIN_COLOURS.len();

/// The bin of a capacity in kW.
pub fn bin_of(hosting_kw: f64) -> usize {
    BIN_EDGES_KW.partition_point(|&edge| edge <= hosting_kw)
}

/// Formats kW with a narrow no-break space between thousands: `12 500`.
pub fn group_thousands(value: f64) -> String {
    let rounded = value.round();
    let digits = format!("{}", rounded.abs() as u64);
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push('\u{202f}');
        }
        out.push(c);
    }
    if rounded < 0.0 {
        format!("-{out}")
    } else {
        out
    }
}

/// The label of a bin in kW, e.g. `below 100 kW`, `100–250 kW`, `10 000 kW and more`.
pub fn bin_label(bin: usize) -> String {
    let edge = |i: usize| group_thousands(BIN_EDGES_KW[i]);
    match bin {
        0 => format!("below {} kW", edge(0)),
        b if b >= BIN_EDGES_KW.len() => format!("{} kW and more", edge(BIN_EDGES_KW.len() - 1)),
        b => format!("{}–{} kW", edge(b - 1), edge(b)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative luminance of an sRGB colour (WCAG 2.x definition, from IEC 61966-2-1 sRGB).
    fn luminance(hex: &str) -> f64 {
        let channel = |i: usize| {
            let v = f64::from(u8::from_str_radix(&hex[i..i + 2], 16).unwrap()) / 255.0;
            if v <= 0.04045 {
                v / 12.92
            } else {
                ((v + 0.055) / 1.055).powf(2.4)
            }
        };
        0.2126 * channel(1) + 0.7152 * channel(3) + 0.0722 * channel(5)
    }

    #[test]
    fn lightness_rises_strictly_so_the_order_survives_greyscale() {
        let lum: Vec<f64> = BIN_COLOURS.iter().map(|c| luminance(c)).collect();
        for pair in lum.windows(2) {
            // Neighbours differ by a visible step (contrast ratio at least 1.2).
            assert!(
                (pair[1] + 0.05) / (pair[0] + 0.05) > 1.2,
                "luminance steps {lum:?}"
            );
        }
    }

    #[test]
    fn no_red_in_the_ramp() {
        // Not a traffic-light scheme: no colour where red clearly dominates green and blue.
        for c in BIN_COLOURS {
            let v = |i: usize| i32::from(u8::from_str_radix(&c[i..i + 2], 16).unwrap());
            assert!(!(v(1) > v(3) + 48 && v(1) > v(5) + 48), "{c}");
        }
    }

    #[test]
    fn bins_follow_the_edges_with_the_lower_edge_inside() {
        assert_eq!(BIN_EDGES_KW.len() + 1, N_BINS);
        assert_eq!(bin_of(0.0), 0);
        assert_eq!(bin_of(99.99), 0);
        assert_eq!(bin_of(100.0), 1);
        assert_eq!(bin_of(999.0), 3);
        assert_eq!(bin_of(1000.0), 4);
        assert_eq!(bin_of(20_000.0), 7);
    }

    #[test]
    fn labels_are_in_kw_with_grouped_thousands() {
        assert_eq!(bin_label(0), "below 100 kW");
        assert_eq!(bin_label(4), "1\u{202f}000–2\u{202f}000 kW");
        assert_eq!(bin_label(7), "10\u{202f}000 kW and more");
        assert_eq!(group_thousands(1234567.4), "1\u{202f}234\u{202f}567");
        assert_eq!(group_thousands(-950.0), "-950");
    }
}
