//! An application to connect new generation, and the date it was received.

use std::fmt;

use headroom_model::{BusIdx, GenerationSettings};

/// A request to connect `p_kw` of new generation at one node, at a given power factor.
#[derive(Debug, Clone, PartialEq)]
pub struct Application {
    /// The applicant's reference (empty for a one-off check).
    pub id: String,
    /// Where the plant would connect; never the head.
    pub bus: BusIdx,
    /// Export at rated output, kW (finite, > 0).
    pub p_kw: f64,
    /// The plant's power factor and whether it absorbs or injects reactive power.
    pub generation: GenerationSettings,
}

impl Application {
    /// An application of `p_kw` at `bus` with the given power factor settings.
    pub fn new(
        id: impl Into<String>,
        bus: BusIdx,
        p_kw: f64,
        generation: GenerationSettings,
    ) -> Application {
        Application {
            id: id.into(),
            bus,
            p_kw,
            generation,
        }
    }

    /// Reactive power injected at rated output, kvar (negative = absorbed).
    pub fn q_kvar(&self) -> f64 {
        // + 0.0 turns the −0 of unity power factor into 0.
        self.p_kw * self.generation.q_per_p() + 0.0
    }
}

/// A calendar date, ISO 8601 `YYYY-MM-DD` (proleptic Gregorian); orders chronologically.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct ApplicationDate {
    year: u16,
    month: u8,
    day: u8,
}

impl ApplicationDate {
    /// The date, when it exists (years 1–9999).
    pub fn new(year: u16, month: u8, day: u8) -> Option<ApplicationDate> {
        let leap =
            (year.is_multiple_of(4) && !year.is_multiple_of(100)) || year.is_multiple_of(400);
        let days_in_month = match month {
            1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
            4 | 6 | 9 | 11 => 30,
            2 if leap => 29,
            2 => 28,
            _ => return None,
        };
        ((1..=9999).contains(&year) && (1..=days_in_month).contains(&day))
            .then_some(ApplicationDate { year, month, day })
    }

    /// Reads exactly `YYYY-MM-DD` (four, two and two digits); `None` for anything else,
    /// including dates that do not exist such as `2025-02-30`.
    pub fn parse(text: &str) -> Option<ApplicationDate> {
        let bytes = text.as_bytes();
        if bytes.len() != 10 || bytes[4] != b'-' || bytes[7] != b'-' {
            return None;
        }
        let digits = |range: std::ops::Range<usize>| -> Option<u16> {
            let part = &text[range];
            part.bytes()
                .all(|b| b.is_ascii_digit())
                .then(|| part.parse().ok())
                .flatten()
        };
        let year = digits(0..4)?;
        let month = u8::try_from(digits(5..7)?).ok()?;
        let day = u8::try_from(digits(8..10)?).ok()?;
        ApplicationDate::new(year, month, day)
    }
}

impl fmt::Display for ApplicationDate {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:04}-{:02}-{:02}", self.year, self.month, self.day)
    }
}

impl serde::Serialize for ApplicationDate {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.collect_str(self)
    }
}

#[cfg(test)]
mod tests {
    use super::ApplicationDate;

    #[test]
    fn dates_are_read_strictly() {
        let d = ApplicationDate::parse("2024-02-29").unwrap();
        assert_eq!(d.to_string(), "2024-02-29");
        for bad in [
            "2023-02-29",
            "2024-13-01",
            "2024-00-10",
            "2024-1-01",
            "24-01-01",
            "2024/01/01",
            "2024-01-01T00:00",
            "+024-01-01",
            "0000-01-01",
            "",
        ] {
            assert_eq!(ApplicationDate::parse(bad), None, "{bad}");
        }
        assert!(ApplicationDate::parse("2023-12-31") < ApplicationDate::parse("2024-01-01"));
    }
}
